"""`isentrope import-csv -c FILE CSV...`: load historian exports into the configured store.

Two layouts, detected from the header (or forced with ``--layout``):

* long: ``time,tag,value`` (one sample per row; the header names may also be
  timestamp/datetime/date, name/tagname/point, val/reading);
* wide: ``time,<tag>,<tag>,...`` (the first column is the time, one column per tag).

Times are read in one way per file, never guessed row by row. ISO 8601 times
(2025-05-02T10:00, with or without an offset) are always read. Numeric dates with a four-digit
year (02/05/2025, 02.05.2025 or 02-05-2025, with an optional time of day, AM/PM or offset) are
read in one day/month order for the whole file: ``--dayfirst`` or ``--monthfirst`` says which;
without them the order is the one that the file's dates allow (13/05/2025 can only be day
first), and a file whose dates read both ways, or that mixes the two orders, is refused with
line numbers before anything is written. Any other form needs ``--time-format`` (strptime
directives), which then applies to every time of the files. Rows whose time does not fit are
rejected and counted, with the lines of the first few.

Times with an offset or ``Z`` are taken as written. Naive times are local times of
``--timezone`` (default UTC): the repeated hour at the end of daylight saving time is
``--ambiguous`` (reject the rows, take the earlier/later instant, or "file-order": first
occurrence earlier, second later, as a historian writes the repeated hour) and the skipped hour at its
start is ``--nonexistent`` (reject, or shift forward to the first valid instant). Rejected rows
are counted, never guessed.

Tags map onto roles through the configuration (``[roles.<role>] tag``); unmapped tags are
counted and skipped. Values that are not numbers are left out (not written, so a value already
stored at that time stays) and counted, with the lines of the first few. Duplicate
(time, tag) pairs keep the last value, as the store contract does; times closer than the
store's resolution (1 ms for SQLite) are one time there, and count as duplicates. Samples go to
the store through ``write_raw`` in plant units, chunk by chunk (bounded memory); writing the
same file again replaces, never duplicates. Line numbers count the header as line 1 (blank
lines count, and are skipped).

A line that cannot be used is rejected, and the import goes on: everything accepted is
written, and the report counts each rejected line by its reason, names the first few with
their text and lists every rejected line of each file (as ranges, the first 40). This holds
for every failure alike: a line that is not UTF-8, a malformed line (more fields than the
header, a quote that does not close on its line), a time that cannot be read, is ambiguous or
nonexistent in the zone, or lies outside 1677-09-22 to 2262-04-10 (what nanoseconds since 1970
in 64 bits hold). Every line is checked before the file is parsed (``scan_lines``). Only what
concerns a whole file refuses it before anything is written: a header that is not UTF-8 or
cannot be used, dates of no clear day/month order, a bad option. The command exits non-zero
when no sample at all was written.
"""

from __future__ import annotations

import argparse
import csv
import logging
import re
import tempfile
import warnings
from collections import Counter
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from isentrope.daemon.config import Config, load_config
from isentrope.daemon.timeutil import ISO_8601

NAME = "import-csv"
HELP = "import historian CSV exports (long time,tag,value or wide time,<tag>,...) into the store"

log = logging.getLogger(__name__)

TIME_NAMES = ("time", "timestamp", "datetime", "date", "date_time", "ts")
TAG_NAMES = ("tag", "name", "tagname", "tag_name", "point", "tag name")
VALUE_NAMES = ("value", "val", "reading")
CHUNK_ROWS = 200_000
#: Rejected rows and values named (file and line) in the report.
EXAMPLES = 3
#: The day/month orders of numeric dates, as the report and the errors name them.
ORDER_NAMES = {"day-first": "day/month/year", "month-first": "month/day/year"}
ORDER_OPTIONS = {"day-first": "--dayfirst", "month-first": "--monthfirst"}
#: Times the stores hold: nanoseconds since 1970 in a signed 64-bit integer (InfluxDB, pandas)
#: reach from 1677-09-21 to 2262-04-11; a day inside each end leaves room for a zone's offset.
TIME_RANGE = (pd.Timestamp("1677-09-22"), pd.Timestamp("2262-04-10"))
OUT_OF_RANGE = "time outside 1677-09-22 to 2262-04-10 (what the stores hold)"
#: Rejected lines named one by one (as ranges such as 12-40) per file in the report.
LISTED_RANGES = 40
UNREADABLE_HINT = (
    "times must be ISO 8601 (2025-05-02T10:00), or day/month/year or month/day/year numbers "
    "with a four-digit year; give --time-format for any other form"
)
#: A numeric date in the "shape" of a time (every digit written as 9): day and month in either
#: order, a four-digit year, optionally a time of day (12-hour with AM/PM, seconds, a fraction)
#: and an offset.
_NUMERIC_SHAPE = re.compile(
    r"(?P<a>9{1,2})(?P<sep>[/.-])(?P<b>9{1,2})(?P=sep)9999"
    r"(?:(?P<gap>T| +)(?P<hour>9{1,2}):99(?P<sec>:99(?P<frac>[.,]9+)?)?"
    r"(?:(?P<ampm_gap> *)(?P<ampm>[AaPp][Mm]))?(?P<zone>Z|[+-]99(?::?99)?)?)?"
)


