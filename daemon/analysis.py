"""Degradation analysis over the stored history: rates, steps, projections, costs, alarms.

The worker's cycles write per-window deviations from the baseline (measurement ``deviation``).
What a planner needs comes from the whole history of those deviations, not from one cycle:
the degradation rate with its interval, the step changes, the projection to the planned
outage, the cost of the lost efficiency and the payback of an overhaul. ``analyse`` computes
all of it from in-memory inputs (no I/O, deterministic). ``run_analysis`` is the worker's
second job (``Worker.analyse``): it brings the stored analysis up to a time, day by day. Each
UTC midnight is an evaluation time: the rate as it stood then (the windows before it, blocked
at the steps the CUSUM had detected by then), the current deviation, the net of the steps, and
the rate and step alarm machines; a midnight's rows are written once it is final and kept,
the rows after the last final midnight are provisional and replaced by the next run. The
saved state ``analysis/<unit>`` carries the alarm machines, operating hours and costs from one
run to the next, so a run reads only the deviations and the new days' gross output. A
backfill or refit rebuilds it from the reference start (every analysis row deleted first).
``load_analysis`` reads the stored analysis back for the report, the demo and ``status``.

Result series (also in daemon/DECISIONS.md, "Result series"):

* ``degradation`` (tags unit, section): one row per UTC midnight (and one at the end of the
  history): ``rate_intercept`` [points], ``rate_span_h`` [h], ``step_offset`` [points: net of
  the steps the scan of the windows before the row found, confirmed or not], ``rate_per_1000h``, ``rate_low``, ``rate_high`` [points per 1000 operating h],
  ``rate_per_month`` [points per 730 operating h], ``rate_ok`` (bool: enough data),
  ``n_windows`` [-], ``operating_hours`` [h since the first deviation], ``deviation_now``
  and ``deviation_now_u`` [points; median of the last week's windows and its standard error
  from their scatter], ``deviation_now_window_u`` [points; median ``deviation_u`` of those
  windows: one window's measurement and model uncertainty], ``projected``,
  ``projected_low``, ``projected_high`` [points at the planned outage; last row only].
* ``steps`` (tags unit, section): one row per step found, at the first window at the new
  level (least-squares change point): ``size``, ``size_u`` [points], ``detected_at_s`` [s
  since 1970: the window at which the CUSUM crossed its limit].
* ``operation`` (tags unit): one row per UTC day (``daily_operation``).
* ``losses`` (tags unit, section): one row per UTC day (as ``calc.economics.daily_losses``,
  at the day's own online hours and mean online output):
  ``deviation`` [points], ``heat_rate_change`` [%], ``output_change_mw`` [MW], ``lost_mwh``
  [MWh], ``fuel_cost`` [currency], ``cumulative_lost_mwh`` [MWh], ``cumulative_fuel_cost``
  [currency].
* ``outlook`` (tags unit, section): one row at the end of the history:
  ``projected_lost_mwh``, ``projected_fuel_cost`` (to the planned outage, with ``_low`` /
  ``_high``), ``overhaul_payback_years``, ``overhaul_saving_per_year`` [currency/yr],
  ``overhaul_break_even_s`` [s since 1970, UTC].
* ``alarm_events`` rows for the rules ``degradation_rate`` and ``step_change``, evaluated
  at each UTC midnight (and the end of the history). ``degradation_rate``: ``value`` the rate
  [points per 1000 h] where its interval excludes zero, else 0
  (``calc.alarms.rate_alarm_value``), raised below ``-[alarms] rate_limit_per_1000h``, cleared above 80 %
  of it. ``step_change``: ``value`` the net offset of the steps found up to then (a scan of
  the windows before the time) that the scan of the evaluation before also found
  (``_confirmed``), signed (the sum of their sizes; a single step's size) [points], raised below
  ``-[alarms] min_step_points`` (the ``threshold`` written), cleared only when later steps
  up bring it back above half of that (an overhaul, a cleaning, an instrument change) or a
  new baseline starts the steps anew; a slow recovery without a step does not clear it.
"""

from __future__ import annotations

import json
import logging
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from isentrope.calc import alarms, economics, trend
from isentrope.calc.baseline import BaselineModel
from isentrope.calc.economics import OverhaulCase, ProjectedLoss
from isentrope.calc.names import TRENDED_SECTIONS
from isentrope.calc.trend import HOURS_PER_MONTH, Projection, RateResult
from isentrope.daemon.config import DEFAULT_SENSITIVITY
from isentrope.daemon.pipeline import (
    WORK_SHARE,
    Pipeline,
    alarm_event_writes,
    no_events,
)
from isentrope.daemon.series import (
    ALARMS_MEASUREMENT,
    DEGRADATION_MEASUREMENT,
    DEVIATION_MEASUREMENT,
    LOSSES_MEASUREMENT,
    OPERATION_MEASUREMENT,
    OUTLOOK_MEASUREMENT,
    STEPS_MEASUREMENT,
)
from isentrope.daemon.timeutil import epoch_seconds

logger = logging.getLogger(__name__)


#: Window over which the "current" deviation is the median of the steady windows [days]
#: (project choice, no source: long enough to average out day-to-day scatter).
CURRENT_WINDOW_DAYS = 7.0


@dataclass
class SectionOutlook:
    """Everything the analysis found for one section.

    Attributes
    ----------
    section : str
        "hp", "ip", "lp_dry" (LP dry stage group) or "lp" (whole LP, energy balance).
    deviation : pandas.Series
        Deviation of each steady window after the reference period [points], UTC index.
    hours : numpy.ndarray
        Operating hours at each of those windows [h].
    rate : isentrope.calc.trend.RateResult
        Degradation rate over the whole history, blocked at the steps found.
    steps : list of isentrope.calc.trend.Step
        Step changes found, at least ``[alarms] min_step_points`` in size; the time of each is
        the least-squares change point (``detect_steps(..., refine=True)``): the first window
        at the new level.
    current : float
        Current deviation: median over the last ``CURRENT_WINDOW_DAYS`` [points].
    current_u : float
        Standard error of that median from the scatter of those windows (scaled MAD /
        sqrt(n)) [points]: how well the present level is known while the instruments are those
        of the baseline period (a fixed bias cancels in the deviation). The projection's
        interval carries it.
    projection : isentrope.calc.trend.Projection or None
        Deviation at the planned outage, None without a planned outage.
    daily : pandas.DataFrame
        The ``degradation`` rows (see the module docstring).
    losses : pandas.DataFrame or None
        Daily losses (``calc.economics.daily_losses``); None without prices.
    projected_loss : isentrope.calc.economics.ProjectedLoss or None
    overhaul : isentrope.calc.economics.OverhaulCase or None
    deviation_u : pandas.Series or None
        ``deviation_u`` of each window (measurement and baseline-model standard uncertainty,
        k = 1) [points], same index as ``deviation``.
    current_window_u : float
        Median ``deviation_u`` of the windows behind ``current``: the standard uncertainty of
        one window's deviation, i.e. what a change of instrument bias since the baseline
        (recalibration, replacement) could shift the level by, which ``current_u`` does not
        cover [points].
    heat_rate_per_point, output_per_point : float
        Sensitivity coefficients the losses were priced with [% per point]; NaN unpriced.
    pricing : str
        Where they come from (configured, default, or the LP dry group's share of the LP).
    """

    section: str
    deviation: pd.Series
    hours: np.ndarray
    rate: object
    steps: object
    current: float
    current_u: float
    projection: object | None
    daily: pd.DataFrame
    losses: pd.DataFrame | None = None
    projected_loss: object | None = None
    overhaul: object | None = None
    deviation_u: pd.Series | None = None
    current_window_u: float = math.nan
    heat_rate_per_point: float = math.nan
    output_per_point: float = math.nan
    pricing: str = ""


