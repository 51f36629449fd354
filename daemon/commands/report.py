"""`isentrope report -c FILE --start T --end T -o DIR`: the HTML report for a period.

Reads the degradation analysis the worker stored (``analysis.load_analysis``: the whole
history from the baseline's reference start, whatever the period asked for); when none is
stored yet it brings it up to the last reading first (``run_analysis``, as the worker's job
does). Then writes ``DIR/index.html`` with its PNG figures for the period ``[--start,
--end)``: the planner summary is the state at the end of the analysed history, the period
table and the figures are the period's, taken from that analysis. A report never rewrites the
stored rates, steps or cumulative costs with those of its period alone.
"""

from __future__ import annotations

from isentrope.daemon.timeutil import parse_time

NAME = "report"
HELP = "write the HTML performance report for a period"


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument("--start", required=True, metavar="T", help="first time, ISO 8601 (naive means UTC)")
    parser.add_argument("--end", required=True, metavar="T", help="end time (excluded), ISO 8601")
    parser.add_argument(
        "-o", "--output", required=True, metavar="DIR", help="folder for index.html and figures"
    )
    parser.add_argument("--hs-window", metavar="T", help="start of the steady window for the h-s diagram")


def run(args) -> int:
    from isentrope.daemon.analysis import load_analysis, run_analysis, state_name
    from isentrope.daemon.config import load_config
    from isentrope.daemon.report import write_report
    from isentrope.daemon.stores import open_store

    config = load_config(args.config)
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        if store.load_state(state_name(config)).get("end"):
            analysis = load_analysis(store, config)  # what the worker stored
        else:
            analysis = run_analysis(store, config)  # none yet: the whole history, not the period
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
