"""Grid reads (``[read]``, isentrope.daemon.stores.grid) against the plain read, same run, SQLite.

    python tests/bench/bench_grid.py [--days 91] [--dir DIR]

Data: ``--days`` of one-minute rows of the 16 roles of the synthetic unit
(isentrope.daemon.synthetic, fictional plant) in plant units, stored twice: as they are, and
as an exception-reporting historian keeps them (``synthetic.exception_report``: the
``EXCEPTION_DEADBANDS``, one-hour heartbeat). Prints, each with its ratio to the plain
``read_raw`` of the regular rows measured in the same run:

* ``read_raw`` of the regular rows (the reference; what the worker does with ``interval = "0s"``);
* ``read_grid`` of the regular rows on their own 1-minute grid (hold, 90 min);
* ``read_grid`` of the exception rows on the same grid (hold), and with linear interpolation.

Timings depend on the machine and its load; this prints them and asserts nothing.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import pandas as pd

from isentrope.daemon import synthetic
from isentrope.daemon.stores import open_store
from isentrope.daemon.stores.grid import Fill, ReadGrid


def best_of(n, fn):
    times = []
    for _ in range(n):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return out, min(times)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days", type=float, default=91.0)
    ap.add_argument("--repeat", type=int, default=2, help="best of this many reads (default 2)")
    ap.add_argument("--dir", help="work folder (default: a temporary folder, removed)")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(args.dir or tmp)
        frame, _ = synthetic.generate(start="2025-01-01", days=args.days, freq="1min", faults=False)
        plant = synthetic.to_plant_units(frame)
        maps = synthetic.role_mappings()
        kept = synthetic.exception_report(plant, synthetic.EXCEPTION_DEADBANDS, "1h")
        regular = open_store("sqlite", path=folder / "regular.sqlite")
        regular.write_raw(maps, plant)
        compressed = open_store("sqlite", path=folder / "exception.sqlite")
        for m in maps:
            compressed.write_raw([m], kept[m.role].to_frame(m.role))
        n_raw = int(plant.notna().sum().sum())
        n_kept = sum(len(s) for s in kept.values())
        start, end = plant.index[0], plant.index[-1] + pd.Timedelta("1min")
        hold = ReadGrid(pd.Timedelta("1m"), default=Fill("hold", pd.Timedelta("90m")))
        linear = ReadGrid(pd.Timedelta("1m"), default=Fill("linear", pd.Timedelta("90m")))
        print(
            f"{args.days:g} days, {len(plant):,} rows x {len(maps)} roles: {n_raw:,} samples regular, "
            f"{n_kept:,} kept by exception ({100 * n_kept / n_raw:.0f} %)"
        )
        ref, t_ref = best_of(args.repeat, lambda: regular.read_raw(maps, start, end))
        print(f"  read_raw, regular rows (reference)            {t_ref:7.2f} s  1.00x")
        for label, store, grid in (
            ("read_grid hold 1m, regular rows", regular, hold),
            ("read_grid hold 1m, exception rows", compressed, hold),
            ("read_grid linear 1m, exception rows", compressed, linear),
        ):
            got, t = best_of(args.repeat, lambda s=store, g=grid: s.read_grid(maps, start, end, g))
            print(f"  {label:<45s} {t:7.2f} s  {t / t_ref:.2f}x  ({len(got):,} rows)")
        regular.close()
        compressed.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
