"""Degradation analysis over the stored history: rates, steps, projections, costs, alarms.

The worker's cycles write per-window deviations from the baseline (measurement ``deviation``).
What a planner needs comes from the whole history of those deviations, not from one cycle:
the degradation rate with its interval, the step changes, the projection to the planned
outage, the cost of the lost efficiency and the payback of an overhaul. ``analyse`` computes
all of it from in-memory inputs (no I/O, deterministic); ``run_analysis`` reads the inputs
of the whole stored history (from the baseline's reference start to the last reading) from a
store, calls ``analyse`` and writes the results back. Re-running it over the same history
gives identical rows at identical times, so the writes replace and never duplicate. It
refuses to write an analysis of part of the history, whose rates, steps and cumulative costs
would overwrite the whole history's; a report of a shorter period takes its figures from the
whole-history analysis with ``period_view``.

Result series (also in DEVELOPERS.md, "Result series"):

* ``degradation`` (tags unit, section): one row per month end (and one at the end of the
  history): ``rate_per_1000h``, ``rate_low``, ``rate_high`` [points per 1000 operating h],
  ``rate_per_month`` [points per 730 operating h], ``rate_ok`` (bool: enough data),
  ``n_windows`` [-], ``operating_hours`` [h since the first deviation], ``deviation_now``
  and ``deviation_now_u`` [points; median of the last week's windows and its standard error
  from their scatter], ``deviation_now_window_u`` [points; median ``deviation_u`` of those
  windows: one window's measurement and model uncertainty], ``projected``,
  ``projected_low``, ``projected_high`` [points at the planned outage; last row only].
* ``steps`` (tags unit, section): one row per step found, at the first window at the new
  level (least-squares change point): ``size``, ``size_u`` [points].
* ``losses`` (tags unit, section): one row per UTC day (``calc.economics.daily_losses``):
  ``deviation`` [points], ``heat_rate_change`` [%], ``output_change_mw`` [MW], ``lost_mwh``
  [MWh], ``fuel_cost`` [currency], ``cumulative_lost_mwh`` [MWh], ``cumulative_fuel_cost``
  [currency].
* ``outlook`` (tags unit, section): one row at the end of the history:
  ``projected_lost_mwh``, ``projected_fuel_cost`` (to the planned outage, with ``_low`` /
  ``_high``), ``overhaul_payback_years``, ``overhaul_saving_per_year`` [currency/yr],
  ``overhaul_break_even_s`` [s since 1970, UTC].
* ``alarm_events`` rows for the rules ``degradation_rate`` and ``step_change``, evaluated
  at each month end (and the end of the history). ``degradation_rate``: ``value`` the rate
  [points per 1000 h] where its interval excludes zero, else 0 (``calc.alarms.rate_alarm_value``), raised below ``-[alarms] rate_limit_per_1000h``, cleared above 80 %
  of it. ``step_change``: ``value`` the net offset of the steps found up to then, signed
  (the sum of their sizes; a single step's size) [points], raised below
  ``-[alarms] min_step_points`` (the ``threshold`` written), cleared only when later steps
  up bring it back above half of that (an overhaul, a cleaning, an instrument change) or a
  new baseline starts the steps anew; a slow recovery without a step does not clear it.

Advisory performance information, not a protective function; the turbine maker's limits,
local codes and licensed engineering practice take precedence.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from isentrope.daemon.pipeline import ALARMS_MEASUREMENT, DEVIATION_MEASUREMENT

logger = logging.getLogger(__name__)

DEGRADATION_MEASUREMENT = "degradation"
STEPS_MEASUREMENT = "steps"
LOSSES_MEASUREMENT = "losses"
OUTLOOK_MEASUREMENT = "outlook"

#: Window over which the "current" deviation is the median of the steady windows [days]
#: (project choice, no source: long enough to average out day-to-day scatter).
CURRENT_WINDOW_DAYS = 7.0

#: Sections analysed, in report order: HP, IP, the LP dry stage group (crossover -> LP
#: extraction) and the whole LP (from the energy balance, where it is mapped).
SECTIONS = ("hp", "ip", "lp_dry", "lp")

_EPOCH = pd.Timestamp("1970-01-01", tz="UTC")


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
    monthly : pandas.DataFrame
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
    monthly: pd.DataFrame
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
            if len(s.monthly):
                out.append((DEGRADATION_MEASUREMENT, s.monthly, t))
            if len(s.steps):
                steps = pd.DataFrame(
                    {"size": [float(x.size) for x in s.steps], "size_u": [float(x.size_u) for x in s.steps]},
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
        ev = self.alarm_events
        if len(ev):
            for (section, rule), part in ev.groupby(["section", "rule"], sort=True):
                frame = pd.DataFrame(
                    {
                        "raised": (part["kind"] == "raised").to_numpy(dtype=bool),
                        "value": pd.to_numeric(part["value"], errors="coerce").to_numpy(dtype=float),
                        "threshold": pd.to_numeric(part["threshold"], errors="coerce").to_numpy(dtype=float),
                    },
                    index=pd.DatetimeIndex(part.index, name="time"),
                )
                out.append((ALARMS_MEASUREMENT, frame, {**tags, "section": str(section), "rule": str(rule)}))
        return out


def _outlook_row(s: SectionOutlook) -> dict:
    row = {}
    if s.projected_loss is not None and s.projected_loss.status == "ok":
        p = s.projected_loss
        row.update(
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
            overhaul_saving_per_year=[float(o.saving_per_year)],
            overhaul_break_even_s=[
                float((pd.Timestamp(o.break_even) - _EPOCH).total_seconds())
                if o.break_even is not None
                else math.nan
            ],
        )
    return row


def _hours_at(times: pd.DatetimeIndex, online: pd.Series) -> np.ndarray:
    """Cumulative operating hours at ``times`` from a per-sample online flag."""
    from isentrope.calc import trend

    if not len(online):
        return np.full(len(times), np.nan)
    cum = trend.operating_hours(online.index, online.to_numpy(dtype=bool))
    pos = np.searchsorted(online.index.asi8, times.asi8, side="right") - 1
    vals = cum.to_numpy(dtype=float)
    out = np.where(pos >= 0, vals[np.clip(pos, 0, len(vals) - 1)], 0.0)
    return out


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
    the steps found up to then (``rel``: operating hours of each window since the first)."""
    from isentrope.calc import trend

    sel = dev.index <= t
    breaks = [rel[int(s.index)] for s in steps if pd.Timestamp(s.time) <= t] or None
    return trend.degradation_rate(rel[sel], dev.to_numpy(dtype=float)[sel], breaks=breaks)


