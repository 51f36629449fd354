"""`isentrope import-csv -c FILE CSV...`: load historian exports into the configured store.

Two layouts, detected from the header (or forced with ``--layout``):

* long: ``time,tag,value`` (one sample per row; the header names may also be
  timestamp/datetime/date, name/tagname/point, val/reading);
* wide: ``time,<tag>,<tag>,...`` (the first column is the time, one column per tag).

Times with an offset or ``Z`` are taken as written. Naive times are local times of
``--timezone`` (default UTC): the repeated hour at the end of daylight saving time is
``--ambiguous`` (reject the rows, take the earlier/later instant, or "file-order": first
occurrence earlier, second later, as a historian writes the repeated hour) and the skipped hour at its
start is ``--nonexistent`` (reject, or shift forward to the first valid instant). Rejected rows
are counted, never guessed.

Tags map onto roles through the configuration (``[roles.<role>] tag``); unmapped tags are
counted and skipped. Values that are not numbers become NaN and are counted. Duplicate
(time, tag) pairs keep the last value, as the store contract does. Samples go to the store
through ``write_raw`` in plant units, chunk by chunk (bounded memory); writing the same file
again replaces, never duplicates.
"""

from __future__ import annotations

import argparse
import csv
import logging
import re
import warnings
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from isentrope.daemon.config import Config, load_config

NAME = "import-csv"
HELP = "import historian CSV exports (long time,tag,value or wide time,<tag>,...) into the store"

log = logging.getLogger(__name__)

TIME_NAMES = ("time", "timestamp", "datetime", "date", "date_time", "ts")
TAG_NAMES = ("tag", "name", "tagname", "tag_name", "point", "tag name")
VALUE_NAMES = ("value", "val", "reading")
_OFFSET = re.compile(r"(?:Z|[+-]\d\d(?::?\d\d)?)$", re.IGNORECASE)
CHUNK_ROWS = 200_000


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
    unmapped_tags: Counter = field(default_factory=Counter)
    roles_seen: set = field(default_factory=set)
    first: pd.Timestamp | None = None
    last: pd.Timestamp | None = None

    def lines(self, config: Config, written: bool = True) -> list[str]:
        out = [
            f"files: {self.files}",
            f"rows read: {self.rows_read}",
            f"rows rejected: {self.rows_rejected}"
            + (f" ({', '.join(f'{n} {why}' for why, n in sorted(self.reject_reasons.items()))})"
               if self.reject_reasons else ""),
            f"values not a number (stored as missing): {self.bad_values}",
            f"duplicate (time, tag) values replaced by the later one: {self.duplicates}",
            f"samples {'written' if written else 'that would be written (dry run)'}: {self.samples_written}",
        ]
        if self.first is not None:
            out.append(f"time span (UTC): {self.first.isoformat()} to {self.last.isoformat()}")
        if self.unmapped_tags:
            names = ", ".join(f"{t} ({n})" for t, n in self.unmapped_tags.most_common(10))
            more = len(self.unmapped_tags) - 10
            out.append(f"tags not in the configuration, skipped: {names}" + (f" and {more} more" if more > 0 else ""))
        missing = [m.role for m in config.mappings if m.role not in self.roles_seen]
        if missing:
            out.append(f"mapped roles with no data in the files: {', '.join(missing)}")
        return out


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="configuration file (TOML)")
    parser.add_argument("csv", nargs="+", metavar="CSV", help="historian export(s)")
    parser.add_argument("--layout", choices=("auto", "long", "wide"), default="auto",
                        help="long = time,tag,value; wide = time,<tag>,<tag>,... (default: auto)")
    parser.add_argument("--timezone", default="UTC", metavar="ZONE",
                        help="IANA zone of times written without an offset, e.g. Europe/Berlin (default: UTC)")
    parser.add_argument("--ambiguous", choices=("reject", "earlier", "later", "file-order"), default="reject",
                        help="naive times in the repeated hour when daylight saving ends: reject the rows, "
                             "take the earlier (daylight saving) or later (standard time) instant, or "
                             "file-order (first occurrence earlier, second later) (default: reject)")
    parser.add_argument("--dayfirst", action="store_true", help="read 03/04/2026 as 3 April (default: 4 March)")
    parser.add_argument("--nonexistent", choices=("reject", "shift-forward"), default="reject",
                        help="naive times in the hour skipped when daylight saving starts (default: reject)")
    parser.add_argument("--delimiter", default=None, metavar="CHAR",
                        help="field separator (default: detected from the header: , ; or tab)")
    parser.add_argument("--decimal", choices=(".", ","), default=".",
                        help="decimal mark of the values (default: .); with , use a ; or tab delimiter")
    parser.add_argument("--dry-run", action="store_true", help="read and report, write nothing")


# ------------------------------------------------------------------------------------
# parsing
# ------------------------------------------------------------------------------------
def detect_layout(header: list[str]) -> str:
    """"long" when the header is time/tag/value (in any order), else "wide"."""
    names = [h.strip().lower() for h in header]
    if (len(names) == 3 and any(n in TIME_NAMES for n in names)
            and any(n in TAG_NAMES for n in names) and any(n in VALUE_NAMES for n in names)):
        return "long"
    return "wide"


