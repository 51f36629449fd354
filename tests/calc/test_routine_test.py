"""Routine test evaluation: stabilisation, sub-periods, PTC 6 fluctuation checks, result.

Readings are held at the "large reheat unit" conditions of calc/REFERENCES.md (values invented
for checks, efficiencies computed there with iapws): HP 16.55 MPa / 538 C -> 3.9 MPa / 330 C,
efficiency 0.8626; IP 3.55 MPa / 538 C -> 0.95 MPa / 350 C, efficiency 0.9022. Noise and
disturbances are invented for the checks. Fluctuation limits: ASME PTC 6-2004 Table 3-1 via
calc.steady (read from a poor copy).
"""

import math

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import routine_test, steady
from isentrope.calc.routine_test import evaluate_test

START = pd.Timestamp("2026-10-14 08:00", tz="UTC")
BASE = {
    "throttle_p": 16.55,
    "throttle_t": 811.15,
    "cold_reheat_p": 3.9,
    "cold_reheat_t": 603.15,
    "hot_reheat_p": 3.55,
    "hot_reheat_t": 811.15,
    "crossover_p": 0.95,
    "crossover_t": 623.15,
    "condenser_p": 0.005,
    "gross_output": 500.0,
}


def make_test_frame(hours=4.0, seed=0):
    n = int(hours * 60)
    idx = pd.date_range(START, periods=n, freq="1min", tz="UTC", name="time")
    rng = np.random.default_rng(seed)
    f = pd.DataFrame({k: np.full(n, v) for k, v in BASE.items()}, index=idx)
    # small noise well inside the PTC 6 limits
    f["throttle_p"] += rng.normal(0, 0.005, n)
    f["throttle_t"] += rng.normal(0, 0.5, n)
    f["hot_reheat_t"] += rng.normal(0, 0.5, n)
    f["gross_output"] += rng.normal(0, 0.5, n)
    return f


def test_clean_test_gives_reference_efficiencies():
    r = evaluate_test(make_test_frame(), START, START + pd.Timedelta(hours=4), rating_mw=600.0)
    assert r.status == "ok"
    assert r.run_start == START + pd.Timedelta(hours=1) and r.run_end == START + pd.Timedelta(hours=4)
    assert len(r.sub_periods) == 3 and r.sub_periods["passed"].all()
    assert (r.sub_periods["n_samples"] == 60).all()
    assert (r.sub_periods["steady_fraction"] == 1.0).all()
    hp = r.result.loc["hp_efficiency"]
    ip = r.result.loc["ip_efficiency"]
    assert hp["mean"] == pytest.approx(0.8626, abs=0.001)  # calc/REFERENCES.md, computed with iapws
    assert ip["mean"] == pytest.approx(0.9022, abs=0.001)  # calc/REFERENCES.md, computed with iapws
    assert hp["n"] == 3
    assert hp["u"] == pytest.approx(math.hypot(hp["u_spread"], hp["u_instrument"]))
    assert hp["U95"] == pytest.approx(2 * hp["u"])
    # instrument uncertainty dominates (common practice, no source): several tenths of a point
    assert hp["u_instrument"] > 10 * hp["u_spread"]
    assert "stabilisation" in r.notes[0]


def test_unsteady_sub_period_fails_and_is_left_out():
    f = make_test_frame()
    # a 6 K swing of throttle temperature in the second sub-period (limit +/-4 K)
    sel = (f.index >= START + pd.Timedelta(hours=2)) & (f.index < START + pd.Timedelta(hours=2, minutes=20))
    f.loc[sel, "throttle_t"] += 6.0
    r = evaluate_test(f, START, START + pd.Timedelta(hours=4), rating_mw=600.0)
    assert r.sub_periods["passed"].tolist() == [True, False, True]
    # the trending detector sees a 20 min plateau as steady on either side of its edges
    assert r.sub_periods["steady_fraction"].iloc[1] == 1.0
    reason = r.sub_periods["reason"].iloc[1]
    assert "throttle_t" in reason
    sub = f[(f.index >= START + pd.Timedelta(hours=2)) & (f.index < START + pd.Timedelta(hours=3))][
        "throttle_t"
    ]
    expected_ratio = float(np.max(np.abs(sub - sub.mean()))) / 4.0  # PTC 6: +/-4 K
    assert r.sub_periods["throttle_t_fluctuation"].iloc[1] == pytest.approx(expected_ratio)
    assert r.result.loc["hp_efficiency", "n"] == 2


