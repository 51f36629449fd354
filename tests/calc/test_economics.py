"""Economics: a hand-worked case written out, plus the daily, projected and overhaul figures.

Sensitivity coefficients: the module defaults (HP 0.20 % heat rate and 0.275 % output per
point; from memory, midpoints of the ranges in calc/REFERENCES.md). Plant figures and prices are
invented for the check (a fictional 500 MW unit).

Hand-worked case (HP 2.0 points below baseline, 500 MW, heat rate 8000 kJ/kWh, boiler 88 %,
fuel 3.00 per GJ):
  heat-rate change      = 0.20 %/pt x 2.0 pt                    = 0.40 %
  turbine heat input    = 500 000 kW x 8000 kJ/kWh              = 4.0e9 kJ/h = 4000 GJ/h
  fuel energy           = 4000 GJ/h / 0.88                      = 4545.4545 GJ/h
  extra fuel            = 4545.4545 x 0.40 / 100                = 18.181818 GJ/h
  extra fuel cost       = 18.181818 x 3.00                      = 54.545455 per h
  per day (24 h online) = 54.545455 x 24                        = 1309.0909 per day
  output change         = -0.275 %/pt x 2.0 pt x 500 MW / 100   = -2.75 MW
  lost energy per day   = 2.75 MW x 24 h                        = 66.0 MWh
"""

import math

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import economics as ec
from isentrope.calc.economics import CostBasis

BASIS = CostBasis(
    heat_rate_kj_per_kwh=8000.0,
    boiler_efficiency=0.88,
    fuel_price_per_gj=3.0,
    power_price_per_mwh=50.0,
    currency="EUR",
)


def test_hand_worked_case():
    hr = ec.heat_rate_change(-2.0, "hp")
    assert hr == pytest.approx(0.40, rel=1e-12)
    assert ec.extra_fuel_rate(hr, 500.0, BASIS) == pytest.approx(18.181818, rel=1e-7)
    assert ec.fuel_cost_rate(hr, 500.0, BASIS) == pytest.approx(54.545455, rel=1e-7)
    assert ec.output_change(-2.0, "hp", 500.0) == pytest.approx(-2.75, rel=1e-12)


def test_daily_losses_hand_worked_and_cumulative():
    idx = pd.date_range("2026-09-01", periods=3 * 6, freq="4h", tz="UTC", name="time")
    dev = pd.Series(-2.0, index=idx)
    d = ec.daily_losses(dev, "hp", output_mw=500.0, basis=BASIS)
    assert len(d) == 3
    assert d["fuel_cost"].tolist() == pytest.approx([1309.0909] * 3, rel=1e-6)
    assert d["lost_mwh"].tolist() == pytest.approx([66.0] * 3, rel=1e-12)
    assert d["lost_output_value"].iloc[0] == pytest.approx(66.0 * 50.0)
    assert d["cumulative_lost_mwh"].iloc[-1] == pytest.approx(198.0)
    assert d["cumulative_fuel_cost"].iloc[-1] == pytest.approx(3 * 1309.0909, rel=1e-6)
    assert d["extra_fuel_gj"].iloc[0] == pytest.approx(18.181818 * 24, rel=1e-7)


def test_daily_losses_fill_and_online_hours():
    idx = pd.DatetimeIndex(["2026-09-01 06:00", "2026-09-01 18:00", "2026-09-05 12:00"], tz="UTC")
    dev = pd.Series([-1.0, -3.0, np.nan], index=idx)  # NaN window (extrapolated) ignored
    dev.loc[pd.Timestamp("2026-09-06 12:00", tz="UTC")] = -2.0
    days = pd.date_range("2026-09-01", periods=6, freq="1D", tz="UTC")
    hours = pd.Series([24, 12, 24, 24, 0, 24], index=days, dtype=float)
    d = ec.daily_losses(dev, "hp", output_mw=500.0, basis=BASIS, online_hours=hours, fill_days=2)
    assert d["deviation"].iloc[0] == pytest.approx(-2.0)  # mean of the day's windows
    assert d["filled"].tolist() == [False, True, True, False, False, False]
    assert d["covered"].tolist() == [True, True, True, False, False, True]
    assert d["lost_mwh"].iloc[1] == pytest.approx(2.75 * 12)  # half a day online
    assert math.isnan(d["lost_mwh"].iloc[3])
    assert d["cumulative_lost_mwh"].iloc[-1] == pytest.approx(2.75 * (24 + 12 + 24 + 24))
    with pytest.raises(ValueError, match="online_hours"):
        ec.daily_losses(dev, "hp", output_mw=500.0, basis=BASIS, online_hours=hours.iloc[:3])


