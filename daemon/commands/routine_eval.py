"""`isentrope test-eval -c FILE --start T --end T`: evaluate a planned routine test.

Reads the readings of the test period from the unit's store, drops the stabilisation,
checks each sub-period against the PTC 6 fluctuation limits, computes the section figures
from each sub-period's averaged readings with their uncertainty
(``isentrope.calc.routine_test.evaluate_test``), compares the result with the online trend
(the stored steady-window figures within a week of the test), prints the tables and, with
``-o``, writes them as CSV. Not an acceptance test to ASME PTC 6.
"""

from __future__ import annotations

import math
import sys

import pandas as pd

from isentrope.daemon.timeutil import parse_duration, parse_time

NAME = "test-eval"
HELP = "evaluate a planned routine performance test from the stored readings (not an acceptance test)"

#: Figures reported, with the column of the online trend they are compared with.
FIGURES = ("hp_efficiency", "ip_efficiency", "lp_dry_efficiency", "lp_moisture")


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument("--start", required=True, metavar="T", help="start of the test as logged, ISO 8601")
    parser.add_argument("--end", required=True, metavar="T", help="end of the test as logged, ISO 8601")
    parser.add_argument(
        "--stabilisation",
        default="1h",
        metavar="DURATION",
        help="dropped at the start (default 1h, common practice)",
    )
    parser.add_argument(
        "--sub-period",
        default="1h",
        metavar="DURATION",
        help="length of each sub-period (default 1h, common practice)",
    )
    parser.add_argument(
        "-o", "--output", metavar="PREFIX", help="write PREFIX_sub_periods.csv and PREFIX_result.csv"
    )


def _fmt(x, spec) -> str:
    """``x`` formatted with ``spec``; "n/a" (padded to the same width) when not a finite number."""
    width = int("".join(ch for ch in spec.split(".")[0] if ch.isdigit()) or 0)
    try:
        v = float(x)
    except (TypeError, ValueError):
        return format(str(x), f">{width}")
    return format(v, spec) if math.isfinite(v) else format("n/a", f">{width}")


def run(args) -> int:
    from isentrope.calc import routine_test
    from isentrope.daemon.config import load_config
    from isentrope.daemon.pipeline import WINDOWS_MEASUREMENT, Pipeline
    from isentrope.daemon.stores import open_store

    config = load_config(args.config)
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    stabilisation = pd.Timedelta(parse_duration(args.stabilisation))
    sub_period = pd.Timedelta(parse_duration(args.sub_period))
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        frame = store.read(
            config.mappings, start, end, barometric_kpa=config.screening.barometric_kpa, grid=config.read_grid
        )
        week = pd.Timedelta(days=7)
        trend = store.read_results(WINDOWS_MEASUREMENT, start - week, end + week, {"unit": config.unit.name})
    finally:
        store.close()
    if not len(frame):
        raise ValueError(
            f"no readings for unit {config.unit.name} from {start.isoformat()} to {end.isoformat()}"
        )
    online = {f: trend[f].dropna() for f in FIGURES if f in trend.columns and trend[f].notna().any()}
    # Trend windows inside the test itself are not an independent comparison: leave them out.
    online = {f: s[(s.index < start) | (s.index >= end)] for f, s in online.items()}
    online = {f: s for f, s in online.items() if len(s)}
    result = routine_test.evaluate_test(
        frame,
        start,
        end,
        stabilisation=stabilisation,
        sub_period=sub_period,
        rating_mw=float(config.unit.rating_mw) or None,
        section_kwargs=Pipeline(config).section_kwargs(),
        online=online or None,
    )

    print(
        f"Routine test, {config.unit.plant or ''} {config.unit.name}: {start:%Y-%m-%d %H:%M} to "
        f"{end:%Y-%m-%d %H:%M} UTC; evaluated {result.run_start:%H:%M} to {result.run_end:%H:%M}; "
        f"status {result.status}"
    )
    sp = result.sub_periods
    print(
        f"\n{'sub-period start':20}{'samples':>8}{'passed':>8}  {'HP eff [%]':>11}{'IP eff [%]':>11}  reason"
    )
    for t, r in sp.iterrows():
        print(
            f"{t:%Y-%m-%d %H:%M}    {int(r['n_samples']):>8}{'yes' if r['passed'] else 'no':>8}  "
            f"{_fmt(100 * r.get('hp_efficiency', math.nan), '11.2f')}"
            f"{_fmt(100 * r.get('ip_efficiency', math.nan), '11.2f')}  {r.get('reason', '')}"
        )
    print(
        f"\n{'figure':28}{'test result':>14}{'U95':>11}{'n':>4}{'online trend':>14}{'difference':>12}  agrees"
    )
    for name, r in result.result.iterrows():
        percent = name.endswith("efficiency") or name.endswith("moisture")
        scale, unit = (100.0, "%") if percent else (1.0, "kJ/kg" if name.startswith("lp_") else "")
        agrees = r.get("agrees", None)
        agrees = "" if agrees is None or pd.isna(agrees) else ("yes" if agrees else "no")
        print(
            f"{name:28}{_fmt(scale * r['mean'], '12.2f')} {unit:<5}{_fmt(scale * r['U95'], '8.2f')}"
            f"{int(r['n']):>4}{_fmt(scale * r.get('online', math.nan), '14.2f')}"
            f"{_fmt(scale * r.get('difference', math.nan), '+12.2f')}  {agrees}"
        )
    for note in result.notes:
        print(f"note: {note}")
    print(
        "\nEfficiencies and moisture in percent, enthalpies in kJ/kg; U95 = 2 standard uncertainties (spread between "
        "sub-periods and instrument uncertainty). Not an acceptance test to ASME PTC 6; advisory "
        "performance information, not a protective function."
    )
    if args.output:
        sp.to_csv(f"{args.output}_sub_periods.csv", date_format="%Y-%m-%dT%H:%M:%SZ")
        result.result.to_csv(f"{args.output}_result.csv")
        print(f"written: {args.output}_sub_periods.csv, {args.output}_result.csv", file=sys.stderr)
    return 0 if result.status == "ok" else 1