def _window_u(dev_u: pd.Series | None, end: pd.Timestamp) -> float:
    """Median ``deviation_u`` of the windows ``_current`` takes at ``end`` [points]."""
    if dev_u is None:
        return math.nan
    recent = dev_u[dev_u.index >= end - pd.Timedelta(days=CURRENT_WINDOW_DAYS)].dropna()
    return float(np.median(recent.to_numpy(dtype=float))) if len(recent) >= 3 else math.nan


def _month_ends(first: pd.Timestamp, end: pd.Timestamp) -> pd.DatetimeIndex:
    start = (first + pd.offsets.MonthBegin(1)).normalize()
    ends = pd.date_range(start, end, freq="MS", tz="UTC")
    return ends.append(pd.DatetimeIndex([end])).unique().sort_values()


def analyse(
    deviation: dict[str, pd.DataFrame], online: pd.Series, output_mw: pd.Series, config, end: pd.Timestamp
) -> Analysis:
    """Rates, steps, projections, costs and the slow alarms from a unit's history.

    Parameters
    ----------
    deviation : dict of str to pandas.DataFrame
        Section -> stored ``deviation`` rows (UTC index; columns ``deviation`` and
        ``deviation_u`` [points], ``extrapolated``) of the steady windows.
    online : pandas.Series
        Per-sample bool, True when the unit was online (gross output above
        ``[unit] online_mw``), UTC index; gives the operating hours.
    output_mw : pandas.Series
        Per-sample gross output [MW]; its mean while online is the output the losses apply to.
    config : isentrope.daemon.config.Config
    end : pandas.Timestamp
        End of the history analysed (UTC).

    Returns
    -------
    Analysis
    """
    from isentrope.calc import alarms, economics, trend

    end = pd.Timestamp(end)
    notes: list[str] = []
    on = online.astype(bool)
    n_on = int(on.sum())
    availability = n_on / len(on) if len(on) else math.nan
    mean_output = float(output_mw[on].mean()) if n_on else math.nan
    econ = config.economics
    basis = None
    if econ.fuel_price_per_gj is not None and econ.heat_rate_kj_per_kwh is not None:
        basis = economics.CostBasis(
            heat_rate_kj_per_kwh=float(econ.heat_rate_kj_per_kwh),
            boiler_efficiency=float(econ.boiler_efficiency),
            fuel_price_per_gj=float(econ.fuel_price_per_gj),
            currency=econ.currency,
        )
    else:
        notes.append("no fuel price or heat rate in [economics]: costs not computed")
    outage = pd.Timestamp(econ.planned_outage).tz_localize("UTC") if econ.planned_outage is not None else None
    if outage is None:
        notes.append("no planned outage in [economics]: no projection")
    a = config.alarms
    sections: dict[str, SectionOutlook] = {}
    obs_parts = []
    for name in SECTIONS:
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
        hours = _hours_at(pd.DatetimeIndex(dev.index), on)
        h0 = hours[0]
        rel = hours - h0
        # the step time is the least-squares change point (the scan's own; with
        # step_method "cusum", refine replaces the point after the CUSUM's last zero, which
        # can fall windows before the cause): a trip's step is placed at the first steady
        # window after the restart, where the loss first shows
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
        steps = [s for s in found if abs(float(s.size)) >= float(a.min_step_points)]
        breaks = [rel[int(s.index)] for s in steps] if len(steps) else None
        rate = trend.degradation_rate(rel, dev.to_numpy(dtype=float), breaks=breaks)
        current, current_u = _current(dev, end)
        projection = None
        hours_ahead = math.nan
        if outage is not None and outage > end and math.isfinite(availability):
            hours_ahead = (outage - end).total_seconds() / 3600.0 * availability
            if math.isfinite(current):
                projection = trend.project(rate, current, hours_ahead, current_u=current_u)
        # the rate as it stood at each month end (expanding history), for the trend chart and
        # the rate alarm
        rows = []
        for t in _month_ends(dev.index[0], end):
            sel = dev.index <= t
            if sel.sum() == 0:
                continue
            r = _rate_until(dev, rel, steps, t)
            c, cu = _current(dev[sel], t)
            rows.append(
                {
                    "time": t,
                    "rate_per_1000h": r.slope_per_1000h,
                    "rate_low": r.low,
                    "rate_high": r.high,
                    "rate_per_month": r.per_month,
                    "rate_ok": r.status == "ok",
                    "n_windows": float(r.n),
                    "operating_hours": float(rel[sel][-1]),
                    "deviation_now": c,
                    "deviation_now_u": cu,
                    "deviation_now_window_u": _window_u(dev_u[sel] if dev_u is not None else None, t),
                }
            )
            # the net offset of the steps found up to t (signed: negative is a loss); it stays
            # while no later step takes it back, so the step alarm stays raised with it
            step_offset = float(sum(float(s.size) for s in steps if pd.Timestamp(s.time) <= t))
            if r.status == "ok":
                # the rate where its interval excludes zero, else 0: a wander of correlated
                # windows is not a trend (calc.alarms.rate_alarm_value)
                obs_parts.append(
                    {
                        "time": t,
                        "section": name,
                        "quantity": alarms.QUANTITY_RATE,
                        "value": alarms.rate_alarm_value(r),
                        "steady": True,
                    }
                )
            obs_parts.append(
                {
                    "time": t,
                    "section": name,
                    "quantity": alarms.QUANTITY_STEP,
                    "value": step_offset,
                    "steady": True,
                }
            )
        monthly = pd.DataFrame(rows).set_index("time")
        monthly.index = pd.DatetimeIndex(monthly.index, name="time")
        if projection is not None and projection.status == "ok":
            monthly.loc[monthly.index[-1], ["projected", "projected_low", "projected_high"]] = [
                projection.value,
                projection.low,
                projection.high,
            ]
        out = SectionOutlook(
            section=name,
            deviation=dev,
            hours=rel,
            rate=rate,
            steps=steps,
            current=current,
            current_u=current_u,
            projection=projection,
            monthly=monthly,
            deviation_u=dev_u,
            current_window_u=_window_u(dev_u, end),
        )
        coefficients = _coefficients(name, frame, econ, notes)
        if coefficients is not None:
            out.heat_rate_per_point, out.output_per_point, out.pricing = coefficients
        if basis is not None and math.isfinite(mean_output) and coefficients is not None:
            hr = {name: coefficients[0]}
            oc = {name: coefficients[1]}
            daily_online = on.groupby(on.index.floor("D")).sum() * _sample_hours(on)
            out.losses = economics.daily_losses(
                dev,
                name,
                output_mw=mean_output,
                basis=basis,
                online_hours=daily_online,
                heat_rate_coefficients=hr,
                output_coefficients=oc,
            )
            if math.isfinite(hours_ahead) and math.isfinite(current):
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
            if case is not None and math.isfinite(availability):
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
    rules = [
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
    if obs_parts:
        obs = pd.DataFrame(obs_parts).sort_values(["time", "section", "quantity"], kind="stable")
        _, events = alarms.evaluate_alarms(None, obs.reset_index(drop=True), rules)
    else:
        events = pd.DataFrame(
            columns=["section", "rule", "kind", "value", "threshold", "message"],
            index=pd.DatetimeIndex([], tz="UTC", name="time"),
        )
    return Analysis(
        end=end,
        sections=sections,
        alarm_events=events,
        availability=availability,
        mean_output_mw=mean_output,
        notes=notes,
    )


def _coefficients(name: str, frame: pd.DataFrame, econ, notes: list) -> tuple[float, float, str] | None:
    """Heat-rate and output coefficients of a section [% per point] and their source.

    Configured ones first. The LP dry stage group has no default: it is priced with the whole
    LP's coefficients times its weight in the LP (median over its windows of
    ``calc.sections.stage_group_weight``: its share of the LP's isentropic drop less what the
    stages after it recover), since a point of the group is only that part of a point of
    the LP (``calc.economics.stage_group_coefficient``)."""
    from isentrope.calc import economics
    from isentrope.daemon.config import DEFAULT_SENSITIVITY
    from isentrope.daemon.pipeline import WORK_SHARE

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


def _sample_hours(series: pd.Series) -> float:
    """Typical sample spacing of a per-sample series [h]."""
    if len(series) < 2:
        return 0.0
    return float(np.median(np.diff(series.index.asi8))) / 3.6e12


#: Rules of the analysis itself (the per-cycle rules are ``Pipeline.alarm_rules``).
ANALYSIS_RULES = ("degradation_rate", "step_change")


def alarm_series(config) -> list[tuple[str, str]]:
    """Every (section or tag, rule) pair whose ``alarm_events`` series the worker or the
    analysis can write for ``config``: per-tag rules for each mapped role, rules limited to
    some sections for those, the others (and the analysis rules) for each section."""
    from isentrope.calc import alarms
    from isentrope.daemon.pipeline import Pipeline

    roles = [m.role for m in config.mappings]
    out = []
    for rule in Pipeline(config).alarm_rules():
        if rule.quantity == alarms.QUANTITY_TAG_BAD:
            where = roles
        elif rule.sections is not None:
            where = list(rule.sections)
        else:
            where = list(SECTIONS)
        out += [(w, rule.name) for w in where]
    out += [(w, r) for w in SECTIONS for r in ANALYSIS_RULES]
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


def run_analysis(
    store, config, start: pd.Timestamp | None = None, end: pd.Timestamp | None = None, *, write: bool = True
) -> Analysis:
    """Read a unit's deviations and online history from ``store``, analyse, write back.

    The analysis always belongs to the whole history: rates, steps, the cumulative cost and
    the alarm machines start at the baseline and run to the end of the stored history, and
    its rows (``degradation``, ``steps``, ``losses``, ``outlook``, ``alarm_events``) are
    that history's. A report of a shorter period takes its figures from this analysis
    (``period_view``); it never analyses the period alone.

    Parameters
    ----------
    store : isentrope.daemon.stores.base.Store
    config : isentrope.daemon.config.Config
    start : pandas.Timestamp or None
        Start of the history (UTC); None: ``reference_start`` (the baseline's reference start).
    end : pandas.Timestamp or None
        End of the history (UTC, excluded); None: one sample spacing after the last stored
        ``gross_output`` reading.
    write : bool
        Write the result series back (the default). Only an analysis of the whole history is
        written: with ``start`` after the reference start, or stored ``deviation`` rows at or
        after ``end``, it raises ``ValueError`` instead (nothing is written); pass
        ``write=False`` for an as-of analysis that is only returned.

    The baseline models' ids come from the worker's saved state ``baseline/<unit>``; without a
    saved baseline there is nothing to analyse and an empty ``Analysis`` is returned.
    """
    from isentrope.calc.baseline import BaselineModel

    unit = config.unit.name
    tags = {"unit": unit}
    saved = store.load_state(f"baseline/{unit}")
    models = {
        sec: BaselineModel.from_json(text) for sec, text in sorted((saved or {}).get("models", {}).items())
    }
    ref = reference_start(store, config)
    ahead = pd.Timestamp.now(tz="UTC") + _READ_AHEAD
    start = pd.Timestamp(start) if start is not None else ref
    end = pd.Timestamp(end) if end is not None else None
    if start is None or not models:
        empty = analyse(
            {},
            pd.Series([], dtype=bool, index=pd.DatetimeIndex([], tz="UTC")),
            pd.Series([], dtype=float, index=pd.DatetimeIndex([], tz="UTC")),
            config,
            end if end is not None else pd.Timestamp.now(tz="UTC").floor("min"),
        )
        empty.notes.append("no baseline model saved yet: nothing to analyse")
        return empty
    gross = [m for m in config.mappings if m.role == "gross_output"]
    power = store.read(
        gross,
        start,
        end if end is not None else ahead,
        barometric_kpa=config.screening.barometric_kpa,
        grid=config.read_grid,  # exception-reported output on the worker's grid: regular samples
    )["gross_output"]
    if end is None:
        spacing = (
            pd.Timedelta(int(np.median(np.diff(power.index.asi8))), unit="ns")
            if len(power) > 1
            else pd.Timedelta(0)
        )
        end = power.index[-1] + spacing if len(power) else start
    if write:
        left_out = []
        if ref is not None and start > ref:
            left_out.append(f"it starts at {start.isoformat()}, after the reference start {ref.isoformat()}")
        later = {
            sec: store.read_results(
                DEVIATION_MEASUREMENT,
                end,
                max(ahead, end + _READ_AHEAD),
                {**tags, "section": sec, "model": model.model_id},
            )
            for sec, model in models.items()
        }
        later = {sec: frame.index.min() for sec, frame in later.items() if len(frame)}
        if later:
            left_out.append(
                f"stored deviation rows ({', '.join(later)}) from {min(later.values()).isoformat()} "
                f"lie at or after its end {end.isoformat()}"
            )
        if left_out:
            raise ValueError(
                "run_analysis: not writing a partial analysis over the stored one ("
                + "; ".join(left_out)
                + "): analyse the whole history (no start/end) or pass "
                "write=False"
            )
    deviation = {}
    for sec, model in models.items():
        deviation[sec] = store.read_results(
            DEVIATION_MEASUREMENT, start, end, {**tags, "section": sec, "model": model.model_id}
        )
    power = power[power.index < end]
    online = power > float(config.unit.online_mw)
    result = analyse(deviation, online, power, config, end)
    if write:
        for measurement, frame, t in result.writes(tags):
            store.write_results(measurement, frame, t)
    return result
