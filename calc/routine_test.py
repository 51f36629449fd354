"""Evaluating a planned performance test from the same plant data.

A routine test holds the unit steady (control valves wide open at constant throttle pressure,
typically) for a few hours. Given the start and end of the test:

1. the first ``stabilisation`` (default 1 h; common practice) is dropped;
2. the rest is cut into consecutive sub-periods (default 1 h; common practice: runs of about
   1 h or more); a tail shorter than one sub-period is dropped and noted;
3. each sub-period is checked against the permissible fluctuations of ASME PTC 6-2004
   Table 3-1 (``isentrope.calc.steady.PTC6_LIMITS``; load band ``steady.LOAD_BAND``): every
   reading of a limited role must lie within the permissible fluctuation of the sub-period
   average, and no role the section figures need may be missing for more than
   ``max_missing`` of the samples;
4. the section figures of each sub-period are computed from its averaged readings
   (``isentrope.calc.sections.evaluate``, test practice: average the readings, then
   compute), with their instrument uncertainty;
5. the test result of each figure is the mean over the sub-periods that passed, with a
   standard uncertainty combining the spread between them (Type A, ``s / sqrt(n)``) and the
   instrument uncertainty (Type B; systematic, so not reduced by averaging: the mean of the
   sub-periods' uncertainties);
6. optionally, it is compared with the online trend value at the test date.

A routine test evaluated here is not an acceptance test to ASME PTC 6: the test's
instrumentation, isolation and corrections are not checked.

References
----------
ASME PTC 6-2004, Steam Turbines, Table 3-1 (permissible fluctuations; read from a poor
copy: defaults a user can change).
JCGM 100:2008 (ISO GUM): combination of Type A and Type B standard uncertainties.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from isentrope.calc import sections, steady

#: Stabilisation dropped at the start of a test (common practice: about 1 h).
DEFAULT_STABILISATION = "1h"

#: Length of one sub-period (common practice: runs of about 1 h or more).
DEFAULT_SUB_PERIOD = "1h"

#: Largest fraction of missing samples of a needed role in a sub-period (project choice,
#: no source).
DEFAULT_MAX_MISSING = 0.10

#: Coverage factor for the comparison with the online value (k = 2, about 95 %; GUM).
COVERAGE_K = 2.0


@dataclass(frozen=True)
class RoutineTestResult:
    """Outcome of ``evaluate_test``.

    Attributes
    ----------
    status : str
        ``"ok"`` or ``"no valid sub-period"`` (then every test result is NaN).
    run_start, run_end : pandas.Timestamp
        The evaluated span, after the stabilisation and without the short tail [UTC].
    sub_periods : pandas.DataFrame
        One row per sub-period (index: its start): ``end``, ``n_samples``, ``passed``
        [bool], ``reason`` (empty when passed), ``<role>_fluctuation`` (largest deviation
        of a reading from the sub-period mean over the permissible fluctuation [-]; > 1
        fails), ``steady_fraction`` (share of the sub-period's samples that the trending
        detector ``steady.tag_steady(method="ptc6")`` tags steady, for information; it does
        not decide ``passed``) [-], the averaged readings [internal units] and the section
        figures with their ``_u`` [figure units].
    result : pandas.DataFrame
        One row per figure (index: figure name, e.g. ``hp_efficiency``): ``mean``,
        ``spread_std`` (between sub-periods), ``n`` (sub-periods used), ``u_spread``
        (``spread_std / sqrt(n)``), ``u_instrument``, ``u`` (root-sum-square), ``U95``
        (``2 u``), and with an online value ``online``, ``online_u``, ``difference``
        (test minus online), ``difference_u`` and ``agrees`` (|difference| <= 2
        difference_u) [figure units; efficiencies and moisture as fractions].
    notes : tuple of str
        What was dropped or switched off.
    """

    status: str
    run_start: pd.Timestamp
    run_end: pd.Timestamp
    sub_periods: pd.DataFrame
    result: pd.DataFrame
    notes: tuple[str, ...]


def _td(value, name: str) -> pd.Timedelta:
    try:
        td = pd.Timedelta(value)
    except (ValueError, TypeError):
        raise ValueError(f"{name} must be a duration such as '1h'; found {value!r}") from None
    if td < pd.Timedelta(0) or pd.isna(td):
        raise ValueError(f"{name} must be a duration >= 0; found {value!r}")
    return td


def _utc(value, name: str) -> pd.Timestamp:
    try:
        ts = pd.Timestamp(value)
    except (ValueError, TypeError):
        raise ValueError(f"{name} must be a time; found {value!r}") from None
    return ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")


def _limits(steady_limits: Mapping | None, rating_mw: float | None) -> dict[str, tuple[float, float]]:
    merged: dict[str, tuple[float, float] | None] = dict(steady.PTC6_LIMITS)
    merged["gross_output"] = (steady.LOAD_BAND, 0.0)
    for role, lim in (steady_limits or {}).items():
        merged[role] = None if lim is None else (float(lim[0]), float(lim[1]))
    out = {}
    for role, lim in merged.items():
        if lim is None:
            continue
        rel, ab = lim
        if not (rel >= 0 and ab >= 0) or (rel == 0 and ab == 0):
            raise ValueError(
                f"steady limit for {role!r} must be (relative >= 0, absolute >= 0), not both 0; found {lim!r}"
            )
        out[role] = (rel, ab)
    return out


def _online_value(spec, when: pd.Timestamp, window: pd.Timedelta) -> tuple[float, float]:
    if isinstance(spec, pd.Series):
        if not isinstance(spec.index, pd.DatetimeIndex):
            raise ValueError("an online trend series needs a DatetimeIndex")
        near = spec[(spec.index >= when - window) & (spec.index <= when + window)].astype(float).dropna()
        if near.empty:
            return math.nan, math.nan
        n = len(near)
        mad = float(np.median(np.abs(near - near.median())))
        u = 1.2533 * 1.4826 * mad / math.sqrt(n) if n > 1 else math.nan  # s.e. of a median, Gaussian
        return float(near.median()), u
    if isinstance(spec, (tuple, list)):
        return float(spec[0]), float(spec[1])
    return float(spec), 0.0


def evaluate_test(
    frame: pd.DataFrame,
    start,
    end,
    *,
    stabilisation="1h",
    sub_period="1h",
    steady_limits: Mapping | None = None,
    rating_mw: float | None = None,
    section_kwargs: Mapping | None = None,
    max_missing: float = DEFAULT_MAX_MISSING,
    online: Mapping | None = None,
    online_window="7D",
) -> RoutineTestResult:
    """Evaluate a planned test: stabilisation, sub-periods, steadiness, figures, result.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings in internal units (MPa abs, K, MW, kg/s), one column per role, UTC
        DatetimeIndex covering the test.
    start, end : timestamp
        Start and end of the test as logged [UTC; naive times are taken as UTC].
    stabilisation : str or Timedelta
        Dropped at the start [duration]; default 1 h (common practice).
    sub_period : str or Timedelta
        Length of each sub-period [duration]; default 1 h (common practice).
    steady_limits : mapping or None
        Role -> (relative [-], absolute [internal unit]) permissible fluctuation, the larger
        applies, merged over ``steady.PTC6_LIMITS`` and the load band (``gross_output``:
        relative part of ``rating_mw``, or of the mean load without a rating); None removes
        a role.
    rating_mw : float or None
        Unit rating for the load band [MW].
    section_kwargs : mapping or None
        Passed to ``sections.evaluate`` (LP design efficiency, annulus area, uncertainty...).
    max_missing : float
        Largest fraction of missing samples of a needed role in a passing sub-period [-].
    online : mapping or None
        Figure -> the online trend value at the test date: a number, a (value, standard
        uncertainty) pair, or a Series of windowed values (UTC index; its median within
        ``online_window`` of the test midpoint is used) [figure units].
    online_window : str or Timedelta
        Half-width of the span of an online Series used [duration].

    Returns
    -------
    RoutineTestResult

    Raises
    ------
    ValueError
        A frame without a UTC DatetimeIndex, ``end <= start``, bad durations, or a test too
        short to hold one sub-period after the stabilisation.
    """
    if (
        not isinstance(frame, pd.DataFrame)
        or not isinstance(frame.index, pd.DatetimeIndex)
        or frame.index.tz is None
    ):
        raise ValueError("evaluate_test needs a DataFrame with a timezone-aware (UTC) DatetimeIndex")
    t0, t1 = _utc(start, "start"), _utc(end, "end")
    if t1 <= t0:
        raise ValueError(f"test end {t1} must be after its start {t0}")
    stab = _td(stabilisation, "stabilisation")
    sp = _td(sub_period, "sub_period")
    if sp <= pd.Timedelta(0):
        raise ValueError(f"sub_period must be longer than 0; found {sub_period!r}")
    if not 0 <= max_missing < 1:
        raise ValueError(f"max_missing must lie in [0, 1); found {max_missing!r}")
    if rating_mw is not None and not (math.isfinite(rating_mw) and rating_mw > 0):
        raise ValueError(f"rating_mw must be a positive number of MW; found {rating_mw!r}")
    limits = _limits(steady_limits, rating_mw)
    run_start = t0 + stab
    n_sub = int((t1 - run_start) // sp) if t1 > run_start else 0
    if n_sub < 1:
        raise ValueError(
            f"test {t0} to {t1} is too short: after {stab} of stabilisation it does not hold one "
            f"sub-period of {sp}"
        )
    run_end = run_start + n_sub * sp
    notes = [f"first {stab.total_seconds() / 3600.0:g} h dropped as stabilisation"]
    if run_end < t1:
        notes.append(f"last {t1 - run_end} dropped: shorter than one sub-period of {sp}")

    frame = frame.sort_index()
    data = frame[(frame.index >= run_start) & (frame.index < run_end)]
    numeric = [c for c in data.columns if pd.api.types.is_numeric_dtype(data[c])]
    needed = [r for r in sections.ROLE_QUANTITY if r in numeric]
    limited = [r for r in limits if r in numeric]

    # Per-sample steady flags of the trending detector, for information beside the
    # sub-period check (a sub-period can pass while a trailing window inside it did not).
    steady_flag = None
    if "gross_output" in numeric and len(data):
        try:
            window = min(sp, pd.Timedelta(steady.DEFAULT_WINDOW))
            steady_flag = steady.tag_steady(
                data[numeric], method="ptc6", window=window, limits=steady_limits, rating_mw=rating_mw
            ).steady
        except ValueError as exc:
            notes.append(f"steady tagging off: {exc}")

    rows = []
    for j in range(n_sub):
        a = run_start + j * sp
        b = a + sp
        sub = data[(data.index >= a) & (data.index < b)]
        row: dict = {"start": a, "end": b, "n_samples": int(len(sub))}
        reasons = []
        means = sub[numeric].astype(float).mean() if len(sub) else pd.Series(np.nan, index=numeric)
        if len(sub) == 0:
            reasons.append("no samples")
        else:
            missing = sub[needed].isna().mean() if needed else pd.Series(dtype=float)
            bad = [r for r in needed if missing[r] > max_missing]
            if bad:
                reasons.append("missing data: " + ", ".join(f"{r} {100 * missing[r]:.0f} %" for r in bad))
        for role in limited:
            rel, ab = limits[role]
            x = sub[role].to_numpy(dtype=float) if len(sub) else np.zeros(0)
            x = x[np.isfinite(x)]
            m = float(means[role])
            if x.size == 0 or not math.isfinite(m):
                row[f"{role}_fluctuation"] = np.nan
                continue
            base = rating_mw if (role == "gross_output" and rating_mw is not None) else abs(m)
            limit = max(rel * base, ab)
            ratio = float(np.max(np.abs(x - m))) / limit
            row[f"{role}_fluctuation"] = ratio
            if ratio > 1.0:
                reasons.append(f"{role} fluctuates {ratio:.2f} x the permissible limit")
        if steady_flag is not None:
            flags = steady_flag[(steady_flag.index >= a) & (steady_flag.index < b)]
            row["steady_fraction"] = float(flags.mean()) if len(flags) else np.nan
        row["passed"] = not reasons
        row["reason"] = "; ".join(reasons)
        for c in numeric:
            row[c] = float(means[c])
        rows.append(row)

    table = pd.DataFrame(rows).set_index("start")
    table.index = pd.DatetimeIndex(table.index, name="start")
    averaged = table[numeric]
    figures = sections.evaluate(averaged, **dict(section_kwargs or {}))
    fig_frame = figures.to_frame()
    notes.extend(figures.notes)
    fig_cols = [c for c in fig_frame.columns if f"{c}_u" in fig_frame.columns]
    for c in fig_cols:
        table[c] = fig_frame[c].to_numpy(dtype=float)
        table[f"{c}_u"] = fig_frame[f"{c}_u"].to_numpy(dtype=float)

    passed = table["passed"].to_numpy(dtype=bool)
    midpoint = run_start + (run_end - run_start) / 2
    window = _td(online_window, "online_window")
    result_rows = {}
    for c in fig_cols:
        v = table[c].to_numpy(dtype=float)
        u_i = table[f"{c}_u"].to_numpy(dtype=float)
        use = passed & np.isfinite(v)
        n = int(use.sum())
        mean = float(v[use].mean()) if n else math.nan
        s = float(v[use].std(ddof=1)) if n > 1 else math.nan
        u_spread = s / math.sqrt(n) if n > 1 else math.nan
        u_instr = float(np.nanmean(u_i[use])) if n and np.isfinite(u_i[use]).any() else math.nan
        if n == 1:
            # one sub-period: no spread estimate; the instrument part alone, noted
            u = u_instr
        else:
            u = math.hypot(u_spread, u_instr) if n else math.nan
        rec = {
            "mean": mean,
            "spread_std": s,
            "n": n,
            "u_spread": u_spread,
            "u_instrument": u_instr,
            "u": u,
            "U95": COVERAGE_K * u,
        }
        if online is not None and c in online:
            ov, ou = _online_value(online[c], midpoint, window)
            diff = mean - ov
            diff_u = math.hypot(u, ou) if math.isfinite(ou) else u
            rec.update(
                online=ov,
                online_u=ou,
                difference=diff,
                difference_u=diff_u,
                agrees=bool(abs(diff) <= COVERAGE_K * diff_u)
                if math.isfinite(diff) and math.isfinite(diff_u)
                else False,
            )
        result_rows[c] = rec
    if 0 < int(passed.sum()) < 2:
        notes.append(
            "only one sub-period passed: no spread estimate, uncertainty is the instrument part only"
        )
    result = pd.DataFrame.from_dict(result_rows, orient="index")
    result.index.name = "figure"
    status = "ok" if passed.any() else "no valid sub-period"
    return RoutineTestResult(status, run_start, run_end, table, result, tuple(notes))