@dataclass
class Analysis:
    """The result of ``analyse``: one ``SectionOutlook`` per section with a baseline."""

    end: pd.Timestamp
    sections: dict[str, SectionOutlook]
    alarm_events: pd.DataFrame
    availability: float
    mean_output_mw: float
    notes: list[str] = field(default_factory=list)

    def writes(self, tags: dict[str, str]) -> list[tuple[str, pd.DataFrame, dict[str, str]]]:
        """The result series as ``(measurement, frame, tags)`` for ``Store.write_results``."""
        out = []
        for name, s in self.sections.items():
            t = {**tags, "section": name}
            if len(s.daily):
                out.append((DEGRADATION_MEASUREMENT, s.daily, t))
            if len(s.steps):
                steps = pd.DataFrame(
                    {
                        "size": [float(x.size) for x in s.steps],
                        "size_u": [float(x.size_u) for x in s.steps],
                        "detected_at_s": [epoch_seconds(x.detected_at) for x in s.steps],
                    },
                    index=pd.DatetimeIndex([pd.Timestamp(x.time) for x in s.steps], name="time"),
                )
                out.append((STEPS_MEASUREMENT, steps[~steps.index.duplicated(keep="last")], t))
            if s.losses is not None and len(s.losses):
                cols = [
                    "deviation",
                    "heat_rate_change",
                    "output_change_mw",
                    "lost_mwh",
                    "fuel_cost",
                    "cumulative_lost_mwh",
                    "cumulative_fuel_cost",
                ]
                out.append((LOSSES_MEASUREMENT, s.losses[cols].astype(float), t))
            row = _outlook_row(s)
            if row:
                out.append(
                    (
                        OUTLOOK_MEASUREMENT,
                        pd.DataFrame(row, index=pd.DatetimeIndex([self.end], name="time")),
                        t,
                    )
                )
        out.extend(alarm_event_writes(self.alarm_events, tags))
        return out


def _outlook_row(s: SectionOutlook) -> dict:
    row = {}
    if s.projected_loss is not None and s.projected_loss.status == "ok":
        p = s.projected_loss
        row.update(
            projected_hours=[float(p.hours)],
            projected_mean_deviation=[float(p.mean_deviation)],
            projected_lost_mwh=[float(p.lost_mwh)],
            projected_lost_mwh_low=[float(p.lost_mwh_low)],
            projected_lost_mwh_high=[float(p.lost_mwh_high)],
            projected_fuel_cost=[float(p.fuel_cost)],
            projected_fuel_cost_low=[float(p.fuel_cost_low)],
            projected_fuel_cost_high=[float(p.fuel_cost_high)],
        )
    if s.overhaul is not None:
        o = s.overhaul
        row.update(
            overhaul_payback_years=[float(o.payback_years)],
            overhaul_payback_hours=[float(o.payback_hours)],
            overhaul_saving_per_hour=[float(o.saving_per_hour)],
            overhaul_saving_per_year=[float(o.saving_per_year)],
            overhaul_break_even_s=[epoch_seconds(o.break_even) if o.break_even is not None else math.nan],
        )
    return row


#: Most points a rate fit sees: longer histories are fitted on group medians
#: (``calc.trend.degradation_rate(max_points=...)``). The analysis fits the rate at every day
#: end; Theil-Sen over the default 2000 group medians took 0.2-0.8 s a fit here, over 150 about
#: 3 ms, so a year is analysed from scratch in seconds (tests/bench/bench_analysis.py). 150
#: medians of a ten-year history are 24 days each (project choice, measured).
RATE_MAX_POINTS = 150

#: Days a day without any steady window takes the last daily deviation for its losses
#: (as ``calc.economics.daily_losses``) [days].
LOSS_FILL_DAYS = 7

_DAY = pd.Timedelta(days=1)
_RECENT_NS = int(CURRENT_WINDOW_DAYS * 86400 * 1e9)


def daily_operation(
    online: pd.Series, output_mw: pd.Series, start: pd.Timestamp, end: pd.Timestamp, hours_before: float = 0.0
) -> pd.DataFrame:
    """Operation per UTC day of ``[start, end)`` from per-sample readings.

    Parameters
    ----------
    online : pandas.Series
        Per-sample bool, True when the unit was online, UTC index [-].
    output_mw : pandas.Series
        Per-sample gross output, same index [MW].
    start, end : pandas.Timestamp
        The period (UTC); its first and last day may be partial.
    hours_before : float
        Operating hours counted before ``start`` [h].

    Returns
    -------
    pandas.DataFrame
        Index: day start (UTC), every day of the period. ``online_hours`` [h]: the interval
        from each sample to the next (left-point rule, as ``calc.trend.operating_hours``), cut
        at the day's end and at ``end``, counted when the sample is online; ``output_mw`` [MW]:
        mean output of the online samples (NaN without any); ``span_h`` [h]: hours of the day
        inside the period; ``hours_start``, ``hours_end`` [h]: cumulative operating hours at
        the day's start and end. Cutting at day ends makes a day's figures depend on that
        day's samples only, so the days of a long period and of many short ones are equal.
    """
    first = start.floor("D")
    days = pd.date_range(first, (end - pd.Timedelta(1, unit="ns")).floor("D"), freq="D")
    on = online[(online.index >= start) & (online.index < end)]
    out = output_mw.reindex(on.index)
    t = on.index.as_unit("ns").asi8
    if len(t):
        nxt = np.append(t[1:], end.value)
        day_end = on.index.floor("D").as_unit("ns").asi8 + _DAY.value
        dt_h = (np.minimum(np.minimum(nxt, day_end), end.value) - t) / 3.6e12
        flag = on.to_numpy(dtype=bool)
        per = pd.DataFrame(
            {
                "online_hours": np.where(flag, dt_h, 0.0),
                "output_mw": np.where(flag, out.to_numpy(float), np.nan),
            },
            index=on.index.floor("D"),
        )
        grouped = per.groupby(level=0, sort=True)
        hours = grouped["online_hours"].sum().reindex(days, fill_value=0.0)
        mean_out = grouped["output_mw"].mean().reindex(days)
    else:
        hours = pd.Series(0.0, index=days)
        mean_out = pd.Series(np.nan, index=days)
    lo = np.maximum(days.as_unit("ns").asi8, start.value)
    hi = np.minimum(days.as_unit("ns").asi8 + _DAY.value, end.value)
    cum = np.cumsum(np.concatenate([[float(hours_before)], hours.to_numpy(dtype=float)]))
    frame = pd.DataFrame(
        {
            "online_hours": hours.to_numpy(dtype=float),
            "output_mw": mean_out.to_numpy(dtype=float),
            "span_h": (hi - lo) / 3.6e12,
            "hours_start": cum[:-1],
            "hours_end": cum[1:],
        },
        index=pd.DatetimeIndex(days, name="time"),
    )
    return frame


def window_hours(times: pd.DatetimeIndex, operation: pd.DataFrame) -> np.ndarray:
    """Operating hours at each time from the daily ``operation`` rows [h]: the hours at the
    start of its day plus that day's online hours in proportion to the part of the day gone
    (of the day's ``span_h``). NaN for a time outside the days given."""
    if not len(times):
        return np.zeros(0)
    day = times.floor("D")
    pos = operation.index.get_indexer(day)
    ok = pos >= 0
    p = np.where(ok, pos, 0)
    frac = np.asarray((times - day) / pd.Timedelta(hours=1), dtype=float) / np.maximum(
        operation["span_h"].to_numpy(dtype=float)[p], 1e-9
    )
    frac = np.clip(frac, 0.0, 1.0)
    h = (
        operation["hours_start"].to_numpy(dtype=float)[p]
        + operation["online_hours"].to_numpy(dtype=float)[p] * frac
    )
    return np.where(ok, h, np.nan)