def _sniff_delimiter(first_line: str) -> str:
    counts = {d: first_line.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=counts.get)
    return best if counts[best] else ","


def _to_datetime(s: pd.Series, dayfirst: bool, utc: bool) -> pd.Series:
    """Parse ISO 8601 fast; anything else element by element (slower, rarer)."""
    if not dayfirst:
        parsed = pd.to_datetime(s, errors="coerce", format="ISO8601", utc=utc)
        rest = parsed.isna()
        if not rest.any():
            return parsed
    else:
        parsed = pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns, UTC]" if utc else "datetime64[ns]")
        rest = pd.Series(True, index=s.index)
    parsed[rest] = pd.to_datetime(s[rest], errors="coerce", format="mixed", dayfirst=dayfirst, utc=utc)
    return parsed


def parse_times(text: pd.Series, zone: ZoneInfo, ambiguous: str = "reject", nonexistent: str = "reject",
                dayfirst: bool = False, group: pd.Series | None = None,
                seen: Counter | None = None) -> tuple[pd.Series, pd.Series]:
    """Strings -> UTC timestamps, and a reason per rejected row ("" when accepted).

    Parameters
    ----------
    text : pandas.Series of str
        Times as written (ISO 8601 or any form pandas reads; with or without an offset) [-].
    zone : zoneinfo.ZoneInfo
        Zone of times written without an offset [-].
    ambiguous : {"reject", "earlier", "later", "file-order"}
        Naive times that occur twice (end of daylight saving): reject, take the earlier
        (daylight saving) or later (standard time) instant, or "file-order": the first
        occurrence of a time (per ``group``) is the earlier instant, the second the later,
        a third is rejected [-].
    nonexistent : {"reject", "shift-forward"}
        Naive times that never occur (start of daylight saving) [-].
    dayfirst : bool
        Read 03/04/2026 as 3 April [-].
    group : pandas.Series, optional
        Key (the tag, in the long layout) within which "file-order" counts occurrences [-].
    seen : collections.Counter, optional
        Occurrences counted so far, carried from chunk to chunk of one file [-].
    """
    s = text.astype("string").str.strip()
    out = pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns, UTC]")
    reason = pd.Series("", index=s.index, dtype=object)
    empty = s.isna() | (s == "")
    reason[empty] = "empty time"
    aware = ~empty & s.str.contains(_OFFSET, na=False)
    naive = ~empty & ~aware
    if aware.any():
        out[aware] = _to_datetime(s[aware], dayfirst, utc=True)
        reason[aware & out.isna()] = "unreadable time"
    if not naive.any():
        return out, reason
    parsed = _to_datetime(s[naive], dayfirst, utc=False)
    bad = parsed.isna()
    reason[parsed.index[bad]] = "unreadable time"
    good = parsed[~bad]
    if not len(good):
        return out, reason
    if str(zone) == "UTC":
        out[good.index] = good.dt.tz_localize("UTC")
        return out, reason
    # Which naive times are ambiguous, which nonexistent: localise with NaT for both, then
    # again with a fixed choice for the ambiguous ones (only the nonexistent stay NaT).
    probe = good.dt.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
    is_nonexistent = good.dt.tz_localize(zone, ambiguous=np.ones(len(good), dtype=bool), nonexistent="NaT").isna()
    is_ambiguous = probe.isna() & ~is_nonexistent
    local = probe.copy()
    if is_ambiguous.any():
        sub = good[is_ambiguous]
        if ambiguous == "reject":
            reason[sub.index] = f"ambiguous local time in {zone}"
        else:
            if ambiguous == "file-order":
                keys = list(zip(group[sub.index] if group is not None else [""] * len(sub), sub))
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