def test_daily_losses_output_series():
    idx = pd.date_range("2026-09-01", periods=12, freq="4h", tz="UTC")
    dev = pd.Series(-2.0, index=idx)
    out = pd.Series([400.0] * 6 + [500.0] * 6, index=idx)  # daily means 400 and 500 MW
    d = ec.daily_losses(dev, "hp", output_mw=out, basis=BASIS)
    assert d["lost_mwh"].tolist() == pytest.approx([2.2 * 24, 2.75 * 24])  # 0.55 % of 400, of 500 MW
    with pytest.raises(ValueError, match="timezone-aware"):
        ec.daily_losses(dev, "hp", output_mw=out.tz_localize(None), basis=BASIS)
    with pytest.raises(ValueError, match="timezone-aware"):
        ec.daily_losses(dev.tz_localize(None), "hp", output_mw=500.0, basis=BASIS)
    empty = ec.daily_losses(dev.iloc[:0], "hp", output_mw=500.0, basis=BASIS)
    assert len(empty) == 0 and "cumulative_fuel_cost" in empty.columns


@pytest.mark.parametrize(
    "section, heat_rate, output",
    # calc/REFERENCES.md "Degradation and its cost" (from memory): heat rate HP 0.15-0.25,
    # IP 0.10-0.20, LP 0.40-0.50 % per point; output HP 0.25-0.3, IP 0.2-0.3, LP about 0.5 %
    [
        ("hp", (0.15, 0.25), (0.25, 0.30)),
        ("ip", (0.10, 0.20), (0.20, 0.30)),
        ("lp", (0.40, 0.50), (0.45, 0.55)),
    ],
)
def test_default_coefficients_lie_in_the_ranges_of_the_trade(section, heat_rate, output):
    assert heat_rate[0] <= -ec.heat_rate_change(1.0, section) <= heat_rate[1]
    assert output[0] <= ec.output_change(1.0, section, 100.0) <= output[1]


def test_a_stage_group_is_priced_by_its_weight_in_the_section():
    # A point of the LP dry group is 0.2446 point of the whole LP at a 0.25 MPa extraction
    # (two-group IF97 integration with iapws, tests/calc/test_sections.py): priced at that part
    # of the whole LP's coefficient, not at all of it.
    assert ec.stage_group_coefficient(0.45, 0.2446) == pytest.approx(0.45 * 0.2446)
    np.testing.assert_allclose(ec.stage_group_coefficient([0.45, 0.5], [0.2, 0.3]), [0.09, 0.15])
    for bad in (0.0, 1.2, float("nan")):
        with pytest.raises(ValueError, match="weight"):
            ec.stage_group_coefficient(0.45, bad)


def test_gain_has_opposite_sign_and_coefficient_override():
    assert ec.heat_rate_change(1.0, "lp") < 0 < ec.heat_rate_change(-1.0, "lp")
    assert ec.heat_rate_change(-1.0, "lp", coefficients={"lp": 0.6}) == pytest.approx(0.6)
    arr = ec.heat_rate_change(np.array([-1.0, 0.0, 1.0]), "ip")
    np.testing.assert_allclose(arr, [0.15, 0.0, -0.15])
    s = ec.output_change(pd.Series([-1.0, -2.0]), "ip", 400.0)
    assert isinstance(s, pd.Series) and s.tolist() == pytest.approx([-1.0, -2.0])
    with pytest.raises(ValueError, match="section 'xp'"):
        ec.heat_rate_change(-1.0, "xp")