@dataclass
class ImportReport:
    """What an import did. ``rows_*`` count CSV data rows; ``samples_*`` count (time, tag) values."""

    files: int = 0
    rows_read: int = 0
    rows_rejected: int = 0
    samples_written: int = 0
    bad_values: int = 0
    duplicates: int = 0
    reject_reasons: Counter = field(default_factory=Counter)
    #: (file name, line, what) of the first rejected rows and of the first values not a number
    reject_examples: list = field(default_factory=list)
    bad_value_examples: list = field(default_factory=list)
    #: how each file's numeric dates were read (one line per file that has or may have them)
    readings: list = field(default_factory=list)
    unmapped_tags: Counter = field(default_factory=Counter)
    roles_seen: set = field(default_factory=set)
    first: pd.Timestamp | None = None
    last: pd.Timestamp | None = None
    #: file name -> the line of every rejected row
    rejected_lines: dict = field(default_factory=dict)
    #: the store's time resolution: times closer than this are one time (None: nanoseconds)
    resolution: pd.Timedelta | None = None
    #: duplicates only at the store's resolution (different times as written)
    coarse_duplicates: int = 0

    def reject(self, name: str, line: int, reason: str, what: str) -> None:
        """Count one rejected line (``reason`` its kind, ``what`` the example's text)."""
        self.rows_rejected += 1
        self.reject_reasons[reason] += 1
        self.rejected_lines.setdefault(name, []).append(int(line))
        if len(self.reject_examples) < EXAMPLES:
            self.reject_examples.append((name, int(line), what))

    def lines(self, config: Config, written: bool = True) -> list[str]:
        out = [
            f"files: {self.files}",
            f"rows read: {self.rows_read}",
            f"rows rejected: {self.rows_rejected}"
            + (
                f" ({', '.join(f'{n} {why}' for why, n in sorted(self.reject_reasons.items()))})"
                if self.reject_reasons
                else ""
            )
            + _examples(self.reject_examples),
            f"values not a number, left out (not written; a value already stored stays): {self.bad_values}"
            + _examples(self.bad_value_examples),
            f"duplicate (time, tag) values replaced by the later one: {self.duplicates}",
            f"samples {'written' if written else 'that would be written (dry run)'}: {self.samples_written}",
        ]
        if self.coarse_duplicates:
            out.append(
                f"of those duplicates, times closer than the store's resolution "
                f"({_duration_text(self.resolution)}), which it keeps as one: {self.coarse_duplicates}"
            )
        for name, lines in self.rejected_lines.items():
            if lines:
                out.append(f"rejected lines of {name}: {_ranges(lines)}")
        if "unreadable time" in self.reject_reasons:
            out.append(UNREADABLE_HINT)
        out.extend(self.readings)
        if self.first is not None:
            out.append(f"time span (UTC): {self.first.isoformat()} to {self.last.isoformat()}")
        if self.unmapped_tags:
            names = ", ".join(f"{t} ({n})" for t, n in self.unmapped_tags.most_common(10))
            more = len(self.unmapped_tags) - 10
            out.append(
                f"tags not in the configuration, skipped: {names}" + (f" and {more} more" if more > 0 else "")
            )
        missing = [m.role for m in config.mappings if m.role not in self.roles_seen]
        if missing:
            out.append(f"mapped roles with no data in the files: {', '.join(missing)}")
        return out


def _ranges(lines: list) -> str:
    """'4, 9-12, 301' for the lines 4, 9, 10, 11, 12, 301; the first ``LISTED_RANGES`` ranges."""
    numbers = sorted(set(lines))
    runs: list[list[int]] = []
    for n in numbers:
        if runs and n == runs[-1][1] + 1:
            runs[-1][1] = n
        else:
            runs.append([n, n])
    text = ", ".join(str(a) if a == b else f"{a}-{b}" for a, b in runs[:LISTED_RANGES])
    more = sum(b - a + 1 for a, b in runs[LISTED_RANGES:])
    return text + (f" and {more} more" if more else "")


def _duration_text(t: pd.Timedelta) -> str:
    """'1 ms', '1 s' or pandas' text for other resolutions."""
    for unit, size in (("s", pd.Timedelta("1s")), ("ms", pd.Timedelta("1ms")), ("us", pd.Timedelta("1us"))):
        if t % size == pd.Timedelta(0):
            return f"{t // size} {unit}"
    return str(t)


def _resolution(config: Config, store) -> pd.Timedelta | None:
    """The time resolution of the store (or, for a dry run, of the configured kind's class)."""
    if store is None:
        from isentrope.daemon.stores import store_class

        store = store_class(config.store.kind)
    value = getattr(store, "time_resolution", None)
    return None if value is None or pd.Timedelta(value) <= pd.Timedelta(1, "ns") else pd.Timedelta(value)


def _examples(items: list) -> str:
    """'; e.g. a.csv line 4 'x', line 9 'y'' (the file named when it changes), or ''."""
    parts, last = [], None
    for name, line, what in items:
        parts.append(f"{name + ' ' if name != last else ''}line {line} {what}")
        last = name
    return "; e.g. " + ", ".join(parts) if parts else ""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="configuration file (TOML)")
    parser.add_argument("csv", nargs="+", metavar="CSV", help="historian export(s)")
    parser.add_argument(
        "--layout",
        choices=("auto", "long", "wide"),
        default="auto",
        help="long = time,tag,value; wide = time,<tag>,<tag>,... (default: auto)",
    )
    parser.add_argument(
        "--timezone",
        default="UTC",
        metavar="ZONE",
        help="IANA zone of times written without an offset, e.g. Europe/Berlin (default: UTC)",
    )
    parser.add_argument(
        "--ambiguous",
        choices=("reject", "earlier", "later", "file-order"),
        default="reject",
        help="naive times in the repeated hour when daylight saving ends: reject the rows, "
        "take the earlier (daylight saving) or later (standard time) instant, or "
        "file-order (first occurrence earlier, second later) (default: reject)",
    )
    order = parser.add_mutually_exclusive_group()
    order.add_argument(
        "--dayfirst",
        dest="date_order",
        action="store_const",
        const="day-first",
        help="numeric dates are day/month/year: 03/04/2026 is 3 April (default: the order "
        "that the file's dates allow; a file whose dates read both ways is refused)",
    )
    order.add_argument(
        "--monthfirst",
        dest="date_order",
        action="store_const",
        const="month-first",
        help="numeric dates are month/day/year: 03/04/2026 is 4 March",
    )
    order.add_argument(
        "--time-format",
        default=None,
        metavar="FORMAT",
        help="the one form of every time in the files, in strptime directives, e.g. "
        "'%%d-%%b-%%Y %%H:%%M' for 02-May-2025 10:00 (%%z for an offset); for forms "
        "other than ISO 8601 and numeric dates",
    )
    parser.add_argument(
        "--nonexistent",
        choices=("reject", "shift-forward"),
        default="reject",
        help="naive times in the hour skipped when daylight saving starts (default: reject)",
    )
    parser.add_argument(
        "--delimiter",
        default=None,
        metavar="CHAR",
        help="field separator (default: detected from the header: , ; or tab)",
    )
    parser.add_argument(
        "--decimal",
        choices=(".", ","),
        default=".",
        help="decimal mark of the values (default: .); with , use a ; or tab delimiter",
    )
    parser.add_argument("--dry-run", action="store_true", help="read and report, write nothing")


