"""Shared helpers of the pipeline, worker and fault tests: a unit configuration written as TOML
for a store, and short synthetic histories (isentrope.daemon.synthetic, fictional unit)."""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pandas as pd

from isentrope.daemon import synthetic

START = pd.Timestamp("2025-03-03", tz="UTC")


@functools.lru_cache(maxsize=8)
def history(days: float = 1.0, faults: bool = False, seed: int = 11, freq: str = "2min") -> pd.DataFrame:
    """A short synthetic history in internal units (cached; callers must not modify it)."""
    frame, _ = synthetic.generate(start=START, days=days, seed=seed, faults=faults, freq=freq)
    return frame


def plant_history(
    days: float = 1.0, faults: bool = False, seed: int = 11, freq: str = "2min"
) -> pd.DataFrame:
    """The same history in the plant units of the synthetic tag mapping."""
    return synthetic.to_plant_units(history(days, faults, seed, freq))


def mappings():
    return synthetic.role_mappings()


def store_toml(kind: str, **options) -> str:
    lines = ["[store]", f'kind = "{kind}"']
    for k, v in options.items():
        lines.append(f"{k} = {v!r}" if not isinstance(v, str) else f'{k} = "{v}"')
    return "\n".join(lines)


def influx18_store_toml(server, db: str) -> str:
    """The [store] table of database ``db`` on the influxd 1.8.10 fixture ``server`` through the v2
    API (token from ISENTROPE_TEST_TOKEN; a generous timeout: the test machine is shared)."""
    return store_toml(
        "influx2",
        url=server.url,
        org="isentrope",
        bucket=server.bucket(db),
        token="${ISENTROPE_TEST_TOKEN}",
        timeout="30s",
    )


def write_config(path: Path, store: str, *, schedule: str = "", extra: str = "") -> Path:
    """A complete configuration of the fictional unit, with the given [store] table."""
    text = f"""
[unit]
name = "Greywater Bend 2"
rating_mw = 520.0
online_mw = 60.0

{store}

{synthetic.tag_map_toml()}

[steady]
window = "30m"
min_length = "20m"
max_gap = "5m"
max_length = "1h"

[schedule]
interval = "5m"
settle = "2m"
lookback = "30m"
chunk = "6h"
retries = 2
backoff = "1s"
backoff_max = "2s"
{schedule}

{extra}
"""
    path.write_text(text)
    return path


#: Relative tolerance of "the same results". Re-processing one window with the same data gives
#: bit-identical numbers; a catch-up groups rows into other batches, and the vectorised steam
#: solvers iterate until the whole batch has converged, so a row may get one more Newton step
#: and differ in the last bits (seen: 2e-15 relative). Uncertainties come from central finite
#: differences, which magnify those bits (seen: 1.4e-12 relative), hence their looser bound.
SAME_RTOL = 1e-12
SAME_RTOL_U = 1e-9


def assert_same_results(a: pd.DataFrame, b: pd.DataFrame, rtol: float = SAME_RTOL) -> None:
    """Two result frames read back from stores hold the same rows, fields and values."""
    a = a.sort_index().sort_index(axis=1)
    b = b.sort_index().sort_index(axis=1)
    assert list(a.columns) == list(b.columns)
    assert a.index.equals(b.index), (a.index.difference(b.index), b.index.difference(a.index))
    for c in a.columns:
        x, y = a[c].to_numpy(), b[c].to_numpy()
        if x.dtype.kind in "fc" or y.dtype.kind in "fc":
            tol = max(rtol, SAME_RTOL_U) if c.endswith("_u") else rtol
            np.testing.assert_allclose(
                x.astype(float), y.astype(float), rtol=tol, atol=0, equal_nan=True, err_msg=c
            )
        else:
            assert (x == y).all(), c


# --- stores for the worker tests -----------------------------------------------------------

import json  # noqa: E402

from isentrope.daemon.stores.base import Store, TemporaryStoreError, UnitBusyError  # noqa: E402


