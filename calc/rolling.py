"""Trailing time-window statistics shared by screening (``calc.quality``) and steady-state
tagging (``calc.steady``).

All windows are closed on both ends, ``[t - W, t]``, over samples whose values are finite;
NaN samples are skipped, never propagated. Times are int64 nanoseconds, strictly increasing.

On a regular time grid (the usual historian export) the window is a fixed number of samples
and the running max/min use scipy.ndimage's O(n) filters; an irregular grid falls back to
pandas' time-based rolling max/min, slower but still fast (calc/DECISIONS.md, "Speed of the kernels").
Running sums use cumulative sums over the window start indices and need no fast path.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import ndimage


def times_ns(index: pd.Index) -> np.ndarray:
    """int64 nanoseconds of a DatetimeIndex; ValueError unless strictly increasing."""
    if not isinstance(index, pd.DatetimeIndex):
        raise ValueError(f"frame index must be a DatetimeIndex (UTC), found {type(index).__name__}")
    t = index.as_unit("ns").asi8
    if len(t) > 1 and not (np.diff(t) > 0).all():
        raise ValueError("frame index must be sorted and without duplicate times")
    return t


def to_ns(duration, name: str) -> int:
    """A duration ("30m", "2h", Timedelta) in int64 nanoseconds, > 0."""
    try:
        td = pd.Timedelta(duration)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a duration such as '30m' or '2h', found {duration!r}") from None
    if pd.isna(td) or td <= pd.Timedelta(0):
        raise ValueError(f"{name} must be a positive duration, found {duration!r}")
    return int(td.value)


def regular_step(t: np.ndarray) -> int | None:
    """The constant sampling step [ns] of ``t``, or None if the grid is irregular."""
    if len(t) < 2:
        return None
    d = np.diff(t)
    return int(d[0]) if (d == d[0]).all() else None


def typical_step(t: np.ndarray) -> int:
    """Median sampling step [ns] (1 minute when there are fewer than two samples)."""
    if len(t) < 2:
        return int(pd.Timedelta("1min").value)
    return int(np.median(np.diff(t)))


def window_start(t: np.ndarray, window_ns: int) -> np.ndarray:
    """For each sample i, the first index j with t[j] >= t[i] - window_ns."""
    return np.searchsorted(t, t - window_ns, side="left")


def trailing_sum(values: np.ndarray, start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sum and count of the finite values in ``[start[i], i]``."""
    valid = np.isfinite(values)
    cs = np.concatenate(([0.0], np.cumsum(np.where(valid, values, 0.0))))
    cn = np.concatenate(([0], np.cumsum(valid)))
    i1 = np.arange(1, len(values) + 1)
    return cs[i1] - cs[start], cn[i1] - cn[start]


def trailing_mean(values: np.ndarray, start: np.ndarray) -> np.ndarray:
    """Mean of the finite values in ``[start[i], i]`` (NaN where there are none)."""
    s, n = trailing_sum(values, start)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, s / np.maximum(n, 1), np.nan)


def trailing_max_min(
    values: np.ndarray, t: np.ndarray, window_ns: int, step: int | None
) -> tuple[np.ndarray, np.ndarray]:
    """Running max and min of the finite values over ``[t - W, t]`` (NaN where none)."""
    values = np.asarray(values, dtype=float)
    valid = np.isfinite(values)
    if step is not None:
        m = int(window_ns // step) + 1
        m = max(1, min(m, len(values)))
        origin = (m - 1) // 2
        hi = ndimage.maximum_filter1d(
            np.where(valid, values, -np.inf), m, origin=origin, mode="constant", cval=-np.inf
        )
        lo = ndimage.minimum_filter1d(
            np.where(valid, values, np.inf), m, origin=origin, mode="constant", cval=np.inf
        )
        none = ~np.isfinite(hi)
        hi[none] = np.nan
        lo[none] = np.nan
        return hi, lo
    s = pd.Series(np.where(valid, values, np.nan), index=pd.DatetimeIndex(t))
    roll = s.rolling(pd.Timedelta(window_ns, unit="ns"), closed="both")
    return roll.max().to_numpy(), roll.min().to_numpy()


def next_valid(valid: np.ndarray) -> np.ndarray:
    """For each i, the first index j >= i with valid[j] (len(valid) where none)."""
    n = len(valid)
    idx = np.where(valid, np.arange(n), n)
    return np.minimum.accumulate(idx[::-1])[::-1]


def reach(end_ok: np.ndarray, start: np.ndarray) -> np.ndarray:
    """For each sample j, the earliest start of a qualifying window ending at or after j.

    ``end_ok[e]`` says the window ``[start[e], e]`` qualifies. Since start is non-decreasing,
    the first qualifying e >= j gives the earliest start; ``len(end_ok)`` where there is none.
    Sample j lies in a qualifying window iff ``reach[j] <= j``; samples i < j share one iff
    ``reach[j] <= i``.
    """
    n = len(end_ok)
    ends = np.flatnonzero(end_ok)
    if len(ends) == 0:
        return np.full(n, n, dtype=np.int64)
    pos = np.searchsorted(ends, np.arange(n), side="left")
    has = pos < len(ends)
    e = ends[np.minimum(pos, len(ends) - 1)]
    return np.where(has, start[e], n)


def covered(end_ok: np.ndarray, start: np.ndarray) -> np.ndarray:
    """Samples lying inside at least one qualifying window (see ``reach``)."""
    return reach(end_ok, start) <= np.arange(len(end_ok))