def _numbers(values: pd.Series, decimal: str = ".") -> tuple[pd.Series, int]:
    """Strings -> floats (NaN where not a finite number); also how many non-empty cells were
    not numbers. ``decimal`` "," reads 165,2 as 165.2."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        # The CSV parser already read the whole column as numbers (the common case, fast);
        # only infinities remain to be refused.
        nums = values.astype(float)
        finite = np.isfinite(nums.to_numpy())
        bad = int((~finite & nums.notna().to_numpy()).sum())
        nums[~finite] = np.nan
        return nums, bad
    s = values.astype(object).where(values.notna(), "").astype(str).str.strip()
    if decimal == ",":
        s = s.str.replace(",", ".", regex=False)
    nums = pd.to_numeric(s.where(s != "", None), errors="coerce").astype(float)
    nums[~np.isfinite(nums.to_numpy())] = np.nan
    bad = int((nums.isna() & (s != "")).sum())
    return nums, bad


def _long_chunk(chunk: pd.DataFrame, cols: tuple[str, str, str], tag_role: dict[str, str],
                times: pd.Series, report: ImportReport, decimal: str) -> pd.DataFrame:
    _, gcol, vcol = cols
    tags = chunk[gcol].fillna("").astype(str).str.strip()
    mapped = tags.isin(list(tag_role))
    report.unmapped_tags.update(t or "(empty)" for t in tags[~mapped])
    values, bad = _numbers(chunk.loc[mapped, vcol], decimal)
    report.bad_values += bad
    frame = pd.DataFrame({"time": times[mapped], "role": tags[mapped].map(tag_role), "value": values})
    dup = frame.duplicated(["time", "role"], keep="last")
    report.duplicates += int(dup.sum())
    return frame[~dup].pivot(index="time", columns="role", values="value")


def _wide_chunk(chunk: pd.DataFrame, tcol: str, tag_role: dict[str, str], times: pd.Series,
                report: ImportReport, decimal: str) -> pd.DataFrame:
    out = {}
    for col in chunk.columns:
        if col == tcol:
            continue
        tag = str(col).strip()
        if tag not in tag_role:
            report.unmapped_tags[tag] += int(chunk[col].notna().sum())
            continue
        values, bad = _numbers(chunk[col], decimal)
        report.bad_values += bad
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
        raise ValueError(f"--timezone: unknown time zone {name!r}; use an IANA name such as "
                         "UTC, Europe/Berlin or America/Chicago") from None


@dataclass(frozen=True)
class ImportOptions:
    """How to read the files (see the module docstring)."""

    layout: str = "auto"
    timezone: str = "UTC"
    ambiguous: str = "reject"
    nonexistent: str = "reject"
    dayfirst: bool = False
    delimiter: str | None = None
    decimal: str = "."


def import_files(config: Config, paths: list[Path], store, options: ImportOptions = ImportOptions(),
                 dry_run: bool = False) -> ImportReport:
    """Read CSV exports and write them to ``store`` (unless ``dry_run``); returns the counts.

    Raises ValueError for an unknown time zone, a file whose header cannot be used, or a
    malformed row (its line number; rows before it are written already).
    """
    zone = time_zone(options.timezone)
    tag_role = {m.tag: m.role for m in config.mappings}
    report = ImportReport()
    for path in paths:
        path = Path(path)
        with path.open("r", encoding="utf-8-sig", newline="") as fh:
            first = fh.readline()
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
                cols = tuple(header[next(i for i, n in enumerate(names) if n in group)]
                             for group in (TIME_NAMES, TAG_NAMES, VALUE_NAMES))
            except StopIteration:
                raise ValueError(f"{path}: long layout needs time, tag and value columns, found {header}") from None
        else:
            if len(header) < 2:
                raise ValueError(f"{path}: wide layout needs a time column and at least one tag column, "
                                 f"found {header}")
            cols = (header[0], "", "")
        report.files += 1
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
                with pd.read_csv(path, sep=sep, dtype={c: str for c in text_cols}, keep_default_na=False,
                                 na_values=[""], decimal=options.decimal, chunksize=CHUNK_ROWS,
                                 encoding="utf-8-sig", skipinitialspace=True, index_col=False) as reader:
                    for chunk in reader:
                        _import_chunk(chunk, kind, cols, zone, options, seen, tag_role, config, store,
                                      dry_run, report)
        except pd.errors.ParserWarning:
            raise ValueError(f"{path}: malformed CSV: a row has more fields than the header's "
                             f"{len(header)} (rows before it were imported)") from None
        except pd.errors.ParserError as exc:
            raise ValueError(f"{path}: malformed CSV: {str(exc).strip()} (rows before it were imported)") from None
    return report


def _import_chunk(chunk: pd.DataFrame, kind: str, cols: tuple, zone: ZoneInfo, options: ImportOptions,
                  seen: Counter, tag_role: dict[str, str], config: Config, store, dry_run: bool,
                  report: ImportReport) -> None:
    tcol, gcol, _ = cols
    report.rows_read += len(chunk)
    group = chunk[gcol].fillna("").astype(str).str.strip() if kind == "long" else None
    times, reason = parse_times(chunk[tcol], zone, options.ambiguous, options.nonexistent,
                                dayfirst=options.dayfirst, group=group, seen=seen)
    rejected = reason != ""
    report.reject_reasons.update(reason[rejected].tolist())
    report.rows_rejected += int(rejected.sum())
    chunk, times = chunk[~rejected], times[~rejected]
    if not len(chunk):
        return
    if kind == "long":
        wide = _long_chunk(chunk, cols, tag_role, times, report, options.decimal)
    else:
        wide = _wide_chunk(chunk, tcol, tag_role, times, report, options.decimal)
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
    options = ImportOptions(layout=args.layout, timezone=args.timezone, ambiguous=args.ambiguous,
                            nonexistent=args.nonexistent, dayfirst=args.dayfirst, delimiter=delimiter,
                            decimal=args.decimal)
    time_zone(options.timezone)  # before any connection
    if args.dry_run:
        report = import_files(config, paths, None, options, dry_run=True)
    else:
        with config.store.open() as store:
            report = import_files(config, paths, store, options)
    for line in report.lines(config, written=not args.dry_run):
        print(line)
    return 0
