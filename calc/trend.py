"""Degradation trends of a section's deviation: rate, steps, projection.

Wear shows in two shapes. Deposits and slow erosion tilt the deviation into a *slope*
against operating hours; a rub, a trip or a lost seal strip moves it by a *step*. This
module estimates both from the deviation series of steady windows [percentage points]:

* ``degradation_rate``: Theil-Sen slope against operating hours with its 95 % interval,
  robust to the odd bad window and to a few steps. Successive windows are correlated (ambient,
  cooling water, load pattern, fouling), so the interval is Sen's (1968) with the variance of
  Kendall's S inflated by the effective-sample-size factor of Hamed & Rao (1998) for an AR(1)
  fitted to the residuals, and a Student-t quantile on the effective sample size (Santer et
  al. 2000);
* ``detect_steps``: on the series prewhitened by its fitted AR(1), a binary segmentation by
  the generalised least-squares step statistic (or, on request, a two-sided CUSUM after
  Page 1954), with the time and size (generalised least squares) of each step;
* ``project``: the deviation carried forward to a date (the planned outage) with its interval.

Too little data gives ``status == "insufficient data"`` and NaN figures, never a number.

References
----------
Hamed, K. H. & Rao, A. R. (1998). A modified Mann-Kendall trend test for autocorrelated
data. J. Hydrol. 204, 182-196 (eq. 14 for the variance correction n/n*).
Santer, B. D. et al. (2000). Statistical significance of trends and trend differences in
layer-average atmospheric temperature time series. J. Geophys. Res. 105(D6), 7337-7356
(effective sample size from the lag-1 autocorrelation of the residuals; t with n_e - 2 dof).
Marriott, F. H. C. & Pope, J. A. (1954). Bias in the estimation of autocorrelations.
Biometrika 41, 390-402 (E[r1] = rho - (1 + 3 rho) / n to first order; from memory).
Vostrikova, L. Ju. (1981). Detecting "disorder" in multidimensional random processes.
Soviet Math. Dokl. 24, 55-59 (binary segmentation; from memory).
Bai, J. & Perron, P. (1998). Estimating and testing linear models with multiple structural
changes. Econometrica 66(1), 47-78 (from memory).
Cochrane, D. & Orcutt, G. H. (1949). Application of least squares regression to
relationships containing auto-correlated error terms. J. Amer. Statist. Assoc. 44, 32-61
(prewhitening by the fitted AR(1), used for the steps).
Page, E. S. (1954). Continuous inspection schemes. Biometrika 41(1/2), 100-115.
Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau.
J. Amer. Statist. Assoc. 63(324), 1379-1389.
Theil, H. (1950). A rank-invariant method of linear and polynomial regression analysis.
Proc. Kon. Ned. Akad. v. Wetensch. A 53, 386-392.
Brown, R. L., Durbin, J. & Evans, J. M. (1975). Techniques for testing the constancy of
regression relationships over time. J. R. Statist. Soc. B 37(2), 149-192.
Hawkins, D. M. (1987). Self-starting CUSUM charts for location and scale. The
Statistician 36, 403-413 (from memory).
Montgomery, D. C., Introduction to Statistical Quality Control, the CUSUM chapter
(k = 0.5, h = 4 or 5 as usual choices; average run lengths; from memory).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from itertools import pairwise

import numpy as np
import pandas as pd
from scipy import stats

#: Operating hours in one "month" of the per-month rate: 8760 h / 12 = 730 h, i.e. a month
#: of continuous operation (a definition of this module, not a calendar month).
HOURS_PER_MONTH = 730.0

#: Fewest points for a rate (project choice, no source).
DEFAULT_MIN_POINTS = 10

#: Shortest span of operating hours for a rate [h] (project choice, no source: below about
#: three weeks online a slope of a few tenths of a point per 1000 h drowns in the scatter).
DEFAULT_MIN_SPAN_H = 500.0

#: Most points fed to the Theil-Sen estimator before consecutive points are grouped into
#: medians (project choice: scipy.stats.theilslopes builds n x n pair matrices; measured on
#: 2000 points: 0.3 s and a 100 MB peak on the shared 2-core machine).
DEFAULT_MAX_POINTS = 2000

#: Largest lag-1 autocorrelation used for the effective sample size (project choice: near 1
#: the factor (1 + phi) / (1 - phi) explodes and the series says more about a wander than a
#: slope; 0.98 already widens the interval some 10 times).
MAX_PHI = 0.98

#: Margin added to the fitted lag-1 autocorrelation, in its standard errors
#: sqrt((1 - phi^2) / n) (project choice: the variance factor is convex in phi, so the
#: estimation error of phi alone narrows the interval; one standard error brought the
#: coverage at phi 0.9 with a daily wave from 93 % / 90 % (400 / 2500 windows) to 95.5 % /
#: 90.5 %, at 5 % more width on independent noise; calc/DECISIONS.md).
PHI_MARGIN_SE = 1.0

#: CUSUM reference value k, in standard deviations: half the smallest shift worth finding
#: quickly, here 1 sigma (Montgomery, from memory: k = 0.5 is the usual choice).
DEFAULT_CUSUM_K = 0.5

#: CUSUM decision interval h, in standard deviations. Montgomery's usual h = 4 or 5 gives an
#: in-control average run length of only a few hundred points two-sided (from memory), too
#: many false steps on years of windows; h = 8 was chosen here from the false-alarm rate
#: measured in tests/calc/test_trend.py: 15 of 200 pure-noise series of 500 points had a
#: false step (about one per 6 700 points), against 136 of 200 with h = 5. Measured delay
#: for a step of 2 standard deviations: median 5 points; of 1 standard deviation: 15.
DEFAULT_CUSUM_H = 8.0

#: Decision threshold of the GLS step scan, in standard errors of the step estimate
#: (project choice, measured: calc/DECISIONS.md. The largest of 400 independent standard
#: normal statistics exceeds 3.8 in 5 % of series; at phi near 0 the statistics of
#: neighbouring candidates are strongly correlated and the largest is smaller).
DEFAULT_SCAN_THRESHOLD = 4.25

#: Points at the start of each segment that only build up its running mean before the
#: CUSUM starts to accumulate (project choice, no source).
DEFAULT_WARMUP_POINTS = 5

#: Fewest valid points for step detection (project choice, no source).
DEFAULT_MIN_STEP_POINTS = 20

#: Scale from the MAD of first differences to the noise standard deviation:
#: 1.4826 / sqrt(2). Differences cancel slow drift and leave only a single outlier per step.
_DIFF_MAD_TO_SIGMA = 1.482602218505602 / math.sqrt(2.0)


@dataclass(frozen=True)
class RateResult:
    """A degradation rate.

    Attributes
    ----------
    status : str
        ``"ok"`` or ``"insufficient data"`` (then every number is NaN).
    slope_per_1000h : float
        Theil-Sen slope [percentage points per 1000 operating hours].
    low, high : float
        95 % confidence interval of the slope [points per 1000 operating hours].
    per_month, per_month_low, per_month_high : float
        The same per 730 operating hours [points per month of operation].
    intercept : float
        Deviation at zero operating hours on the fitted line [points]; with ``breaks``, on
        the line through the last block (the current level).
    n : int
        Valid points used [-].
    span_h : float
        Operating hours spanned by the valid points [h].
    reason : str
        Why the status is not "ok" (empty when ok).
    n_used : int
        Points the estimator saw: ``n``, or the number of group medians when ``n`` exceeded
        ``max_points`` [-].
    """

    status: str
    slope_per_1000h: float
    low: float
    high: float
    per_month: float
    per_month_low: float
    per_month_high: float
    intercept: float
    n: int
    span_h: float
    reason: str = ""
    n_used: int = 0

    def to_dict(self) -> dict:
        """Plain dict (NaN as None) for stores and reports."""
        return {
            k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in asdict(self).items()
        }


def _insufficient(n: int, span: float, reason: str) -> RateResult:
    nan = float("nan")
    return RateResult("insufficient data", nan, nan, nan, nan, nan, nan, nan, int(n), float(span), reason)


def degradation_rate(
    operating_hours,
    deviation,
    *,
    min_points: int = DEFAULT_MIN_POINTS,
    min_span_h: float = DEFAULT_MIN_SPAN_H,
    confidence: float = 0.95,
    breaks=None,
    max_points: int = DEFAULT_MAX_POINTS,
    serial_correction: bool = True,
) -> RateResult:
    """Theil-Sen degradation rate of a deviation series against operating hours.

    Parameters
    ----------
    operating_hours : array_like
        Cumulative operating hours at each point (see ``operating_hours``) [h].
    deviation : array_like
        Deviation from the baseline at each point [percentage points].
    min_points : int
        Fewest valid (finite) points for a rate [-].
    min_span_h : float
        Shortest span of operating hours for a rate [h].
    confidence : float
        Confidence level of the slope interval [-]; 0.95 by default.
    breaks : array_like or None
        Operating hours at which steps occurred (e.g. from ``detect_steps``, mapped to
        operating hours) [h]. Points at or after a break start a new block; the slope is then
        the median of the pairwise slopes *within* blocks only, so a step does not pass for a
        slope, and ``intercept`` is the last block's. None: one block, computed by
        ``scipy.stats.theilslopes``.
    max_points : int
        Theil-Sen compares every pair of points, so time and memory grow with the square of
        their number. Above ``max_points`` valid points, consecutive groups of points (in
        operating-hour order, never across a break) are replaced by their median hours and
        median deviation, and the estimate and its interval come from those medians
        (``RateResult.n_used``) [-].
    serial_correction : bool
        True (default): widen the interval for the serial correlation of the points (see
        Notes). False: Sen's interval for independent points, as ``scipy.stats.theilslopes``.

    Returns
    -------
    RateResult
        Slope and interval in points per 1000 operating hours and per 730 operating hours;
        ``status == "insufficient data"`` with NaN figures when there are fewer than
        ``min_points`` valid points or they span less than ``min_span_h``.

    Notes
    -----
    Sen's (1968) interval takes the pairwise slopes ranked ``(N -/+ C) / 2`` with
    ``C = q sqrt(var S)``, S being Kendall's statistic. Windows a few hours apart are
    positively correlated (ambient, cooling water, fouling, control tuning); with
    ``serial_correction`` the residuals about the Theil-Sen line give a lag-1
    autocorrelation r1 (within blocks), corrected for its small-sample bias
    (Marriott & Pope 1954), clipped to ``[0, MAX_PHI]``: phi. ``var S`` is multiplied by the
    Hamed & Rao (1998, eq. 14) factor ``n/n* = 1 + 2 / (n (n-1) (n-2)) sum_k (n-k) (n-k-1)
    (n-k-2) phi^k`` (their correction, with the autocorrelation of an AR(1) in place of the
    sample one: the sample autocorrelations of 400 windows were measured to undercorrect,
    72 % coverage at phi = 0.9), and ``q`` is the Student-t quantile with ``n* - 2`` degrees
    of freedom (Santer et al. 2000) instead of the normal one. The correlation is taken
    between successive points, whatever their spacing in hours. Measured coverage and
    widths: ``calc/DECISIONS.md``; a periodic daily component lowers r1 and so the
    correction (95.5 % coverage at 400 windows, 90.5 % at 2500, at phi 0.9 with a 0.3-point
    daily wave). ``PHI_MARGIN_SE`` adds one standard error to phi first.
    """
    h = np.asarray(operating_hours, dtype=float).ravel()
    d = np.asarray(deviation, dtype=float).ravel()
    if h.shape != d.shape:
        raise ValueError(f"operating_hours has {h.size} points, deviation {d.size}; they must match")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie between 0 and 1; found {confidence!r}")
    ok = np.isfinite(h) & np.isfinite(d)
    h, d = h[ok], d[ok]
    n = int(h.size)
    span = float(h.max() - h.min()) if n else 0.0
    if n < min_points:
        return _insufficient(n, span, f"{n} valid points, at least {min_points} needed")
    if span < min_span_h:
        return _insufficient(n, span, f"{span:.0f} operating hours spanned, at least {min_span_h:.0f} needed")
    if max_points < min_points:
        raise ValueError(f"max_points ({max_points}) must be >= min_points ({min_points})")
    blocked = breaks is not None and len(np.atleast_1d(breaks)) > 0
    block = (
        np.searchsorted(np.sort(np.asarray(breaks, dtype=float)), h, side="right")
        if blocked
        else np.zeros(n, dtype=int)
    )
    n_used = n
    if n > max_points:
        h, d, block = _group_medians(h, d, block, max_points)
        n_used = int(h.size)
    slope, intercept, low, high = _blocked_theil_sen(h / 1000.0, d, block, confidence, serial_correction)
    if not math.isfinite(slope):
        return _insufficient(n, span, "no block between breaks holds two points at distinct hours")
    f = HOURS_PER_MONTH / 1000.0
    return RateResult("ok", slope, low, high, slope * f, low * f, high * f, intercept, n, span, n_used=n_used)


def _group_medians(h: np.ndarray, d: np.ndarray, block: np.ndarray, max_points: int):
    """Medians of consecutive groups of points (in hour order, never across a break).

    Each block's full groups are one ``numpy.median`` over a reshaped array and its last,
    shorter group another: the same values as a pandas groupby median, faster (calc/DECISIONS.md, "Speed of the kernels")."""
    order = np.argsort(h, kind="stable")
    h, d, block = h[order], d[order], block[order]
    size = int(math.ceil(h.size / max_points))
    hs, ds, bs = [], [], []
    edges = np.flatnonzero(np.diff(block)) + 1  # blocks are ascending with h
    for lo, hi in zip(np.r_[0, edges], np.r_[edges, h.size], strict=True):
        full = (hi - lo) // size * size
        for part_h, part_d, rows in (
            (h[lo : lo + full], d[lo : lo + full], full // size),
            (h[lo + full : hi], d[lo + full : hi], 1 if hi > lo + full else 0),
        ):
            if rows:
                hs.append(np.median(part_h.reshape(rows, -1), axis=1))
                ds.append(np.median(part_d.reshape(rows, -1), axis=1))
                bs.append(np.full(rows, block[lo]))
    return np.concatenate(hs), np.concatenate(ds), np.concatenate(bs)


def _tie_term(v: np.ndarray) -> float:
    _, counts = np.unique(v, return_counts=True)
    counts = counts[counts > 1].astype(float)
    return float(np.sum(counts * (counts - 1) * (2 * counts + 5)))


def _pairwise_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Slopes of every pair of points at distinct x (unordered).

    Built one lag at a time into one preallocated array, faster than fancy indexing with
    ``numpy.triu_indices`` (calc/DECISIONS.md, "Speed of the kernels").
    """
    n = x.size
    dy = np.empty(n * (n - 1) // 2)
    dx = np.empty_like(dy)
    pos = 0
    for k in range(1, n):
        m = n - k
        np.subtract(y[k:], y[:m], out=dy[pos : pos + m])
        np.subtract(x[k:], x[:m], out=dx[pos : pos + m])
        pos += m
    keep = dx != 0
    if keep.all():
        return np.divide(dy, dx, out=dy)
    return dy[keep] / dx[keep]


def _order_stats(values: np.ndarray, ranks) -> dict:
    """The values at the given 0-based ranks of ``values`` sorted (one partition, no sort)."""
    ranks = sorted({int(r) for r in ranks})
    part = np.partition(values, ranks)
    return {r: float(part[r]) for r in ranks}


def _median(values: np.ndarray) -> float:
    """Median of a 1-D array of finite values: ``numpy.median``'s value (the same partition
    and the same mean of the middle pair), without its generic-axis and NaN handling, which
    took half of each call on the series the daily step scans use (measured with cProfile:
    0.28 ms a call, 0.13 ms of it the partition, at 5,000 points)."""
    n = values.size
    k = n // 2
    if n % 2:
        return float(np.partition(values, k)[k])
    part = np.partition(values, (k - 1, k))
    return float((part[k - 1] + part[k]) / 2.0)


def _mad_about_median(values: np.ndarray) -> float:
    """Median of ``|values - median(values)|`` (unscaled) [unit of values]."""
    return _median(np.abs(values - _median(values)))


def lag1_autocorrelation(residuals, block=None) -> float:
    """Lag-1 autocorrelation of residuals, pooled within blocks, bias-corrected.

    Parameters
    ----------
    residuals : array_like
        Residuals about a fitted line, in time order [any unit].
    block : array_like of int or None
        Block of each residual (pairs across blocks are not used); None: one block.

    Returns
    -------
    float
        r1 + (1 + 3 r1) / n, the first-order bias correction of Marriott & Pope (1954) for a
        series with an estimated mean (from memory) [-]; NaN with fewer than 3 residuals.
        Residuals are centred per block and clipped at 5 scaled MADs first, so that one bad
        window does not decide the correlation.
    """
    r = np.asarray(residuals, dtype=float)
    b = np.zeros(r.size, dtype=int) if block is None else np.asarray(block)
    if r.size < 3:
        return float("nan")
    centred = r.copy()
    for k in np.unique(b):
        sel = b == k
        centred[sel] -= np.median(r[sel])
    mad = 1.482602218505602 * float(np.median(np.abs(centred)))
    if mad > 0:
        centred = np.clip(centred, -5.0 * mad, 5.0 * mad)
    for k in np.unique(b):
        sel = b == k
        centred[sel] -= centred[sel].mean()
    same = b[1:] == b[:-1]
    den = float(centred @ centred)
    if den <= 0 or not same.any():
        return float("nan")
    r1 = float(np.sum(centred[1:][same] * centred[:-1][same])) / den
    return r1 + (1.0 + 3.0 * r1) / r.size


def variance_factor_ar1(n: int, phi: float) -> float:
    """Hamed & Rao (1998, eq. 14) variance correction n/n* of Kendall's S for an AR(1).

    Parameters
    ----------
    n : int
        Points in the series [-].
    phi : float
        Lag-1 autocorrelation; lag k has phi^k [-].

    Returns
    -------
    float
        ``1 + 2 / (n (n-1) (n-2)) sum_{k=1}^{n-1} (n-k)(n-k-1)(n-k-2) phi^k`` [-]; 1 for
        ``phi <= 0`` or ``n < 3``.
    """
    if n < 3 or not phi > 0:
        return 1.0
    k = np.arange(1, n, dtype=float)
    w = (n - k) * (n - k - 1) * (n - k - 2)
    return float(1.0 + 2.0 / (n * (n - 1.0) * (n - 2.0)) * np.sum(w * phi**k))


def _blocked_theil_sen(
    x: np.ndarray, y: np.ndarray, block: np.ndarray, confidence: float, serial_correction: bool = False
):
    """Theil-Sen slope from pairs within blocks, with Sen's (1968, eq. 2.6) interval.

    The variance of Kendall's S is summed over the blocks (independent blocks), the
    interval ranks follow Sen (1968) as for one block; with one block and no serial
    correction this is the estimator and interval of ``scipy.stats.theilslopes`` (checked in
    the tests). With ``serial_correction`` each block's variance carries the Hamed & Rao
    factor of the AR(1) fitted to the residuals and the quantile is Student's t on the
    effective sample size (see ``degradation_rate``).
    """
    order = np.lexsort((x, block))
    x, y, block = x[order], y[order], block[order]
    slopes = []
    sizes = []
    ties = []
    last = None
    for b in np.unique(block):
        sel = block == b
        xb, yb = x[sel], y[sel]
        if xb.size < 2 or xb[-1] == xb[0]:
            continue
        slopes.append(_pairwise_slopes(xb, yb))
        sizes.append(xb.size)
        ties.append(_tie_term(xb) + _tie_term(yb))
        last = (xb, yb)
    if not slopes:
        nan = float("nan")
        return nan, nan, nan, nan
    all_slopes = np.concatenate(slopes)
    n_pairs = all_slopes.size
    mid = _order_stats(all_slopes, [(n_pairs - 1) // 2, n_pairs // 2])
    slope = 0.5 * (mid[(n_pairs - 1) // 2] + mid[n_pairs // 2])
    var_iid = np.array([(nb * (nb - 1) * (2 * nb + 5) - t) / 18.0 for nb, t in zip(sizes, ties, strict=True)])
    if serial_correction:
        used = np.isin(block, [b for b in np.unique(block) if (block == b).sum() >= 2])
        phi = lag1_autocorrelation((y - slope * x)[used], block[used])
        if math.isfinite(phi):
            n_used = int(used.sum())
            phi += PHI_MARGIN_SE * math.sqrt(max(1.0 - phi * phi, 0.0) / n_used)
            phi = min(max(phi, 0.0), MAX_PHI)
        else:
            phi = 0.0
        factors = np.array([variance_factor_ar1(nb, phi) for nb in sizes])
        n_eff = float(sum(nb / f for nb, f in zip(sizes, factors, strict=True)))
        var_s = float(np.sum(var_iid * factors))
        q = float(stats.t.ppf(0.5 * (1.0 + confidence), max(n_eff - 2.0, 1.0)))
    else:
        var_s = float(np.sum(var_iid))
        q = float(stats.norm.ppf(0.5 * (1.0 + confidence)))
    sd = math.sqrt(var_s)
    i_hi = min(int(np.round((n_pairs + q * sd) / 2.0)), n_pairs - 1)
    i_lo = max(int(np.round((n_pairs - q * sd) / 2.0)) - 1, 0)
    ends = _order_stats(all_slopes, [i_lo, i_hi])
    xb, yb = last
    intercept = float(np.median(yb) - slope * np.median(xb))
    return slope, intercept, ends[i_lo], ends[i_hi]


def operating_hours(time, online, *, max_gap=None) -> pd.Series:
    """Cumulative hours online at each sample time.

    Parameters
    ----------
    time : array_like of datetime
        Sample times, ascending [UTC].
    online : array_like of bool
        Whether the unit was online (synchronised, producing) at each sample [-].
    max_gap : str, pandas.Timedelta or None
        An interval between samples longer than this counts as not online (the data do not
        say); None counts every interval [duration, e.g. "1h"].

    Returns
    -------
    pandas.Series
        Cumulative operating hours at each sample, starting at 0 [h], indexed by ``time``.
        The interval from one sample to the next counts when the first of the two was online
        (left-point rule).
    """
    t = pd.DatetimeIndex(pd.to_datetime(time))
    on = np.asarray(online, dtype=bool).ravel()
    if len(t) != on.size:
        raise ValueError(f"time has {len(t)} points, online {on.size}; they must match")
    if len(t) and not t.is_monotonic_increasing:
        raise ValueError("time must be ascending")
    dt_h = np.asarray((t[1:] - t[:-1]) / pd.Timedelta(hours=1), dtype=float)
    count = on[:-1].astype(float) * dt_h
    if max_gap is not None:
        limit_h = pd.Timedelta(max_gap).total_seconds() / 3600.0
        count = np.where(dt_h > limit_h, 0.0, count)
    hours = np.concatenate([[0.0], np.cumsum(count)]) if len(t) else np.zeros(0)
    return pd.Series(hours, index=t, name="operating_hours")


@dataclass(frozen=True)
class Step:
    """One step change found in a deviation series.

    Attributes
    ----------
    time : pandas.Timestamp or float
        Estimated time of the step: the first point after the last CUSUM zero before the
        alarm [same type as the input times].
    size : float
        Mean after the step minus mean before it, each over its own segment [points].
    size_u : float
        Standard uncertainty of ``size`` from the noise scale and segment lengths [points].
    direction : str
        ``"up"`` or ``"down"``.
    detected_at : pandas.Timestamp or float
        Time of the point at which the CUSUM crossed the decision interval.
    index : int
        Position of the step point in the valid (non-NaN) input series [-].
    """

    time: object
    size: float
    size_u: float
    direction: str
    detected_at: object
    index: int


class Steps(list):
    """The list of ``Step`` found, with the run's status.

    Attributes
    ----------
    status : str
        ``"ok"`` or ``"insufficient data"`` (then the list is empty and means "not
        examined", not "no steps").
    sigma : float
        Robust noise scale used to standardise the series: the standard deviation of the
        prewhitened noise (the AR(1) innovations) [points].
    n : int
        Valid points examined [-].
    reason : str
        Why the status is not "ok".
    phi : float
        Lag-1 autocorrelation the series was prewhitened with [-].
    """

    def __init__(self, items=(), *, status="ok", sigma=float("nan"), n=0, reason="", phi=0.0):
        super().__init__(items)
        self.status = status
        self.sigma = sigma
        self.n = n
        self.reason = reason
        self.phi = phi


def detect_steps(
    time,
    deviation,
    *,
    k: float = DEFAULT_CUSUM_K,
    h: float = DEFAULT_CUSUM_H,
    warmup_points: int = DEFAULT_WARMUP_POINTS,
    min_points: int = DEFAULT_MIN_STEP_POINTS,
    sigma: float | None = None,
    drift: bool = True,
    hours=None,
    refine: bool = False,
    phi: float | None = None,
    method: str = "scan",
    threshold: float | None = None,
) -> Steps:
    """Find step changes in a deviation series that may be serially correlated.

    The series is prewhitened by its fitted AR(1); steps are then found by a binary
    segmentation on the generalised least-squares step statistic (``method="scan"``, the
    default) or by a two-sided CUSUM after Page (1954) (``method="cusum"``).

    Parameters
    ----------
    time : array_like
        Time of each point, ascending [UTC timestamps or operating hours].
    deviation : array_like
        Deviation from the baseline [percentage points]; NaN points are skipped.
    k : float
        CUSUM only: reference value (allowance) [standard deviations].
    h : float
        CUSUM only: decision interval [standard deviations].
    warmup_points : int
        Points at the start of each segment that only feed its running mean (CUSUM); the
        fewest points either side of a step (scan) [-].
    min_points : int
        Fewest valid points examined at all [-].
    sigma : float or None
        Standard deviation of the prewhitened noise (the innovations of the AR(1), the noise
        itself when ``phi`` is 0) [points]; None estimates it robustly as
        MAD(first differences of the prewhitened series) x 1.4826 / sqrt(2), which neither
        steps nor slow drift inflate.
    drift : bool
        True (default): each segment's in-control model is a straight line (level plus
        slope), so a steady degradation slope is not mistaken for a string of steps. False:
        a constant level only.
    hours : array_like or None
        The regressor of the drift, normally cumulative operating hours [h]; None uses the
        elapsed time of ``time`` [h] (or ``time`` itself when numeric).
    refine : bool
        False (default): the step time is the point after the last CUSUM zero before the
        alarm. True: that estimate is refined by least squares, trying every step point from
        ``(last zero) - (alarm delay) - 5`` to the alarm and keeping the one with the
        smallest residual sum of squares of the joint fit described below.
    phi : float or None
        Lag-1 autocorrelation of the noise between successive points [-]; None (default)
        fits it (see Notes); 0 treats the points as independent.
    method : {"scan", "cusum"}
        Decision rule (see Notes) [-].
    threshold : float or None
        Scan only: a step is declared where the GLS step estimate exceeds this many of its
        standard errors; None: ``DEFAULT_SCAN_THRESHOLD`` [-].

    Returns
    -------
    Steps
        A list of ``Step`` in time order, with ``status``, ``sigma`` and ``n``. Fewer than
        ``min_points`` valid points, or no noise at all, give
        ``status == "insufficient data"`` and an empty list.

    Notes
    -----
    Successive windows are correlated; a CUSUM fed with correlated residuals and scaled by
    the short-term scatter raises false steps in most series (measured: 73 % of 400-window
    series at phi = 0.5). So the series is first prewhitened by its AR(1), after Cochrane &
    Orcutt (1949): ``e_i = y_i - phi y_(i-1)`` and ``x'_i = x_i - phi x_(i-1)`` within each
    segment, where a level plus slope stays a level plus slope (on ``x'``) and the noise is
    the AR(1) innovations. A step of size D in y becomes a spike of D at its first point
    followed by a shift of (1 - phi) D, which the CUSUM below picks up from the spike; an
    isolated outlier gives a spike and an opposite one and cancels. phi comes from the
    residuals of a line (or level) through the whole series; when steps are found it is
    refitted from the residuals of the segments between them (a step inflates the first
    estimate) and the detection runs once more. The first estimate is
    ``variogram_phi`` (robust to steps), the refit ``lag1_autocorrelation``; both are
    clipped to ``[0, MAX_PHI]``. The noise scale ``sigma`` is that of the prewhitened noise
    (see ``_noise_scale``); the old scale, the MAD of the first differences of the raw
    series, reads sigma too low by about sqrt(1 - phi) under correlation.

    Scan (default): for every candidate point of a segment, the GLS estimate of a step
    there (jointly with the segment's level, and slope with ``drift``) over its standard
    error, from running sums in O(1) per candidate. The largest in magnitude, if above
    ``threshold``, is a step; the segment is split there and both halves are scanned again
    (binary segmentation, Vostrikova 1981; the statistic is the likelihood-ratio one of a
    single change in a regression, Worsley 1986 / Bai & Perron 1998, from memory). The step
    time is then the least-squares change point; ``detected_at`` is the last point examined
    (a retrospective scan knows a step only from the whole series). Measured false-step
    rate and power on AR(1) series: ``calc/DECISIONS.md``.

    CUSUM (``method="cusum"``), on the prewhitened recursive residuals:

    The in-control level of a segment is not known beforehand, so the scheme is
    self-starting: each point is compared with the least-squares fit to the segment's
    earlier points (a running mean, or a running line when ``drift``), scaled to unit
    variance. These are the recursive residuals of Brown, Durbin & Evans (1975), standard
    normal and independent in control (with a level only this is Hawkins' 1987
    self-starting CUSUM). A level taken from the median of the first few points instead was
    measured to raise the false-alarm rate many times over: its error acts as a permanent
    shift. The standardised residuals ``z`` feed ``S+ = max(0, S+ + z - k)`` and
    ``S- = max(0, S- - z - k)``; a step is declared when either exceeds ``h``. Its time is
    the point after the last zero of the alarming sum; the scheme restarts, with a fresh
    fit, at the point after the alarm. The size comes from one generalised least-squares fit
    (the same prewhitening) over the two segments either side of the step (from the
    previous step, or the start, to the next step, or the end): a common level and slope
    (``drift``) or a common level, plus an offset from the step on; the offset is the size
    (with phi = 0 and without drift, the difference of the two segment means). A step inside the first ``warmup_points`` of a segment is
    absorbed into its fit and not reported.
    """
    d = np.asarray(deviation, dtype=float).ravel()
    t_in = time if isinstance(time, pd.DatetimeIndex) else np.asarray(time).ravel()
    if len(t_in) != d.size:
        raise ValueError(f"time has {len(t_in)} points, deviation {d.size}; they must match")
    if k < 0 or h <= 0:
        raise ValueError(f"CUSUM needs k >= 0 and h > 0; found k={k!r}, h={h!r}")
    if warmup_points < 1 or min_points < 2:
        raise ValueError(
            f"need warmup_points >= 1 and min_points >= 2; found {warmup_points!r}, {min_points!r}"
        )
    if isinstance(t_in, pd.DatetimeIndex) or np.issubdtype(np.asarray(t_in).dtype, np.datetime64):
        tt = pd.DatetimeIndex(t_in)
        clock = np.asarray((tt - tt[0]) / pd.Timedelta(hours=1), dtype=float) if len(tt) else np.zeros(0)
    else:
        clock = np.asarray(t_in, dtype=float)
    if hours is None:
        x_all = clock
    else:
        x_all = np.asarray(hours, dtype=float).ravel()
        if x_all.size != d.size:
            raise ValueError(f"hours has {x_all.size} points, deviation {d.size}; they must match")
    ok = np.isfinite(d) & np.isfinite(x_all)
    d = d[ok]
    t = t_in[ok]
    x = (x_all[ok] - (x_all[ok][0] if ok.any() else 0.0)) / 1000.0
    gaps = np.diff(clock[ok]) if np.isfinite(clock[ok]).all() else None
    n = int(d.size)
    if n < min_points:
        return Steps(
            status="insufficient data", n=n, reason=f"{n} valid points, at least {min_points} needed"
        )
    if method not in ("scan", "cusum"):
        raise ValueError(f"method must be 'scan' or 'cusum'; found {method!r}")
    if threshold is None:
        threshold = DEFAULT_SCAN_THRESHOLD
    if not threshold > 0:
        raise ValueError(f"threshold must be > 0; found {threshold!r}")
    rule = (method, k, h, float(threshold), warmup_points)
    if phi is None:
        phi_used = variogram_phi(d)
        steps = _find_steps(t, x, d, phi_used, sigma, rule, drift, refine, gaps=gaps)
        if steps.status == "ok" and len(steps):
            bounds = [0] + [s.index for s in steps] + [n]
            phi_used = _fit_phi(x, d, bounds, drift)
            steps = _find_steps(t, x, d, phi_used, sigma, rule, drift, refine, bounds, gaps)
        return steps
    if not 0.0 <= phi < 1.0:
        raise ValueError(f"phi must lie in [0, 1) or be None; found {phi!r}")
    return _find_steps(t, x, d, float(phi), sigma, rule, drift, refine, gaps=gaps)


#: Lags of the robust variogram that ``variogram_phi`` fits (project choice: phi = 0.9 still
#: leaves 1 - 0.9^20 = 88 % of the sill at lag 20, so the curve bends inside the range).
VARIOGRAM_MAX_LAG = 20


def variogram_phi(values, max_lag: int = VARIOGRAM_MAX_LAG) -> float:
    """AR(1) coefficient fitted to the robust variogram of a series; steps barely move it.

    Parameters
    ----------
    values : array_like
        The series in time order, no NaN [any unit].
    max_lag : int
        Largest lag fitted [points].

    Returns
    -------
    float
        phi in ``[0, MAX_PHI]`` [-]. For an AR(1) the semi-variogram at lag k is
        ``sigma^2 (1 - phi^k)``; it is estimated at lags 1 to ``max_lag`` (at most a tenth of
        the series) as the squared scaled MAD of the lag-k differences, each centred on its
        median (robust variogram in the manner of Genton 1998, from memory: a step or an
        outlier spoils only k of the n - k differences, a slow drift only shifts their
        median), and phi is the grid value (steps of 0.005) that fits
        ``log gamma_k = log c + log(1 - phi^k)`` best in least squares.

    References
    ----------
    Genton, M. G. (1998). Highly robust variogram estimation. Math. Geology 30(2), 213-221.
    """
    v = np.asarray(values, dtype=float)
    lags = np.arange(1, max(2, min(int(max_lag), v.size // 10)) + 1)
    gamma = np.empty(lags.size)
    for i, lag in enumerate(lags):
        dv = v[lag:] - v[:-lag]
        gamma[i] = 0.5 * (1.482602218505602 * _mad_about_median(dv)) ** 2
    if not np.all(gamma > 0):
        return 0.0
    grid = np.arange(0.0, MAX_PHI + 1e-9, 0.005)
    model = np.log1p(-(grid[:, None] ** lags[None, :]))  # log(1 - phi^k), phi 0 -> 0
    resid = np.log(gamma)[None, :] - model
    resid -= resid.mean(axis=1, keepdims=True)
    return float(grid[int(np.argmin(np.sum(resid * resid, axis=1)))])


def _fit_phi(x: np.ndarray, y: np.ndarray, bounds: list[int], drift: bool) -> float:
    """AR(1) coefficient of the residuals of a level (or line) per segment, in [0, MAX_PHI]."""
    res = np.empty_like(y)
    block = np.empty(y.size, dtype=int)
    for b, (lo, hi) in enumerate(pairwise(bounds)):
        xs, ys = x[lo:hi], y[lo:hi]
        if drift and hi - lo > 2 and np.ptp(xs) > 0:
            coef = np.polyfit(xs, ys, 1)
            res[lo:hi] = ys - np.polyval(coef, xs)
        else:
            res[lo:hi] = ys - ys.mean()
        block[lo:hi] = b
    phi = lag1_autocorrelation(res, block)
    return min(max(phi, 0.0), MAX_PHI) if math.isfinite(phi) else 0.0


#: A gap between points longer than this many median spacings decorrelates the noise as the
#: time passes: the correlation across it is ``phi ** (gap / (GAP_SPACINGS * median gap))``
#: instead of ``phi`` (project choice: an outage of days leaves the windows either side
#: nearly independent, and the prewhitened jump across it is then no longer a step; within
#: normal spacing the correlation is taken per window, as the AR(1) between windows).
GAP_SPACINGS = 2.0


def _row_rho(phi: float, gaps) -> np.ndarray | None:
    """Correlation between each point and the next: phi, less across long gaps (or None)."""
    if gaps is None or phi == 0.0 or gaps.size == 0:
        return None
    positive = gaps[gaps > 0]
    ref = GAP_SPACINGS * _median(positive) if positive.size else 0.0
    if not ref > 0:
        return None
    return phi ** np.maximum(1.0, gaps / ref)


def _prewhiten(v: np.ndarray, phi: float, rho: np.ndarray | None = None) -> np.ndarray:
    """v_i - phi v_(i-1) for i >= 1 (one element shorter), along the first axis.

    With ``rho`` (the correlation of each point with the previous one), the transform of a
    first-order autoregression sampled at uneven times: ``(v_i - rho_i v_(i-1))
    sqrt((1 - phi^2) / (1 - rho_i^2))``, whose noise has the innovation variance of ``phi``
    on every row.
    """
    if rho is None:
        return v[1:] - phi * v[:-1]
    r = rho if v.ndim == 1 else rho[:, None]
    return (v[1:] - r * v[:-1]) * np.sqrt((1.0 - phi * phi) / (1.0 - r * r))


def _noise_scale(x: np.ndarray, d: np.ndarray, phi: float, bounds: list[int], drift: bool, rho=None) -> float:
    """Robust standard deviation of the prewhitened noise (see ``detect_steps``) [points].

    The larger of two robust estimates: the scaled MAD of the first differences of the
    prewhitened series over sqrt(2) (immune to steps and drift, but low when the
    prewhitened noise is still positively correlated, as with a daily wave on top of the
    AR(1)), and the scaled MAD of the residuals of the prewhitened base fit (level, and
    slope) within each segment between ``bounds``.
    """
    e = _prewhiten(d, phi, rho)
    de = np.diff(e)
    from_diffs = _DIFF_MAD_TO_SIGMA * _mad_about_median(de)
    parts = []
    for lo, hi in pairwise(bounds):
        if hi - lo < 4:
            continue
        rs = None if rho is None else rho[lo : hi - 1]
        yy = _prewhiten(d[lo:hi], phi, rs)
        cols = [_prewhiten(np.ones(hi - lo), phi, rs)] + ([_prewhiten(x[lo:hi], phi, rs)] if drift else [])
        B = np.column_stack(cols)
        beta, *_ = np.linalg.lstsq(B, yy, rcond=None)
        parts.append(yy - B @ beta)
    if not parts:
        return from_diffs
    r = np.concatenate(parts)
    from_level = 1.482602218505602 * _mad_about_median(r)
    return max(from_diffs, from_level)


def _scan_changes(x, d, phi, sigma, threshold, min_seg, drift, rho=None) -> list[tuple[int, int, str]]:
    """Binary segmentation by the largest GLS step statistic (see ``detect_steps``)."""
    n = d.size
    found = []
    todo = [(0, n)]
    while todo:
        lo, hi = todo.pop()
        if hi - lo < 2 * min_seg + 1:
            continue
        rs = None if rho is None else rho[lo : hi - 1]
        stat = _step_statistics(x[lo:hi], d[lo:hi], phi, drift, rs) / sigma
        cand = np.arange(lo + 1, hi)  # element j of stat is a step at point lo + 1 + j
        inside = (cand >= lo + min_seg) & (cand <= hi - min_seg)
        stat = np.where(inside & np.isfinite(stat), stat, 0.0)
        j = int(np.argmax(np.abs(stat)))
        if abs(stat[j]) <= threshold:
            continue
        tau = int(cand[j])
        found.append((tau, n - 1, "up" if stat[j] > 0 else "down"))
        todo += [(lo, tau), (tau, hi)]
    return sorted(found)


def _rank(a: np.ndarray) -> int:
    """``numpy.linalg.matrix_rank`` of a small square matrix (the same singular values and
    tolerance, without its generic-shape overhead, which was half of each call)."""
    sv = np.linalg.svd(a, compute_uv=False)
    return int(np.count_nonzero(sv > sv.max(initial=0.0) * max(a.shape) * np.finfo(float).eps))


def _step_statistics(x: np.ndarray, y: np.ndarray, phi: float, drift: bool, rho=None) -> np.ndarray:
    """GLS estimate of a step at each point 1..m-1 over its standard error, times sigma.

    In the prewhitened rows (one per point after the first) a step at point i is the column
    s with g at row i - 1 and the prewhitened level column c below it (g = 1, c = 1 - phi at
    even spacing); the statistic is ``s'r / sqrt(s'Ms)`` with r the residuals of the base
    fit (level, and slope) and M its residual projector, all from running sums, so every
    candidate costs O(1).
    """
    yy = _prewhiten(y, phi, rho)
    m = yy.size
    c = _prewhiten(np.ones(y.size), phi, rho)
    g = np.ones(m) if rho is None else np.sqrt((1.0 - phi * phi) / (1.0 - rho * rho))
    cols = [c]
    if drift:
        cols.append(_prewhiten(x, phi, rho))
    B = np.column_stack(cols)
    gram = B.T @ B
    if _rank(gram) < B.shape[1]:
        return np.full(m, np.nan)
    inv = np.linalg.inv(gram)
    r = yy - B @ (inv @ (B.T @ yy))

    def below(v):  # sum over the rows below each row
        tail = np.cumsum(v[::-1], axis=0)[::-1]
        return np.concatenate([tail[1:], np.zeros((1,) + v.shape[1:])])

    num = g * r + below(c * r)
    bs = g[:, None] * B + below(c[:, None] * B)
    quad = np.zeros(m)  # the rows' bs inv bs', term by term (einsum's order, a third of its time)
    for j in range(inv.shape[0]):
        for k in range(inv.shape[0]):
            quad += bs[:, j] * inv[j, k] * bs[:, k]
    den2 = g * g + below(c * c) - quad
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den2 > 1e-12, num / np.sqrt(den2), np.nan)


def _cusum_changes(x, d, phi, sigma, k, h, warmup_points, drift) -> list[tuple[int, int, str]]:
    """(step index, alarm index, direction) of the two-sided CUSUM (see ``detect_steps``).

    Runs on the prewhitened segment from ``start``: element j of z belongs to point
    start + 1 + j.
    """
    n = d.size
    changes: list[tuple[int, int, str]] = []
    start = 0
    while start < n - 2:
        z = _recursive_residuals(_prewhiten(x[start:], phi), _prewhiten(d[start:], phi), drift) / sigma
        s_hi = s_lo = 0.0
        # index of the last zero of each sum: the sums start at zero after the warm-up
        zero_hi = zero_lo = start + warmup_points
        found = None
        for j in range(warmup_points, z.size):
            zj = z[j]
            if not math.isfinite(zj):
                continue
            i = start + 1 + j
            s_hi = max(0.0, s_hi + zj - k)
            s_lo = max(0.0, s_lo - zj - k)
            if s_hi == 0.0:
                zero_hi = i
            if s_lo == 0.0:
                zero_lo = i
            if s_hi > h or s_lo > h:
                found = (zero_hi + 1, i, "up") if s_hi > h else (zero_lo + 1, i, "down")
                break
        if found is None:
            break
        changes.append(found)
        # Restart after the alarm point: the points between the estimated step and the alarm
        # may still hold some of the old level when the estimate is early, and would read as
        # a second step if they seeded the new segment's fit.
        start = found[1] + 1
    return changes


def _find_steps(t, x, d, phi, sigma, rule, drift, refine, bounds=None, gaps=None) -> Steps:
    """The passes of ``detect_steps`` for a given phi (see there)."""
    method, k, h, threshold, warmup_points = rule
    n = int(d.size)
    # the CUSUM's recursive residuals need an even level column: no gap correction there
    rho = _row_rho(phi, gaps) if method == "scan" else None
    if sigma is None:
        sigma = _noise_scale(x, d, phi, bounds or [0, n], drift, rho)
    if not (math.isfinite(sigma) and sigma > 0):
        return Steps(
            status="insufficient data",
            n=n,
            sigma=float(sigma),
            reason="no noise scale (series constant)",
            phi=phi,
        )

    # Pass 1: change points and alarm points.
    if method == "scan":
        changes = _scan_changes(x, d, phi, sigma, threshold, warmup_points, drift, rho)
        refine = False  # the scan's change point is already the least-squares one
    else:
        changes = _cusum_changes(x, d, phi, sigma, k, h, warmup_points, drift)

    # Pass 2: sizes from the neighbouring segments, fitted jointly.
    bounds = [0] + [c[0] for c in changes] + [n]
    if refine:
        for j, (tau, alarm, direction) in enumerate(changes):
            lo, hi = bounds[j], bounds[j + 2]
            first = max(lo + 1, tau - (alarm - tau) - 5)
            best = min(
                range(first, alarm + 1),
                key=lambda c: _step_rss(x[lo:hi], d[lo:hi], c - lo, drift, phi),
            )
            changes[j] = (best, alarm, direction)
            bounds[j + 1] = best
    steps = []
    for j, (tau, alarm, direction) in enumerate(changes):
        lo, hi = bounds[j], bounds[j + 2]
        rs = None if rho is None else rho[lo : hi - 1]
        size, size_u = _step_size(x[lo:hi], d[lo:hi], tau - lo, drift, sigma, phi, rs)
        if not math.isfinite(size):
            continue
        steps.append(
            Step(
                time=t[tau],
                size=size,
                size_u=size_u,
                direction=direction,
                detected_at=t[alarm],
                index=int(tau),
            )
        )
    return Steps(steps, status="ok", sigma=float(sigma), n=n, phi=phi)


def _recursive_residuals(x: np.ndarray, y: np.ndarray, drift: bool) -> np.ndarray:
    """Recursive residuals (Brown, Durbin & Evans 1975) of a level or a line; NaN where undefined.

    Element i compares y[i] with the least-squares fit to y[:i], scaled by
    sqrt(1 + leverage) so that in control every element has the noise variance.
    """
    m = np.arange(y.size, dtype=float)  # earlier points
    s1 = np.concatenate([[0.0], np.cumsum(x)[:-1]])
    sy = np.concatenate([[0.0], np.cumsum(y)[:-1]])
    with np.errstate(divide="ignore", invalid="ignore"):
        if not drift:
            pred = sy / m
            lev = 1.0 / m
        else:
            s2 = np.concatenate([[0.0], np.cumsum(x * x)[:-1]])
            sxy = np.concatenate([[0.0], np.cumsum(x * y)[:-1]])
            det = m * s2 - s1 * s1
            b1 = (m * sxy - s1 * sy) / det
            b0 = (sy - b1 * s1) / m
            pred = b0 + b1 * x
            lev = (s2 - 2.0 * s1 * x + m * x * x) / det
            # fewer than two distinct earlier x: no line yet
            tiny = det <= 1e-12 * np.maximum(m * s2, 1e-300)
            pred[tiny] = np.nan
        w = (y - pred) / np.sqrt(1.0 + lev)
    w[~np.isfinite(w)] = np.nan
    return w


def _step_design(x: np.ndarray, n: int, at: int, drift: bool, phi: float = 0.0, rho=None) -> np.ndarray:
    """Columns level, (slope), step offset; prewhitened by phi (one row fewer) when phi > 0."""
    cols = [np.ones_like(x), (np.arange(n) >= at).astype(float)]
    if drift:
        cols.insert(1, x)
    X = np.column_stack(cols)
    return X if phi == 0.0 else _prewhiten(X, phi, rho)


def _step_fit(x: np.ndarray, y: np.ndarray, at: int, drift: bool, phi: float, rho=None):
    X = _step_design(x, y.size, at, drift, phi, rho)
    yy = y if phi == 0.0 else _prewhiten(y, phi, rho)
    beta, *_ = np.linalg.lstsq(X, yy, rcond=None)
    return X, yy, beta


def _step_rss(x: np.ndarray, y: np.ndarray, at: int, drift: bool, phi: float = 0.0) -> float:
    """Residual sum of squares of the joint (prewhitened) fit with the step at index ``at``."""
    if at <= 0 or at >= y.size:
        return math.inf
    X, yy, beta = _step_fit(x, y, at, drift, phi)
    r = yy - X @ beta
    return float(r @ r)


def _step_size(
    x: np.ndarray, y: np.ndarray, at: int, drift: bool, sigma: float, phi: float = 0.0, rho=None
) -> tuple[float, float]:
    """Offset of y from index ``at`` on, fitted jointly with a level (and slope) [points].

    Generalised least squares for AR(1) noise (prewhitened by phi); the standard uncertainty
    takes ``sigma`` as the innovation standard deviation.
    """
    if at <= 0 or at >= y.size:
        return float("nan"), float("nan")
    X, yy, beta = _step_fit(x, y, at, drift, phi, rho)
    if np.linalg.matrix_rank(X) < X.shape[1]:
        return float("nan"), float("nan")
    cov = np.linalg.inv(X.T @ X)
    return float(beta[-1]), float(sigma * math.sqrt(cov[-1, -1]))


@dataclass(frozen=True)
class Projection:
    """A deviation carried forward.

    Attributes
    ----------
    status : str
        ``"ok"`` or ``"insufficient data"`` (then the numbers are NaN).
    value : float
        Projected deviation [points].
    low, high : float
        Interval of the projection at the rate's confidence level [points].
    hours_ahead : float
        Operating hours projected over [h].
    """

    status: str
    value: float
    low: float
    high: float
    hours_ahead: float


#: Two-sided 95 % normal quantile (standard constant).
_Z95 = 1.959963984540054


def project(
    rate_result: RateResult, current_deviation: float, hours_to_date: float, *, current_u: float = 0.0
) -> Projection:
    """Project the deviation forward by a number of operating hours.

    Parameters
    ----------
    rate_result : RateResult
        From ``degradation_rate``.
    current_deviation : float
        Deviation now, e.g. the fitted line at the latest point or a recent mean [points].
    hours_to_date : float
        Operating hours from now to the date of interest (the planned outage), at the
        expected running regime [h].
    current_u : float
        Standard uncertainty of ``current_deviation`` [points].

    Returns
    -------
    Projection
        ``value = current + slope * hours / 1000``. The interval combines the slope interval
        scaled by the hours with ``1.96 * current_u`` in quadrature, separately on each side.
    """
    if not (math.isfinite(hours_to_date) and hours_to_date >= 0):
        raise ValueError(f"hours_to_date must be a finite number of hours >= 0; found {hours_to_date!r}")
    nan = float("nan")
    if rate_result.status != "ok" or not math.isfinite(current_deviation):
        return Projection("insufficient data", nan, nan, nan, float(hours_to_date))
    f = hours_to_date / 1000.0
    value = current_deviation + rate_result.slope_per_1000h * f
    down = (rate_result.slope_per_1000h - rate_result.low) * f
    up = (rate_result.high - rate_result.slope_per_1000h) * f
    cu = _Z95 * float(current_u)
    return Projection(
        "ok",
        float(value),
        float(value - math.hypot(down, cu)),
        float(value + math.hypot(up, cu)),
        float(hours_to_date),
    )