def _current(dev: pd.Series, end: pd.Timestamp) -> tuple[float, float]:
    recent = dev[dev.index >= end - pd.Timedelta(days=CURRENT_WINDOW_DAYS)].dropna()
    if len(recent) < 3:
        return math.nan, math.nan
    v = recent.to_numpy(dtype=float)
    med = float(np.median(v))
    mad = 1.4826 * float(np.median(np.abs(v - med)))  # normal-consistent MAD (common practice)
    return med, mad / math.sqrt(len(v))


def _rate_until(dev: pd.Series, rel: np.ndarray, steps, t: pd.Timestamp):
    """The degradation rate as it stood at ``t``: the windows at or before ``t``, blocked at
    the steps known by then (``rel``: operating hours of each window since the first)."""

    sel = dev.index <= t
    breaks = [rel[int(s.index)] for s in steps if pd.Timestamp(s.detected_at) <= t] or None
    return trend.degradation_rate(
        rel[sel], dev.to_numpy(dtype=float)[sel], breaks=breaks, max_points=RATE_MAX_POINTS
    )


def _recent(idx_ns: np.ndarray, n: int, t: pd.Timestamp) -> int:
    """First of the ``n`` windows inside the ``CURRENT_WINDOW_DAYS`` before ``t``."""
    return int(np.searchsorted(idx_ns[:n], t.value - _RECENT_NS, side="left"))


def _current_values(values: np.ndarray, idx_ns: np.ndarray, n: int, t: pd.Timestamp) -> tuple[float, float]:
    """``_current`` of the first ``n`` windows at ``t``, on arrays (as ``_current``)."""
    v = values[_recent(idx_ns, n, t) : n]
    v = v[np.isfinite(v)]
    if v.size < 3:
        return math.nan, math.nan
    med = float(np.median(v))
    mad = 1.4826 * float(np.median(np.abs(v - med)))  # normal-consistent MAD (common practice)
    return med, mad / math.sqrt(v.size)


def _window_u_values(u: np.ndarray | None, idx_ns: np.ndarray, n: int, t: pd.Timestamp) -> float:
    """``_window_u`` of the first ``n`` windows at ``t``, on arrays."""
    if u is None:
        return math.nan
    v = u[_recent(idx_ns, n, t) : n]
    v = v[np.isfinite(v)]
    return float(np.median(v)) if v.size >= 3 else math.nan


def _window_u(dev_u: pd.Series | None, end: pd.Timestamp) -> float:
    """Median ``deviation_u`` of the windows ``_current`` takes at ``end`` [points]."""
    if dev_u is None:
        return math.nan
    recent = dev_u[dev_u.index >= end - pd.Timedelta(days=CURRENT_WINDOW_DAYS)].dropna()
    return float(np.median(recent.to_numpy(dtype=float))) if len(recent) >= 3 else math.nan


def _cost_basis(config, notes: list[str]):

    econ = config.economics
    if econ.fuel_price_per_gj is not None and econ.heat_rate_kj_per_kwh is not None:
        return economics.CostBasis(
            heat_rate_kj_per_kwh=float(econ.heat_rate_kj_per_kwh),
            boiler_efficiency=float(econ.boiler_efficiency),
            fuel_price_per_gj=float(econ.fuel_price_per_gj),
            currency=econ.currency,
        )
    notes.append("no fuel price or heat rate in [economics]: costs not computed")
    return None


def _rules(config) -> list:

    a = config.alarms
    return [
        # a rate is a loss when negative: raised below -limit, cleared at 80 % of it
        # (project choice, no source)
        alarms.Rule(
            "degradation_rate",
            alarms.QUANTITY_RATE,
            "below",
            -float(a.rate_limit_per_1000h),
            -0.8 * float(a.rate_limit_per_1000h),
            1,
            1,
            unit="points/1000 h",
            label="degradation rate",
        ),
        # a loss by steps: raised when the net offset of the steps found falls below
        # -min_step_points, cleared when later steps up bring it back above half of that
        # (project choice, no source); a gradual recovery does not clear it
        alarms.Rule(
            "step_change",
            alarms.QUANTITY_STEP,
            "below",
            -float(a.min_step_points),
            -0.5 * float(a.min_step_points),
            1,
            1,
            unit="points",
            label="net step change in the deviation",
        ),
    ]


def _coefficients(name: str, frame: pd.DataFrame, econ, notes: list) -> tuple[float, float, str] | None:
    """Heat-rate and output coefficients of a section [% per point] and their source.

    Configured ones first. The LP dry stage group has no default: it is priced with the whole
    LP's coefficients times its weight in the LP (median over its windows of
    ``calc.sections.stage_group_weight``: its share of the LP's isentropic drop less what the
    stages after it recover), since a point of the group is only that part of a point of
    the LP (``calc.economics.stage_group_coefficient``)."""

    sens = econ.sensitivity.get(name)
    if sens is not None:
        given = name in DEFAULT_SENSITIVITY and sens == DEFAULT_SENSITIVITY[name]
        source = "typical values (from memory)" if given else "configured"
        return sens.heat_rate_percent_per_point, sens.output_percent_per_point, source
    if name != "lp_dry":
        return None
    share = pd.to_numeric(frame.get(WORK_SHARE, pd.Series(dtype=float)), errors="coerce").to_numpy(
        dtype=float
    )
    share = share[np.isfinite(share) & (share > 0) & (share <= 1)]
    whole = econ.sensitivity.get("lp")
    if not len(share) or whole is None:
        notes.append("LP dry stage group not priced: no weight in the LP stored with its deviation")
        return None
    f = float(np.median(share))
    return (
        economics.stage_group_coefficient(whole.heat_rate_percent_per_point, f),
        economics.stage_group_coefficient(whole.output_percent_per_point, f),
        f"whole-LP coefficients x its weight {f:.2f} in the LP",
    )


def _losses(
    dev: pd.Series, days: pd.DatetimeIndex, operation: pd.DataFrame, name: str, basis, coefficients, prev
):
    """Loss rows of ``days`` for one section; the deviation of a day is the mean of its
    windows, or the last such mean of the ``LOSS_FILL_DAYS`` before (windows before the day
    only, so a day's row never changes once the day is over); the day's own online hours and
    mean online output. ``coefficients``: (heat rate, output) [% per point] of ``_coefficients``;
    ``prev``: (lost MWh, fuel cost) accumulated before ``days[0]``."""

    hr_c = {name: coefficients[0]}
    out_c = {name: coefficients[1]}
    lo = days[0] - LOSS_FILL_DAYS * _DAY
    all_days = pd.date_range(lo, days[-1], freq="D")
    part = dev[(dev.index >= lo) & (dev.index < days[-1] + _DAY)]
    daily = part.groupby(part.index.floor("D")).mean().reindex(all_days)
    filled = daily.ffill(limit=LOSS_FILL_DAYS).reindex(days)
    ops = operation.reindex(days)
    hours = ops["online_hours"].fillna(0.0)
    out = ops["output_mw"]
    hr = economics.heat_rate_change(filled, name, coefficients=hr_c)
    dmw = economics.output_change(filled, name, out, coefficients=out_c)
    lost = -dmw * hours
    cost = economics.extra_fuel_rate(hr, out, basis) * hours * basis.fuel_price_per_gj
    cum_lost = np.cumsum(np.concatenate([[prev[0]], lost.fillna(0.0).to_numpy(dtype=float)]))[1:]
    cum_cost = np.cumsum(np.concatenate([[prev[1]], cost.fillna(0.0).to_numpy(dtype=float)]))[1:]
    frame = pd.DataFrame(
        {
            "deviation": filled.to_numpy(dtype=float),
            "heat_rate_change": hr.to_numpy(dtype=float),
            "output_change_mw": dmw.to_numpy(dtype=float),
            "lost_mwh": lost.to_numpy(dtype=float),
            "fuel_cost": cost.to_numpy(dtype=float),
            "cumulative_lost_mwh": cum_lost,
            "cumulative_fuel_cost": cum_cost,
        },
        index=pd.DatetimeIndex(days, name="time"),
    )
    return frame


