"""Readings on a fixed time grid from data stored by exception (the ``[read]`` section).

Most plant historians store a value only when it moved beyond a deadband, or when a maximum
time has passed since the last stored value (a heartbeat); an InfluxDB fed on change does the
same. The calculations want one row per grid time, so a grid read obtains each role's value
at every grid time from the stored points around it, by one of two fills:

``hold``
    The value at grid time ``t`` is the last stored value at or before ``t`` while its age
    ``t - s`` is below ``max_age``; older, the role is missing (NaN) at ``t``: a value is
    never held beyond its maximum age. What an exception-reporting historian means by a
    stored value: the reading stayed within the deadband until the next stored one.
``linear``
    Linear interpolation at ``t`` between the last stored point at or before ``t`` and the
    first after it, when the two are at most ``max_age`` apart (a stored point exactly at
    ``t`` is taken as it is); across a longer gap the role is missing. What a historian
    storing a swinging-door (slope) compression means.

Grid times are the multiples of ``interval`` from the Unix epoch (UTC) inside ``[start, end)``,
so chunks of any length give the same grid. The first grid times of a read take the stored
points before ``start`` (up to ``max_age`` back), and ``linear`` those after ``end``. Values
that are not numbers are left out, as ``read_raw`` leaves them out: a hold runs on from the
last number. A grid time where no role has a value is no row at all (a silent historian
still shows as absent rows, for the ``no_data`` alarm, once every hold has aged out).

The ``hold`` fill needs ``max_age`` to be a whole number ``m`` of grid intervals. Then the
stores can do the windowing natively: the last stored value in each grid interval
``(t - interval, t]`` (SQL ``GROUP BY``, InfluxQL ``GROUP BY time()``, Flux
``aggregateWindow``) is held over the next ``m - 1`` grid times, which is exactly the rule
above (a point ``s`` in ``(t_j - interval, t_j]`` is younger than ``m`` intervals at
``t_k`` if and only if ``k - j <= m - 1``). ``Store.read_window_last`` is that native step;
``hold_on_grid`` and ``linear_on_grid`` here are the shared numpy rules every store ends
with, so all stores give the same numbers (tests/daemon/stores/test_contract.py).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

HOLD = "hold"
LINEAR = "linear"
FILLS = (HOLD, LINEAR)


@dataclass(frozen=True)
class Fill:
    """How one role's value between stored points is obtained.

    ``method``: ``"hold"`` or ``"linear"``; ``max_age``: hold: a value older than this is
    stale; linear: the longest gap between two stored points interpolated across [duration].
    """

    method: str = HOLD
    max_age: pd.Timedelta = pd.Timedelta(hours=2)

    def __post_init__(self):
        if self.method not in FILLS:
            raise ValueError(f"fill method must be one of {FILLS}, found {self.method!r}")
        age = pd.Timedelta(self.max_age)
        if age <= pd.Timedelta(0):
            raise ValueError(f"max_age must be positive, found {self.max_age!r}")
        object.__setattr__(self, "max_age", age)


@dataclass(frozen=True)
class ReadGrid:
    """A grid read: ``interval`` between grid times, and the fill of each role.

    ``fills``: role -> ``Fill``; a role not listed takes ``default``.
    """

    interval: pd.Timedelta
    fills: Mapping[str, Fill] = field(default_factory=dict)
    default: Fill = Fill()

    def __post_init__(self):
        iv = pd.Timedelta(self.interval)
        if iv < pd.Timedelta(seconds=1) or iv.value % 1_000_000_000:
            raise ValueError(
                f"grid interval must be a whole number of seconds >= 1 s, found {self.interval!r}"
            )
        object.__setattr__(self, "interval", iv)
        for role, f in {"(default)": self.default, **dict(self.fills)}.items():
            if f.method == HOLD and f.max_age.value % iv.value:
                raise ValueError(
                    f"{role}: a hold's max_age must be a whole number of grid intervals ({iv}), "
                    f"found {f.max_age}"
                )

    def fill_of(self, role: str) -> Fill:
        return self.fills.get(role, self.default)

    def times(self, start: pd.Timestamp, end: pd.Timestamp) -> pd.DatetimeIndex:
        """Grid times in ``[start, end)``: multiples of ``interval`` from the Unix epoch."""
        return pd.DatetimeIndex(
            pd.to_datetime(grid_ns(start, end, self.interval), unit="ns", utc=True), name="time"
        )


def grid_ns(start: pd.Timestamp, end: pd.Timestamp, interval: pd.Timedelta) -> np.ndarray:
    """Grid times in ``[start, end)`` as int64 ns since 1970 (multiples of ``interval``)."""
    iv = int(pd.Timedelta(interval).value)
    first = -(-int(pd.Timestamp(start).value) // iv) * iv
    return np.arange(first, int(pd.Timestamp(end).value), iv, dtype=np.int64)


def window_last(
    times_ns: np.ndarray, values: np.ndarray, interval: pd.Timedelta
) -> tuple[np.ndarray, np.ndarray]:
    """The last finite value in each grid interval ``(t - interval, t]``, stamped ``t``.

    The pandas/numpy form of what the stores do natively (``Store.read_window_last``).
    ``times_ns`` sorted ascending [ns]. Returns (stamps [ns], values).
    """
    iv = int(pd.Timedelta(interval).value)
    t = np.asarray(times_ns, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    keep = np.isfinite(v)
    t, v = t[keep], v[keep]
    if not len(t):
        return t, v
    stamp = -(-t // iv) * iv  # ceil to the grid: the end of the interval holding t
    last = np.flatnonzero(np.r_[stamp[1:] != stamp[:-1], True])
    return stamp[last], v[last]


def hold_on_grid(
    stamps_ns: np.ndarray, values: np.ndarray, grid: np.ndarray, max_age: pd.Timedelta, interval: pd.Timedelta
) -> np.ndarray:
    """Values at the ``grid`` times [ns] from window-last values (``window_last``), held while
    younger than ``max_age``.

    ``stamps_ns``: ascending ends of the grid intervals that hold a stored value; the value of
    grid time ``t_k`` is that of the latest stamp ``t_j <= t_k`` with
    ``t_k - t_j <= max_age - interval`` (the stored point itself being in ``(t_j - interval,
    t_j]``, this is its age below ``max_age``); NaN otherwise.
    """
    s = np.asarray(stamps_ns, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    out = np.full(len(grid), np.nan)
    if not len(s) or not len(grid):
        return out
    pos = np.searchsorted(s, grid, side="right") - 1
    has = pos >= 0
    p = np.where(has, pos, 0)
    limit = int(pd.Timedelta(max_age).value) - int(pd.Timedelta(interval).value)
    ok = has & (grid - s[p] <= limit)
    out[ok] = v[p[ok]]
    return out


def linear_on_grid(
    times_ns: np.ndarray, values: np.ndarray, grid: np.ndarray, max_age: pd.Timedelta
) -> np.ndarray:
    """Linear interpolation at the ``grid`` times [ns] between stored points at most
    ``max_age`` apart; a stored point at a grid time is taken as it is; NaN elsewhere.

    ``times_ns`` ascending, unique [ns]; non-finite values are left out first.
    """
    t = np.asarray(times_ns, dtype=np.int64)
    v = np.asarray(values, dtype=float)
    keep = np.isfinite(v)
    t, v = t[keep], v[keep]
    out = np.full(len(grid), np.nan)
    if not len(t) or not len(grid):
        return out
    right = np.searchsorted(t, grid, side="right")  # first stored point after the grid time
    left = right - 1
    has_left = left >= 0
    lp = np.where(has_left, left, 0)
    exact = has_left & (t[lp] == grid)
    out[exact] = v[lp[exact]]
    inner = has_left & ~exact & (right < len(t))
    if inner.any():
        a, b = lp[inner], right[inner]
        span = (t[b] - t[a]).astype(float)
        close = span <= float(pd.Timedelta(max_age).value)
        frac = (grid[inner] - t[a]).astype(float) / span
        vals = v[a] + frac * (v[b] - v[a])
        sel = np.flatnonzero(inner)
        out[sel[close]] = vals[close]
    return out


def series_on_grid(values: np.ndarray, grid: np.ndarray) -> pd.Series:
    """A role's grid values as a Series with a UTC index, NaN left out."""
    keep = np.isfinite(values)
    idx = pd.DatetimeIndex(pd.to_datetime(grid[keep], unit="ns", utc=True), name="time")
    return pd.Series(values[keep], index=idx)
