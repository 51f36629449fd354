"""What lost section efficiency costs: heat rate, output, fuel, and the case for an overhaul.

A section's deviation from its baseline [percentage points] moves the turbine cycle heat rate
and the output through sensitivity coefficients. The defaults below are typical values for
large reheat units recalled from the trade literature (*from memory*); **the unit's own heat
balance (the turbine maker's correction curves or a cycle model) should replace them**, since
they depend on the cycle, the load and the section's place in it.

Two ways to pay for the loss are reported side by side, never added:

* at the same output, more fuel: extra fuel energy [GJ] and its cost, from the heat-rate
  change, the heat-rate basis and the boiler efficiency;
* at the same fuel (valves wide open, boiler limited), less output: lost energy [MWh].

Sign convention: deviation < 0 is a loss; heat-rate change > 0, output change < 0, lost MWh
> 0, extra fuel and fuel cost > 0 are losses. A deviation above baseline gives the opposite
signs (a gain).

These figures are planning estimates: they do not replace the unit's heat balance or a
performance test to a code such as ASME PTC 6, and they do not weigh inspection findings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Turbine heat-rate change per percentage point of section efficiency [% per point].
#: From memory: HP 0.15-0.25, IP 0.10-0.20, LP 0.40-0.50 for large reheat units; the
#: midpoints are used. Replace with the unit's own heat balance.
HEAT_RATE_PCT_PER_POINT: dict[str, float] = {"hp": 0.20, "ip": 0.15, "lp": 0.45}
# The LP figures are per point of the *whole* LP (crossover to exhaust). The LP dry stage
# group (crossover to an LP extraction) is priced by its weight in the LP
# (``stage_group_coefficient``), not with these.

#: Output change per percentage point of section efficiency [% of output per point].
#: From memory: HP 0.25-0.3, IP 0.2-0.3, LP about 0.5; midpoints. Replace with the unit's
#: own heat balance.
OUTPUT_PCT_PER_POINT: dict[str, float] = {"hp": 0.275, "ip": 0.25, "lp": 0.50}

#: kJ per GJ.
_KJ_PER_GJ = 1.0e6


def stage_group_coefficient(whole_section_per_point, weight):
    """Sensitivity per point of a stage group's efficiency from the whole section's.

    One point of the group's efficiency is ``weight`` points of the whole section's
    (``isentrope.calc.sections.stage_group_weight``: the group's share of the section's
    isentropic drop, less what the stages after it recover), so its heat-rate and output
    coefficients are ``weight`` times the section's.

    Parameters
    ----------
    whole_section_per_point : float or array_like
        Heat-rate [% per point] or output [% per point] coefficient of the whole section.
    weight : float or array_like
        Points of the section's efficiency per point of the group's, in (0, 1] [-].

    Returns
    -------
    float or ndarray
        The coefficient per point of the group's efficiency, in the unit of
        ``whole_section_per_point``.

    Raises
    ------
    ValueError
        When a share lies outside (0, 1].
    """
    share = np.asarray(weight, dtype=float)
    if not np.all(np.isfinite(share) & (share > 0) & (share <= 1)):
        raise ValueError(f"weight: expected numbers in (0, 1], found {weight!r}")
    out = np.asarray(whole_section_per_point, dtype=float) * share
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class CostBasis:
    """Prices and plant figures that turn heat rate into money.

    Attributes
    ----------
    heat_rate_kj_per_kwh : float
        Turbine cycle heat rate the percentages apply to, at the reference output [kJ/kWh].
    boiler_efficiency : float
        Boiler (steam generator) efficiency, fuel energy to steam [fraction, 0-1].
    fuel_price_per_gj : float
        Fuel price per unit of fuel energy on the same (higher or lower heating value)
        basis as the boiler efficiency [currency/GJ].
    power_price_per_mwh : float or None
        Value of lost output, e.g. the replacement power price [currency/MWh]; None when
        unknown (the lost output is then reported in MWh only).
    currency : str
        Currency label for reports.
    """

    heat_rate_kj_per_kwh: float
    boiler_efficiency: float
    fuel_price_per_gj: float
    power_price_per_mwh: float | None = None
    currency: str = ""

    def __post_init__(self):
        if not (math.isfinite(self.heat_rate_kj_per_kwh) and self.heat_rate_kj_per_kwh > 0):
            raise ValueError(
                f"heat_rate_kj_per_kwh must be a positive number of kJ/kWh; found {self.heat_rate_kj_per_kwh!r}"
            )
        if not (0.0 < self.boiler_efficiency <= 1.0):
            raise ValueError(
                f"boiler_efficiency must be a fraction in (0, 1]; found {self.boiler_efficiency!r}"
            )
        if not (math.isfinite(self.fuel_price_per_gj) and self.fuel_price_per_gj >= 0):
            raise ValueError(f"fuel_price_per_gj must be a number >= 0; found {self.fuel_price_per_gj!r}")
        if self.power_price_per_mwh is not None and not (
            math.isfinite(self.power_price_per_mwh) and self.power_price_per_mwh >= 0
        ):
            raise ValueError(
                f"power_price_per_mwh must be a number >= 0 or None; found {self.power_price_per_mwh!r}"
            )


def _coefficient(table: dict[str, float], section: str, coefficients: dict | None, what: str) -> float:
    source = table if coefficients is None else {**table, **coefficients}
    try:
        c = float(source[section])
    except KeyError:
        raise ValueError(f"no {what} coefficient for section {section!r}; known: {sorted(source)}") from None
    if not math.isfinite(c):
        raise ValueError(f"{what} coefficient for {section!r} must be finite; found {c!r}")
    return c


def heat_rate_change(deviation, section: str, *, coefficients: dict | None = None):
    """Turbine heat-rate change caused by a section's deviation.

    Parameters
    ----------
    deviation : float, array_like or pandas.Series
        Section efficiency deviation from baseline [percentage points].
    section : str
        ``"hp"``, ``"ip"`` or ``"lp"`` (or any key of ``coefficients``).
    coefficients : dict or None
        Section -> heat-rate change per point [% per point], overriding
        ``HEAT_RATE_PCT_PER_POINT``.

    Returns
    -------
    same type as ``deviation``
        Heat-rate change [% of heat rate]; positive is worse.
    """
    c = _coefficient(HEAT_RATE_PCT_PER_POINT, section, coefficients, "heat-rate")
    return -c * deviation


def output_change(deviation, section: str, output_mw, *, coefficients: dict | None = None):
    """Output change caused by a section's deviation.

    Parameters
    ----------
    deviation : float, array_like or pandas.Series
        Section efficiency deviation from baseline [percentage points].
    section : str
        ``"hp"``, ``"ip"`` or ``"lp"`` (or any key of ``coefficients``).
    output_mw : float, array_like or pandas.Series
        Output the percentage applies to, normally gross output at the time [MW].
    coefficients : dict or None
        Section -> output change per point [% of output per point], overriding
        ``OUTPUT_PCT_PER_POINT``.

    Returns
    -------
    same type as ``deviation``
        Output change [MW]; negative is lost output.
    """
    c = _coefficient(OUTPUT_PCT_PER_POINT, section, coefficients, "output")
    return c / 100.0 * deviation * output_mw


def extra_fuel_rate(heat_rate_change_pct, output_mw, basis: CostBasis):
    """Extra fuel energy per hour at the same output.

    Parameters
    ----------
    heat_rate_change_pct : float, array_like or pandas.Series
        Turbine heat-rate change [%].
    output_mw : float, array_like or pandas.Series
        Output [MW].
    basis : CostBasis
        Heat rate [kJ/kWh] and boiler efficiency [fraction].

    Returns
    -------
    same type as the inputs
        Extra fuel energy [GJ/h] = output [kW] x heat rate [kJ/kWh] x change / 100
        / boiler efficiency / 1e6.
    """
    return (
        output_mw
        * 1000.0
        * basis.heat_rate_kj_per_kwh
        * heat_rate_change_pct
        / 100.0
        / basis.boiler_efficiency
        / _KJ_PER_GJ
    )


def fuel_cost_rate(heat_rate_change_pct, output_mw, basis: CostBasis):
    """Cost per hour of the extra fuel at the same output [currency/h]; see ``extra_fuel_rate``."""
    return extra_fuel_rate(heat_rate_change_pct, output_mw, basis) * basis.fuel_price_per_gj


def daily_losses(
    deviation: pd.Series,
    section: str,
    *,
    output_mw,
    basis: CostBasis,
    online_hours: pd.Series | None = None,
    heat_rate_coefficients: dict | None = None,
    output_coefficients: dict | None = None,
    fill_days: int = 7,
) -> pd.DataFrame:
    """Daily lost output and fuel cost of one section, and their totals since the first day.

    Parameters
    ----------
    deviation : pandas.Series
        Deviation of each steady window, UTC DatetimeIndex [percentage points]. NaN
        (extrapolated, flagged) windows are ignored.
    section : str
        ``"hp"``, ``"ip"`` or ``"lp"``.
    output_mw : float or pandas.Series
        Output the losses apply to: a constant, or a series (UTC DatetimeIndex) whose daily
        mean is used [MW].
    basis : CostBasis
        Heat rate, boiler efficiency and prices.
    online_hours : pandas.Series or None
        Hours online per UTC day (index: day start) [h]; None assumes 24 h every day.
    heat_rate_coefficients, output_coefficients : dict or None
        Overrides of the sensitivity coefficients [% per point].
    fill_days : int
        A day without any valid window takes the last known daily deviation for at most
        this many days (``filled`` is then True); past that the day is NaN and counts as
        zero in the totals (``covered`` False) [days].

    Returns
    -------
    pandas.DataFrame
        One row per UTC day from the first to the last window, columns ``deviation``
        [points], ``filled``, ``covered`` [bool], ``online_hours`` [h],
        ``heat_rate_change`` [%], ``output_change_mw`` [MW], ``lost_mwh`` [MWh],
        ``extra_fuel_gj`` [GJ], ``fuel_cost`` [currency], ``lost_output_value`` [currency;
        NaN without a power price], ``cumulative_lost_mwh`` [MWh],
        ``cumulative_fuel_cost`` [currency].
    """
    if not isinstance(deviation, pd.Series) or not isinstance(deviation.index, pd.DatetimeIndex):
        raise ValueError("daily_losses needs the deviation as a Series with a UTC DatetimeIndex")
    if deviation.index.tz is None:
        raise ValueError("daily_losses needs a timezone-aware (UTC) index")
    if fill_days < 0:
        raise ValueError(f"fill_days must be >= 0; found {fill_days!r}")
    dev = deviation.astype(float).dropna()
    columns = [
        "deviation",
        "filled",
        "covered",
        "online_hours",
        "heat_rate_change",
        "output_change_mw",
        "lost_mwh",
        "extra_fuel_gj",
        "fuel_cost",
        "lost_output_value",
        "cumulative_lost_mwh",
        "cumulative_fuel_cost",
    ]
    if dev.empty:
        return pd.DataFrame(columns=columns, index=pd.DatetimeIndex([], tz="UTC", name="day"), dtype=float)
    dev = dev.tz_convert("UTC")
    daily = dev.resample("1D").mean()
    have = daily.notna()
    filled_dev = daily.ffill(limit=fill_days) if fill_days > 0 else daily
    filled = (~have) & filled_dev.notna()
    covered = filled_dev.notna()
    days = daily.index
    if isinstance(output_mw, pd.Series):
        if not isinstance(output_mw.index, pd.DatetimeIndex) or output_mw.index.tz is None:
            raise ValueError("output_mw as a Series needs a timezone-aware (UTC) DatetimeIndex")
        out = output_mw.astype(float).tz_convert("UTC").resample("1D").mean().reindex(days)
    else:
        out = pd.Series(float(output_mw), index=days)
    if online_hours is None:
        hours = pd.Series(24.0, index=days)
    else:
        hours = online_hours.astype(float).reindex(days)
        if hours.isna().any():
            missing = list(days[hours.isna()][:3].strftime("%Y-%m-%d"))
            raise ValueError(
                f"online_hours has no value for day(s) {missing}...; give every day from {days[0]:%Y-%m-%d} to {days[-1]:%Y-%m-%d}"
            )
    hr = heat_rate_change(filled_dev, section, coefficients=heat_rate_coefficients)
    dmw = output_change(filled_dev, section, out, coefficients=output_coefficients)
    lost_mwh = -dmw * hours
    fuel_gj = extra_fuel_rate(hr, out, basis) * hours
    cost = fuel_gj * basis.fuel_price_per_gj
    value = (
        lost_mwh * basis.power_price_per_mwh if basis.power_price_per_mwh is not None else lost_mwh * np.nan
    )
    frame = pd.DataFrame(
        {
            "deviation": filled_dev,
            "filled": filled.astype(bool),
            "covered": covered.astype(bool),
            "online_hours": hours,
            "heat_rate_change": hr,
            "output_change_mw": dmw,
            "lost_mwh": lost_mwh,
            "extra_fuel_gj": fuel_gj,
            "fuel_cost": cost,
            "lost_output_value": value,
            "cumulative_lost_mwh": lost_mwh.fillna(0.0).cumsum(),
            "cumulative_fuel_cost": cost.fillna(0.0).cumsum(),
        },
        index=days,
        columns=columns,
    )
    frame.index.name = "day"
    return frame


def operating_hours_until(now, date, *, online_fraction: float = 1.0) -> float:
    """Expected operating hours from ``now`` to ``date`` (e.g. the planned outage).

    Parameters
    ----------
    now, date : timestamp
        Start and end [UTC; naive times are taken as UTC].
    online_fraction : float
        Expected share of the calendar time online [fraction, 0-1].

    Returns
    -------
    float
        Calendar hours times ``online_fraction`` [h]; 0 when ``date`` is not after ``now``.
    """
    if not 0.0 <= online_fraction <= 1.0:
        raise ValueError(f"online_fraction must lie in [0, 1]; found {online_fraction!r}")
    a, b = pd.Timestamp(now), pd.Timestamp(date)
    a = a.tz_localize("UTC") if a.tzinfo is None else a
    b = b.tz_localize("UTC") if b.tzinfo is None else b
    return max(0.0, (b - a) / pd.Timedelta(hours=1)) * online_fraction


@dataclass(frozen=True)
class ProjectedLoss:
    """Loss from now to a date, with the deviation following the degradation rate.

    Attributes
    ----------
    status : str
        ``"ok"`` or ``"insufficient data"`` (numbers NaN).
    hours : float
        Operating hours to the date [h].
    mean_deviation : float
        Mean deviation over the period on the projected line [points].
    lost_mwh, lost_mwh_low, lost_mwh_high : float
        Lost output energy, central and at the rate interval [MWh].
    fuel_cost, fuel_cost_low, fuel_cost_high : float
        Extra fuel cost at the same output, central and at the rate interval [currency].
    """

    status: str
    hours: float
    mean_deviation: float
    lost_mwh: float
    lost_mwh_low: float
    lost_mwh_high: float
    fuel_cost: float
    fuel_cost_low: float
    fuel_cost_high: float


def projected_loss(
    rate,
    current_deviation: float,
    hours_to_date: float,
    section: str,
    *,
    output_mw: float,
    basis: CostBasis,
    heat_rate_coefficients: dict | None = None,
    output_coefficients: dict | None = None,
) -> ProjectedLoss:
    """Lost output and fuel cost from now to a date (the planned outage).

    Parameters
    ----------
    rate : isentrope.calc.trend.RateResult or float
        Degradation rate [points per 1000 operating hours]; a RateResult also gives the
        interval.
    current_deviation : float
        Deviation now [points].
    hours_to_date : float
        Operating hours from now to the date [h].
    section : str
        ``"hp"``, ``"ip"`` or ``"lp"``.
    output_mw : float
        Mean output while online [MW].
    basis : CostBasis
        Heat rate, boiler efficiency, prices.
    heat_rate_coefficients, output_coefficients : dict or None
        Overrides of the sensitivity coefficients [% per point].

    Returns
    -------
    ProjectedLoss
        The deviation runs on ``current + rate * h / 1000``; losses are linear in it, so
        the totals use its mean over the period, ``current + rate * H / 2000``. The "low"
        loss uses the slower end of the rate interval (the interval bound nearer zero
        loss), "high" the faster end.
    """
    if not (math.isfinite(hours_to_date) and hours_to_date >= 0):
        raise ValueError(f"hours_to_date must be a finite number of hours >= 0; found {hours_to_date!r}")
    if hasattr(rate, "slope_per_1000h"):
        ok = rate.status == "ok"
        slopes = (rate.slope_per_1000h, rate.low, rate.high)
    else:
        ok = math.isfinite(float(rate))
        slopes = (float(rate),) * 3
    nan = float("nan")
    if not ok or not math.isfinite(current_deviation):
        return ProjectedLoss("insufficient data", float(hours_to_date), nan, nan, nan, nan, nan, nan, nan)

    def totals(slope):
        mean_dev = current_deviation + slope * hours_to_date / 2000.0
        mwh = -output_change(mean_dev, section, output_mw, coefficients=output_coefficients) * hours_to_date
        cost = (
            fuel_cost_rate(
                heat_rate_change(mean_dev, section, coefficients=heat_rate_coefficients), output_mw, basis
            )
            * hours_to_date
        )
        return mean_dev, float(mwh), float(cost)

    mean_dev, mwh, cost = totals(slopes[0])
    _, mwh_a, cost_a = totals(slopes[1])
    _, mwh_b, cost_b = totals(slopes[2])
    return ProjectedLoss(
        "ok",
        float(hours_to_date),
        float(mean_dev),
        mwh,
        min(mwh_a, mwh_b),
        max(mwh_a, mwh_b),
        cost,
        min(cost_a, cost_b),
        max(cost_a, cost_b),
    )


@dataclass(frozen=True)
class OverhaulCase:
    """The payback of an overhaul.

    Attributes
    ----------
    saving_per_hour : float
        Value recovered per operating hour [currency/h].
    saving_per_year : float
        The same per year at ``operating_hours_per_year`` [currency/year].
    payback_hours : float
        Operating hours until the savings equal the cost [h]; inf when nothing is saved.
    payback_years : float
        ``payback_hours / operating_hours_per_year`` [years].
    break_even : pandas.Timestamp or None
        ``start`` plus the payback in calendar time (365.25-day years), when ``start`` is
        given and the payback is finite.
    basis_of_value : str
        ``"fuel"`` or ``"output"``.
    """

    saving_per_hour: float
    saving_per_year: float
    payback_hours: float
    payback_years: float
    break_even: pd.Timestamp | None
    basis_of_value: str


def overhaul_case(
    recoverable_points: float,
    overhaul_cost: float,
    section: str,
    *,
    output_mw: float,
    basis: CostBasis,
    operating_hours_per_year: float,
    start=None,
    value: str = "fuel",
    heat_rate_coefficients: dict | None = None,
    output_coefficients: dict | None = None,
) -> OverhaulCase:
    """Payback time and break-even date of an overhaul that recovers some efficiency.

    Parameters
    ----------
    recoverable_points : float
        Section efficiency the overhaul is expected to recover [percentage points, > 0].
    overhaul_cost : float
        Cost of the overhaul, including the outage if wanted [currency].
    section : str
        ``"hp"``, ``"ip"`` or ``"lp"``.
    output_mw : float
        Mean output while online [MW].
    basis : CostBasis
        Heat rate, boiler efficiency, prices.
    operating_hours_per_year : float
        Expected operating hours per year after the overhaul [h/year].
    start : timestamp or None
        Return to service after the overhaul [UTC]; gives the break-even date.
    value : str
        ``"fuel"`` (default): the saving is the fuel no longer burnt at the same output.
        ``"output"``: the saving is the recovered output sold at ``basis.power_price_per_mwh``.
    heat_rate_coefficients, output_coefficients : dict or None
        Overrides of the sensitivity coefficients [% per point].

    Returns
    -------
    OverhaulCase

    Notes
    -----
    Simple payback: a constant saving, no discounting, no renewed degradation after the
    overhaul, so it is optimistic for long paybacks.
    """
    if not (math.isfinite(recoverable_points) and recoverable_points > 0):
        raise ValueError(f"recoverable_points must be > 0 points; found {recoverable_points!r}")
    if not (math.isfinite(overhaul_cost) and overhaul_cost >= 0):
        raise ValueError(f"overhaul_cost must be >= 0; found {overhaul_cost!r}")
    if not (math.isfinite(operating_hours_per_year) and 0 < operating_hours_per_year <= 8784):
        raise ValueError(
            f"operating_hours_per_year must lie in (0, 8784] h; found {operating_hours_per_year!r}"
        )
    if value == "fuel":
        hr = heat_rate_change(-recoverable_points, section, coefficients=heat_rate_coefficients)
        per_hour = float(fuel_cost_rate(hr, output_mw, basis))
    elif value == "output":
        if basis.power_price_per_mwh is None:
            raise ValueError("value='output' needs basis.power_price_per_mwh")
        per_hour = (
            float(output_change(recoverable_points, section, output_mw, coefficients=output_coefficients))
            * basis.power_price_per_mwh
        )
    else:
        raise ValueError(f"value must be 'fuel' or 'output'; found {value!r}")
    payback_h = overhaul_cost / per_hour if per_hour > 0 else math.inf
    payback_y = payback_h / operating_hours_per_year
    break_even = None
    if start is not None and math.isfinite(payback_y):
        ts = pd.Timestamp(start)
        ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
        break_even = ts + pd.Timedelta(days=payback_y * 365.25)
    return OverhaulCase(
        per_hour, per_hour * operating_hours_per_year, float(payback_h), float(payback_y), break_even, value
    )