# ------------------------------------------------------------------------------------
# parsing
# ------------------------------------------------------------------------------------
def detect_layout(header: list[str]) -> str:
    """ "long" when the header is time/tag/value (in any order), else "wide"."""
    names = [h.strip().lower() for h in header]
    if (
        len(names) == 3
        and any(n in TIME_NAMES for n in names)
        and any(n in TAG_NAMES for n in names)
        and any(n in VALUE_NAMES for n in names)
    ):
        return "long"
    return "wide"


def _sniff_delimiter(first_line: str) -> str:
    counts = {d: first_line.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=counts.get)
    return best if counts[best] else ","


@dataclass(frozen=True)
class DateShape:
    """Where day and month stand in one shape of numeric date, and its strptime form."""

    first: tuple[int, int]  # start and end of the first number (the day when day first) [-]
    second: tuple[int, int]  # start and end of the second number [-]
    year: tuple[int, int]  # start and end of the year [-]
    pattern: str  # strptime form with {0} for the first number's directive and {1} the second's [-]
    aware: bool  # the shape ends in an offset [-]

    def format(self, order: str) -> str:
        """The strptime form of this shape in ``order`` ("day-first" or "month-first")."""
        return self.pattern.format(*(("%d", "%m") if order == "day-first" else ("%m", "%d")))


@lru_cache(maxsize=4096)
def date_shape(shape: str) -> DateShape | None:
    """The numeric date of ``shape`` (the text with every digit 0-9 written 9), None if it is none."""
    m = _NUMERIC_SHAPE.fullmatch(shape)
    if m is None:
        return None
    sep = m["sep"]
    pattern = "{0}" + sep + "{1}" + sep + "%Y"
    if m["hour"]:
        pattern += m["gap"] + ("%I" if m["ampm"] else "%H") + ":%M"
        if m["sec"]:
            pattern += ":%S" + (m["frac"][0] + "%f" if m["frac"] else "")
        if m["ampm"]:
            pattern += m["ampm_gap"] + "%p"
        if m["zone"]:
            pattern += "%z"
    year = (m.end("b") + 1, m.end("b") + 5)
    return DateShape(m.span("a"), m.span("b"), year, pattern, bool(m["zone"]))


def _forms(s: pd.Series) -> tuple[pd.Series, dict]:
    """Stripped non-empty strings -> (mask of the ISO 8601 ones, {DateShape or None: row labels})
    for the others, grouped by their shape."""
    iso = s.str.fullmatch(ISO_8601).fillna(False).astype(bool)
    groups: dict = {}
    rest = s[~iso]
    if len(rest):
        shapes = rest.str.replace(r"[0-9]", "9", regex=True)
        for shape, rows in shapes.groupby(shapes, sort=False).groups.items():
            groups.setdefault(date_shape(shape), []).append(rows)
    return iso, {k: pd.Index(np.concatenate(v)) for k, v in groups.items()}


def check_time_format(fmt: str) -> None:
    """ValueError unless the strptime form ``fmt`` gives back a date (and the hour and minute
    when it has an hour)."""
    aware = "%z" in fmt
    sample = pd.Timestamp("2025-05-13T14:35:00", tz="UTC" if aware else None)
    try:
        back = pd.to_datetime(pd.Series([sample.strftime(fmt)]), format=fmt, utc=aware).iloc[0]
        good = back.date() == sample.date() and (
            not any(d in fmt for d in ("%H", "%I")) or (back.hour, back.minute) == (14, 35)
        )
    except (ValueError, TypeError):
        good = False
    if not good:
        raise ValueError(
            f"--time-format {fmt!r} must give the year, month and day (and with an hour the "
            "minute, with %I also %p), e.g. '%d-%b-%Y %H:%M' for 02-May-2025 10:00"
        )


