"""`isentrope report -c FILE --start T --end T -o DIR`: the HTML report for a period.

Runs the degradation analysis over the whole stored history, from the baseline's reference
start to the last reading, whatever the period asked for, and writes its result series back
(idempotently: the same history gives the same rows). Then writes ``DIR/index.html`` with
its PNG figures for the period ``[--start, --end)``: the planner summary is the state at the
end of the history, the period table and the figures are the period's, taken from that
analysis. A short period therefore never rewrites the stored rates, steps or cumulative costs
with those of the period alone. Advisory performance information, not a protective function.
"""

from __future__ import annotations

from isentrope.daemon.commands import parse_time

NAME = "report"
HELP = "write the HTML performance report for a period (advisory information, not a protective function)"


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument("--start", required=True, metavar="T", help="first time, ISO 8601 (naive means UTC)")
    parser.add_argument("--end", required=True, metavar="T", help="end time (excluded), ISO 8601")
    parser.add_argument(
        "-o", "--output", required=True, metavar="DIR", help="folder for index.html and figures"
    )
    parser.add_argument("--hs-window", metavar="T", help="start of the steady window for the h-s diagram")


def run(args) -> int:
    from isentrope.daemon.analysis import run_analysis
    from isentrope.daemon.config import load_config
    from isentrope.daemon.report import write_report
    from isentrope.daemon.stores import open_store

    config = load_config(args.config)
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        analysis = run_analysis(store, config)  # the whole history, not the period
        path = write_report(
            store,
            config,
            start,
            end,
            args.output,
            analysis=analysis,
            hs_window=parse_time(args.hs_window) if args.hs_window else None,
        )
    finally:
        store.close()
    print(path)
    return 0
