"""`isentrope backfill -c FILE --start T --end T`: process a past period, chunk by chunk.

The backfill keeps its own checkpoint, named after the unit and the period, so it never moves
the scheduled worker's checkpoint, and running the same command again after an interruption
(even SIGKILL) resumes after the last chunk whose results were fully written. The backfill
owns the period it processes: before it starts (or resumes) it deletes the unit's results in
what is left of the period (``Worker.own_period``), so rows of an earlier run stay nowhere
this one writes none. At its end it analyses the whole history again (``Worker.analyse``
with ``rebuild``): every analysis row is replaced, as if only this run had happened. One chunk
(``[schedule] chunk``, or ``--chunk``) is in memory at a time. A progress bar goes to stderr.
It holds the unit's lease on its store from before its first write to its end
(``isentrope.daemon.lease``): a second backfill or a ``run`` of the unit is refused with exit
code 6.
"""

from __future__ import annotations

import logging
import signal
import sys

import pandas as pd

from isentrope.daemon.errors import EXIT_OK, EXIT_UNREACHABLE
from isentrope.daemon.timeutil import parse_duration, parse_time

NAME = "backfill"
HELP = "process a past period in chunks and write the results; resumable"

logger = logging.getLogger("isentrope.backfill")


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument("--start", required=True, metavar="T", help="first time, ISO 8601 (naive means UTC)")
    parser.add_argument("--end", required=True, metavar="T", help="end time (excluded), ISO 8601")
    parser.add_argument(
        "--chunk", metavar="DURATION", help="chunk length, e.g. 1d (default: [schedule] chunk)"
    )
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")
    parser.add_argument(
        "--refit",
        action="store_true",
        help="fit the baseline models again on the configured [baseline] period (its steady "
        "windows must be stored), then process the whole period again from --start, alarm "
        "machines included (after an overhaul or a changed [baseline])",
    )


def checkpoint_name(unit: str, start: pd.Timestamp, end: pd.Timestamp) -> str:
    """The backfill's own checkpoint: one per unit and period."""
    return f"backfill/{unit}/{start:%Y%m%dT%H%M%SZ}-{end:%Y%m%dT%H%M%SZ}"


def run(args) -> int:
    from isentrope.daemon.config import load_config
    from isentrope.daemon.lease import UnitLease
    from isentrope.daemon.stores import open_store

    config = load_config(args.config)  # ConfigError before any connection is made
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    chunk = parse_duration(args.chunk) if args.chunk else config.schedule.chunk
    name = checkpoint_name(config.unit.name, start, end)
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        with UnitLease(store, config.unit.name, "backfill", config.schedule.lease) as lease:
            return _backfill(args, config, store, lease, name, start, end, chunk)
    finally:
        store.close()


def _backfill(args, config, store, lease, name, start, end, chunk) -> int:
    from isentrope.daemon.commands.progress import hours_bar
    from isentrope.daemon.worker import Worker

    worker = Worker.from_config(
        config, store, checkpoint_name=name, start_default=start, lookback="0s", settle="0s", chunk=chunk
    )
    if args.refit:
        if worker.baseline_period() is None:
            raise ValueError("--refit needs a [baseline] period (start and end) in the configuration")
        # Fresh models, fresh alarm machines, from the start: results are replaced where they
        # are written again; events of the old models at other instants stay (daemon/DECISIONS.md).
        store.save_state(worker.baseline_state_name, {})
        store.save_state(worker.alarm_state_name, {})
        store.set_checkpoint(name, start)
        logger.info(
            "unit %s: refit: baseline models and alarm state cleared; processing %s to %s again",
            config.unit.name,
            start.isoformat(),
            end.isoformat(),
        )
    else:
        worker.warn_if_baseline_changed()
    resumed_at = store.get_checkpoint(name)
    worker.own_period(start if resumed_at is None else max(start, min(resumed_at, end)), end)
    received: list[int] = []

    def on_signal(signum, _frame):
        received.append(signum)
        worker.stop()

    previous = {s: signal.signal(s, on_signal) for s in (signal.SIGTERM, signal.SIGINT)}
    done = worker.store.get_checkpoint(name)
    if done is not None:
        logger.info("unit %s: resuming backfill %s at %s", config.unit.name, name, done.isoformat())
    bar, progress = hours_bar(start, end, done, f"backfill {config.unit.name}", disable=args.no_progress)
    lease.on_lost = lambda _exc: worker.stop()
    try:
        report = worker.run_cycle(until=end, progress=progress)
    finally:
        bar.close()
        for s, h in previous.items():
            signal.signal(s, h)
    lease.check()  # exit 6: another worker took the unit while this lease had run out
    if received:
        logger.info(
            "unit %s: backfill stopped on signal %d at %s; run the same command to resume",
            config.unit.name,
            received[0],
            report.checkpoint.isoformat() if report.checkpoint is not None else start.isoformat(),
        )
        return 128 + received[0]
    if not report.ok:
        print(
            f"isentrope: backfill interrupted: {report.error}; run the same command to resume",
            file=sys.stderr,
        )
        return EXIT_UNREACHABLE
    live = store.get_checkpoint(f"run/{config.unit.name}")  # the scheduled worker's
    worker.analyse(end=max(end, live) if live is not None else end, rebuild=True)
    if report.chunks_done and not report.rows_read:
        logger.warning(
            "unit %s: no sample of any mapped tag between %s and %s: nothing was computed; "
            "check the tag names and the period with `isentrope check`",
            config.unit.name,
            start.isoformat(),
            end.isoformat(),
        )
    logger.info(
        "unit %s: backfill %s to %s done: %d chunks, %d rows read, %d flagged",
        config.unit.name,
        start.isoformat(),
        end.isoformat(),
        report.chunks_done,
        report.rows_read,
        report.rows_flagged,
    )
    return EXIT_OK