def read_clock(
    s: pd.Series, order: str | None = None, time_format: str | None = None
) -> tuple[pd.Series, pd.Series, pd.Series]:
    """Times as written -> (UTC times of those with an offset, naive times of the others, reason).

    Parameters
    ----------
    s : pandas.Series of str
        Stripped, non-empty times [-].
    order : {"day-first", "month-first"}, optional
        Day/month order of numeric dates; without it they are rejected [-].
    time_format : str, optional
        The strptime form of every time; ISO 8601 and numeric dates are then not read otherwise [-].

    Returns
    -------
    aware : pandas.Series of datetime64[UTC] (a subset of ``s``'s index) [-]
    naive : pandas.Series of datetime64 (another subset) [-]
    reason : pandas.Series of str over ``s``'s index, "" where read [-]
    """
    reason = pd.Series("", index=s.index, dtype=object)
    aware, naive = [], []

    def keep(t: pd.Series, with_offset: bool, why: str) -> None:
        bad = t.isna()
        reason[t.index[bad]] = why
        t = t[~bad]
        low, high = (b.tz_localize("UTC") if with_offset else b for b in TIME_RANGE)
        outside = ((t < low) | (t >= high)).to_numpy(dtype=bool)
        reason[t.index[outside]] = OUT_OF_RANGE
        (aware if with_offset else naive).append(t[~outside])

    if time_format is not None:
        with_offset = "%z" in time_format
        keep(
            pd.to_datetime(s, format=time_format, errors="coerce", utc=with_offset),
            with_offset,
            "time not of the --time-format form",
        )
    else:
        iso, groups = _forms(s)
        if iso.any():
            text = s[iso]
            offset = text.str.slice(10).str.contains(r"[Z+-]").fillna(False).astype(bool)
            keep(
                pd.to_datetime(text[offset], format="ISO8601", errors="coerce", utc=True),
                True,
                "unreadable time",
            )
            keep(pd.to_datetime(text[~offset], format="ISO8601", errors="coerce"), False, "unreadable time")
        for shape, rows in groups.items():
            if shape is None:
                reason[rows] = "unreadable time"
            elif order is None:
                reason[rows] = "numeric date with no day/month order given"
            else:
                keep(
                    pd.to_datetime(s[rows], format=shape.format(order), errors="coerce", utc=shape.aware),
                    shape.aware,
                    f"not a {ORDER_NAMES[order]} date",
                )
    return _joined(aware, "datetime64[ns, UTC]"), _joined(naive, "datetime64[ns]"), reason


def _joined(parts: list, dtype: str) -> pd.Series:
    """The parts as one series in row order (the order "file-order" counts in)."""
    parts = [p.astype(dtype) for p in parts if len(p)]
    return pd.concat(parts).sort_index() if parts else pd.Series([], dtype=dtype)


def parse_times(
    text: pd.Series,
    zone: ZoneInfo,
    ambiguous: str = "reject",
    nonexistent: str = "reject",
    order: str | None = None,
    time_format: str | None = None,
    group: pd.Series | None = None,
    seen: Counter | None = None,
) -> tuple[pd.Series, pd.Series]:
    """Strings -> UTC timestamps, and a reason per rejected row ("" when accepted).

    Parameters
    ----------
    text : pandas.Series of str
        Times as written: ISO 8601, numeric dates in ``order``, or all of ``time_format``; with
        or without an offset [-].
    zone : zoneinfo.ZoneInfo
        Zone of times written without an offset [-].
    ambiguous : {"reject", "earlier", "later", "file-order"}
        Naive times that occur twice (end of daylight saving): reject, take the earlier
        (daylight saving) or later (standard time) instant, or "file-order": the first
        occurrence of a time (per ``group``) is the earlier instant, the second the later,
        a third is rejected [-].
    nonexistent : {"reject", "shift-forward"}
        Naive times that never occur (start of daylight saving) [-].
    order : {"day-first", "month-first"}, optional
        Day/month order of numeric dates (03/04/2026 is 3 April day first); decided once per
        file (``decide_reading``). Without it numeric dates are rejected, never guessed [-].
    time_format : str, optional
        The strptime form of every time (then nothing else is read) [-].
    group : pandas.Series, optional
        Key (the tag, in the long layout) within which "file-order" counts occurrences [-].
    seen : collections.Counter, optional
        Occurrences counted so far, carried from chunk to chunk of one file [-].
    """
    s = text.astype("string").str.strip()
    out = pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns, UTC]")
    reason = pd.Series("", index=s.index, dtype=object)
    empty = (s.isna() | (s == "")).fillna(True).astype(bool)
    reason[empty] = "empty time"
    aware, good, why = read_clock(s[~empty], order, time_format)
    reason[why.index] = why
    out[aware.index] = aware
    if not len(good):
        return out, reason
    if str(zone) == "UTC":
        out[good.index] = good.dt.tz_localize("UTC")
        return out, reason
    # Which naive times are ambiguous, which nonexistent: localise with NaT for both, then
    # again with a fixed choice for the ambiguous ones (only the nonexistent stay NaT).
    probe = good.dt.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
    is_nonexistent = good.dt.tz_localize(
        zone, ambiguous=np.ones(len(good), dtype=bool), nonexistent="NaT"
    ).isna()
    is_ambiguous = probe.isna() & ~is_nonexistent
    local = probe.copy()
    if is_ambiguous.any():
        sub = good[is_ambiguous]
        if ambiguous == "reject":
            reason[sub.index] = f"ambiguous local time in {zone}"
        else:
            if ambiguous == "file-order":
                keys = list(zip(group[sub.index] if group is not None else [""] * len(sub), sub, strict=True))
                seen = Counter() if seen is None else seen
                nth = []
                for key in keys:
                    seen[key] += 1
                    nth.append(seen[key])
                nth = np.asarray(nth)
                third = nth > 2
                reason[sub.index[third]] = f"ambiguous local time in {zone} seen more than twice"
                dst = nth == 1
            else:
                dst = np.full(len(sub), ambiguous == "earlier", dtype=bool)
                third = np.zeros(len(sub), dtype=bool)
            done = sub.dt.tz_localize(zone, ambiguous=dst, nonexistent="NaT")
            done[third] = pd.NaT
            local[sub.index] = done
    if is_nonexistent.any():
        sub = good[is_nonexistent]
        if nonexistent == "reject":
            reason[sub.index] = f"nonexistent local time in {zone}"
        else:
            local[sub.index] = sub.dt.tz_localize(zone, ambiguous="NaT", nonexistent="shift_forward")
    out[good.index] = local.dt.tz_convert("UTC")
    return out, reason


