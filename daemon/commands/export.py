"""`isentrope export -c FILE --start T --end T --format csv [-o FILE]`: results for spreadsheets.

Reads result series with ``Store.read_results`` over ``[start, end)`` and writes one CSV: a
``time`` column in ISO 8601 UTC (``2026-03-01T12:05:00Z``) and one column per field. With one
``--measurement`` the columns are the field names; with several they are
``<measurement>.<field>``, joined on time. The series are selected by the tags the worker
writes: ``unit = <[unit] name>`` plus any ``--tag key=value`` (e.g. ``--tag section=hp`` for
the deviation series, which must be given for the deviation and alarm series, since they hold
one series per section, and per rule). Default measurement: the per-sample section figures. The output file is
written to a temporary name and renamed, so an interrupted export never leaves half a file in
place of a good one.
"""

from __future__ import annotations

import argparse
import io
import os
import sys
import tempfile
from pathlib import Path

import pandas as pd

from isentrope.daemon.config import load_config
from isentrope.daemon.files import chmod_created
from isentrope.daemon.redact import redact
from isentrope.daemon.series import SAMPLES_MEASUREMENT
from isentrope.daemon.timeutil import parse_time

NAME = "export"
HELP = "export result series over a time window as CSV (ISO UTC times, one column per field)"


def _series_tags() -> dict[str, tuple[str, ...]]:
    """Measurement -> tag keys besides ``unit`` that tell its series apart (see pipeline)."""
    try:
        from isentrope.daemon import pipeline
    except ImportError:
        return {}
    out = {}
    if hasattr(pipeline, "DEVIATION_MEASUREMENT"):
        out[pipeline.DEVIATION_MEASUREMENT] = ("section",)
    if hasattr(pipeline, "ALARMS_MEASUREMENT"):
        out[pipeline.ALARMS_MEASUREMENT] = ("section", "rule")
    return out


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="configuration file (TOML)")
    parser.add_argument("--start", required=True, metavar="TIME", help="window start, ISO 8601 (naive = UTC)")
    parser.add_argument(
        "--end", required=True, metavar="TIME", help="window end (exclusive), ISO 8601 (naive = UTC)"
    )
    parser.add_argument("--format", choices=("csv",), default="csv", help="output format (default: csv)")
    parser.add_argument(
        "-o", "--output", default=None, metavar="FILE", help="output file (default: standard output)"
    )
    parser.add_argument(
        "--measurement",
        action="append",
        default=None,
        metavar="NAME",
        help="result series to export; repeat for several (default: the per-sample section figures)",
    )
    parser.add_argument(
        "--tag",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="extra tag filter, e.g. section=hp; repeatable",
    )


def parse_tags(items: list[str]) -> dict[str, str]:
    tags = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise ValueError(f"--tag: expected KEY=VALUE such as section=hp, found {item!r}")
        tags[key.strip()] = value.strip()
    return tags


def collect(
    store, measurements: list[str], start: pd.Timestamp, end: pd.Timestamp, tags: dict[str, str]
) -> pd.DataFrame:
    """The requested series joined on time; columns prefixed by measurement when several."""
    frames = []
    needed = _series_tags()
    for name in measurements:
        # A store returns one value per time and field: series that differ by a tag left out
        # would be mixed (or refused), so such tags must be given.
        missing = [k for k in needed.get(name, ()) if k not in tags]
        if missing:
            example = " ".join(f"--tag {k}={'hp' if k == 'section' else '...'}" for k in missing)
            raise ValueError(
                f"{name} holds one series per {' and '.join(missing)}; choose one with --tag, e.g. {example}"
            )
        frame = store.read_results(name, start, end, tags)
        if frame.index.has_duplicates:
            raise ValueError(
                f"several {name} series match the tags {tags} (they differ by another tag, such as "
                f"section or rule); choose one with --tag, e.g. --tag section=hp"
            )
        if len(measurements) > 1:
            frame = frame.add_prefix(f"{name}.")
        frames.append(frame)
    if not frames:
        return pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC", name="time"))
    out = pd.concat(frames, axis=1, join="outer").sort_index()
    out.index.name = "time"
    return out


def to_csv_text(frame: pd.DataFrame) -> str:
    """CSV with ``time`` as ISO 8601 UTC with a trailing Z; floats at full precision."""
    index = pd.DatetimeIndex(frame.index)
    index = index.tz_localize("UTC") if index.tz is None else index.tz_convert("UTC")
    has_fraction = bool(len(index)) and bool((index.microsecond != 0).any() or (index.nanosecond != 0).any())
    fmt = "%Y-%m-%dT%H:%M:%S.%fZ" if has_fraction else "%Y-%m-%dT%H:%M:%SZ"
    out = frame.copy()
    out.index = pd.Index(index.strftime(fmt), name="time")
    buf = io.StringIO()
    out.to_csv(buf, lineterminator="\n")
    return buf.getvalue()


def _write_atomically(path: Path, text: str) -> None:
    path = path.expanduser()
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent if str(path.parent) else ".")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        chmod_created(tmp)  # mkstemp makes 0600; the umask's mode (0640 by default) instead
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config)
    start = parse_time(args.start, "--start")
    end = parse_time(args.end, "--end")
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    tags = {"unit": config.unit.name, **parse_tags(args.tag)}
    measurements = args.measurement or [SAMPLES_MEASUREMENT]
    if args.output is not None and not Path(args.output).expanduser().parent.is_dir():
        raise ValueError(f"-o: no such directory: {Path(args.output).expanduser().parent}")
    with config.store.open(create=False) as store:
        frame = collect(store, measurements, start, end, tags)
    text = to_csv_text(frame)
    if redact(text) != text:
        raise ValueError(
            "the export would contain a configured secret (the store's token or password) or an "
            "Authorization header: nothing written"
        )
    if args.output is None:
        sys.stdout.write(text)
    else:
        _write_atomically(Path(args.output), text)
    where = args.output or "standard output"
    if frame.empty:
        print(
            f"isentrope: no results of {', '.join(measurements)} with tags {tags} in "
            f"[{start.isoformat()}, {end.isoformat()}); wrote the header only to {where}",
            file=sys.stderr,
        )
    elif args.output is not None:
        print(f"wrote {len(frame)} rows x {frame.shape[1]} fields to {where}", file=sys.stderr)
    return 0