def test_projected_loss_hand_worked():
    # deviation -2.0 now, losing 0.4 points per 1000 h, 5000 h to the outage:
    # mean deviation -2.0 - 0.4 x 5 / 2 = -3.0 points
    # lost energy 3.0 x 0.275 % x 500 MW x 5000 h = 20 625 MWh
    # fuel: 0.60 % heat rate -> 27.272727 GJ/h x 3.00 = 81.818182 per h x 5000 h = 409 090.91
    p = ec.projected_loss(-0.4, -2.0, 5000.0, "hp", output_mw=500.0, basis=BASIS)
    assert p.mean_deviation == pytest.approx(-3.0)
    assert p.lost_mwh == pytest.approx(20625.0)
    assert p.fuel_cost == pytest.approx(409090.91, rel=1e-7)
    from isentrope.calc.trend import RateResult

    r = RateResult("ok", -0.4, -0.6, -0.2, 0, 0, 0, 0.0, 50, 6000.0)
    p = ec.projected_loss(r, -2.0, 5000.0, "hp", output_mw=500.0, basis=BASIS)
    # rate -0.2: mean -2.5 -> 17 187.5 MWh; rate -0.6: mean -3.5 -> 24 062.5 MWh
    assert (p.lost_mwh_low, p.lost_mwh, p.lost_mwh_high) == pytest.approx((17187.5, 20625.0, 24062.5))
    bad = RateResult("insufficient data", *([float("nan")] * 7), 3, 10.0)
    assert (
        ec.projected_loss(bad, -2.0, 100.0, "hp", output_mw=500.0, basis=BASIS).status == "insufficient data"
    )


def test_operating_hours_until():
    # 2026-12-01 to 2027-03-01: 31 + 31 + 28 = 90 days = 2160 h; 85 % online -> 1836 h
    assert ec.operating_hours_until("2026-12-01", "2027-03-01", online_fraction=0.85) == pytest.approx(1836.0)
    assert ec.operating_hours_until("2027-03-01", "2026-12-01") == 0.0
    with pytest.raises(ValueError, match="online_fraction"):
        ec.operating_hours_until("2026-12-01", "2027-03-01", online_fraction=1.2)


def test_overhaul_case_hand_worked():
    # recover 3 HP points: 0.60 % heat rate -> 81.818182 per operating hour
    # payback 1 500 000 / 81.818182 = 18 333.33 h; at 7500 h/year 2.444444 years
    # break-even 2027-01-01 + 2.444444 x 365.25 d = 892.8333 d: 731 d to 2029-01-01 (2028 is a
    # leap year), 161 d more to 2029-06-11, 0.8333 d = 20:00 -> 2029-06-11 20:00 UTC
    c = ec.overhaul_case(
        3.0, 1.5e6, "hp", output_mw=500.0, basis=BASIS, operating_hours_per_year=7500.0, start="2027-01-01"
    )
    assert c.saving_per_hour == pytest.approx(81.818182, rel=1e-7)
    assert c.payback_hours == pytest.approx(18333.333, rel=1e-7)
    assert c.payback_years == pytest.approx(2.4444444, rel=1e-7)
    assert c.saving_per_year == pytest.approx(613636.36, rel=1e-7)
    assert abs(c.break_even - pd.Timestamp("2029-06-11 20:00", tz="UTC")) < pd.Timedelta(seconds=1)
    # valued as recovered output: 3 x 0.275 % x 500 MW = 4.125 MW x 50 = 206.25 per h
    o = ec.overhaul_case(
        3.0, 1.5e6, "hp", output_mw=500.0, basis=BASIS, operating_hours_per_year=7500.0, value="output"
    )
    assert o.saving_per_hour == pytest.approx(206.25)
    assert o.break_even is None


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(heat_rate_kj_per_kwh=0.0, boiler_efficiency=0.9, fuel_price_per_gj=3.0), "heat_rate"),
        (
            dict(heat_rate_kj_per_kwh=8000.0, boiler_efficiency=88.0, fuel_price_per_gj=3.0),
            "boiler_efficiency",
        ),
        (dict(heat_rate_kj_per_kwh=8000.0, boiler_efficiency=0.9, fuel_price_per_gj=-1.0), "fuel_price"),
    ],
)
def test_bad_basis(kwargs, match):
    with pytest.raises(ValueError, match=match):
        CostBasis(**kwargs)


def test_bad_overhaul_arguments():
    kw = dict(output_mw=500.0, basis=BASIS, operating_hours_per_year=7500.0)
    with pytest.raises(ValueError, match="recoverable_points"):
        ec.overhaul_case(0.0, 1e6, "hp", **kw)
    with pytest.raises(ValueError, match="operating_hours_per_year"):
        ec.overhaul_case(1.0, 1e6, "hp", output_mw=500.0, basis=BASIS, operating_hours_per_year=9000.0)
    no_price = CostBasis(8000.0, 0.88, 3.0)
    with pytest.raises(ValueError, match="power_price"):
        ec.overhaul_case(
            1.0, 1e6, "hp", output_mw=500.0, basis=no_price, operating_hours_per_year=7500.0, value="output"
        )
