"""The analysis job on a ten-year history of one-minute readings: from scratch, and the runs
the worker makes every hour (incremental), against a reference measured in the same run.

    python tests/bench/bench_analysis.py [--years 10] [--folder DIR] [--reuse] [--no-rebuild]

The history is written straight into a SQLite store (no pipeline run: that would take hours):
the gross output of the fictional unit at one minute with shutdowns and trips, and for each
section one steady-window deviation every 90 minutes online, with a slow degradation, two
steps and serially correlated scatter (AR(1), phi 0.5), tagged with baseline models fitted on
invented reference windows. Invented numbers for a benchmark only.

Prints, for the reference (reading the three deviation histories the analysis must read
anyway) and for each run: seconds and the ratio to the reference. Nothing here asserts a time.

A rebuild from scratch evaluates every UTC midnight on the windows before it, so its cost grows
with the square of the history (about 40 minutes for ten years on two cores). ``--no-rebuild``
leaves it out and times what one hourly run computes at the end of the history instead: the
analysis of the last day (``analysis._compute`` from the last final midnight) on the whole
history's windows, with the sections' scans in threads and one after another.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

START = pd.Timestamp("2015-01-01", tz="UTC")


def _models(config, rng):
    from isentrope.calc import baseline

    n = 400
    idx = pd.date_range(START, periods=n, freq="90min", tz="UTC")
    load = rng.uniform(300.0, 520.0, n)
    frame = pd.DataFrame({"gross_output": load}, index=idx)
    cols = {"hp": "hp_efficiency", "ip": "ip_efficiency", "lp": "lp_dry_efficiency"}
    design = {"hp": 0.86, "ip": 0.91, "lp": 0.88}
    models = {}
    for sec, col in cols.items():
        frame[col] = design[sec] - 0.02 * (1 - load / 520.0) ** 2 + rng.normal(0, 0.002, n)
        models[sec] = baseline.fit_baseline(
            frame, sec, efficiency_col=col, rating_mw=float(config.unit.rating_mw)
        )
    return models, idx[0], idx[-1]


def _history(config, store, years: float, seed: int = 5) -> pd.Timestamp:
    rng = np.random.default_rng(seed)
    models, ref_start, ref_end = _models(config, rng)
    unit = config.unit.name
    store.save_state(
        f"baseline/{unit}",
        {
            "models": {s: m.to_json() for s, m in models.items()},
            "reference_start": ref_start.isoformat(),
            "reference_end": ref_end.isoformat(),
        },
    )
    end = START + pd.Timedelta(days=round(365.25 * years))
    minutes = pd.date_range(START, end, freq="1min", inclusive="left", tz="UTC")
    online = np.ones(len(minutes), dtype=bool)
    for _ in range(int(years * 6)):  # six stops a year, 1-4 days each
        a = int(rng.integers(0, len(minutes)))
        online[a : a + int(rng.integers(1440, 4 * 1440))] = False
    power = np.where(online, 420.0 + 60.0 * np.sin(np.arange(len(minutes)) * 2 * np.pi / 1440.0), 0.0)
    gross = [m for m in config.mappings if m.role == "gross_output"]
    t0 = time.perf_counter()
    store.write_raw(gross, pd.DataFrame({"gross_output": power}, index=minutes))
    wrote_raw = time.perf_counter() - t0
    windows = minutes[::90][online[::90]]
    windows = windows[windows > ref_end]
    hours = np.arange(len(windows)) * 1.5
    t0 = time.perf_counter()
    for sec, model in models.items():
        noise = np.zeros(len(windows))
        e = rng.normal(0.0, 0.1, len(windows))
        for i in range(1, len(windows)):
            noise[i] = 0.5 * noise[i - 1] + e[i]
        dev = -0.4 * hours / 1000.0 + noise
        dev[len(dev) // 3 :] -= 1.0
        dev[2 * len(dev) // 3 :] += 0.8
        frame = pd.DataFrame({"deviation": dev, "deviation_u": 0.3, "extrapolated": False}, index=windows)
        store.write_results("deviation", frame, {"unit": unit, "section": sec, "model": model.model_id})
    wrote_dev = time.perf_counter() - t0
    print(
        f"history: {len(minutes):,} one-minute samples ({wrote_raw:.1f} s to write), "
        f"{len(windows):,} windows a section ({wrote_dev:.1f} s to write)"
    )
    return end


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--years", type=float, default=10.0)
    ap.add_argument("--folder", default=None, help="keep the store here (default: a temporary folder)")
    ap.add_argument(
        "--reuse",
        action="store_true",
        help="the store in --folder holds the history already (from an earlier run of this script)",
    )
    ap.add_argument(
        "--no-rebuild",
        action="store_true",
        help="skip the rebuild from scratch; time one hourly run's computation at the history's end",
    )
    args = ap.parse_args(argv)
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from _common import write_config

    from isentrope.daemon import analysis
    from isentrope.daemon.config import load_config
    from isentrope.daemon.stores import open_store

    folder = Path(args.folder or tempfile.mkdtemp(prefix="isentrope-bench-analysis-"))
    print(f"store: {folder / 'unit.sqlite'}")
    folder.mkdir(parents=True, exist_ok=True)
    config = load_config(folder / "unit.toml" if args.reuse else write_config(folder, 365.0))
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        end = START + pd.Timedelta(days=round(365.25 * args.years))
        if not args.reuse:
            _history(config, store, args.years)
        unit = config.unit.name
        saved = store.load_state(f"baseline/{unit}")
        from isentrope.calc.baseline import BaselineModel

        ids = {s: BaselineModel.from_json(t).model_id for s, t in saved["models"].items()}
        t0 = time.perf_counter()
        for sec, mid in ids.items():
            store.read_results("deviation", START, end, {"unit": unit, "section": sec, "model": mid})
        ref = time.perf_counter() - t0
        rows = []

        def timed(label, **kw):
            t = time.perf_counter()
            analysis.run_analysis(store, config, load=False, **kw)
            rows.append((label, time.perf_counter() - t))

        day, hour = pd.Timedelta(days=1), pd.Timedelta(hours=1)
        if args.no_rebuild:
            rows += _one_run(store, config, saved, end - 2 * day)
            print("steps found: (no rebuild)")
            return _print(ref, rows)
        timed("from scratch, the whole history (backfill, refit)", end=end - 2 * day, rebuild=True)
        # the worker's hourly runs over the last two days, each day made final at its midnight
        for k in range(1, 48, 4):
            timed(f"hourly run at {(end - 2 * day + k * hour):%Y-%m-%d %H:%M}", end=end - 2 * day + k * hour)
        hourly = sorted(s for label, s in rows if label.startswith("hourly"))
        rows.append(("hourly runs: median", hourly[len(hourly) // 2]))
        t = time.perf_counter()
        stored = analysis.load_analysis(store, config)
        rows.append(("load_analysis (what the report reads)", time.perf_counter() - t))
        print("steps found: " + ", ".join(f"{s} {len(o.steps)}" for s, o in stored.sections.items()))
    finally:
        store.close()
    return _print(ref, rows)


def _print(ref: float, rows: list) -> int:
    print(f"reference: reading the three deviation histories: {ref:.2f} s")
    for label, s in rows:
        print(f"{label:52} {s:8.2f} s   {s / ref:7.1f} x reference")
    return 0


def _one_run(store, config, saved, end) -> list:
    """What an hourly run computes at ``end``: the last day's evaluation on every window."""
    from isentrope.calc.baseline import BaselineModel
    from isentrope.daemon import analysis

    unit = config.unit.name
    ref = analysis.reference_start(store, config)
    models = {s: BaselineModel.from_json(t) for s, t in saved["models"].items()}
    gross = [m for m in config.mappings if m.role == "gross_output"]
    power = store.read(gross, ref, end)["gross_output"]
    ops = analysis.daily_operation(power > float(config.unit.online_mw), power, ref, end, hours_before=0.0)
    dev = {
        s: store.read_results("deviation", ref, end, {"unit": unit, "section": s, "model": m.model_id})
        for s, m in models.items()
    }
    rows = []
    for threads in (analysis.SCAN_THREADS, 1):
        before, analysis.SCAN_THREADS = analysis.SCAN_THREADS, threads
        t = time.perf_counter()
        analysis._compute(
            dev,
            ops,
            config,
            end=end,
            final_after=(end - pd.Timedelta(hours=1)).floor("D"),
            final_until=end.floor("D"),
            alarm_state=None,
            cumulative={},
        )
        rows.append((f"one hourly run's computation, {threads} thread(s)", time.perf_counter() - t))
        analysis.SCAN_THREADS = before
    return rows


if __name__ == "__main__":
    raise SystemExit(main())
