"""Steady-state tagging: which samples may be averaged into a test-like steady window.

Two detectors, both returning a steady flag per sample and the steady windows with the mean
of every role over each window:

``method="ptc6"``
    Windowed fluctuation limits after ASME PTC 6-2004, Table 3-1: over a trailing window
    (default 30 min) every reading of each limited role stays within +/- its permissible
    fluctuation of the window average. A sample is steady when it lies inside at least one
    such window.
``method="r_statistic"``
    The ratio-of-variances statistic of Cao & Rhinehart (1995) on every quantity the ptc6
    method watches (load, throttle pressure and temperature, hot reheat temperature,
    condenser pressure): R near 1 when steady, large during a transient. A sample is steady
    when R is below the critical value for every variable. R assumes noise that is
    uncorrelated from sample to sample; on steady samples with AR(1) noise it reads
    transients falsely, measured on 20 000 one-minute samples of the five roles (default
    factors, R_critical 2): lag-1 correlation 0 -> about 1-2 % of samples, 0.3 -> about
    25 %, 0.5 -> about 75 %, 0.8 -> nearly all (``tests/calc/test_steady.py``;
    calc/DECISIONS.md). Historian data a minute apart are usually that correlated; the
    ptc6 method is the default for that reason.

For both, samples that failed screening (``ok=False``), samples with a criterion role missing
and samples with the unit offline (gross output below ``offline_mw``) are never steady.
Contiguous steady samples form windows; a window ends at a gap longer than ``max_gap``, at a
non-steady sample, and after ``max_length`` (long plateaus give several windows); windows
shorter than ``min_length`` are dropped, and with ptc6 so are windows whose own readings break
the limits about their own mean.

The thresholds are defaults a user can change; for a performance test, the test code decides
what a valid steady period is.

References
----------
.. [1] ASME PTC 6-2004, Steam Turbines, Performance Test Codes, Table 3-1 "Permissible
   deviations in test operating conditions" (with its 2006 erratum; read from a poor copy).
.. [2] S. Cao, R. R. Rhinehart, "An efficient method for on-line identification of steady
   state", Journal of Process Control 5(6) (1995) 363-374.
.. [3] S. Cao, R. R. Rhinehart, "Critical values for a steady-state identifier", Journal of
   Process Control 7(2) (1997) 149-152.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from itertools import pairwise

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from isentrope.calc import rolling

__all__ = [
    "SteadyResult",
    "tag_steady",
    "r_statistic",
    "PTC6_LIMITS",
    "LOAD_BAND",
    "R_CRITICAL",
    "R_ROLES",
    "DEFAULT_WINDOW",
    "DEFAULT_MAX_LENGTH",
]

#: Permissible fluctuation during a run, role -> (relative to the window mean [-], absolute
#: [internal unit]); the larger of the two applies. ASME PTC 6-2004 Table 3-1 (2006 erratum;
#: calc/REFERENCES.md, read from a poor copy):
#: throttle pressure +/-0.25 % of absolute or 34.5 kPa (5 psi), whichever larger;
#: throttle and reheat temperature +/-4 K (7 degF);
#: exhaust pressure +/-1.0 % of absolute or 0.14 kPa, whichever larger.
PTC6_LIMITS: Mapping[str, tuple[float, float]] = {
    "throttle_p": (0.0025, 0.0345),
    "throttle_t": (0.0, 4.0),
    "hot_reheat_t": (0.0, 4.0),
    "condenser_p": (0.01, 0.00014),
}
#: Permissible load fluctuation: +/-1 % of the rating (of the window mean load when no rating
#: is given). Common practice, no source.
LOAD_BAND = 0.01
#: Offline threshold when none is given: 5 % of the rating, or 1 MW without a rating
#: (common practice, no source: a unit below this is synchronising, tripped or off the grid).
OFFLINE_FRACTION_OF_RATING = 0.05
OFFLINE_MW = 1.0
#: Moving window of the PTC 6 method. PTC 6 runs last about 1 h after about 1 h of
#: stabilisation (common practice); 30 min is the project's default for trending.
DEFAULT_WINDOW = "30m"
#: Longest steady window; longer plateaus are cut into several (common practice: test runs
#: of about 1 h).
DEFAULT_MAX_LENGTH = "1h"
#: Shortest gap always tolerated inside a window; the default max_gap is the larger of this
#: and three sampling steps (common practice, no source).
MIN_MAX_GAP = "5m"
#: Critical value of R: a transient when R exceeds about 2 to 2.5 (Cao & Rhinehart 1995;
#: critical values tabulated in Cao & Rhinehart 1997; from memory).
R_CRITICAL = 2.0
#: Filter factors lambda1 (mean), lambda2 (variance about the filtered mean), lambda3
#: (variance of successive differences): Cao & Rhinehart (1995), recommended 0.2, 0.1, 0.1.
R_LAMBDAS = (0.2, 0.1, 0.1)
#: Variables the R statistic watches: every quantity the PTC 6 method watches (load and the
#: Table 3-1 roles of ``PTC6_LIMITS``).
R_ROLES = ("gross_output", "throttle_p", "throttle_t", "hot_reheat_t", "condenser_p")
LOAD_ROLE = "gross_output"


@dataclass(frozen=True)
class SteadyResult:
    """Outcome of ``tag_steady``.

    Attributes
    ----------
    steady : pandas.Series
        bool per sample, same index as the frame.
    windows : pandas.DataFrame
        One row per steady window: "start", "end" (times of its first and last steady
        sample, UTC), "n_samples", then the mean of every column of the frame over the
        window's steady samples (internal units).
    window_id : pandas.Series
        int per sample: the row of ``windows`` the sample was averaged into, -1 if none.
    method : str
        "ptc6" or "r_statistic".
    details : pandas.DataFrame or None
        With ``return_details=True``, per-criterion diagnostics per sample. ptc6:
        "<role>_deviation" (largest deviation of a reading from the trailing-window mean
        [internal unit]), "<role>_limit" (permissible fluctuation [internal unit]),
        "<role>_within" (bool), "window_covered" (no gap longer than max_gap in the window,
        bool), "window_ok" (bool). r_statistic: "<role>_r" (R [-]) and "<role>_within".
        Both: "online" and "usable" (screened ok, online, criterion roles present).
    """

    steady: pd.Series
    windows: pd.DataFrame
    window_id: pd.Series
    method: str
    details: pd.DataFrame | None = None


# --- the R statistic -----------------------------------------------------------------------
def _first_order(u: np.ndarray, lam: float, y0: float) -> np.ndarray:
    """y_i = lam * u_i + (1 - lam) * y_{i-1}, y_{-1} = y0 (scipy.signal.lfilter recursion)."""
    out, _ = lfilter([lam], [1.0, -(1.0 - lam)], u, zi=[(1.0 - lam) * y0])
    return out


def _check_lambda(name: str, lam: float) -> float:
    lam = float(lam)
    if not 0.0 < lam <= 1.0:
        raise ValueError(f"{name} must be in (0, 1], found {lam!r}")
    return lam


def r_statistic(
    x, lambda1: float = 0.2, lambda2: float = 0.1, lambda3: float = 0.1, *, warmup: int | None = None
):
    """Cao & Rhinehart ratio of variances, sample by sample.

    With exponential filters of factor lambda (lambda1 for the mean, lambda2 and lambda3 for
    the variances):

    * filtered value  X_f,i = l1 x_i + (1 - l1) X_f,i-1
    * variance about the filtered value  v2_i = l2 (x_i - X_f,i-1)^2 + (1 - l2) v2_i-1
    * variance from successive differences  d2_i = l3 (x_i - x_i-1)^2 + (1 - l3) d2_i-1
    * R_i = (2 - l1) v2_i / d2_i

    Parameters
    ----------
    x : array_like or pandas.Series
        Equally spaced samples of one variable [any unit]. NaN samples are skipped (the
        filters run over the finite samples) and give NaN.
    lambda1, lambda2, lambda3 : float, optional
        Filter factors in (0, 1] [-]; Cao & Rhinehart (1995) recommend 0.2, 0.1, 0.1.
    warmup : int, optional
        Leading finite samples returned as NaN while the filters settle [samples]; default
        ceil(3 / min(lambda2, lambda3)), 30 for the recommended factors.

    Returns
    -------
    ndarray or pandas.Series
        R [-], the shape (and index) of ``x``. About 1 for uncorrelated noise about a constant
        mean, large during a trend. 1 where both variances are zero up to round-off (a
        constant signal), inf where only the difference variance is.

    Notes
    -----
    The variances start from the first ``warmup`` samples: d2 from the mean squared successive
    difference and v2 = d2 / (2 - l1), which makes R start at 1. The statistic assumes
    uncorrelated noise; strongly autocorrelated noise raises R even when steady.

    References
    ----------
    S. Cao, R. R. Rhinehart, J. Process Control 5(6) (1995) 363-374, eqs. for the filtered
    mean, the two variance estimates and R.
    """
    l1 = _check_lambda("lambda1", lambda1)
    l2 = _check_lambda("lambda2", lambda2)
    l3 = _check_lambda("lambda3", lambda3)
    if warmup is None:
        warmup = math.ceil(3.0 / min(l2, l3))
    if isinstance(warmup, bool) or not isinstance(warmup, (int, np.integer)) or warmup < 0:
        raise ValueError(f"warmup must be a whole number of samples >= 0, found {warmup!r}")
    series = x if isinstance(x, pd.Series) else None
    arr = np.asarray(x.to_numpy(dtype=float, na_value=np.nan) if series is not None else x, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"x must be one-dimensional, found shape {arr.shape}")
    out = np.full(arr.shape, np.nan)
    pos = np.flatnonzero(np.isfinite(arr))
    if len(pos) >= 2:
        v = arr[pos]
        xf = _first_order(v, l1, v[0])
        xf_prev = np.concatenate(([v[0]], xf[:-1]))
        diff2 = np.concatenate(([0.0], np.diff(v) ** 2))
        head = diff2[1 : max(2, min(len(v), max(warmup, 2)))]
        d0 = float(np.mean(head))
        v0 = d0 / (2.0 - l1)
        var_mean = _first_order((v - xf_prev) ** 2, l2, v0)
        var_diff = _first_order(diff2, l3, d0)
        with np.errstate(divide="ignore", invalid="ignore"):
            r = (2.0 - l1) * var_mean / var_diff
        # A constant signal: both variances are zero up to round-off of the filters.
        tiny = (64.0 * np.finfo(float).eps * max(1.0, float(np.max(np.abs(v))))) ** 2
        flat = var_diff <= tiny
        r = np.where(flat, np.where(var_mean <= tiny, 1.0, np.inf), r)
        r[: min(warmup, len(r))] = np.nan
        out[pos] = r
    if series is not None:
        return pd.Series(out, index=series.index, name=series.name)
    return out


# --- helpers -------------------------------------------------------------------------------
def _breaks(t: np.ndarray, usable: np.ndarray, max_gap_ns: int) -> np.ndarray:
    """Usable samples more than max_gap after the previous usable sample (the first one too)."""
    idx = np.flatnonzero(usable)
    brk = np.zeros(len(t), dtype=bool)
    if len(idx):
        gaps = np.diff(t[idx], prepend=t[idx[0]] - max_gap_ns - 1)
        brk[idx[gaps > max_gap_ns]] = True
    return brk


def _build_windows(
    frame, t, steady, usable, max_gap_ns, max_length_ns, min_length_ns, reach=None, check=None
):
    """Window id per sample (-1 none) and the windows table.

    ``reach`` (ptc6): two consecutive steady samples stay in one run only if one qualifying
    window holds both, so two plateaus at different levels never merge. ``check(group, idx)``
    returns, per candidate window, whether it passes the method's own criteria over its span.
    """
    n = len(t)
    window_id = np.full(n, -1, dtype=np.int64)
    idx = np.flatnonzero(steady)
    columns = ["start", "end", "n_samples"] + [c for c in frame.columns]
    if len(idx) == 0:
        return window_id, _empty_windows(frame, columns)
    # Non-steady usable samples between two steady ones end a run; so does a long gap.
    interrupt = np.concatenate(([0], np.cumsum(usable & ~steady)))
    ts = t[idx]
    new_run = np.ones(len(idx), dtype=bool)
    new_run[1:] = (np.diff(ts) > max_gap_ns) | (interrupt[idx[1:]] - interrupt[idx[:-1] + 1] > 0)
    if reach is not None:
        new_run[1:] |= reach[idx[1:]] > idx[:-1]
    run = np.cumsum(new_run) - 1
    run_start = ts[new_run][run]
    chunk = (ts - run_start) // max_length_ns
    # run and chunk only grow along the steady samples, so groups are consecutive stretches
    change = np.ones(len(idx), dtype=bool)
    change[1:] = (run[1:] != run[:-1]) | (chunk[1:] != chunk[:-1])
    group = np.cumsum(change) - 1
    n_groups = int(group[-1]) + 1
    heads = np.flatnonzero(change)
    first = ts[heads]
    last = ts[np.append(heads[1:] - 1, len(idx) - 1)]
    keep = (last - first) >= min_length_ns
    if check is not None and keep.any():
        keep &= check(group, idx)
    renumber = np.full(n_groups, -1, dtype=np.int64)
    renumber[keep] = np.arange(int(keep.sum()))
    wid = renumber[group]
    window_id[idx] = wid
    inside = wid >= 0
    if not inside.any():
        return window_id, _empty_windows(frame, columns)
    # Means by bincount over the steady samples of each window (finite values only).
    k = int(keep.sum())
    rows, w = idx[inside], wid[inside]
    tz = frame.index.tz
    table = pd.DataFrame(
        {
            "start": pd.to_datetime(first[keep], utc=True).tz_convert(tz)
            if tz
            else pd.to_datetime(first[keep]),
            "end": pd.to_datetime(last[keep], utc=True).tz_convert(tz) if tz else pd.to_datetime(last[keep]),
            "n_samples": np.bincount(w, minlength=k),
        }
    )
    for c in frame.columns:
        v = pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=float, na_value=np.nan)[rows]
        fin = np.isfinite(v)
        total = np.bincount(w[fin], weights=v[fin], minlength=k)
        count = np.bincount(w[fin], minlength=k)
        with np.errstate(invalid="ignore", divide="ignore"):
            table[c] = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    return window_id, table[columns]


def _empty_windows(frame, columns):
    tz = frame.index.tz
    empty_t = pd.DatetimeIndex([], tz=tz) if tz else pd.DatetimeIndex([])
    data = {"start": empty_t, "end": empty_t, "n_samples": np.array([], dtype=np.int64)}
    data.update({c: np.array([], dtype=float) for c in frame.columns})
    return pd.DataFrame(data, columns=columns)


def _float(frame: pd.DataFrame, role: str) -> np.ndarray:
    try:
        return frame[role].to_numpy(dtype=float, na_value=np.nan)
    except (TypeError, ValueError):
        raise ValueError(f"column {role!r} is not numeric (dtype {frame[role].dtype})") from None


# --- entry point ---------------------------------------------------------------------------
def tag_steady(
    frame: pd.DataFrame,
    method: str = "ptc6",
    window: str | pd.Timedelta = DEFAULT_WINDOW,
    min_length: str | pd.Timedelta | None = None,
    max_gap: str | pd.Timedelta | None = None,
    limits: Mapping[str, tuple[float, float] | None] | None = None,
    offline_mw: float | None = None,
    rating_mw: float | None = None,
    ok: pd.Series | None = None,
    return_details: bool = False,
    *,
    max_length: str | pd.Timedelta = DEFAULT_MAX_LENGTH,
    r_critical: float = R_CRITICAL,
    r_roles: Sequence[str] = R_ROLES,
    r_lambdas: tuple[float, float, float] = R_LAMBDAS,
    deadband: Mapping[str, float] | None = None,
) -> SteadyResult:
    """Tag steady-state samples and collect the steady windows.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings in internal units (MPa abs, K, MW, ...), one column per role, sorted unique
        UTC DatetimeIndex. Must contain "gross_output" [MW].
    method : {"ptc6", "r_statistic"}, optional
        Windowed PTC 6 fluctuation limits, or the Cao & Rhinehart R statistic.
    window : str or Timedelta, optional
        Trailing window of the ptc6 method [duration]. The r_statistic method's memory is set
        by its filter factors instead and ignores it.
    min_length : str or Timedelta, optional
        Shortest steady window kept, first to last sample [duration]; default ``window``.
    max_gap : str or Timedelta, optional
        Longest gap between usable samples inside a window [duration]; default the larger of
        5 min and three sampling steps.
    limits : mapping of str to (float, float) or None, optional
        ptc6 only: role -> (relative [-], absolute [internal unit]) permissible fluctuation,
        the larger applies; merged over ``PTC6_LIMITS`` (None removes a role). The
        "gross_output" entry's relative part is a fraction of ``rating_mw`` (default
        ``(LOAD_BAND, 0.0)``). Roles absent from the frame are skipped.
    offline_mw : float, optional
        Below this gross output the unit is offline and never steady [MW]; default 5 % of
        ``rating_mw``, or 1 MW without a rating.
    rating_mw : float, optional
        Unit rating, for the load band [MW]; without it the band is relative to the window
        mean load.
    ok : pandas.Series of bool, optional
        Screening result per sample (``ScreenResult.ok``), same index; False is never steady.
    return_details : bool, optional
        Return per-criterion diagnostics in ``details``.
    max_length : str or Timedelta, optional
        Longest window; longer steady runs are cut into consecutive windows [duration].
    r_critical : float, optional
        r_statistic only: R at or above this is a transient [-].
    r_roles : sequence of str, optional
        r_statistic only: the variables R is computed on (those present in the frame).
    r_lambdas : (float, float, float), optional
        r_statistic only: filter factors lambda1, lambda2, lambda3 [-].
    deadband : mapping of str to float, optional
        ptc6 only: role -> exception deadband of the historian [internal unit]. A reading
        stored by exception may move by up to its deadband unseen, so the role's observed
        fluctuation is taken as at least its deadband (a noise floor): a value held unchanged
        over the window counts as moving by its deadband, never as perfectly steady.

    Returns
    -------
    SteadyResult

    Raises
    ------
    ValueError
        Unknown method, bad durations, no "gross_output" column, ``ok`` not aligned, bad
        limits, naming what was found.

    Notes
    -----
    Windows are runs of steady samples cut at a gap longer than ``max_gap``, at a usable
    non-steady sample and after ``max_length``. With ptc6 a run is also cut where no
    qualifying trailing window holds two neighbouring steady samples (two plateaus at
    different loads never merge), and a window whose own readings break the limits about
    its own mean is dropped (its samples stay steady per sample).

    The r_statistic method assumes equally spaced samples; its filters restart after a gap
    longer than ``max_gap``. Being recursive, R at a sample depends on all samples since the
    filters (re)started, with a weight that decays as (1 - lambda)^k after k samples: a caller
    processing chunks needs a look-back of some 100 samples (0.9^100 = 3e-5) for results that
    do not depend on where a chunk starts. The ptc6 method depends only on the samples within
    ``window`` before and after each sample.
    """
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"frame must be a pandas DataFrame, found {type(frame).__name__}")
    if method not in ("ptc6", "r_statistic"):
        raise ValueError(f"method must be 'ptc6' or 'r_statistic', found {method!r}")
    t = rolling.times_ns(frame.index)
    n = len(t)
    if LOAD_ROLE not in frame.columns:
        raise ValueError(f"steady-state tagging needs the {LOAD_ROLE!r} column (generator gross output, MW)")
    window_ns = rolling.to_ns(window, "window")
    min_length_ns = window_ns if min_length is None else rolling.to_ns(min_length, "min_length")
    max_length_ns = rolling.to_ns(max_length, "max_length")
    if max_length_ns < min_length_ns:
        raise ValueError(
            f"max_length ({max_length}) must not be shorter than min_length ({min_length or window})"
        )
    step = rolling.typical_step(t)
    if max_gap is None:
        max_gap_ns = max(rolling.to_ns(MIN_MAX_GAP, "max_gap"), 3 * step)
    else:
        max_gap_ns = rolling.to_ns(max_gap, "max_gap")
    if rating_mw is not None and not (np.isfinite(rating_mw) and rating_mw > 0):
        raise ValueError(f"rating_mw must be a positive number of MW, found {rating_mw!r}")
    if offline_mw is None:
        offline_mw = OFFLINE_FRACTION_OF_RATING * rating_mw if rating_mw is not None else OFFLINE_MW
    elif not np.isfinite(offline_mw):
        raise ValueError(f"offline_mw must be a number of MW, found {offline_mw!r}")

    load = _float(frame, LOAD_ROLE)
    with np.errstate(invalid="ignore"):
        online = load >= offline_mw
    if ok is None:
        screened = np.ones(n, dtype=bool)
    else:
        if not isinstance(ok, pd.Series) or not ok.index.equals(frame.index):
            raise ValueError("ok must be a boolean Series with the same index as frame (ScreenResult.ok)")
        screened = ok.fillna(False).to_numpy(dtype=bool)

    details: dict[str, np.ndarray] = {"online": online}
    reach = check = None
    if method == "ptc6":
        steady, usable, reach, check = _ptc6(
            frame, t, window_ns, max_gap_ns, limits, rating_mw, online & screened, details, deadband or {}
        )
    else:
        if r_critical is None or not r_critical > 0:
            raise ValueError(f"r_critical must be > 0, found {r_critical!r}")
        steady, usable = _r_method(
            frame, t, max_gap_ns, r_critical, r_roles, r_lambdas, online & screened, details
        )
    details["usable"] = usable

    window_id, table = _build_windows(
        frame, t, steady, usable, max_gap_ns, max_length_ns, min_length_ns, reach=reach, check=check
    )
    index = frame.index
    return SteadyResult(
        steady=pd.Series(steady, index=index, name="steady"),
        windows=table,
        window_id=pd.Series(window_id, index=index, name="window_id"),
        method=method,
        details=pd.DataFrame(details, index=index) if return_details else None,
    )


def _ptc6(frame, t, window_ns, max_gap_ns, limits, rating_mw, base, details, deadband):
    merged: dict[str, tuple[float, float] | None] = dict(PTC6_LIMITS)
    merged[LOAD_ROLE] = (LOAD_BAND, 0.0)
    if limits is not None:
        merged.update(limits)
    criteria = {}
    for role, lim in merged.items():
        if lim is None or role not in frame.columns:
            continue
        if len(lim) != 2 or not (lim[0] >= 0 and lim[1] >= 0) or (lim[0] == 0 and lim[1] == 0):
            raise ValueError(
                f"limit of {role} must be (relative >= 0, absolute >= 0), not both zero; found {lim!r}"
            )
        criteria[role] = (float(lim[0]), float(lim[1]))
    if LOAD_ROLE not in criteria:
        # Load is what makes a window a steady operating point; it always takes part.
        criteria[LOAD_ROLE] = (LOAD_BAND, 0.0)
    values = {role: _float(frame, role) for role in criteria}
    usable = base & np.logical_and.reduce([np.isfinite(v) for v in values.values()])

    step = rolling.regular_step(t)
    start = rolling.window_start(t, window_ns)
    window_ok = usable.copy()
    for role, (rel, absolute) in criteria.items():
        x = np.where(usable, values[role], np.nan)
        hi, lo = rolling.trailing_max_min(x, t, window_ns, step)
        mean = rolling.trailing_mean(x, start)
        with np.errstate(invalid="ignore"):
            deviation = np.maximum(hi - mean, mean - lo)
            if role == LOAD_ROLE and rating_mw is not None:
                limit = np.full(len(t), max(rel * rating_mw, absolute))
            else:
                limit = np.maximum(rel * np.abs(mean), absolute)
            # a held reading never fluctuates less than its deadband: the noise floor
            deviation = np.maximum(deviation, float(deadband.get(role, 0.0)))
            within = deviation <= limit
        window_ok &= within
        details[f"{role}_deviation"] = deviation
        details[f"{role}_limit"] = limit
        details[f"{role}_within"] = within
    # The window must be filled: its first usable sample within one sampling step of the
    # window start, and no gap longer than max_gap between usable samples inside it.
    first = np.minimum(rolling.next_valid(usable)[start], len(t) - 1)
    brk = np.concatenate(([0], np.cumsum(_breaks(t, usable, max_gap_ns))))
    breaks_inside = brk[np.arange(1, len(t) + 1)] - brk[first + 1]
    grace = rolling.typical_step(t)
    filled = (t[first] <= t - window_ns + grace) & (breaks_inside == 0) & (first < np.arange(len(t)))
    window_ok &= filled
    details["window_covered"] = filled & usable
    details["window_ok"] = window_ok
    reach = rolling.reach(window_ok, start)
    steady = (reach <= np.arange(len(t))) & usable

    def check(group, idx):
        """Each candidate window must itself keep every reading within the limits of its mean."""
        ok = np.ones(int(group.max()) + 1, dtype=bool)
        for role, (rel, absolute) in criteria.items():
            v = pd.Series(values[role][idx]).groupby(group)
            hi, lo, mean = v.max().to_numpy(), v.min().to_numpy(), v.mean().to_numpy()
            if role == LOAD_ROLE and rating_mw is not None:
                limit = max(rel * rating_mw, absolute)
            else:
                limit = np.maximum(rel * np.abs(mean), absolute)
            ok &= np.maximum(np.maximum(hi - mean, mean - lo), float(deadband.get(role, 0.0))) <= limit
        return ok

    return steady, usable, reach, check


def _r_method(frame, t, max_gap_ns, r_critical, r_roles, r_lambdas, base, details):
    roles = [r for r in r_roles if r in frame.columns]
    if not roles:
        raise ValueError(f"none of the R-statistic roles {list(r_roles)} is a column of the frame")
    if len(r_lambdas) != 3:
        raise ValueError(f"r_lambdas must be three filter factors, found {r_lambdas!r}")
    values = {role: _float(frame, role) for role in roles}
    usable = base & np.logical_and.reduce([np.isfinite(v) for v in values.values()])
    n = len(t)
    # Filters restart after every gap longer than max_gap: one lfilter call per stretch.
    brk = _breaks(t, usable, max_gap_ns)
    segment = np.cumsum(brk) - 1
    idx = np.flatnonzero(usable)
    steady = usable.copy()
    bounds = np.flatnonzero(np.diff(segment[idx], prepend=-1)) if len(idx) else np.array([], dtype=int)
    bounds = np.append(bounds, len(idx))
    for role in roles:
        r = np.full(n, np.nan)
        for a, b in pairwise(bounds):
            rows = idx[a:b]
            r[rows] = r_statistic(values[role][rows], *r_lambdas)
        with np.errstate(invalid="ignore"):
            within = r < r_critical
        steady &= within
        details[f"{role}_r"] = r
        details[f"{role}_within"] = within
    return steady, usable