def test_throttle_pressure_limit_is_the_larger_of_relative_and_absolute():
    lim = steady.PTC6_LIMITS["throttle_p"]
    # 0.25 % of 16.55 MPa = 0.041375 MPa > 34.5 kPa: the relative part applies
    assert max(lim[0] * 16.55, lim[1]) == pytest.approx(0.041375)
    f = make_test_frame()
    f.loc[START + pd.Timedelta(hours=1, minutes=30), "throttle_p"] += 0.06
    r = evaluate_test(f, START, START + pd.Timedelta(hours=4))
    assert r.sub_periods["passed"].tolist() == [False, True, True]
    assert r.sub_periods["throttle_p_fluctuation"].iloc[0] > 1.0
    # a user may widen the limit
    wide = evaluate_test(
        f, START, START + pd.Timedelta(hours=4), steady_limits={"throttle_p": (0.005, 0.0345)}
    )
    assert wide.sub_periods["passed"].all()


def test_missing_data_fails_sub_period():
    f = make_test_frame()
    sel = (f.index >= START + pd.Timedelta(hours=3)) & (f.index < START + pd.Timedelta(hours=3, minutes=15))
    f.loc[sel, "cold_reheat_t"] = np.nan
    r = evaluate_test(f, START, START + pd.Timedelta(hours=4))
    assert r.sub_periods["passed"].tolist() == [True, True, False]
    assert "cold_reheat_t 25 %" in r.sub_periods["reason"].iloc[2]


def test_spread_between_sub_periods():
    f = make_test_frame()
    # cold reheat temperature 1 K higher in the second hour, 1 K lower in the third
    for h, dt in ((2, 1.0), (3, -1.0)):
        sel = (f.index >= START + pd.Timedelta(hours=h)) & (f.index < START + pd.Timedelta(hours=h + 1))
        f.loc[sel, "cold_reheat_t"] += dt
    r = evaluate_test(f, START, START + pd.Timedelta(hours=4))
    v = r.sub_periods["hp_efficiency"].to_numpy()
    hp = r.result.loc["hp_efficiency"]
    assert hp["spread_std"] == pytest.approx(np.std(v, ddof=1))
    assert hp["u_spread"] == pytest.approx(np.std(v, ddof=1) / math.sqrt(3))
    # 1 K of HP exhaust temperature is about half a point (common practice, no source:
    # 5 K moves an HP efficiency by roughly 2.5-3 points)
    assert 0.003 < abs(v[1] - v[0]) < 0.008


def test_comparison_with_online_trend():
    f = make_test_frame()
    end = START + pd.Timedelta(hours=4)
    r = evaluate_test(f, START, end, online={"hp_efficiency": (0.858, 0.002), "ip_efficiency": 0.85})
    hp, ip = r.result.loc["hp_efficiency"], r.result.loc["ip_efficiency"]
    assert hp["difference"] == pytest.approx(hp["mean"] - 0.858)
    assert hp["difference_u"] == pytest.approx(math.hypot(hp["u"], 0.002))
    assert bool(hp["agrees"]) is True
    assert bool(ip["agrees"]) is False  # 5 points off
    # an online series: its median within the window around the test midpoint
    days = pd.date_range(START - pd.Timedelta(days=20), periods=41, freq="1D", tz="UTC")
    series = pd.Series(0.850, index=days)
    series[(days >= START - pd.Timedelta(days=7)) & (days <= START + pd.Timedelta(days=7))] = 0.861
    r2 = evaluate_test(f, START, end, online={"hp_efficiency": series})
    assert r2.result.loc["hp_efficiency", "online"] == pytest.approx(0.861)


def test_tail_shorter_than_a_sub_period_is_dropped():
    r = evaluate_test(make_test_frame(hours=4.5), START, START + pd.Timedelta(hours=4, minutes=30))
    assert len(r.sub_periods) == 3
    assert any("30 minutes" in n or "0 days 00:30:00" in n for n in r.notes)
    r = evaluate_test(
        make_test_frame(), START, START + pd.Timedelta(hours=4), stabilisation="30min", sub_period="45min"
    )
    assert len(r.sub_periods) == 4


def test_no_valid_sub_period():
    f = make_test_frame()
    f["hot_reheat_t"] += np.where(np.arange(len(f)) % 2 == 0, 5.0, -5.0)
    r = evaluate_test(f, START, START + pd.Timedelta(hours=4))
    assert r.status == "no valid sub-period"
    assert (r.sub_periods["steady_fraction"] == 0.0).all()
    assert math.isnan(r.result.loc["hp_efficiency", "mean"]) and r.result.loc["hp_efficiency", "n"] == 0


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(start=START, end=START), "after its start"),
        (dict(start=START, end=START + pd.Timedelta(minutes=90)), "too short"),
        (dict(start=START, end=START + pd.Timedelta(hours=4), sub_period="soon"), "sub_period"),
        (
            dict(start=START, end=START + pd.Timedelta(hours=4), steady_limits={"throttle_p": (0, 0)}),
            "not both 0",
        ),
    ],
)
def test_bad_arguments(kwargs, match):
    with pytest.raises(ValueError, match=match):
        evaluate_test(make_test_frame(), **kwargs)
    assert routine_test.DEFAULT_STABILISATION == "1h"
