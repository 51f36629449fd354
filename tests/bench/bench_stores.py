"""Store speed on a unit-year: raw read, raw write, results write and read.

    python tests/bench/bench_stores.py                       # sqlite, a unit-year
    python tests/bench/bench_stores.py --stores sqlite,influx1,influx2 --rows 131400

A unit-year is 525,600 one-minute rows of 16 roles (8.4 million samples) and the same number of
rows of 30 result fields. InfluxDB servers are started like the test fixtures do (binaries
from ISENTROPE_INFLUXD_V1 / ISENTROPE_INFLUXD_18). Each figure is printed with a reference
measured in the same run on the same data:

* sqlite read_raw against ``pandas.read_sql_query`` of the same rows;
* influx2 read_raw (query_raw CSV + pandas) against the client's own
  ``query_api.query_data_frame`` on the same Flux query: the reason the store parses CSV itself.

Timings depend on the machine and its load; this prints them, it asserts nothing.
"""

from __future__ import annotations

import argparse
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/ for conftest's InfluxServer

from isentrope.daemon.roles import ROLES, RoleMapping  # noqa: E402
from isentrope.daemon.stores import open_store  # noqa: E402


def timed(label, fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    dt = time.perf_counter() - t
    print(f"  {label:<44s} {dt:8.2f} s")
    return out, dt


def data(rows: int):
    idx = pd.date_range("2025-01-01", periods=rows, freq="min", tz="UTC")
    rng = np.random.default_rng(7)
    maps = [
        RoleMapping(role=r, tag=f"U9.{r}", unit="MPa", measurement="plant", tags={"unit": "U9"})
        for r in ROLES
    ]
    raw = pd.DataFrame(rng.normal(10, 1, size=(rows, len(maps))), index=idx, columns=[m.role for m in maps])
    res = pd.DataFrame(
        rng.normal(0.9, 0.01, size=(rows, 30)), index=idx, columns=[f"field_{i:02d}" for i in range(30)]
    )
    return maps, raw, res


def run(store, name, maps, raw, res):
    start, end = raw.index[0], raw.index[-1] + pd.Timedelta("1min")
    print(f"{name}: {len(raw)} rows x {len(maps)} roles raw, x {res.shape[1]} result fields")
    timed("write_raw", store.write_raw, maps, raw)
    back, t_read = timed("read_raw", store.read_raw, maps, start, end)
    assert back.shape == raw.shape, back.shape
    timed("write_results", store.write_results, "bench", res, {"unit": "U9"})
    got, _ = timed("read_results", store.read_results, "bench", start, end, {"unit": "U9"})
    assert got.shape == res.shape, got.shape
    return t_read


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=525_600)
    ap.add_argument("--stores", default="sqlite")
    args = ap.parse_args(argv)
    maps, raw, res = data(args.rows)
    kinds = args.stores.split(",")
    with tempfile.TemporaryDirectory() as tmp:
        if "sqlite" in kinds:
            path = Path(tmp) / "bench.sqlite"
            with open_store("sqlite", path=path) as store:
                t_read = run(store, "sqlite", maps, raw, res)
            db = sqlite3.connect(path)
            start_ms = raw.index[0].value // 1_000_000

            def reference():
                return {
                    m.role: pd.read_sql_query(
                        "SELECT time, value FROM samples WHERE tag = ? AND time >= ? ORDER BY time",
                        db,
                        params=(m.tag, start_ms),
                    )
                    for m in maps
                }

            _, t_ref = timed("reference: pandas.read_sql_query, same rows", reference)
            print(
                f"  read_raw / read_sql_query = {t_read / t_ref:.2f}   file {path.stat().st_size / 1e6:.0f} MB"
            )
        if "influx1" in kinds or "influx2" in kinds:
            from conftest import INFLUXD_18, INFLUXD_V1, InfluxServer

            if "influx1" in kinds:
                (Path(tmp) / "v1").mkdir()
                server = InfluxServer(INFLUXD_V1, Path(tmp) / "v1", flux=False).start()
                try:
                    db = server.new_database("bench")
                    with open_store("influx1", url=server.url, database=db, timeout=300) as store:
                        run(store, f"influx1 on {server.version}", maps, raw, res)
                finally:
                    server.kill()
            if "influx2" in kinds:
                (Path(tmp) / "v18").mkdir()
                server = InfluxServer(INFLUXD_18, Path(tmp) / "v18", flux=True).start()
                try:
                    db = server.new_database("bench")
                    with open_store(
                        "influx2", url=server.url, org="-", bucket=server.bucket(db), timeout=600
                    ) as store:
                        t_read = run(store, f"influx2 on {server.version}", maps, raw, res)
                        start, end = raw.index[0], raw.index[-1] + pd.Timedelta("1min")
                        fields = [m.field_name for m in maps]
                        q = store._pivot_query("plant", fields, {"unit": "U9"}, start, end)
                        _, t_ours = timed("our parser (query_raw CSV + pandas)", store.query_csv, q)
                        _, t_ref = timed(
                            "reference: client query_data_frame",
                            store._query_api.query_data_frame,
                            q,
                            org="-",
                        )
                        print(f"  client parser / ours = {t_ref / t_ours:.2f}")
                finally:
                    server.kill()


if __name__ == "__main__":
    main()
