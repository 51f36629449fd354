"""`isentrope run -c FILE [--once]`: the scheduled worker of one unit.

Every ``[schedule] interval`` the worker processes the data from its checkpoint (minus the
look-back) to now minus the settle delay, in chunks, and writes the results and a heartbeat
(``worker_status``). Every ``[schedule] analysis_interval`` (default 1 h; "0s" turns it off) it
also brings the degradation analysis up to its checkpoint and writes rates, steps, the rate
and step alarms, losses and the outlook back for dashboards (``Worker.analyse``).
``--once`` runs a single cycle and then the analysis, and exits (for cron or a systemd timer).
Without a checkpoint (first start) it processes only the last look-back; process the history
before that with ``isentrope backfill``.
SIGTERM and SIGINT stop it cleanly after the chunk in progress. It holds the unit's lease on
its store while it runs (``isentrope.daemon.lease``): a second worker of the unit is refused
with exit code 6.
"""

from __future__ import annotations

import logging
import signal
import threading

import pandas as pd

from isentrope.daemon.errors import (
    EXIT_CONFIG,
    EXIT_OK,
    EXIT_OTHER,
    EXIT_UNREACHABLE,
    AuthorizationError,
    CertificateError,
    FatalStoreError,
)

NAME = "run"
HELP = "run the worker: every interval, process new data from the checkpoint and write the results"

logger = logging.getLogger("isentrope.run")


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument("--once", action="store_true", help="run one cycle and exit")


def _install_signal_handlers(on_signal) -> dict:
    previous = {}
    if threading.current_thread() is not threading.main_thread():
        return previous
    for signum in (signal.SIGTERM, signal.SIGINT):
        previous[signum] = signal.signal(signum, on_signal)
    return previous


def _restore(previous: dict) -> None:
    for signum, handler in previous.items():
        signal.signal(signum, handler)


def run(args) -> int:
    from isentrope.daemon.config import load_config
    from isentrope.daemon.lease import UnitLease
    from isentrope.daemon.stores import open_store
    from isentrope.daemon.worker import Worker

    config = load_config(args.config)  # ConfigError before any connection is made
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        lease = UnitLease(store, config.unit.name, "run", config.schedule.lease)
        with lease:  # UnitBusyError (exit 6) when another worker holds the unit
            worker = Worker.from_config(config, store)
            lease.on_lost = lambda _exc: worker.stop()
            if args.once:
                report = worker.run_cycle()
                lease.check()
                if report.ok and config.schedule.analysis_interval.total_seconds() > 0:
                    if worker.analyse() is None and worker.last_report.checkpoint is not None:
                        return EXIT_UNREACHABLE
                return EXIT_OK if report.ok else EXIT_UNREACHABLE
            return _serve(worker, config, lease)
    finally:
        store.close()


def _serve(worker, config, lease=None) -> int:
    from apscheduler.schedulers.background import BackgroundScheduler
    from apscheduler.triggers.interval import IntervalTrigger

    stop = threading.Event()
    received: list[int] = []

    def on_signal(signum, _frame):
        received.append(signum)
        worker.stop()  # the cycle in progress ends after its current chunk
        stop.set()

    exit_code = [EXIT_OK]

    def on_lost(_exc):  # another worker took the unit while this one's lease had run out
        worker.stop()
        stop.set()

    if lease is not None:
        lease.on_lost = on_lost

    def cycle():
        try:
            worker.run_cycle()  # temporary store trouble is handled (logged) inside
        except AuthorizationError as exc:  # credentials or their rights: exit 2, not restarted
            logger.error("unit %s: stopping the worker: configuration error: %s", config.unit.name, exc)
            exit_code[0] = EXIT_CONFIG
            stop.set()
        except FatalStoreError as exc:  # retrying will not help: stop with exit 1
            logger.error("unit %s: stopping the worker: %s", config.unit.name, exc)
            exit_code[0] = EXIT_CONFIG if isinstance(exc, CertificateError) else EXIT_OTHER
            stop.set()

    def analysis():
        if stop.is_set():  # a cycle has stopped the worker
            return
        try:
            worker.analyse()  # temporary store trouble is logged inside
        except FatalStoreError as exc:
            logger.error("unit %s: stopping the worker: %s", config.unit.name, exc)
            exit_code[0] = (
                EXIT_CONFIG if isinstance(exc, (AuthorizationError, CertificateError)) else EXIT_OTHER
            )
            stop.set()

    previous = _install_signal_handlers(on_signal)
    scheduler = BackgroundScheduler(timezone="UTC")
    interval = config.schedule.interval.total_seconds()
    scheduler.add_job(
        cycle,
        IntervalTrigger(seconds=interval, timezone="UTC"),
        id=f"cycle/{config.unit.name}",
        max_instances=1,  # never two cycles of one unit at once
        coalesce=True,  # cycles missed while one ran long are run once, not many times
        misfire_grace_time=None,
        next_run_time=worker.clock().to_pydatetime(),
    )
    every = config.schedule.analysis_interval.total_seconds()
    if every > 0:
        scheduler.add_job(
            analysis,
            IntervalTrigger(seconds=every, timezone="UTC"),
            id=f"analysis/{config.unit.name}",
            max_instances=1,
            coalesce=True,
            misfire_grace_time=None,
            # after the first cycle has had its start (the two share the worker's lock); on the
            # scheduler's own clock, which a worker's injected clock need not follow
            next_run_time=(
                pd.Timestamp.now(tz="UTC") + pd.Timedelta(seconds=min(every, interval))
            ).to_pydatetime(),
        )
    logger.info(
        "unit %s: worker started, a cycle every %.0f s, the analysis every %s (settle %s, "
        "look-back %s, chunk %s)",
        config.unit.name,
        interval,
        f"{every:.0f} s" if every > 0 else "never",
        config.schedule.settle,
        config.schedule.lookback,
        config.schedule.chunk,
    )
    scheduler.start()
    try:
        while not stop.wait(1.0):
            pass
    finally:
        scheduler.shutdown(wait=True)  # waits for the cycle in progress (it stops between chunks)
        _restore(previous)
    if lease is not None:
        lease.check()  # exit 6, after the cycle in progress has ended
    if received:
        logger.info(
            "unit %s: worker stopped on signal %d; checkpoint at %s",
            config.unit.name,
            received[0],
            worker.last_report.checkpoint.isoformat()
            if worker.last_report is not None and worker.last_report.checkpoint is not None
            else "its last value",
        )
    return exit_code[0]
