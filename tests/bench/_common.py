"""Shared pieces of the benchmarks in tests/bench (not collected by pytest: no test_ names).

Everything here runs on the synthetic unit of ``isentrope.daemon.synthetic`` (a fictional
plant); the figures say nothing about any real machine.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import threading
import time
from collections import defaultdict
from pathlib import Path

import numpy as np
import pandas as pd

from isentrope.calc.names import REQUIRED_ROLES, ROLES

DEMO_START = pd.Timestamp("2025-01-01", tz="UTC")


def peak_rss_mb() -> float:
    """Peak resident set size of this process so far [MB] (Linux reports kB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def write_config(folder: Path, days: float, store_toml: str | None = None) -> Path:
    """The demo's configuration (baseline on the first weeks) in ``folder``; SQLite store
    ``unit.sqlite`` there unless ``store_toml`` replaces the ``[store]`` table."""
    from isentrope.daemon.commands.demo import demo_config_toml

    text = demo_config_toml("unit.sqlite", DEMO_START, days)
    if store_toml is not None:
        head, _, rest = text.partition("[store]")
        # drop the SQLite [store] table up to the next table header
        lines = rest.splitlines()
        k = next((i for i, line in enumerate(lines[1:], 1) if line.startswith("[")), len(lines))
        text = head + store_toml.strip() + "\n\n" + "\n".join(lines[k:]) + "\n"
    path = Path(folder) / "unit.toml"
    path.write_text(text, encoding="utf-8")
    return path


def prepare_raw(config_path: Path, days: float, unit: str | None = None) -> dict:
    """Generate ``days`` of the synthetic unit and write them into the configured store.

    Run in a child process (``prepare_in_child``) so the benchmark's peak memory is that of
    the backfill alone.
    """
    from isentrope.daemon import synthetic
    from isentrope.daemon.config import load_config
    from isentrope.daemon.stores import open_store

    config = load_config(config_path)
    t0 = time.perf_counter()
    frame, _truth = synthetic.generate(start=DEMO_START, days=float(days))
    plant = synthetic.to_plant_units(frame)
    t1 = time.perf_counter()
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        n = store.write_raw(config.mappings, plant)
    finally:
        store.close()
    return {"rows": len(frame), "samples": n, "generate_s": t1 - t0, "write_raw_s": time.perf_counter() - t1}


def prepare_in_child(config_path: Path, days: float) -> dict:
    code = (
        f"import json, sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
        "from _common import prepare_raw; "
        f"print(json.dumps(prepare_raw({str(config_path)!r}, {float(days)!r})))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code],
        check=True,
        capture_output=True,
        text=True,
        cwd=str(Path(config_path).parent),
        env={**os.environ, "PYTHONWARNINGS": "ignore"},
    )
    import json

    return json.loads(out.stdout.strip().splitlines()[-1])


class StoreTimer:
    """Wraps a store's methods on the instance and adds up their wall time by kind."""

    KINDS = {
        "read": "read",
        "read_results": "read",
        "write_results": "write",
        "save_state": "write",
        "set_checkpoint": "write",
        "load_state": "read",
        "get_checkpoint": "read",
        "prepare_results": "format",
        "write_prepared": "write",
    }

    def __init__(self, store):
        self.store = store
        self.seconds: dict[str, float] = defaultdict(float)
        self._depth = threading.local()  # only the outermost call of a thread counts
        for name, kind in self.KINDS.items():
            setattr(store, name, self._timed(getattr(store, name), kind))

    def _timed(self, fn, kind):
        def call(*a, **k):
            depth = getattr(self._depth, "n", 0)
            self._depth.n = depth + 1
            t = time.perf_counter()
            try:
                return fn(*a, **k)
            finally:
                self._depth.n = depth
                if depth == 0:
                    self.seconds[kind] += time.perf_counter() - t

        return call


def timed_pipeline(config):
    """A ``Pipeline`` whose ``process`` adds its wall time to ``compute["s"]``; returns both."""
    from isentrope.daemon.pipeline import Pipeline

    pipeline = Pipeline(config)
    return pipeline, time_method(pipeline, "process")


def time_method(obj, name: str) -> dict:
    """Replace ``obj.name`` by a wrapper that adds its wall time to the returned ``{"s": ...}``."""
    total = {"s": 0.0}
    fn = getattr(obj, name)

    def timed(*a, **k):
        t = time.perf_counter()
        try:
            return fn(*a, **k)
        finally:
            total["s"] += time.perf_counter() - t

    setattr(obj, name, timed)
    return total


def shares(total: float, parts: dict[str, float]) -> str:
    return ", ".join(f"{k} {v:.1f} s ({100 * v / total:.0f} %)" for k, v in parts.items())


def backfill_shares(wall: float, timer: StoreTimer, compute_s: float) -> str:
    """Read, compute, write and the rest of a backfill's ``wall`` time, as ``shares``."""
    read, write = timer.seconds["read"], timer.seconds["write"]
    parts = {"read": read, "compute": compute_s, "write": write, "other": wall - read - write - compute_s}
    return shares(wall, parts)


# --- the obvious way: point by point with iapws ---------------------------------------------
def reference_rows(frame: pd.DataFrame, eta_lp: float = 0.88, baumann: float = 1.0) -> pd.DataFrame:
    """HP and IP enthalpy-drop efficiencies and the LP expansion of every row, one
    ``iapws.IAPWS97`` call per state, as a script written without this project would do.

    HP/IP: eta = (h_in - h_out) / (h_in - h(p_out, s_in)) (ASME PTC 6 enthalpy-drop method).
    LP: from the crossover state to the condenser pressure with the design dry efficiency
    and the Baumann rule (efficiency reduced by ``baumann`` x mean moisture of the expansion,
    here the mean of inlet (dry) and exhaust moisture; iterated to a fixed point), ELEP, and
    exhaust moisture 1 - x(p, h_ELEP).
    """
    from iapws import IAPWS97

    out = []
    for r in frame.itertuples(index=False):
        row = {}
        for name, pin, tin, pout, tout in (
            ("hp", r.throttle_p, r.throttle_t, r.cold_reheat_p, r.cold_reheat_t),
            ("ip", r.hot_reheat_p, r.hot_reheat_t, r.crossover_p, r.crossover_t),
        ):
            try:
                a = IAPWS97(P=pin, T=tin)
                b = IAPWS97(P=pout, T=tout)
                c = IAPWS97(P=pout, s=a.s)
                row[f"{name}_efficiency"] = (a.h - b.h) / (a.h - c.h)
            except (ValueError, NotImplementedError, TypeError, ZeroDivisionError):
                row[f"{name}_efficiency"] = np.nan
        try:
            a = IAPWS97(P=r.crossover_p, T=r.crossover_t)
            c = IAPWS97(P=r.condenser_p, s=a.s)
            eta = eta_lp
            for _ in range(20):
                h = a.h - eta * (a.h - c.h)
                x = IAPWS97(P=r.condenser_p, h=h).x
                new = eta_lp * (1.0 - baumann * 0.5 * (1.0 - x))
                if abs(new - eta) < 1e-10:
                    break
                eta = new
            row["lp_elep"] = h
            row["lp_moisture"] = 1.0 - x
        except (ValueError, NotImplementedError, TypeError, ZeroDivisionError):
            row["lp_elep"] = row["lp_moisture"] = np.nan
        out.append(row)
    return pd.DataFrame(out, index=frame.index)


#: Inputs of the reference perturbed one at a time for its uncertainty: the required
#: pressures and temperatures (throttle, cold and hot reheat, crossover, condenser).
REFERENCE_INPUTS = [r for r in REQUIRED_ROLES if ROLES[r][0] in ("pressure", "temperature")]


def reference_with_uncertainty(frame: pd.DataFrame) -> pd.DataFrame:
    """``reference_rows`` plus one-at-a-time finite differences over ``REFERENCE_INPUTS``
    (the obvious uncertainty propagation: one more full evaluation per input)."""
    base = reference_rows(frame)
    var = pd.DataFrame(0.0, index=base.index, columns=base.columns)
    for role in REFERENCE_INPUTS:
        step = frame[role].abs() * 1e-6 + 1e-9
        moved = frame.copy()
        moved[role] = moved[role] + step
        d = (reference_rows(moved) - base).div(step, axis=0)
        u = frame[role].abs() * 0.0025 if role.endswith("_p") else pd.Series(1.0, index=frame.index)
        var += d.mul(u, axis=0) ** 2
    return base.join(np.sqrt(var).add_suffix("_u"))
