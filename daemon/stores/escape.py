r"""Quoting for Flux, InfluxQL and line protocol.

Measurement, field and tag names come from a plant's configuration and may hold quotes,
spaces, commas, equals signs or backslashes. Every name goes through one of these functions
before it reaches a query or a line, so that it round-trips and can never change what the
query means (a field named ``x") |> drop(`` stays a field name).

Names holding a control character (newline, carriage return, tab, NUL, ...) are rejected
with ``ValueError``: line protocol cannot carry them (a newline ends a line, a tab separates),
and a name like that in a plant configuration is a mistake worth an error.

Line protocol escaping follows the InfluxDB 1.x/2.x line protocol reference: in measurements
a comma and a space are escaped with a backslash; in tag keys, tag values and field keys a
comma, an equals sign and a space; in string field values a double quote and a backslash. A
backslash elsewhere is literal. The servers go further than the reference, measured on
influxd 1.6.7 and 1.8.10: in a field key they read ``\"`` as ``"`` (a field named ``a\"b``
written as is was stored as ``a"b``, and its samples were never read back), so a double quote
in a field key is written escaped, and ``a\"b`` goes out as ``a\\"b`` (a literal backslash, then
an escaped quote). In a measurement ``\=`` and ``\"`` are unescaped as well, but ``\\=`` and
``\\"`` do not bring the backslash back (the points vanish, or the backslash is dropped). Tag
keys and tag values keep ``\"`` as written.

What line protocol cannot write at all, and is rejected (``ValueError``; the configuration
refuses it at load, naming the key): a name that *ends* with a backslash, or has a backslash
right before a comma or a space (anywhere), an equals sign (anywhere) or a double quote (in a
measurement). The line's parser takes ``\\`` as a pair before such a character and then splits
the name there, and the name's unescaping has no escape for a backslash itself.
"""

from __future__ import annotations

import math
import re

# Control characters: a newline ends a line; a tab is whitespace to the 1.x line parser.
_FORBIDDEN = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def check_name(name: str, what: str = "name") -> str:
    """Return ``name`` if it can be used as a measurement, tag or field name; else ValueError."""
    if not isinstance(name, str):
        raise ValueError(f"{what} must be a string, found {type(name).__name__} {name!r}")
    if name == "":
        raise ValueError(f"{what} is empty; give a non-empty name")
    m = _FORBIDDEN.search(name)
    if m:
        raise ValueError(
            f"{what} {name!r} holds a {'newline' if m.group() == chr(10) else 'control character'}; "
            "names may not contain newlines, tabs or other control characters"
        )
    return name


# --- Flux -------------------------------------------------------------------------------------
def flux_string(value: str) -> str:
    """A Flux string literal holding ``value`` exactly: ``"..."`` with ``\\``, ``"`` escaped.

    Every ``$`` is written as the byte escape ``\\x24``, so that ``${`` is never read as string
    interpolation and a ``$`` before an escape still compiles: the Flux of InfluxDB 2.9.1
    refuses ``"$\\""`` ("invalid escape sequence") and ``"\\$\\""`` (it allows ``\\$`` only
    before ``{``), and ``"\\x24\\""`` matches the tag value ``$"`` on 2.9.1 and 1.8.10
    (measured).
    """
    if not isinstance(value, str):
        raise ValueError(f"Flux string must be a string, found {type(value).__name__} {value!r}")
    if _FORBIDDEN.search(value):
        raise ValueError(f"Flux string {value!r} holds a newline or another control character")
    out = value.replace("\\", "\\\\").replace('"', '\\"').replace("$", "\\x24")
    return f'"{out}"'


def flux_tag_key(name: str) -> str:
    """``name`` if a Flux filter ``r[<name>] == ...`` finds the points of a tag key of that name;
    else ValueError. Measured on influxd 1.8.10: a tag key that is just ``$`` is written and
    listed (SHOW TAG KEYS) but its filter matches no point (0 of 1 read back), while ``$a``,
    ``a$``, ``$$`` and ``${`` match."""
    check_name(name, "tag key")
    if name == "$":
        raise ValueError(
            "tag key '$' is stored, but InfluxDB 1.8's Flux finds none of its points "
            "(a filter on it matches nothing): rename it"
        )
    return name


# --- InfluxQL ---------------------------------------------------------------------------------
def influxql_identifier(name: str, what: str = "identifier") -> str:
    """A double-quoted InfluxQL identifier (measurement, field, tag key, database, RP)."""
    check_name(name, what)
    return '"' + name.replace("\\", "\\\\").replace('"', '\\"') + '"'


def influxql_string(value: str) -> str:
    """A single-quoted InfluxQL string literal (tag values in WHERE)."""
    if not isinstance(value, str):
        raise ValueError(f"InfluxQL string must be a string, found {type(value).__name__} {value!r}")
    if _FORBIDDEN.search(value):
        raise ValueError(f"InfluxQL string {value!r} holds a newline or another control character")
    return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"


# --- line protocol ----------------------------------------------------------------------------
def _lp_escape(name: str, specials: str, what: str, unescaped: str = "", refused: str = "") -> str:
    """``name`` with each character of ``specials`` (which split a line) and of ``unescaped``
    (which the server unescapes in this place) preceded by a backslash. A backslash at the end
    or right before one of ``specials`` or ``refused`` cannot be written: ValueError."""
    check_name(name, what)
    if name.endswith("\\") or any(f"\\{c}" in name for c in specials + refused):
        shown = " or ".join(repr(c) for c in specials + refused)
        raise ValueError(
            f"{what} {name!r} has a backslash at the end or right before {shown}; line protocol "
            "cannot write that name (it has no escape for a backslash there): rename it"
        )
    return "".join("\\" + c if c in specials or c in unescaped else c for c in name)


def lp_measurement(name: str) -> str:
    """Escape a measurement name for line protocol (comma, space)."""
    if name.startswith("#"):
        raise ValueError(f"measurement {name!r} starts with '#', which line protocol reads as a comment")
    return _lp_escape(name, ", ", "measurement", refused='="')


def lp_tag_key(name: str) -> str:
    """Escape a tag key for line protocol (comma, equals sign, space)."""
    return _lp_escape(name, ",= ", "tag key")


def lp_tag_value(value: str) -> str:
    """Escape a tag value for line protocol (comma, equals sign, space)."""
    return _lp_escape(value, ",= ", "tag value")


def lp_field_key(name: str) -> str:
    """Escape a field key for line protocol (comma, equals sign, space; and ``"``, which the
    servers unescape in a field key)."""
    return _lp_escape(name, ",= ", "field key", unescaped='"')


def lp_string_value(value: str) -> str:
    """A double-quoted line protocol string field value (backslash, double quote escaped)."""
    if not isinstance(value, str):
        raise ValueError(f"string field value must be a string, found {type(value).__name__}")
    if _FORBIDDEN.search(value):
        raise ValueError(f"string field value {value[:40]!r}... holds a newline or another control character")
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'


def lp_float(value: float) -> str:
    """A float field value; NaN and infinities have no line protocol form (ValueError)."""
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"float field value {v} cannot be written in line protocol")
    return repr(v)


def lp_series_key(measurement: str, tags: dict[str, str]) -> str:
    """``measurement,tag=value,...`` with tags sorted by key (the order InfluxDB prefers)."""
    parts = [lp_measurement(measurement)]
    for key in sorted(tags):
        parts.append(f"{lp_tag_key(key)}={lp_tag_value(str(tags[key]))}")
    return ",".join(parts)
