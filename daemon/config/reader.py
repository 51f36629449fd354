"""The TOML reader of the configuration: problems collected, each at its key and line.

``TableReader(source, text)`` reads values out of the tables that ``tomllib`` gave, converts
and bounds them (``value``), reports unknown keys with a suggestion (``unknown``) and collects
every problem as ``<file>:<line>: <key>: <what is wrong>`` instead of stopping at the first;
the line of a key comes from a small scan of the text (``key_lines``). Which tables and keys
exist and what each must hold is ``isentrope.daemon.config.tables``; this module knows none.
Value kinds (``convert``): "str", "bool", "int", "float" (finite), "duration" (the grammar of
``isentrope.daemon.timeutil``), "time" (ISO 8601, naive means UTC), "date", "pair" ([low,
high] numbers) and "str_table" (a table of strings).
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import re
from pathlib import Path
from typing import Any

import pandas as pd

from isentrope.daemon.timeutil import parse_duration, parse_time

__all__ = ["MISSING", "TableReader", "convert", "describe", "key_lines", "resolve"]

# --------------------------------------------------------------------------------------
# where each key is written (for messages only)
# --------------------------------------------------------------------------------------
_HEADER = re.compile(r"^\s*\[\[?\s*([A-Za-z0-9_\-\"'][^\]]*?)\s*\]\]?\s*(#.*)?$")
_KEYLINE = re.compile(
    r"^\s*((?:[A-Za-z0-9_\-]+|\"[^\"]*\"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|\"[^\"]*\"|'[^']*'))*)\s*="
)
_STRINGS = re.compile(r"\"(?:[^\"\\]|\\.)*\"|'[^']*'")


def _split_key(text: str) -> tuple[str, ...]:
    parts = re.findall(r"\"((?:[^\"\\]|\\.)*)\"|'([^']*)'|([A-Za-z0-9_\-]+)", text)
    return tuple(a or b or c for a, b, c in parts)


def key_lines(text: str) -> dict[tuple[str, ...], int]:
    """Key path -> first line number (1-based), from table headers and ``key =`` lines.

    A small scan, not a parser: good enough for error messages."""
    lines: dict[tuple[str, ...], int] = {}
    table: tuple[str, ...] = ()
    depth = 0  # open brackets/braces of a value spanning lines
    for number, raw in enumerate(text.splitlines(), start=1):
        line = _STRINGS.sub('""', raw).split("#", 1)[0]
        if depth > 0:
            depth += line.count("[") + line.count("{") - line.count("]") - line.count("}")
            continue
        m = _HEADER.match(raw)
        if m:
            table = _split_key(m.group(1))
            lines.setdefault(table, number)
            continue
        m = _KEYLINE.match(raw)
        if m:
            path = table + _split_key(m.group(1))
            lines.setdefault(path, number)
            rest = _STRINGS.sub('""', raw[m.end() :])
            rest = rest.split("#", 1)[0]
            depth = max(0, rest.count("[") + rest.count("{") - rest.count("]") - rest.count("}"))
    return lines


# --------------------------------------------------------------------------------------
# the reader: collects problems instead of stopping at the first
# --------------------------------------------------------------------------------------
#: A key left out (``TableReader.value``'s ``default`` when the key is required).
MISSING = object()


class TableReader:
    """Reads the tables of one file (``source``, its ``text``) and collects its ``problems``."""

    def __init__(self, source: str, text: str):
        self.source = source
        self.lines = key_lines(text)
        self.problems: list[str] = []

    # -- messages ------------------------------------------------------------------------
    def line_of(self, path: tuple[str, ...]) -> int | None:
        """Line of ``path``, else of the first key under it, else of its nearest parent."""
        if path in self.lines:
            return self.lines[path]
        below = [n for k, n in self.lines.items() if k[: len(path)] == path]
        if below:
            return min(below)
        for n in range(len(path) - 1, 0, -1):
            if path[:n] in self.lines:
                return self.lines[path[:n]]
        return None

    def problem(self, path: tuple[str, ...], message: str) -> None:
        line = self.line_of(path)
        where = f"{self.source}:{line}" if line else self.source
        key = ".".join(path) if path else "(top level)"
        self.problems.append(f"{where}: {key}: {message}")

    def problems_for(self, path: tuple[str, ...]) -> bool:
        """Whether a problem was already reported at or under ``path``."""
        prefix = ": " + ".".join(path)
        return any(prefix in p for p in self.problems)

    # -- structure -----------------------------------------------------------------------
    def table(self, parent: dict, path: tuple[str, ...], required: bool = False) -> dict:
        """The table at ``path`` (its last part a key of ``parent``); {} when absent or not a
        table (a problem when ``required`` or not a table)."""
        value = parent.get(path[-1], MISSING)
        if value is MISSING:
            if required:
                self.problem(path, f"missing table [{'.'.join(path)}]")
            return {}
        if not isinstance(value, dict):
            self.problem(path, f"expected a table, found {describe(value)}")
            return {}
        return value

    def unknown(self, data: dict, path: tuple[str, ...], allowed) -> None:
        """A problem for each key of ``data`` not in ``allowed``, with the closest as a hint."""
        allowed = list(allowed)
        for key in data:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
                hint = (
                    f"; did you mean '{close[0]}'?"
                    if close
                    else f"; known keys: {', '.join(sorted(allowed))}"
                )
                self.problem(path + (key,), f"unknown key{hint}")

    # -- values --------------------------------------------------------------------------
    def value(
        self,
        data: dict,
        path: tuple[str, ...],
        kind: str,
        default: Any = MISSING,
        choices=None,
        low=None,
        high=None,
        low_open=False,
        high_open=False,
    ) -> Any:
        """The value at ``path`` converted to ``kind`` (``convert``), within ``choices`` and the
        bounds (``low``/``high``, excluded when ``*_open``; a duration's in seconds);
        ``default`` when left out (``MISSING``: required) or after a problem (None if
        required)."""
        key = path[-1]
        raw = data.get(key, MISSING)
        if raw is MISSING:
            if default is MISSING:
                self.problem(path, f"missing required key '{key}'")
                return None
            return default
        try:
            value = convert(raw, kind)
        except ValueError as exc:
            self.problem(path, str(exc))
            return None if default is MISSING else default
        if choices is not None and value not in choices:
            close = difflib.get_close_matches(str(value), [str(c) for c in choices], n=1, cutoff=0.6)
            hint = f"; did you mean '{close[0]}'?" if close else ""
            self.problem(path, f"expected one of {', '.join(repr(c) for c in choices)}, found {raw!r}{hint}")
            return None if default is MISSING else default
        if low is not None or high is not None:
            number = value.total_seconds() if isinstance(value, dt.timedelta) else value
            bad_low = low is not None and (number <= low if low_open else number < low)
            bad_high = high is not None and (number >= high if high_open else number > high)
            if bad_low or bad_high:
                lo = "" if low is None else (f"> {low}" if low_open else f">= {low}")
                hi = "" if high is None else (f"< {high}" if high_open else f"<= {high}")
                self.problem(
                    path, f"expected a value {' and '.join(p for p in (lo, hi) if p)}, found {raw!r}"
                )
                return None if default is MISSING else default
        return value


def describe(value: Any) -> str:
    """What a TOML value is, for messages: 'a number (3)', 'a table', ..."""
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, (int, float)):
        return f"a number ({value!r})"
    if isinstance(value, str):
        return f"a string ({value!r})"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def convert(raw: Any, kind: str) -> Any:
    """``raw`` (as tomllib gave it) as a value of ``kind``; ValueError saying what was found."""
    if kind == "str":
        if not isinstance(raw, str):
            raise ValueError(f"expected a string, found {describe(raw)}")
        return raw
    if kind == "bool":
        if not isinstance(raw, bool):
            raise ValueError(f"expected true or false, found {describe(raw)}")
        return raw
    if kind == "int":
        if isinstance(raw, bool) or not isinstance(raw, int):
            raise ValueError(f"expected an integer, found {describe(raw)}")
        return raw
    if kind == "float":
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            raise ValueError(f"expected a number, found {describe(raw)}")
        if not math.isfinite(raw):
            raise ValueError(f"expected a finite number, found {raw!r}")
        return float(raw)
    if kind == "duration":
        if not isinstance(raw, str):
            raise ValueError(f'expected a duration string such as "15m", found {describe(raw)}')
        return parse_duration(raw)
    if kind == "time":
        if isinstance(raw, (dt.datetime, dt.date)):
            ts = pd.Timestamp(raw)
        elif isinstance(raw, str):
            ts = parse_time(raw)
        else:
            raise ValueError(f"expected an ISO 8601 time, found {describe(raw)}")
        if ts is pd.NaT or pd.isna(ts):
            raise ValueError(f"expected an ISO 8601 time, found {raw!r}")
        return ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    if kind == "date":
        if isinstance(raw, dt.datetime):
            return raw.date()
        if isinstance(raw, dt.date):
            return raw
        if isinstance(raw, str):
            try:
                return dt.date.fromisoformat(raw)
            except ValueError:
                raise ValueError(f"expected a date such as 2027-04-15, found {raw!r}") from None
        raise ValueError(f"expected a date, found {describe(raw)}")
    if kind == "pair":
        if (
            not isinstance(raw, list)
            or len(raw) != 2
            or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in raw)
        ):
            raise ValueError(f"expected [low, high] (two numbers), found {raw!r}")
        lo, hi = float(raw[0]), float(raw[1])
        if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
            raise ValueError(f"expected [low, high] with low < high, found {raw!r}")
        return (lo, hi)
    if kind == "str_table":
        if not isinstance(raw, dict) or any(not isinstance(v, str) for v in raw.values()):
            raise ValueError(f'expected a table of strings such as {{ unit = "7" }}, found {raw!r}')
        return dict(raw)
    raise AssertionError(kind)


def resolve(raw: str, base_dir: Path) -> Path:
    """A path written in the configuration: ``~`` expanded, relative to ``base_dir``."""
    path = Path(raw).expanduser()
    return path if path.is_absolute() else base_dir / path