def _numbers(values: pd.Series, decimal: str = ".") -> tuple[pd.Series, pd.Series]:
    """Strings -> floats (NaN where not a finite number); also the mask of the non-empty cells
    that were not numbers. ``decimal`` "," reads 165,2 as 165.2."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        # The CSV parser already read the whole column as numbers (the common case, fast);
        # only infinities remain to be refused.
        nums = values.astype(float)
        finite = np.isfinite(nums.to_numpy())
        bad = pd.Series(~finite & nums.notna().to_numpy(), index=values.index)
        nums[~finite] = np.nan
        return nums, bad
    s = values.astype(object).where(values.notna(), "").astype(str).str.strip()
    if decimal == ",":
        s = s.str.replace(",", ".", regex=False)
    nums = pd.to_numeric(s.where(s != "", None), errors="coerce").astype(float)
    nums[~np.isfinite(nums.to_numpy())] = np.nan
    return nums, nums.isna() & (s != "")


def line_of(row: int) -> int:
    """The line of data row ``row`` (0-based, blank lines included): the header is line 1."""
    return int(row) + 2


def _note_bad_values(
    report: ImportReport, name: str, raw: pd.Series, bad: pd.Series, tags: str | pd.Series
) -> None:
    """Count the values not a number and keep the first few (file, line, tag and text)."""
    report.bad_values += int(bad.sum())
    room = EXAMPLES - len(report.bad_value_examples)
    for row in bad.index[bad.to_numpy()][: max(0, room)]:
        tag = tags if isinstance(tags, str) else tags[row]
        report.bad_value_examples.append((name, line_of(row), f"{tag} {str(raw[row])!r}"))


def _long_chunk(
    chunk: pd.DataFrame,
    cols: tuple[str, str, str],
    tag_role: dict[str, str],
    times: pd.Series,
    report: ImportReport,
    decimal: str,
    name: str,
) -> pd.DataFrame:
    _, gcol, vcol = cols
    tags = chunk[gcol].fillna("").astype(str).str.strip()
    mapped = tags.isin(list(tag_role))
    report.unmapped_tags.update(t or "(empty)" for t in tags[~mapped])
    values, bad = _numbers(chunk.loc[mapped, vcol], decimal)
    _note_bad_values(report, name, chunk[vcol], bad, tags)
    frame = pd.DataFrame({"time": times[mapped], "role": tags[mapped].map(tag_role), "value": values})
    dup = frame.duplicated(["time", "role"], keep="last")
    report.duplicates += int(dup.sum())
    return frame[~dup].pivot(index="time", columns="role", values="value")


def _wide_chunk(
    chunk: pd.DataFrame,
    tcol: str,
    tag_role: dict[str, str],
    times: pd.Series,
    report: ImportReport,
    decimal: str,
    name: str,
) -> pd.DataFrame:
    out = {}
    for col in chunk.columns:
        if col == tcol:
            continue
        tag = str(col).strip()
        if tag not in tag_role:
            report.unmapped_tags[tag] += int(chunk[col].notna().sum())
            continue
        values, bad = _numbers(chunk[col], decimal)
        _note_bad_values(report, name, chunk[col], bad, tag)
        out[tag_role[tag]] = values.to_numpy()
    wide = pd.DataFrame(out, index=pd.DatetimeIndex(times, name="time"))
    dup = wide.index.duplicated(keep="last")
    report.duplicates += int(dup.sum()) * max(1, wide.shape[1])
    return wide[~dup]


def time_zone(name: str) -> ZoneInfo:
    """An IANA zone; ValueError naming the option when unknown."""
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise ValueError(
            f"--timezone: unknown time zone {name!r}; use an IANA name such as "
            "UTC, Europe/Berlin or America/Chicago"
        ) from None


@dataclass(frozen=True)
class ImportOptions:
    """How to read the files (see the module docstring). ``date_order`` is "day-first",
    "month-first" or None (decided from each file); ``time_format`` a strptime form."""

    layout: str = "auto"
    timezone: str = "UTC"
    ambiguous: str = "reject"
    nonexistent: str = "reject"
    date_order: str | None = None
    time_format: str | None = None
    delimiter: str | None = None
    decimal: str = "."


# ------------------------------------------------------------------------------------
# the day/month order of a file, decided once before anything is written
# ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TimeReading:
    """How the times of one file are read: ``order`` of its numeric dates (None when it has
    none), or one ``time_format``; ``note`` is the report's line ("" for ISO 8601 only)."""

    order: str | None = None
    time_format: str | None = None
    note: str = ""