class MemoryStore(Store):
    """A store in a few dicts, for the worker's scheduling tests (the contract suite checks the
    real stores; the fault tests run against SQLite and a real InfluxDB server)."""

    kind = "memory"

    def __init__(self, raw: pd.DataFrame | None = None, clock=None):
        self.raw = raw if raw is not None else pd.DataFrame()  # plant units, role columns
        self.clock = clock  # samples after clock() have not arrived yet
        self.results: dict[tuple, pd.DataFrame] = {}
        self.checkpoints: dict[str, pd.Timestamp] = {}
        self.states: dict[str, str] = {}
        self.calls: list[str] = []

    def read_raw(self, mappings, start, end):
        self.calls.append("read_raw")
        roles = [m.role for m in mappings]
        if self.clock is not None:
            end = min(end, self.clock())
        part = self.raw.loc[(self.raw.index >= start) & (self.raw.index < end)]
        out = part.reindex(columns=roles).astype(float)
        out.index.name = "time"
        return out

    def write_raw(self, mappings, frame):
        self.raw = pd.concat([self.raw, frame]).sort_index()
        self.raw = self.raw[~self.raw.index.duplicated(keep="last")]
        return int(frame.size)

    def write_results(self, measurement, frame, tags):
        self.calls.append(f"write_results:{measurement}")
        key = (measurement, tuple(sorted(tags.items())))
        old = self.results.get(key)
        new = frame.astype(float)
        self.results[key] = new if old is None else new.combine_first(old)
        return int(frame.size)

    def read_results(self, measurement, start, end, tags):
        parts = [f for (m, t), f in self.results.items() if m == measurement and set(tags.items()) <= set(t)]
        if not parts:
            return pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC", name="time"))
        out = pd.concat(parts).sort_index()
        return out.loc[(out.index >= start) & (out.index < end)]

    def delete_results(self, measurement, start, end, tags):
        self.calls.append(f"delete_results:{measurement}")
        for (m, t), f in list(self.results.items()):
            if m == measurement and set(tags.items()) <= set(t):
                self.results[(m, t)] = f.loc[(f.index < start) | (f.index >= end)]

    def get_checkpoint(self, name):
        self.calls.append("get_checkpoint")
        return self.checkpoints.get(name)

    def set_checkpoint(self, name, time):
        self.calls.append("set_checkpoint")
        self.checkpoints[name] = pd.Timestamp(time)

    def load_state(self, name):
        return json.loads(self.states.get(name, "{}"))

    def save_state(self, name, state):
        self.states[name] = json.dumps(state)

    # one holder per unit, in this object only (the contract suite checks the real stores)
    def acquire_lease(self, unit, holder, lease):
        held = self.__dict__.setdefault("leases", {})
        if held.setdefault(unit, holder.id) != holder.id:
            raise UnitBusyError(unit, "memory store", None)

    def renew_lease(self, unit, holder, lease):
        if self.__dict__.get("leases", {}).get(unit) != holder.id:
            raise UnitBusyError(unit, "memory store", None, lost=True)

    def release_lease(self, unit, holder):
        if self.__dict__.get("leases", {}).get(unit) == holder.id:
            del self.leases[unit]


class FailingStore(Store):
    """Wraps a store; the next ``fail[method]`` calls of a method raise TemporaryStoreError."""

    def __init__(self, inner: Store, **fail: int):
        self.inner = inner
        self.fail = dict(fail)
        self.failures = 0
        self.kind = inner.kind

    def _maybe_fail(self, method: str):
        if self.fail.get(method, 0) > 0:
            self.fail[method] -= 1
            self.failures += 1
            raise TemporaryStoreError(f"{method}: connection refused (injected)")

    def read_raw(self, mappings, start, end):
        self._maybe_fail("read_raw")
        return self.inner.read_raw(mappings, start, end)

    def write_raw(self, mappings, frame):
        return self.inner.write_raw(mappings, frame)

    def write_results(self, measurement, frame, tags):
        self._maybe_fail("write_results")
        return self.inner.write_results(measurement, frame, tags)

    def read_results(self, measurement, start, end, tags):
        self._maybe_fail("read_results")
        return self.inner.read_results(measurement, start, end, tags)

    def delete_results(self, measurement, start, end, tags):
        self._maybe_fail("delete_results")
        return self.inner.delete_results(measurement, start, end, tags)

    def get_checkpoint(self, name):
        self._maybe_fail("get_checkpoint")
        return self.inner.get_checkpoint(name)

    def set_checkpoint(self, name, time):
        self._maybe_fail("set_checkpoint")
        return self.inner.set_checkpoint(name, time)

    def load_state(self, name):
        return self.inner.load_state(name)

    def save_state(self, name, state):
        self._maybe_fail("save_state")
        return self.inner.save_state(name, state)

    def acquire_lease(self, unit, holder, lease):
        return self.inner.acquire_lease(unit, holder, lease)

    def renew_lease(self, unit, holder, lease):
        return self.inner.renew_lease(unit, holder, lease)

    def release_lease(self, unit, holder):
        return self.inner.release_lease(unit, holder)


class FakeClock:
    """A clock the test moves by hand."""

    def __init__(self, now: pd.Timestamp):
        self.now = now

    def __call__(self) -> pd.Timestamp:
        return self.now

    def advance(self, delta) -> None:
        self.now = self.now + pd.Timedelta(delta)


RESULT_MEASUREMENTS = ("section_samples", "steady_windows", "deviation", "alarm_events")


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on (for an unreachable store)."""
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]