@dataclass
class _Evaluation:
    """One section's figures as they stood at one time."""

    time: pd.Timestamp
    steps: list
    confirmed: list
    rate: object
    current: float
    current_u: float
    window_u: float
    n_windows: int
    operating_hours: float


def _confirmed(before: list, now: list, idx_ns: np.ndarray) -> list:
    """The steps of a scan (``now``) that the scan at the evaluation before (``before``: the
    previous day end's, or the last final one's for a provisional evaluation) also found,
    within a few windows of the same place and in the same direction.

    Scanning a growing series every day tests it again and again: a correlated wander found
    as a step by one day's scan is mostly gone from the next (measured on the synthetic
    exception-data history: single-day steps of 0.3-0.4 point in the HP and LP, none of them
    injected), while a true step stays. The step alarm watches the confirmed steps only, so
    it comes at the first evaluation after the next midnight whose scan finds the step again:
    within an hour of that midnight on a live worker, at that midnight in a backfill.
    Measured over 200 correlated series of 400 windows (about 50 days, phi 0.9, daily scans;
    tests/daemon/test_step_confirmation.py): a false step alarm on some day in 8.5 % of the
    series without confirmation, 6.0 % with it (1.0 % against 3.5 % at phi 0.5); a -1 point
    step raised in 99.5 % of the series, a median 47 h after it (23 h unconfirmed)."""

    near = trend.DEFAULT_WARMUP_POINTS
    out = []
    for s in now:
        for b in before:
            i = int(np.searchsorted(idx_ns, pd.Timestamp(b.time).value, side="left"))
            if abs(i - int(s.index)) <= near and b.direction == s.direction:
                out.append(s)
                break
    return out


def _steps_to_json(steps) -> list[dict]:
    return [
        {
            "time": pd.Timestamp(s.time).isoformat(),
            "size": float(s.size),
            "size_u": float(s.size_u),
            "direction": s.direction,
            "detected_at": pd.Timestamp(s.detected_at).isoformat(),
        }
        for s in steps
    ]


def _steps_from_json(rows) -> list:

    return [
        trend.Step(
            pd.Timestamp(r["time"]),
            r["size"],
            r["size_u"],
            r["direction"],
            pd.Timestamp(r["detected_at"]),
            -1,
        )
        for r in rows or []
    ]


def _evaluate(dev: pd.Series, dev_u, rel: np.ndarray, times, a, before=None) -> list[_Evaluation]:
    """The section's figures at each of ``times``: the windows before the time, the steps a
    scan of those windows finds (their times and sizes as known then: each time sees only its
    past, so a run split into days gives the figures of one run), the rate blocked at those
    steps, and the steps confirmed by the scan of the time before (``before``: the steps found
    at the evaluation preceding ``times[0]``; see ``_confirmed``). A time with no new window
    reuses the previous scan and fit (the same inputs give the same results)."""

    out = []
    last_key, last_rate = None, None
    idx_ns = dev.index.as_unit("ns").asi8
    values = dev.to_numpy(dtype=float)
    u_values = dev_u.to_numpy(dtype=float) if dev_u is not None else None
    known: dict[int, list] = {}
    before = list(before or [])
    for t in times:
        n = int(np.searchsorted(idx_ns, t.value, side="left"))  # windows before t
        if n not in known:
            known[n] = _find_steps(dev.iloc[:n], rel[:n], a) if n else []
        steps = known[n]
        confirmed = _confirmed(before, steps, idx_ns[:n])
        before = steps
        key = (n, len(steps))
        if key != last_key:
            breaks = [rel[int(s.index)] for s in steps] or None
            last_rate = trend.degradation_rate(rel[:n], values[:n], breaks=breaks, max_points=RATE_MAX_POINTS)
            last_key = key
        c, cu = _current_values(values, idx_ns, n, t)
        out.append(
            _Evaluation(
                time=t,
                steps=steps,
                confirmed=confirmed,
                rate=last_rate,
                current=c,
                current_u=cu,
                window_u=_window_u_values(u_values, idx_ns, n, t),
                n_windows=n,
                operating_hours=float(rel[n - 1]) if n else math.nan,
            )
        )
    return out


def _row(e: _Evaluation) -> dict:
    r = e.rate
    return {
        "time": e.time,
        "rate_per_1000h": r.slope_per_1000h,
        "rate_low": r.low,
        "rate_high": r.high,
        "rate_per_month": r.per_month,
        "rate_intercept": r.intercept,
        "rate_span_h": r.span_h,
        "rate_ok": r.status == "ok",
        "n_windows": float(r.n),
        "operating_hours": e.operating_hours,
        "deviation_now": e.current,
        "deviation_now_u": e.current_u,
        "deviation_now_window_u": e.window_u,
        "step_offset": float(sum(float(s.size) for s in e.steps)),
    }


def _observations(evals: list[_Evaluation], name: str) -> list[dict]:

    obs = []
    for e in evals:
        if e.rate.status == "ok":
            obs.append(
                {
                    "time": e.time,
                    "section": name,
                    "quantity": alarms.QUANTITY_RATE,
                    # the rate where its interval excludes zero, else 0: a wander of correlated
                    # windows is not a trend (calc.alarms.rate_alarm_value)
                    "value": alarms.rate_alarm_value(e.rate),
                    "steady": True,
                }
            )
        # the net offset of the confirmed steps found by then (signed: negative is a loss);
        # it stays while no later step takes it back, so the step alarm stays raised with it
        obs.append(
            {
                "time": e.time,
                "section": name,
                "quantity": alarms.QUANTITY_STEP,
                "value": float(sum(float(s.size) for s in e.confirmed)),
                "steady": True,
            }
        )
    return obs


def _alarm_events(state, obs: list[dict], rules):

    if not obs:
        return dict(state or {}), no_events()
    frame = pd.DataFrame(obs).sort_values(["time", "section", "quantity"], kind="stable")
    return alarms.evaluate_alarms(state or None, frame.reset_index(drop=True), rules)


#: Threads that scan the sections at once. 1 (one after another) by default: measured on two
#: idle cores, a unit-year rebuild took 7.9-8.8 s with one thread and 11.9 s with three (the
#: scans' Python-level work holds the interpreter lock, and numpy's partitions are too short to
#: gain from it). Results are identical either way (tests/daemon/test_analysis.py).
SCAN_THREADS = 1


def _in_threads(func, names: list[str]) -> dict:
    """``{name: func(name)}``, the calls spread over up to ``SCAN_THREADS`` threads."""
    if len(names) < 2 or SCAN_THREADS < 2:
        return {name: func(name) for name in names}
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=min(SCAN_THREADS, len(names)), thread_name_prefix="scan") as pool:
        return dict(zip(names, pool.map(func, names), strict=True))


def _find_steps(dev: pd.Series, rel: np.ndarray, a):

    # the step time is the least-squares change point (the scan's own; with step_method
    # "cusum", refine replaces the point after the CUSUM's last zero, which can fall windows
    # before the cause): a trip's step is placed at the first steady window after the restart,
    # where the loss first shows
    found = trend.detect_steps(
        dev.index,
        dev.to_numpy(dtype=float),
        hours=rel,
        k=float(a.cusum_k),
        h=float(a.cusum_h),
        method=a.step_method,
        threshold=float(a.step_threshold),
        refine=True,
    )
    return [s for s in found if abs(float(s.size)) >= float(a.min_step_points)]


def _day_ends(after: pd.Timestamp, until: pd.Timestamp) -> pd.DatetimeIndex:
    """UTC midnights ``t`` with ``after < t <= until``."""
    first = after.floor("D") + _DAY
    if first > until:
        return pd.DatetimeIndex([], tz="UTC")
    return pd.date_range(first, until.floor("D"), freq="D")