#: Days of each month in a leap year (the Gregorian calendar; common practice, no source).
_MONTH_DAYS = np.array([31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def is_date(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> np.ndarray:
    """Whether each (year, month, day) is a date of the Gregorian calendar [-]."""
    good = (month >= 1) & (month <= 12) & (day >= 1)
    last = _MONTH_DAYS[np.clip(month, 1, 12) - 1]
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    last = np.where((month == 2) & ~leap, 28, last)
    return good & (day <= last)


@dataclass
class DateEvidence:
    """What the numeric dates of a file say about their order, gathered chunk by chunk.

    Each list holds (row, text) of the first rows, in file order, that are a calendar date
    only day first, only month first, or both ways (different dates); ``counts`` has their
    numbers and that of the dates whose day and month are the same number ("same")."""

    numeric: int = 0
    day_first: list = field(default_factory=list)
    month_first: list = field(default_factory=list)
    both: list = field(default_factory=list)
    counts: Counter = field(default_factory=Counter)

    def add(self, s: pd.Series) -> None:
        """Take the stripped, non-empty times ``s`` (index: data row) into account."""
        _, groups = _forms(s)
        for shape, rows in groups.items():
            if shape is None:
                continue
            text = s[rows]
            first, second, year = (
                text.str.slice(*span).astype(int).to_numpy()
                for span in (shape.first, shape.second, shape.year)
            )
            day_first, month_first = is_date(year, second, first), is_date(year, first, second)
            self.numeric += len(rows)
            for kind, mask in (
                ("day_first", day_first & ~month_first),
                ("month_first", month_first & ~day_first),
                ("both", day_first & month_first & (first != second)),
                ("same", day_first & (first == second)),
            ):
                self.counts[kind] += int(mask.sum())
                if kind == "same":
                    continue
                found = getattr(self, kind)
                found.extend(zip(rows[mask][:EXAMPLES], text[mask][:EXAMPLES], strict=True))
                found.sort()
                del found[EXAMPLES:]

    def decide(self, path: Path) -> TimeReading:
        """The one order of the file; ValueError when its dates mix orders or read both ways."""
        if self.day_first and self.month_first:
            raise ValueError(
                f"{path}: the dates mix two orders: {self._lines(self.day_first, 'day_first')} read only as "
                f"day/month/year, {self._lines(self.month_first, 'month_first')} only as month/day/year; "
                "correct the file, or import each part with --dayfirst or --monthfirst (nothing was written)"
            )
        for order, found in (("day-first", self.day_first), ("month-first", self.month_first)):
            if found:
                row, text = found[0]
                return TimeReading(
                    order,
                    note=f"dates in {path.name}: {ORDER_NAMES[order]}, as line {line_of(row)} {text!r} shows",
                )
        if self.both:
            row, text = self.both[0]
            shape = date_shape(re.sub(r"[0-9]", "9", text))
            first, second = int(text[slice(*shape.first)]), int(text[slice(*shape.second)])
            year = text[slice(*shape.year)]
            raise ValueError(
                f"{path}: the dates read both ways, such as line {line_of(row)} {text!r} "
                f"({year}-{second:02d}-{first:02d} as day/month/year, {year}-{first:02d}-{second:02d} as "
                "month/day/year), and none tells which; say which with --dayfirst or --monthfirst "
                "(nothing was written)"
            )
        if self.counts["same"]:  # every date has the same day and month number
            return TimeReading("day-first", note=f"dates in {path.name}: the same in either day/month order")
        # numeric dates that are no calendar date in either order are rejected row by row
        return TimeReading("day-first" if self.numeric else None)

    def _lines(self, found: list, kind: str) -> str:
        lines = ", ".join(str(line_of(row)) for row, _ in found)
        more = " and more" if self.counts[kind] > len(found) else ""
        return f"line{'s' if len(found) > 1 else ''} {lines}{more} (such as {found[0][1]!r})"


@dataclass(frozen=True)
class CleanSource:
    """The data lines of a file that can be parsed, as pandas reads them.

    ``path`` is the file itself, or (when lines were left out) a copy without them in a
    temporary folder; ``lines`` gives the file's line number of each data row of ``path``;
    ``rejected`` lists (line, reason) of each line left out."""

    path: Path
    lines: np.ndarray
    rejected: tuple = ()

    def relabel(self, chunk: pd.DataFrame) -> pd.DataFrame:
        """A chunk read from ``path`` with its rows labelled by their file line less 2, so
        that ``line_of(row)`` is the line of the file."""
        return chunk.set_axis(self.lines[chunk.index.to_numpy()] - 2, axis=0)


def line_problem(raw: bytes, sep: str, fields: int) -> str | None:
    """Why one line of a file cannot be read as a row, or None: not UTF-8, a quote that does
    not close on the line, or more fields than the header."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        return f"not UTF-8 (byte 0x{raw[exc.start]:02x} at column {exc.start + 1})"
    text = text.rstrip("\r\n")
    if '"' in text:
        if text.count('"') % 2:
            return "a quote that does not close on its line"
        n = len(next(csv.reader([text], delimiter=sep)))
    else:
        n = text.count(sep) + 1
    return f"{n} fields where the header has {fields}" if n > fields else None


def scan_lines(path: Path, sep: str, fields: int, workdir: Path | None) -> CleanSource:
    """Check every data line of ``path`` before anything is parsed or written (``line_problem``).

    The lines that fail are rejected, each with its reason, and the others read as they are:
    when any fails, the others are copied to a file in ``workdir`` for pandas to read. One pass
    line by line: 1.0-1.25 s for 525,600 lines of 11 fields (a unit-year of one-minute rows,
    52 MB) against some 8 s for their import; reading in blocks with numpy and looking only at
    suspect lines took 0.8 s, not worth its code (measured on the shared 2-core development
    machine).
    """
    rejected: list[tuple[int, str]] = []
    count = 0
    with path.open("rb") as fh:
        fh.readline()  # the header (checked by plan_file)
        for count, raw in enumerate(fh, start=1):
            why = line_problem(raw, sep, fields)
            if why is not None:
                rejected.append((count + 1, why))
    if not rejected:
        return CleanSource(path, np.arange(2, count + 2))
    if workdir is None:
        raise ValueError(f"{path}: lines {', '.join(str(n) for n, _ in rejected[:EXAMPLES])} cannot be read")
    bad = {n for n, _ in rejected}
    copy = Path(workdir) / f"{len(list(Path(workdir).iterdir()))}-{path.name}"
    kept = []
    with path.open("rb") as fh, copy.open("wb") as out:
        out.write(fh.readline())
        for number, raw in enumerate(fh, start=2):
            if number not in bad:
                out.write(raw if raw.endswith(b"\n") else raw + b"\n")
                kept.append(number)
    return CleanSource(copy, np.asarray(kept, dtype=np.int64), tuple(rejected))


@dataclass(frozen=True)
class FilePlan:
    """One CSV file as it will be read: separator, layout, columns, time reading and the lines
    that can be parsed (``source``)."""

    path: Path
    sep: str
    kind: str
    header: list
    cols: tuple
    reading: TimeReading
    source: CleanSource | None = None


def _read_options(path: Path, sep: str, decimal: str) -> dict:
    # Blank lines are kept (as empty rows, dropped later) so that row numbers give line numbers.
    return dict(
        sep=sep,
        keep_default_na=False,
        na_values=[""],
        decimal=decimal,
        chunksize=CHUNK_ROWS,
        encoding="utf-8-sig",
        skipinitialspace=True,
        index_col=False,
        skip_blank_lines=False,
    )


def plan_file(path: Path, options: ImportOptions, workdir: Path | None = None) -> FilePlan:
    """Read the header, check every line (``scan_lines``) and decide how the times are read,
    writing nothing.

    Without ``date_order`` or ``time_format`` this reads the file's time column once: a file
    whose numeric dates mix the two day/month orders, or all read both ways, is refused here.
    """
    path = Path(path)
    with path.open("rb") as fh:
        raw = fh.readline()
    try:
        first = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValueError(
            f"{path}: line 1 (the header) is not UTF-8 text (byte 0x{raw[exc.start]:02x} at column "
            f"{exc.start + 1}); save the export as UTF-8 (nothing was written)"
        ) from None
    if not first.strip():
        raise ValueError(f"{path}: empty file, expected a header line")
    sep = options.delimiter or _sniff_delimiter(first)
    if options.decimal == "," and sep == ",":
        raise ValueError(f"{path}: decimal comma with a comma delimiter; give --delimiter")
    header = next(csv.reader([first], delimiter=sep))
    kind = detect_layout(header) if options.layout == "auto" else options.layout
    names = [h.strip().lower() for h in header]
    if kind == "long":
        try:
            cols = tuple(
                header[next(i for i, n in enumerate(names) if n in group)]
                for group in (TIME_NAMES, TAG_NAMES, VALUE_NAMES)
            )
        except StopIteration:
            raise ValueError(
                f"{path}: long layout needs time, tag and value columns, found {header}"
            ) from None
    else:
        if len(header) < 2:
            raise ValueError(
                f"{path}: wide layout needs a time column and at least one tag column, found {header}"
            )
        cols = (header[0], "", "")
    source = scan_lines(path, sep, len(header), workdir)
    if options.time_format is not None:
        reading = TimeReading(
            time_format=options.time_format,
            note=f"times in {path.name}: --time-format {options.time_format!r}",
        )
    elif options.date_order is not None:
        reading = TimeReading(
            options.date_order,
            note=f"dates in {path.name}: {ORDER_NAMES[options.date_order]} "
            f"({ORDER_OPTIONS[options.date_order]})",
        )
    else:
        evidence = DateEvidence()
        read = _read_options(path, sep, ".") | dict(usecols=[header.index(cols[0])], dtype=str)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", pd.errors.ParserWarning)  # the full read reports them
                with pd.read_csv(source.path, **read) as reader:
                    for chunk in reader:
                        chunk = source.relabel(chunk)
                        times = chunk.iloc[:, 0].astype("string").str.strip()
                        evidence.add(times[times.notna() & (times != "")])
        except pd.errors.ParserError as exc:
            raise ValueError(f"{path}: malformed CSV: {str(exc).strip()} (nothing was written)") from None
        reading = evidence.decide(path)
    return FilePlan(path, sep, kind, header, cols, reading, source)


# ------------------------------------------------------------------------------------
# importing
# ------------------------------------------------------------------------------------
def import_files(
    config: Config, paths: list[Path], store, options: ImportOptions = ImportOptions(), dry_run: bool = False
) -> ImportReport:
    """Read CSV exports and write them to ``store`` (unless ``dry_run``); returns the counts.

    Every file's header and time reading are settled first: an unknown time zone, a bad
    ``time_format``, a header that cannot be used or dates of no clear day/month order raise
    ValueError before anything is written. A line that cannot be used is rejected and reported
    (see the module docstring); the rest is written.
    """
    zone = time_zone(options.timezone)
    if options.time_format is not None:
        check_time_format(options.time_format)
    with tempfile.TemporaryDirectory(prefix="isentrope-import-") as workdir:
        plans = [plan_file(Path(path), options, Path(workdir)) for path in paths]
        return _import_plans(config, plans, store, options, zone, dry_run)


def _import_plans(
    config: Config, plans: list, store, options: ImportOptions, zone, dry_run: bool
) -> ImportReport:
    tag_role = {m.tag: m.role for m in config.mappings}
    report = ImportReport(resolution=_resolution(config, store))
    for plan in plans:
        path, kind, cols = plan.path, plan.kind, plan.cols
        report.files += 1
        report.rows_read += len(plan.source.rejected)
        for line, why in plan.source.rejected:
            report.reject(
                path.name, line, "not UTF-8" if why.startswith("not UTF-8") else "malformed row", why
            )
        if plan.reading.note:
            report.readings.append(plan.reading.note)
        log.info("importing %s (%s layout, times without offset in %s)", path, kind, options.timezone)
        # Only empty cells are missing; a column the parser cannot read as numbers stays text
        # and goes through _numbers, which counts "Bad", "I/O Timeout" and the like.
        # (Reading every cell as text and converting took 2.5x as long: 20.7 s against 8.3 s for a
        # year of one-minute rows of 10 tags, measured on the 2-core development machine.)
        text_cols = [c for c in cols if c][: 2 if kind == "long" else 1]
        seen: Counter = Counter()  # file-order occurrences of ambiguous local times
        try:
            with warnings.catch_warnings():
                # a row with more fields than the header: an error with its line, not a shift
                warnings.simplefilter("error", pd.errors.ParserWarning)
                with pd.read_csv(
                    plan.source.path,
                    dtype={c: str for c in text_cols},
                    **_read_options(path, plan.sep, options.decimal),
                ) as reader:
                    for chunk in reader:
                        chunk = plan.source.relabel(chunk)
                        _import_chunk(
                            chunk, plan, zone, options, seen, tag_role, config, store, dry_run, report
                        )
        except pd.errors.ParserWarning:
            raise ValueError(
                f"{path}: malformed CSV: a row has more fields than the header's "
                f"{len(plan.header)} (rows before it were imported)"
            ) from None
        except pd.errors.ParserError as exc:
            raise ValueError(
                f"{path}: malformed CSV: {str(exc).strip()} (rows before it were imported)"
            ) from None
    return report


def _import_chunk(
    chunk: pd.DataFrame,
    plan: FilePlan,
    zone: ZoneInfo,
    options: ImportOptions,
    seen: Counter,
    tag_role: dict[str, str],
    config: Config,
    store,
    dry_run: bool,
    report: ImportReport,
) -> None:
    kind, cols, name = plan.kind, plan.cols, plan.path.name
    tcol, gcol, _ = cols
    chunk = chunk[chunk.notna().any(axis=1).to_numpy()]  # blank lines
    report.rows_read += len(chunk)
    group = chunk[gcol].fillna("").astype(str).str.strip() if kind == "long" else None
    times, reason = parse_times(
        chunk[tcol],
        zone,
        options.ambiguous,
        options.nonexistent,
        order=plan.reading.order,
        time_format=plan.reading.time_format,
        group=group,
        seen=seen,
    )
    rejected = (reason != "").to_numpy()
    report.reject_reasons.update(reason[rejected].tolist())
    report.rows_rejected += int(rejected.sum())
    report.rejected_lines.setdefault(name, []).extend(line_of(row) for row in chunk.index[rejected])
    for row in chunk.index[rejected][: max(0, EXAMPLES - len(report.reject_examples))]:
        text = chunk.at[row, tcol]
        report.reject_examples.append((name, line_of(row), repr("" if pd.isna(text) else str(text).strip())))
    chunk, times = chunk[~rejected], times[~rejected]
    if not len(chunk):
        return
    exact, before = times, report.duplicates
    if report.resolution is not None:  # times the store cannot tell apart are one time
        times = times.dt.floor(report.resolution)
    if kind == "long":
        wide = _long_chunk(chunk, cols, tag_role, times, report, options.decimal, name)
    else:
        wide = _wide_chunk(chunk, tcol, tag_role, times, report, options.decimal, name)
    if report.duplicates > before and report.resolution is not None:
        if kind == "long":
            tags = chunk[gcol].fillna("").astype(str).str.strip()
            mapped = tags.isin(list(tag_role)).to_numpy()
            same = pd.DataFrame({"t": exact[mapped], "g": tags[mapped]}).duplicated().sum()
        else:
            same = exact.duplicated().sum() * max(1, sum(str(c).strip() in tag_role for c in chunk.columns))
        report.coarse_duplicates += report.duplicates - before - int(same)
    wide = wide.dropna(how="all").sort_index()
    wide.index.name = "time"
    wide.columns.name = None
    if wide.empty:
        return
    report.roles_seen.update(wide.columns[wide.notna().any()].tolist())
    report.first = wide.index[0] if report.first is None else min(report.first, wide.index[0])
    report.last = wide.index[-1] if report.last is None else max(report.last, wide.index[-1])
    present = [m for m in config.mappings if m.role in wide.columns]
    if dry_run:
        report.samples_written += int(wide.notna().sum().sum())
    else:
        report.samples_written += int(store.write_raw(present, wide[[m.role for m in present]]))


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config)
    paths = [Path(p) for p in args.csv]
    missing = [str(p) for p in paths if not p.is_file()]
    if missing:
        raise ValueError(f"no such file: {', '.join(missing)}")
    delimiter = args.delimiter.replace("\\t", "\t") if args.delimiter else None
    if delimiter is not None and len(delimiter) != 1:
        raise ValueError(f"--delimiter: expected one character, found {args.delimiter!r}")
    options = ImportOptions(
        layout=args.layout,
        timezone=args.timezone,
        ambiguous=args.ambiguous,
        nonexistent=args.nonexistent,
        date_order=args.date_order,
        time_format=args.time_format,
        delimiter=delimiter,
        decimal=args.decimal,
    )
    time_zone(options.timezone)  # before any connection
    if options.time_format is not None:
        check_time_format(options.time_format)
    if args.dry_run:
        report = import_files(config, paths, None, options, dry_run=True)
    else:
        with config.store.open() as store:
            report = import_files(config, paths, store, options)
    for line in report.lines(config, written=not args.dry_run):
        print(line)
    if report.samples_written == 0:
        what = "no sample would be written" if args.dry_run else "no sample written"
        why = (
            "the files have no data rows"
            if report.rows_read == 0
            else "every value was rejected, empty or of a tag not in the configuration"
        )
        raise ValueError(f"{what}: {why} (what was stored stays)")
    return 0
