"""Benchmark: the fleet backfill on Dask, one worker against two (issue 7).

    python tests/bench/bench_fleet.py [--units 2] [--days 28] [--period 7D] [--dir DIR]

``--units`` configurations of the synthetic unit (fictional plant; they differ in
``[unit] name``, each with its own SQLite store holding a copy of the same raw data) are backfilled over ``--days`` with ``isentrope.daemon.fleet.run_fleet``
on a ``LocalCluster`` of one process, then, on a fresh copy of the store, of two processes
(one thread each). Prints both wall times, the speed-up, the CPU time spent in partition tasks
per unit-year and the estimate for 50 units x 10 years. Nothing here asserts a time.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).parent))
import _common  # noqa: E402


def _configs(folder: Path, base: Path, raw: Path, units: int) -> list[str]:
    """One configuration and one SQLite file (a copy of the raw data) per unit: SQLite takes
    one writer at a time, so units sharing a file would wait for each other's writes
    (measured: two workers on one shared file were slower than one)."""
    text = base.read_text(encoding="utf-8")
    paths = []
    for k in range(units):
        p = folder / f"unit{k + 1}.toml"
        shutil.copy(raw, folder / f"unit{k + 1}.sqlite")
        unit_text = text.replace('name = "Greywater Bend 2"', f'name = "Fleet Unit {k + 1}"', 1)
        unit_text = unit_text.replace('path = "unit.sqlite"', f'path = "unit{k + 1}.sqlite"', 1)
        p.write_text(unit_text, encoding="utf-8")
        paths.append(str(p))
    return paths


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", type=int, default=2)
    ap.add_argument("--days", type=float, default=28.0)
    ap.add_argument("--period", default="7D", help="partition length (default 7D; production default MS)")
    ap.add_argument("--chunk", default="30d", help="worker chunk inside a partition (default 30d)")
    ap.add_argument("--dir", help="work folder (default: temporary)")
    args = ap.parse_args(argv)

    tmp = None if args.dir else tempfile.TemporaryDirectory(prefix="isentrope-fleet-")
    root = Path(args.dir or tmp.name)
    root.mkdir(parents=True, exist_ok=True)
    seed = root / "raw"
    seed.mkdir(exist_ok=True)
    cfg = _common.write_config(seed, args.days)
    if not (seed / "unit.sqlite").exists():
        prep = _common.prepare_in_child(cfg, args.days)
        print(
            f"prepared {prep['rows']:,} rows: generate {prep['generate_s']:.1f} s, write_raw {prep['write_raw_s']:.1f} s"
        )

    from dask.distributed import Client, LocalCluster

    from isentrope.daemon import fleet

    start = _common.DEMO_START
    end = start + pd.Timedelta(days=args.days)
    results = {}
    try:
        for n in (1, 2):
            folder = root / f"workers{n}"
            shutil.rmtree(folder, ignore_errors=True)
            folder.mkdir()
            paths = _configs(folder, cfg, seed / "unit.sqlite", args.units)
            with (
                LocalCluster(
                    n_workers=n,
                    threads_per_worker=1,
                    processes=True,
                    dashboard_address=None,
                    host="127.0.0.1",
                ) as cluster,
                Client(cluster) as client,
            ):
                client.run(lambda: __import__("isentrope.daemon.worker"))  # imports outside the timing
                t = time.perf_counter()
                rep = fleet.run_fleet(client, paths, start, end, period=args.period, chunk=args.chunk)
                wall = time.perf_counter() - t
            results[n] = (wall, rep)
            print(
                f"{n} worker(s): {rep.partitions} partitions of {args.units} unit(s) x {args.days:g} d in {wall:.1f} s "
                f"wall; {rep.task_seconds:.1f} s in partition tasks"
            )
    finally:
        if tmp is not None:
            tmp.cleanup()
    w1, r1 = results[1]
    w2, r2 = results[2]
    unit_years = args.units * args.days / 365.0
    per_unit_year = r1.task_seconds / unit_years
    print(f"speed-up one -> two workers: {w1 / w2:.2f}x (wall {w1:.1f} s -> {w2:.1f} s)")
    print(f"partition task time per unit-year (one worker): {per_unit_year:.0f} s")
    total_h = per_unit_year * 50 * 10 / 3600.0
    print(
        f"estimate for 50 units x 10 years (500 unit-years): {total_h:.0f} CPU-hours of partition tasks; "
        f"{total_h / 2:.0f} h wall on this 2-core machine, {total_h / 32:.1f} h on 32 worker processes "
        "(the store must take the reads and writes of all of them)"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