def _clean(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame[~frame.index.duplicated(keep="last")]
    return frame.dropna(axis=1, how="all")


def _sections_input(deviation: dict) -> dict:
    out = {}
    for name in TRENDED_SECTIONS:
        frame = deviation.get(name)
        if frame is None or not len(frame) or "deviation" not in frame:
            continue
        frame = frame.sort_index()
        dev = pd.to_numeric(frame["deviation"], errors="coerce")
        dev = dev[np.isfinite(dev.to_numpy(dtype=float))]
        if not len(dev):
            continue
        dev_u = (
            pd.to_numeric(frame["deviation_u"], errors="coerce").reindex(dev.index)
            if "deviation_u" in frame
            else None
        )
        out[name] = (dev, dev_u)
    return out


@dataclass
class _Step:
    """A step as stored (``steps`` rows), with ``index`` its position among the windows."""

    time: pd.Timestamp
    size: float
    size_u: float
    direction: str
    detected_at: pd.Timestamp
    index: int


def _compute(
    deviation: dict,
    operation: pd.DataFrame,
    config,
    *,
    end: pd.Timestamp,
    final_after: pd.Timestamp | None,
    final_until: pd.Timestamp,
    alarm_state: dict | None,
    cumulative: dict,
    last_steps: dict | None = None,
) -> dict:
    """The analysis rows from ``final_after`` (exclusive; None: from the first window) to
    ``end``: final rows at each UTC midnight up to ``final_until``, provisional ones at
    ``end`` (no I/O). ``operation``: every day's operation rows from the reference start;
    ``cumulative``: section -> (lost MWh, fuel cost) up to ``final_after``."""

    notes: list[str] = []
    a = config.alarms
    econ = config.economics
    basis = _cost_basis(config, notes)
    outage = pd.Timestamp(econ.planned_outage).tz_localize("UTC") if econ.planned_outage is not None else None
    if outage is None:
        notes.append("no planned outage in [economics]: no projection")
    ops = operation[operation.index < end]
    span = float(ops["span_h"].sum()) if len(ops) else 0.0
    on_h = ops["online_hours"].to_numpy(dtype=float) if len(ops) else np.zeros(0)
    availability = float(on_h.sum()) / span if span > 0 else math.nan
    w = np.isfinite(ops["output_mw"].to_numpy(dtype=float)) if len(ops) else np.zeros(0, dtype=bool)
    mean_output = (
        float(np.sum(ops["output_mw"].to_numpy(dtype=float)[w] * on_h[w]) / np.sum(on_h[w]))
        if w.any() and np.sum(on_h[w]) > 0
        else math.nan
    )
    rules = _rules(config)
    sections: dict[str, SectionOutlook] = {}
    final_obs, end_obs = [], []
    rows, losses = {}, {}
    new_cum = {}
    new_last: dict = dict(last_steps or {})
    inputs = {}
    for name, (dev, dev_u) in _sections_input(deviation).items():
        dev = dev[dev.index < end]
        if not len(dev):
            continue
        if dev_u is not None:
            dev_u = dev_u.reindex(dev.index)
        hours = window_hours(pd.DatetimeIndex(dev.index), operation)
        keep = np.isfinite(hours)  # a window on a day without operation rows has no hours
        dev, hours = dev[keep], hours[keep]
        dev_u = dev_u[keep] if dev_u is not None else None
        if not len(dev):
            continue
        rel = hours - hours[0]
        start = final_after if final_after is not None else dev.index[0]
        finals = _day_ends(start, final_until)
        times = list(finals) + ([end] if end > (finals[-1] if len(finals) else start) else [])
        inputs[name] = (dev, dev_u, rel, start, finals, times)

    def scans(name):  # the sections' step scans and rate fits, independent of each other
        dev, dev_u, rel, _, _, times = inputs[name]
        evals = _evaluate(dev, dev_u, rel, times, a, _steps_from_json((last_steps or {}).get(name)))
        # the steps of the whole history: those of the last evaluation when it saw every window
        found = evals[-1].steps if evals and evals[-1].n_windows == len(dev) else _find_steps(dev, rel, a)
        return evals, found

    scanned = _in_threads(scans, list(inputs))
    for name, (dev, dev_u, rel, start, finals, _) in inputs.items():
        evals, found = scanned[name]
        final_evals = [e for e in evals if e.time in finals]
        if final_evals:
            new_last[name] = _steps_to_json(final_evals[-1].steps)
        elif last_steps and name in last_steps:
            new_last[name] = last_steps[name]
        final_obs += _observations(final_evals, name)
        end_obs += _observations([e for e in evals if e.time not in finals], name)
        rows[name] = pd.DataFrame([_row(e) for e in evals]).set_index("time") if evals else None
        last = evals[-1] if evals else _evaluate(dev, dev_u, rel, [end], a)[0]
        rate, current, current_u = last.rate, last.current, last.current_u
        projection = None
        hours_ahead = math.nan
        if outage is not None and outage > end and math.isfinite(availability):
            hours_ahead = (outage - end).total_seconds() / 3600.0 * availability
            if math.isfinite(current):
                projection = trend.project(rate, current, hours_ahead, current_u=current_u)
        if rows[name] is not None and projection is not None and projection.status == "ok":
            rows[name].loc[rows[name].index[-1], ["projected", "projected_low", "projected_high"]] = [
                projection.value,
                projection.low,
                projection.high,
            ]
        out = SectionOutlook(
            section=name,
            deviation=dev,
            hours=rel,
            rate=rate,
            steps=found,
            current=current,
            current_u=current_u,
            projection=projection,
            daily=rows[name] if rows[name] is not None else pd.DataFrame(),
            deviation_u=dev_u,
            current_window_u=last.window_u,
        )
        coefficients = _coefficients(name, deviation.get(name), econ, notes)
        if coefficients is not None:
            out.heat_rate_per_point, out.output_per_point, out.pricing = coefficients
        if basis is not None and coefficients is not None:
            first_day = dev.index[0].floor("D")
            lo = max(first_day, start.floor("D") if final_after is not None else first_day)
            days = pd.date_range(lo, (end - pd.Timedelta(1, unit="ns")).floor("D"), freq="D")
            if len(days):
                prev = cumulative.get(name, (0.0, 0.0))
                losses[name] = _losses(dev, days, operation, name, basis, coefficients, prev)
                final_days = losses[name][losses[name].index + _DAY <= final_until]
                new_cum[name] = (
                    (
                        float(final_days["cumulative_lost_mwh"].iloc[-1]),
                        float(final_days["cumulative_fuel_cost"].iloc[-1]),
                    )
                    if len(final_days)
                    else tuple(prev)
                )
                out.losses = losses[name]
            hr = {name: coefficients[0]}
            oc = {name: coefficients[1]}
            if math.isfinite(hours_ahead) and math.isfinite(current) and math.isfinite(mean_output):
                out.projected_loss = economics.projected_loss(
                    rate,
                    current,
                    hours_ahead,
                    name,
                    output_mw=mean_output,
                    basis=basis,
                    heat_rate_coefficients=hr,
                    output_coefficients=oc,
                )
            case = econ.overhaul.get(name)
            if case is not None and math.isfinite(availability) and math.isfinite(mean_output):
                out.overhaul = economics.overhaul_case(
                    case.recoverable_points,
                    case.cost,
                    name,
                    output_mw=mean_output,
                    basis=basis,
                    operating_hours_per_year=8760.0 * availability,
                    start=outage or end,
                    heat_rate_coefficients=hr,
                    output_coefficients=oc,
                )
        sections[name] = out
    state, final_events = _alarm_events(alarm_state, final_obs, rules)
    _, end_events = _alarm_events(json.loads(json.dumps(state)), end_obs, rules)
    events = (
        pd.concat([e for e in (final_events, end_events) if len(e)])
        if len(final_events) or len(end_events)
        else no_events()
    )
    return {
        "analysis": Analysis(
            end=end,
            sections=sections,
            alarm_events=events,
            availability=availability,
            mean_output_mw=mean_output,
            notes=notes,
        ),
        "alarm_state": state,
        "last_steps": new_last,
        "cumulative": new_cum,
    }


def analyse(
    deviation: dict[str, pd.DataFrame], online: pd.Series, output_mw: pd.Series, config, end: pd.Timestamp
) -> Analysis:
    """Rates, steps, projections, costs and the slow alarms of a unit's whole history, from
    scratch and in memory (what ``run_analysis`` writes for a store, day by day).

    Parameters
    ----------
    deviation : dict of str to pandas.DataFrame
        Section -> stored ``deviation`` rows (UTC index; columns ``deviation`` and
        ``deviation_u`` [points], ``extrapolated``) of the steady windows.
    online : pandas.Series
        Per-sample bool, True when the unit was online (gross output above
        ``[unit] online_mw``), UTC index; gives the operating hours.
    output_mw : pandas.Series
        Per-sample gross output [MW]; each day's mean while online is the output its losses
        apply to.
    config : isentrope.daemon.config.Config
    end : pandas.Timestamp
        End of the history analysed (UTC).

    Returns
    -------
    Analysis
    """
    end = pd.Timestamp(end)
    firsts = [f.index.min() for f in deviation.values() if f is not None and len(f)]
    firsts += [online.index.min()] if len(online) else []
    begin = min(firsts) if firsts else end
    operation = daily_operation(online.astype(bool), output_mw, begin, end)
    return _compute(
        deviation,
        operation,
        config,
        end=end,
        final_after=None,
        final_until=end,
        alarm_state=None,
        cumulative={},
    )["analysis"]


#: Rules of the analysis itself (the per-cycle rules are ``Pipeline.alarm_rules``).
ANALYSIS_RULES = ("degradation_rate", "step_change")


def alarm_series(config) -> list[tuple[str, str]]:
    """Every (section or tag, rule) pair whose ``alarm_events`` series the worker or the
    analysis can write for ``config``: per-tag rules for each mapped role, rules limited to
    some sections for those, the others (and the analysis rules) for each section."""

    roles = [m.role for m in config.mappings]
    out = []
    for rule in Pipeline(config).alarm_rules():
        if rule.quantity == alarms.QUANTITY_TAG_BAD:
            where = roles
        elif rule.sections is not None:
            where = list(rule.sections)
        else:
            where = list(TRENDED_SECTIONS)
        out += [(w, rule.name) for w in where]
    out += [(w, r) for w in TRENDED_SECTIONS for r in ANALYSIS_RULES]
    return out


def raised_alarms(store, config, start: pd.Timestamp, end: pd.Timestamp) -> dict[str, list[tuple]]:
    """Every alarm raised in ``[start, end)`` per section (or tag): ``[(time, rule), ...]``.

    Reads the ``alarm_events`` series of the per-cycle rules and of the analysis.
    """
    out: dict[str, list[tuple]] = {}
    for section, rule in alarm_series(config):
        ev = store.read_results(
            ALARMS_MEASUREMENT, start, end, {"unit": config.unit.name, "section": section, "rule": rule}
        )
        if len(ev) and "raised" in ev:
            for t in ev.index[ev["raised"].to_numpy(dtype=float) > 0.5]:
                out.setdefault(section, []).append((t, rule))
    return {k: sorted(v) for k, v in out.items()}


@dataclass
class PeriodView:
    """One section's figures for a reported period, taken from the whole-history analysis.

    Attributes
    ----------
    section : str
    start, end : pandas.Timestamp
        The period (UTC, end excluded).
    n_windows : int
        Steady windows with a deviation in the period [-].
    deviation_end, deviation_end_u : float
        Deviation at the period end: median of the windows of the ``CURRENT_WINDOW_DAYS``
        before it, and the standard error of that median (scatter of those windows) [points].
    window_u : float
        Median ``deviation_u`` of the same windows: the standard uncertainty of one window's
        deviation from the instrument and baseline-model uncertainties [points].
    rate : isentrope.calc.trend.RateResult
        The rate as it stood at the period end (windows from the baseline end to it).
    steps : list of isentrope.calc.trend.Step
        Steps estimated inside the period.
    lost_mwh, fuel_cost : float
        Sums over the UTC days that overlap the period [MWh], [currency]; NaN without prices.
    cumulative_fuel_cost : float
        Extra fuel cost from the first deviation (the baseline end) to the last of those days
        [currency]; NaN without prices.
    """

    section: str
    start: pd.Timestamp
    end: pd.Timestamp
    n_windows: int
    deviation_end: float
    deviation_end_u: float
    window_u: float
    rate: object
    steps: list
    lost_mwh: float = math.nan
    fuel_cost: float = math.nan
    cumulative_fuel_cost: float = math.nan


def period_view(analysis: Analysis, start: pd.Timestamp, end: pd.Timestamp) -> dict[str, PeriodView]:
    """The figures of ``[start, end)`` per section from a whole-history ``analysis`` (no I/O).

    The rate and the deviation at the period end are those the history up to ``end`` gives;
    costs of the period are the daily losses of the UTC days that overlap it, so they add up
    to the cumulative cost since the baseline.
    """
    start, end = pd.Timestamp(start), pd.Timestamp(end)
    if end <= start:
        raise ValueError(f"period end ({end.isoformat()}) must be after its start ({start.isoformat()})")
    out = {}
    for name, o in analysis.sections.items():
        dev = o.deviation
        until = dev[dev.index < end]
        current, current_u = _current(until, end)
        window_u = _window_u(
            o.deviation_u[o.deviation_u.index < end] if o.deviation_u is not None else None, end
        )
        rate = _rate_until(dev, o.hours, o.steps, end - pd.Timedelta(1, unit="ns"))
        view = PeriodView(
            section=name,
            start=start,
            end=end,
            n_windows=int(((dev.index >= start) & (dev.index < end)).sum()),
            deviation_end=current,
            deviation_end_u=current_u,
            window_u=window_u,
            rate=rate,
            steps=[s for s in o.steps if start <= pd.Timestamp(s.time) < end],
        )
        if o.losses is not None and len(o.losses):
            days = o.losses.index
            part = o.losses[(days < end) & (days + pd.Timedelta(days=1) > start)]
            if len(part):
                view.lost_mwh = float(part["lost_mwh"].sum())
                view.fuel_cost = float(part["fuel_cost"].sum())
                view.cumulative_fuel_cost = float(part["cumulative_fuel_cost"].iloc[-1])
            else:
                view.lost_mwh = view.fuel_cost = 0.0
                before = o.losses[days < end]
                view.cumulative_fuel_cost = (
                    float(before["cumulative_fuel_cost"].iloc[-1]) if len(before) else 0.0
                )
        out[name] = view
    return out


def reference_start(store, config) -> pd.Timestamp | None:
    """Start of the unit's analysed history: the start of the reference period the saved
    baseline models were fitted on (state ``baseline/<unit>``), else ``[baseline] start``;
    None when neither is known."""
    saved = store.load_state(f"baseline/{config.unit.name}") or {}
    text = saved.get("reference_start")
    if text:
        t = pd.Timestamp(text)
        return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
    return config.baseline.start


#: How far past the clock the analysis looks for stored rows when it finds the end of the
#: history itself (clock skew of a historian; project choice, no source).
_READ_AHEAD = pd.Timedelta(days=1)


#: Measurement of the daily operation rows (``daily_operation``): tags unit.

#: Measurements the analysis writes; each run owns them from where its last run was final.
ANALYSIS_MEASUREMENTS = (DEGRADATION_MEASUREMENT, LOSSES_MEASUREMENT)

#: Far end of the period a run owns (InfluxDB's times end in 2262).
_FAR = pd.Timestamp("2200-01-01", tz="UTC")


def state_name(config) -> str:
    """Name of the analysis's saved state: ``analysis/<unit>``."""
    return f"analysis/{config.unit.name}"


def _fingerprint(config, models: dict, ref: pd.Timestamp) -> dict:
    """What the stored analysis rows depend on besides the data: a change of any of it makes
    the next run analyse the whole history again."""
    import dataclasses

    def plain(x):
        return json.loads(json.dumps(dataclasses.asdict(x), default=str, sort_keys=True))

    return {
        "models": {sec: m.model_id for sec, m in sorted(models.items())},
        "reference_start": ref.isoformat(),
        "alarms": plain(config.alarms),
        "economics": plain(config.economics),
        "online_mw": float(config.unit.online_mw),
        "rate_max_points": RATE_MAX_POINTS,
    }


def _delete_from(store, config, since: pd.Timestamp, sections, *, final: bool) -> None:
    """Delete the analysis rows the run owns: the daily rows (at day starts) from ``since``,
    the rows at evaluation times (day ends) and the alarm events after it when ``since`` is
    the last final midnight (``final``), from it otherwise."""
    tags = {"unit": config.unit.name}
    after = since + pd.Timedelta(1, unit="ns") if final else since
    for m in (LOSSES_MEASUREMENT, OPERATION_MEASUREMENT):
        store.delete_results(m, since, _FAR, tags)
    store.delete_results(DEGRADATION_MEASUREMENT, after, _FAR, tags)
    for sec in sections:
        for rule in ANALYSIS_RULES:
            store.delete_results(ALARMS_MEASUREMENT, after, _FAR, {**tags, "section": sec, "rule": rule})


def run_analysis(
    store,
    config,
    end: pd.Timestamp | None = None,
    *,
    final_until: pd.Timestamp | None = None,
    rebuild: bool = False,
    load: bool = True,
) -> Analysis:
    """Bring the stored analysis of a unit up to ``end`` and return it (``load_analysis``;
    with ``load=False`` what this run computed: the rows since the last final day).

    Each run picks up where the saved state ``analysis/<unit>`` says the last one was final
    (a UTC midnight): it deletes the analysis rows from there on (its provisional rows, and
    anything a crashed run left), computes final rows at each midnight up to ``final_until``
    and provisional ones at ``end``, writes them, then saves the state (alarm machines,
    operating hours and costs so far). Rows of earlier days are kept as they stood: the
    ``degradation`` series shows how the estimate evolved. The ``steps`` and ``outlook``
    rows are those of this run only.

    The whole history is analysed again, every analysis row from the reference start
    deleted first, when ``rebuild`` is set (a backfill or refit: the deviations changed) or
    when the baseline models, the reference start or the ``[alarms]``/``[economics]``/online
    settings differ from the state's. The store then reads as if only this run had happened.

    Parameters
    ----------
    store : isentrope.daemon.stores.base.Store
    config : isentrope.daemon.config.Config
    end : pandas.Timestamp or None
        End of the history (UTC, excluded); None: one sample spacing after the last stored
        ``gross_output`` reading.
    final_until : pandas.Timestamp or None
        Days ending at or before this are final; None: ``end``. The worker passes its
        checkpoint less the look-back and one steady window, before which its results no
        longer change.
    rebuild : bool
        Analyse the whole history again.
    load : bool
        Return the stored analysis read back (the default), or only this run's part.

    The baseline models' ids come from the worker's saved state ``baseline/<unit>``; without a
    saved baseline there is nothing to analyse and an empty ``Analysis`` is returned.
    """

    unit = config.unit.name
    tags = {"unit": unit}
    saved = store.load_state(f"baseline/{unit}") or {}
    models = {sec: BaselineModel.from_json(text) for sec, text in sorted(saved.get("models", {}).items())}
    ref = reference_start(store, config)
    if ref is None or not models:
        return Analysis(
            end=pd.Timestamp(end) if end is not None else pd.Timestamp.now(tz="UTC").floor("min"),
            sections={},
            alarm_events=no_events(),
            availability=math.nan,
            mean_output_mw=math.nan,
            notes=["no baseline model saved yet: nothing to analyse"],
        )
    state = store.load_state(state_name(config)) or {}
    key = _fingerprint(config, models, ref)
    if rebuild or state.get("key") != key:
        since = ref.floor("D")  # the first day's rows are at its midnight
        if state.get("key", {}).get("reference_start"):
            since = min(since, pd.Timestamp(state["key"]["reference_start"]).floor("D"))
        _delete_from(store, config, since, TRENDED_SECTIONS, final=False)
        for m in (STEPS_MEASUREMENT, OUTLOOK_MEASUREMENT):
            store.delete_results(m, since, _FAR, tags)
        state = {}
    final = pd.Timestamp(state["final"]) if state.get("final") else None
    read_from = final if final is not None else ref
    if end is not None and pd.Timestamp(end) <= read_from:  # nothing after what is final
        return load_analysis(store, config) if load else Analysis(end, {}, no_events(), math.nan, math.nan)
    gross = [m for m in config.mappings if m.role == "gross_output"]
    ahead = pd.Timestamp.now(tz="UTC") + _READ_AHEAD
    power = store.read(
        gross,
        read_from,
        end if end is not None else ahead,
        barometric_kpa=config.screening.barometric_kpa,
        grid=config.read_grid,  # exception-reported output on the worker's grid: regular samples
    )["gross_output"]
    if end is None:
        spacing = (
            pd.Timedelta(int(np.median(np.diff(power.index.as_unit("ns").asi8))), unit="ns")
            if len(power) > 1
            else pd.Timedelta(0)
        )
        end = power.index[-1] + spacing if len(power) else read_from
    end = pd.Timestamp(end)
    until = min(pd.Timestamp(final_until), end) if final_until is not None else end
    until = until.floor("D")
    if final is not None and until < final:
        until = final  # final days stay final
    new_final = until if until > read_from else final
    if end <= read_from:
        return load_analysis(store, config) if load else Analysis(end, {}, no_events(), math.nan, math.nan)
    power = power[power.index < end]
    online = power > float(config.unit.online_mw)
    new_ops = daily_operation(online, power, read_from, end, hours_before=float(state.get("hours", 0.0)))
    old_ops = (
        store.read_results(OPERATION_MEASUREMENT, ref.floor("D"), read_from, tags)
        if final is not None
        else None
    )
    operation = pd.concat([old_ops, new_ops]) if old_ops is not None and len(old_ops) else new_ops
    deviation = {
        sec: store.read_results(
            DEVIATION_MEASUREMENT, ref, end, {**tags, "section": sec, "model": m.model_id}
        )
        for sec, m in models.items()
    }
    done = _compute(
        deviation,
        operation,
        config,
        end=end,
        final_after=final,
        final_until=until,
        alarm_state=state.get("alarm_state"),
        last_steps=state.get("last_steps"),
        cumulative={k: tuple(v) for k, v in state.get("cumulative", {}).items()},
    )
    result = done["analysis"]
    if final is not None:
        _delete_from(store, config, final, TRENDED_SECTIONS, final=True)
    for m in (STEPS_MEASUREMENT, OUTLOOK_MEASUREMENT):
        store.delete_results(m, ref.floor("D"), _FAR, tags)
    store.write_results(OPERATION_MEASUREMENT, new_ops[new_ops.index >= read_from.floor("D")], tags)
    for measurement, frame, t in result.writes(tags):
        store.write_results(measurement, frame, t)
    last_final = new_ops[new_ops.index + _DAY <= until]
    hours = float(last_final["hours_end"].iloc[-1]) if len(last_final) else float(state.get("hours", 0.0))
    cumulative = {**state.get("cumulative", {}), **{k: list(v) for k, v in done["cumulative"].items()}}
    store.save_state(
        state_name(config),
        {
            "key": key,
            "final": new_final.isoformat() if new_final is not None else None,
            "hours": hours,
            "cumulative": cumulative,
            "alarm_state": done["alarm_state"],
            "last_steps": done["last_steps"],
            "end": end.isoformat(),
        },
    )
    return load_analysis(store, config) if load else result


def _rate_from_row(row: pd.Series):

    def g(k):
        v = row.get(k, math.nan)
        return float(v) if v is not None and pd.notna(v) else math.nan

    ok = g("rate_ok") > 0.5
    f = HOURS_PER_MONTH / 1000.0
    return RateResult(
        "ok" if ok else "insufficient data",
        g("rate_per_1000h"),
        g("rate_low"),
        g("rate_high"),
        g("rate_per_1000h") * f,
        g("rate_low") * f,
        g("rate_high") * f,
        g("rate_intercept"),
        int(g("n_windows")) if math.isfinite(g("n_windows")) else 0,
        g("rate_span_h"),
        "" if ok else "not enough data when last analysed",
    )


def load_analysis(store, config) -> Analysis:
    """The analysis as the last ``run_analysis`` stored it, read back from ``store``: the
    latest ``degradation`` row of each section (rate, current deviation, projection), its
    ``steps``, ``losses`` and ``outlook`` rows and the analysis's alarm events. Nothing is
    computed again except what the stored rows are drawn against (the windows' deviations and
    operating hours). What the demo's summary, the report and ``status`` show."""

    unit = config.unit.name
    tags = {"unit": unit}
    state = store.load_state(state_name(config)) or {}
    saved = store.load_state(f"baseline/{unit}") or {}
    models = {sec: BaselineModel.from_json(text) for sec, text in sorted(saved.get("models", {}).items())}
    ref = reference_start(store, config)
    notes: list[str] = []
    if ref is None or not models or not state.get("end"):
        notes.append(
            "no analysis stored yet" if models else "no baseline model saved yet: nothing to analyse"
        )
        return Analysis(
            end=pd.Timestamp(state["end"]) if state.get("end") else pd.Timestamp.now(tz="UTC").floor("min"),
            sections={},
            alarm_events=no_events(),
            availability=math.nan,
            mean_output_mw=math.nan,
            notes=notes,
        )
    end = pd.Timestamp(state["end"])
    # rows lie at or before the end (reads to a far date would cost an InfluxDB store one
    # query per read_chunk of the empty years)
    until = end + _DAY
    _cost_basis(config, notes)
    if config.economics.planned_outage is None:
        notes.append("no planned outage in [economics]: no projection")
    operation = store.read_results(OPERATION_MEASUREMENT, ref.floor("D"), end, tags)
    on_h = operation["online_hours"].to_numpy(dtype=float) if len(operation) else np.zeros(0)
    span = float(operation["span_h"].sum()) if len(operation) else 0.0
    availability = float(on_h.sum()) / span if span > 0 else math.nan
    out_mw = (
        operation["output_mw"].to_numpy(dtype=float)
        if len(operation) and "output_mw" in operation
        else np.zeros(0)
    )
    w = np.isfinite(out_mw)
    mean_output = (
        float(np.sum(out_mw[w] * on_h[w]) / np.sum(on_h[w])) if w.any() and np.sum(on_h[w]) > 0 else math.nan
    )
    sections = {}
    events = []
    for sec, model in models.items():
        t = {**tags, "section": sec}
        rows = store.read_results(DEGRADATION_MEASUREMENT, ref, until, t)
        if not len(rows):
            continue
        last = rows.iloc[-1]
        frame = store.read_results(DEVIATION_MEASUREMENT, ref, end, {**t, "model": model.model_id})
        dev, dev_u = _sections_input({sec: frame}).get(sec, (pd.Series(dtype=float), None))
        hours = window_hours(pd.DatetimeIndex(dev.index), operation) if len(dev) else np.zeros(0)
        keep = np.isfinite(hours)
        dev, hours = dev[keep], hours[keep]
        dev_u = dev_u[keep] if dev_u is not None else None
        rel = hours - hours[0] if len(hours) else hours
        st = store.read_results(STEPS_MEASUREMENT, ref, until, t)
        steps = [
            _Step(
                time=pd.Timestamp(ts),
                size=float(r["size"]),
                size_u=float(r.get("size_u", math.nan)),
                direction="up" if float(r["size"]) > 0 else "down",
                detected_at=pd.Timestamp(float(r.get("detected_at_s", math.nan)) * 1e9, tz="UTC")
                if pd.notna(r.get("detected_at_s"))
                else pd.Timestamp(ts),
                index=int(
                    min(
                        np.searchsorted(dev.index.as_unit("ns").asi8, pd.Timestamp(ts).value),
                        max(len(dev) - 1, 0),
                    )
                ),
            )
            for ts, r in st.iterrows()
        ]
        proj = None
        if pd.notna(last.get("projected", math.nan)):
            proj = Projection(
                "ok",
                float(last["projected"]),
                float(last["projected_low"]),
                float(last["projected_high"]),
                math.nan,
            )
        o = SectionOutlook(
            section=sec,
            deviation=dev,
            hours=rel,
            rate=_rate_from_row(last),
            steps=steps,
            current=float(last.get("deviation_now", math.nan)),
            current_u=float(last.get("deviation_now_u", math.nan)),
            projection=proj,
            daily=rows,
            deviation_u=dev_u,
            current_window_u=float(last.get("deviation_now_window_u", math.nan)),
        )
        losses = store.read_results(LOSSES_MEASUREMENT, ref.floor("D"), until, t)
        o.losses = losses if len(losses) else None
        ol = store.read_results(OUTLOOK_MEASUREMENT, ref, until, t)
        if len(ol):
            r = ol.iloc[-1]
            if pd.notna(r.get("projected_fuel_cost", math.nan)):
                o.projected_loss = ProjectedLoss(
                    "ok",
                    float(r.get("projected_hours", math.nan)),
                    float(r.get("projected_mean_deviation", math.nan)),
                    *(
                        float(r[k])
                        for k in ("projected_lost_mwh", "projected_lost_mwh_low", "projected_lost_mwh_high")
                    ),
                    *(
                        float(r[k])
                        for k in (
                            "projected_fuel_cost",
                            "projected_fuel_cost_low",
                            "projected_fuel_cost_high",
                        )
                    ),
                )
            if pd.notna(r.get("overhaul_payback_years", math.nan)):
                years = float(r["overhaul_payback_years"])
                be = r.get("overhaul_break_even_s", math.nan)
                o.overhaul = OverhaulCase(
                    float(r.get("overhaul_saving_per_hour", math.nan)),
                    float(r["overhaul_saving_per_year"]),
                    float(r.get("overhaul_payback_hours", math.nan)),
                    years,
                    pd.Timestamp(float(be) * 1e9, tz="UTC") if pd.notna(be) else None,
                    "fuel",
                )
        sections[sec] = o
        for rule in ANALYSIS_RULES:
            ev = store.read_results(ALARMS_MEASUREMENT, ref, until, {**t, "rule": rule})
            if len(ev) and "raised" in ev:
                raised = ev["raised"].to_numpy(dtype=float) > 0.5
                events.append(
                    pd.DataFrame(
                        {
                            "section": sec,
                            "rule": rule,
                            "kind": np.where(raised, "raised", "cleared"),
                            "value": ev["value"].to_numpy(dtype=float) if "value" in ev else math.nan,
                            "threshold": ev["threshold"].to_numpy(dtype=float)
                            if "threshold" in ev
                            else math.nan,
                            "message": "",
                        },
                        index=pd.DatetimeIndex(ev.index, name="time"),
                    )
                )
    alarm_events = pd.concat(events).sort_index(kind="stable") if events else no_events()
    return Analysis(
        end=end,
        sections=sections,
        alarm_events=alarm_events,
        availability=availability,
        mean_output_mw=mean_output,
        notes=notes,
    )
