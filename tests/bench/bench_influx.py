"""Benchmark: a unit's backfill from and to a real InfluxDB through its v2 API (issue 7).

    python tests/bench/bench_influx.py [--days 365] [--chunk 30d]

Starts influxd 1.8.10 (Flux on; it serves the v2 API) from ``ISENTROPE_INFLUXD_18`` (default
/var/cache/isentrope/influxd-1.8.10/influxd) on free 127.0.0.1 ports in a temporary folder,
with the server helper of tests/conftest.py; writes ``--days`` of the synthetic unit (fictional
plant) with ``Store.write_raw`` (not part of the target), then backfills through
``isentrope.daemon.worker.Worker`` and prints the wall time with the read (Flux through the
client's ``query_raw`` CSV path, see daemon/stores/influx2.py), compute and write (line
protocol, synchronous batches; by default written behind, in a second thread, while the next chunk
is read and computed: ``--no-write-behind`` writes in line) shares. Target: a unit-year under 90 s.
Nothing asserts a time.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

HERE = Path(__file__).parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))
import _common  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days", type=float, default=365.0)
    ap.add_argument("--chunk", default="30d")
    ap.add_argument(
        "--no-write-behind",
        action="store_true",
        help="write each chunk before computing the next (the reference for the write-behind)",
    )
    args = ap.parse_args(argv)

    import conftest  # the real-server helper of the test suite

    binary = conftest.INFLUXD_18
    if not (os.path.isfile(binary) and os.access(binary, os.X_OK)):
        print(
            f"no influxd 1.8 at {binary}: {conftest.BUILD_HINT['v2'] if hasattr(conftest, 'BUILD_HINT') else ''}"
        )
        return 2
    from isentrope.daemon.config import load_config
    from isentrope.daemon.stores import open_store
    from isentrope.daemon.worker import Worker

    with tempfile.TemporaryDirectory(prefix="isentrope-influx-bench-") as tmp:
        root = Path(tmp)
        (root / "server").mkdir()
        server = conftest.InfluxServer(binary, root / "server", flux=True).start()
        try:
            db = server.new_database("bench")
            os.environ["ISENTROPE_BENCH_TOKEN"] = "bench:bench"  # auth is off on this server
            store_toml = (
                f'[store]\nkind = "influx2"\nurl = "{server.url}"\norg = "-"\n'
                f'bucket = "{server.bucket(db)}"\ntoken = "${{ISENTROPE_BENCH_TOKEN}}"\n'
                f'timeout = "120s"\n'
            )
            cfg = _common.write_config(root, args.days, store_toml=store_toml)
            prep = _common.prepare_in_child(cfg, args.days)
            print(
                f"influxd {server.version} at {server.url}; prepared {prep['rows']:,} rows "
                f"({prep['samples']:,} samples): generate {prep['generate_s']:.1f} s, "
                f"write_raw {prep['write_raw_s']:.1f} s (child process)"
            )
            config = load_config(cfg)
            store = open_store(config.store.kind, **config.store.open_options())
            try:
                timer = _common.StoreTimer(store)
                pipeline, compute = _common.timed_pipeline(config)
                start = _common.DEMO_START
                worker = Worker.from_config(
                    config,
                    store,
                    checkpoint_name="bench/influx",
                    start_default=start,
                    lookback="0s",
                    settle="0s",
                    chunk=args.chunk,
                    pipeline=pipeline,
                )
                if args.no_write_behind:
                    store.write_behind = False
                waited = _common.time_method(worker, "_settle")  # waiting for the writes behind
                t0 = time.perf_counter()
                report = worker.run_cycle(until=start + pd.Timedelta(days=args.days))
                wall = time.perf_counter() - t0
            finally:
                store.close()
        finally:
            server.kill()
    if not report.ok:
        print(f"backfill failed: {report.error}")
        return 1
    behind = not args.no_write_behind
    print(
        f"backfill {args.days:g} d through the v2 API ({report.chunks_done} chunks of {args.chunk}, "
        f"{report.rows_read:,} rows read incl. margins; writes {'behind, in a second thread' if behind else 'in line'}): "
        f"{wall:.1f} s wall, peak RSS {_common.peak_rss_mb():.0f} MB"
    )
    if behind:
        fmt = timer.seconds["format"]
        other = wall - timer.seconds["read"] - compute["s"] - fmt - waited["s"]
        print(
            "  "
            + _common.shares(
                wall,
                {
                    "read": timer.seconds["read"],
                    "compute": compute["s"],
                    "line protocol formatting": fmt,
                    "waiting for writes": waited["s"],
                    "other": other,
                },
            )
            + f"; sending took {timer.seconds['write']:.1f} s in the second thread"
        )
    else:
        print("  " + _common.backfill_shares(wall, timer, compute["s"]))
    print(f"  unit-year at this rate: {wall / args.days * 365:.0f} s (target 90 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
