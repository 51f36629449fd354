"""`isentrope fleet-backfill -c unit1.toml -c unit2.toml --start T --end T`: many units on Dask.

Partitions every unit's period by calendar month (``--period`` changes it) and runs them on a
Dask scheduler: ``--scheduler tcp://host:8786`` for a running one (its workers need isentrope
installed and access to the units' stores and configuration files at the same paths), or a
local cluster of ``--workers`` processes (one thread each; the dashboard is off and everything
listens on 127.0.0.1). Partitions that are already done are skipped, so the same command
resumes after an interruption. See ``isentrope.daemon.fleet`` for how the baseline and the
alarms are handled. This process holds every unit's lease on its store while the cluster
works (``isentrope.daemon.lease``; its tasks write under it): a unit another worker holds is
refused with exit code 6 before anything is started.
"""

from __future__ import annotations

import contextlib
import logging
import sys

from isentrope.daemon.errors import EXIT_OK
from isentrope.daemon.timeutil import parse_duration, parse_time

NAME = "fleet-backfill"
HELP = "backfill many units over a long period on a Dask cluster, partitioned by unit and month; resumable"

logger = logging.getLogger("isentrope.fleet")


def add_arguments(parser) -> None:
    parser.add_argument(
        "-c",
        "--config",
        action="append",
        required=True,
        metavar="FILE",
        help="a unit's TOML configuration; repeat for every unit",
    )
    parser.add_argument("--start", required=True, metavar="T", help="first time, ISO 8601 (naive means UTC)")
    parser.add_argument("--end", required=True, metavar="T", help="end time (excluded), ISO 8601")
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786 "
        "(default: a local cluster on this machine)",
    )
    parser.add_argument(
        "--workers",
        type=int,
        default=2,
        metavar="N",
        help="processes of the local cluster (default 2; ignored with --scheduler)",
    )
    parser.add_argument(
        "--period",
        default="MS",
        metavar="ALIAS",
        help="partition length as a pandas offset alias (default MS: calendar months)",
    )
    parser.add_argument(
        "--chunk",
        metavar="DURATION",
        help="worker chunk inside a partition, e.g. 7d (default: [schedule] chunk)",
    )
    parser.add_argument(
        "--refit",
        action="store_true",
        help="fit the baseline again even when one is saved (after changing [baseline]) and recompute the partitions after the baseline end",
    )


def run(args) -> int:
    from isentrope.daemon.config import load_config
    from isentrope.daemon.lease import UnitLease
    from isentrope.daemon.stores import open_store

    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise ValueError(f"--end ({end.isoformat()}) must be after --start ({start.isoformat()})")
    if args.workers < 1:
        raise ValueError(f"--workers must be at least 1, found {args.workers}")
    configs = [load_config(path) for path in args.config]  # every ConfigError before a cluster is started
    chunk = parse_duration(args.chunk) if args.chunk else None
    with contextlib.ExitStack() as held:
        leases = []
        for config in configs:  # UnitBusyError (exit 6) before a cluster is started
            store = held.enter_context(open_store(config.store.kind, **config.store.open_options()))
            leases.append(
                held.enter_context(
                    UnitLease(store, config.unit.name, "fleet-backfill", config.schedule.lease)
                )
            )
        code = _run(args, start, end, chunk)
        for lease in leases:
            lease.check()
        return code


def _run(args, start, end, chunk) -> int:
    from dask.distributed import Client, LocalCluster

    from isentrope.daemon import fleet

    if args.scheduler:
        client, cluster = Client(args.scheduler), None
    else:
        cluster = LocalCluster(
            n_workers=args.workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            host="127.0.0.1",
        )
        client = Client(cluster)
    try:
        report = fleet.run_fleet(
            client, args.config, start, end, period=args.period, chunk=chunk, refit=args.refit
        )
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    print(
        f"fleet backfill: {len(args.config)} unit(s), {report.partitions} partitions "
        f"({report.skipped} already done), {report.rows_read:,} rows read, {report.seconds:.1f} s wall, "
        f"{report.task_seconds:.1f} s in partition tasks",
        file=sys.stderr,
    )
    for unit, sections in sorted(report.baselines.items()):
        print(
            f"  {unit}: baseline {'for ' + ', '.join(sections) if sections else 'not fitted (no deviations)'}",
            file=sys.stderr,
        )
    return EXIT_OK
