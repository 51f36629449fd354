"""Checks of isentrope.calc.sections against sources outside the project.

Sources, named beside each value:
* calc/REFERENCES.md textbook cases (printed answers from memory; IF97 figures recomputed with iapws)
  and the large-reheat-unit section cases (invented for checks, computed with iapws).
* The ``iapws`` package (IAPWS-IF97, point by point) as an independent oracle, including an
  independent scalar Baumann iteration written here.
* JCGM 100:2008 (ISO GUM) Eq. (10) for the propagation law.
* Facts of the trade marked "common practice, no source".
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from iapws import IAPWS97
from scipy.optimize import brentq

from isentrope.calc import sections as S
from isentrope.calc import steam

C = 273.15  # degC -> K

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# --------------------------------------------------------------------------------------------
# Independent oracle (iapws, scalar)
# --------------------------------------------------------------------------------------------
def ia_section(p_in, t_in, p_out, t_out):
    """Enthalpy-drop efficiency with iapws, point by point."""
    a = IAPWS97(P=p_in, T=t_in)
    h_out = IAPWS97(P=p_out, T=t_out).h
    h_s = IAPWS97(P=p_out, s=a.s).h
    return a.h, h_out, h_s, (a.h - h_out) / (a.h - h_s)


def ia_outlet_temperature(p_in, t_in, p_out, eta):
    """Outlet temperature of an expansion of efficiency eta, with iapws."""
    a = IAPWS97(P=p_in, T=t_in)
    h_out = a.h - eta * (a.h - IAPWS97(P=p_out, s=a.s).h)
    return IAPWS97(P=p_out, h=h_out).T


def ia_lp_baumann(p_in, t_in, p_exh, eta, a):
    """Independent LP expansion with the Baumann rule: brentq for the saturation crossing of the
    single-step dry line, then a plain fixed-point iteration on the exhaust wetness.
    Returns (h_elep, x, p_wet)."""
    inlet = IAPWS97(P=p_in, T=t_in)
    h_in, s_in = inlet.h, inlet.s

    def hs(p):
        return IAPWS97(P=p, s=s_in).h

    def hg(p):
        return IAPWS97(P=p, x=1).h

    hf_e, hg_e = IAPWS97(P=p_exh, x=0).h, hg(p_exh)
    h_dry = h_in - eta * (h_in - hs(p_exh))
    if h_dry >= hg_e:
        return h_dry, 1.0, math.nan
    lp_w = brentq(
        lambda u: h_in - eta * (h_in - hs(math.exp(u))) - hg(math.exp(u)),
        math.log(p_exh),
        math.log(p_in),
        xtol=1e-13,
    )
    p_w = math.exp(lp_w)
    d_dry, d_wet = h_in - hs(p_w), hs(p_w) - hs(p_exh)
    y = (hg_e - h_dry) / (hg_e - hf_e)
    h = h_dry
    for _ in range(500):
        eta_wet = eta * (1.0 - a * y / 2.0)
        h = h_in - eta * d_dry - eta_wet * d_wet
        y_new = 1.0 - IAPWS97(P=p_exh, h=h).x
        if abs(y_new - y) < 1e-13:
            y = y_new
            break
        y = y_new
    return h, 1.0 - y, p_w


# --------------------------------------------------------------------------------------------
# Reference cases (calc/REFERENCES.md)
# --------------------------------------------------------------------------------------------
def test_cengel_boles_adiabatic_turbine():
    # Cengel & Boles, Thermodynamics, isentropic-efficiency example (printed 66.7 %, from memory);
    # IF97 values recomputed with iapws in calc/REFERENCES.md: h1 3231.57, h2 2682.40, h2s 2407.82.
    eff, d = S.section_efficiency(3.0, 400 + C, 0.05, 100 + C, return_details=True)
    assert eff == pytest.approx(0.6667, abs=1e-4)
    assert d.h_in == pytest.approx(3231.57, abs=0.01)
    assert d.h_out == pytest.approx(2682.40, abs=0.01)
    assert d.h_out_isentropic == pytest.approx(2407.82, abs=0.01)
    assert d.enthalpy_drop == pytest.approx(3231.57 - 2682.40, abs=0.02)
    assert d.reason == S.OK


def test_moran_shapiro_reheat_cycle_end_points():
    # Moran & Shapiro, reheat-cycle example (from memory), IF97 recomputed (calc/REFERENCES.md):
    # 8 MPa / 480 C: h1 3349.53, to 0.7 MPa isentropic h2s 2742.63.
    d = S.section_expansion(8.0, 480 + C, 0.7, 200 + C)
    assert d.h_in == pytest.approx(3349.53, abs=0.01)
    assert d.h_out_isentropic == pytest.approx(2742.63, abs=0.01)
    # 0.7 MPa / 440 C: h3 3353.81, to 8 kPa isentropic h4s 2428.79 kJ/kg, x 0.9386.
    lp = S.lp_expansion(0.7, 440 + C, 0.008, 1.0, baumann=0.0)
    assert lp.h_in == pytest.approx(3353.81, abs=0.01)
    assert lp.h_isentropic == pytest.approx(2428.79, abs=0.01)
    assert lp.h_elep == pytest.approx(2428.79, abs=0.01)
    assert lp.x == pytest.approx(0.9386, abs=1e-4)


def test_large_reheat_unit_hp_ip():
    # calc/REFERENCES.md, large reheat unit (invented for checks, computed with iapws).
    eff, d = S.section_efficiency(16.55, 538 + C, 3.9, 330 + C, return_details=True)
    assert eff == pytest.approx(0.8626, abs=1e-4)
    assert (d.h_in, d.h_out, d.h_out_isentropic) == pytest.approx((3400.32, 3045.17, 2988.58), abs=0.01)
    eff, d = S.section_efficiency(3.55, 538 + C, 0.95, 350 + C, return_details=True)
    assert eff == pytest.approx(0.9022, abs=1e-4)
    assert (d.h_in, d.h_out, d.h_out_isentropic) == pytest.approx((3537.17, 3159.16, 3118.17), abs=0.01)


def test_large_reheat_unit_lp_without_wetness_correction():
    # calc/REFERENCES.md: 0.95 MPa / 350 C -> 5 kPa, dry efficiency 0.88, no wetness correction:
    # h_s 2234.47 kJ/kg, end point 2345.43 kJ/kg, x = 0.9111 (8.9 % moisture).
    lp = S.lp_expansion(0.95, 350 + C, 0.005, 0.88, baumann=0.0)
    assert lp.h_isentropic == pytest.approx(2234.47, abs=0.01)
    assert lp.h_elep == pytest.approx(2345.43, abs=0.01)
    assert lp.x == pytest.approx(0.9111, abs=1e-4)
    assert lp.moisture == pytest.approx(0.0889, abs=1e-4)
    # Isentropic end point quality x 0.8653 (calc/REFERENCES.md, iapws).
    assert steam.x_ph(0.005, lp.h_isentropic) == pytest.approx(0.8653, abs=1e-4)


def test_lp_baumann_on_against_independent_iteration_reference_case():
    # Same case with a = 1: independent iapws brentq + fixed-point iteration (this file).
    h_ref, x_ref, pw_ref = ia_lp_baumann(0.95, 350 + C, 0.005, 0.88, 1.0)
    lp = S.lp_expansion(0.95, 350 + C, 0.005, 0.88, baumann=1.0)
    assert lp.h_elep == pytest.approx(h_ref, abs=0.01)
    assert lp.x == pytest.approx(x_ref, abs=1e-5)
    assert lp.p_wet == pytest.approx(pw_ref, rel=1e-5)
    # the correction leaves less moisture and a lower overall efficiency than the dry line
    assert lp.moisture < 0.0889 and lp.eta_effective < 0.88
    assert lp.eta_wet == pytest.approx(0.88 * (1 - lp.moisture / 2), rel=1e-12)
    # the crossing is a saturated-vapour state on the dry line
    assert lp.h_wet == pytest.approx(steam.h_sat_vapour(lp.p_wet), abs=1e-3)


# --------------------------------------------------------------------------------------------
# Against iapws on random physical cases
# --------------------------------------------------------------------------------------------
def _random_sections(rng, n, p_in_range, t_in_range, ratio_range):
    cases = []
    while len(cases) < n:
        p_in = rng.uniform(*p_in_range)
        t_in = rng.uniform(*t_in_range)
        p_out = p_in * rng.uniform(*ratio_range)
        eta = rng.uniform(0.6, 0.95)
        t_out = ia_outlet_temperature(p_in, t_in, p_out, eta)
        if t_out - IAPWS97(P=p_out, x=1).T < 5.0:  # keep a measurable superheated outlet
            continue
        cases.append((p_in, t_in, p_out, t_out))
    return np.array(cases)


@pytest.mark.parametrize(
    "name, p_in_range, t_in_range, ratio_range",
    [
        ("hp", (10.0, 24.0), (500 + C, 600 + C), (0.15, 0.35)),  # throttle -> cold reheat
        ("ip", (2.0, 5.0), (500 + C, 600 + C), (0.15, 0.4)),  # hot reheat -> crossover
        ("lp_dry", (0.5, 1.5), (250 + C, 400 + C), (0.15, 0.5)),  # crossover -> LP extraction
    ],
)
def test_section_efficiency_against_iapws(name, p_in_range, t_in_range, ratio_range):
    # Oracle: iapws, point by point (calc/REFERENCES.md "Reference libraries").
    rng = np.random.default_rng(20261202)
    cases = _random_sections(rng, 20, p_in_range, t_in_range, ratio_range)
    eff, d = S.section_efficiency(*cases.T, return_details=True)
    for i, case in enumerate(cases):
        h_in, h_out, h_s, e = ia_section(*case)
        assert d.h_in[i] == pytest.approx(h_in, abs=1e-4)
        assert d.h_out[i] == pytest.approx(h_out, abs=1e-4)
        assert d.h_out_isentropic[i] == pytest.approx(h_s, abs=1e-4)
        assert eff[i] == pytest.approx(e, abs=1e-7)


@pytest.mark.parametrize("a", [0.0, 1.0, 0.6])
def test_lp_expansion_against_independent_baumann_iteration(a):
    # Oracle: the scalar iapws Baumann iteration above (independent code path).
    rng = np.random.default_rng(7 + int(10 * a))
    n = 8
    p_in = rng.uniform(0.3, 1.5, n)
    t_in = np.array([IAPWS97(P=p, x=1).T for p in p_in]) + rng.uniform(60, 200, n)
    p_exh = rng.uniform(0.003, 0.015, n)
    eta = rng.uniform(0.75, 0.92, n)
    lp = S.lp_expansion(p_in, t_in, p_exh, eta, baumann=a)
    for i in range(n):
        h_ref, x_ref, pw_ref = ia_lp_baumann(p_in[i], t_in[i], p_exh[i], eta[i], a)
        assert lp.h_elep[i] == pytest.approx(h_ref, abs=0.01)
        assert lp.x[i] == pytest.approx(x_ref, abs=1e-5)
        if a == 0.0:  # single step: h_in - eta (h_in - h_s), exactly
            assert lp.h_elep[i] == pytest.approx(
                lp.h_in[i] - eta[i] * (lp.h_in[i] - lp.h_isentropic[i]), abs=1e-9
            )
        if not math.isnan(pw_ref):
            assert lp.p_wet[i] == pytest.approx(pw_ref, rel=1e-5)


def test_lp_expansion_dry_exhaust():
    # A hot inlet expanded at a low efficiency ends superheated: no wet part, moisture 0
    # (checked against iapws: the single-step end point lies above h'' at the exhaust).
    lp = S.lp_expansion(0.5, 500 + C, 0.02, 0.3, baumann=1.0)
    h_ref, x_ref, _ = ia_lp_baumann(0.5, 500 + C, 0.02, 0.3, 1.0)
    assert x_ref == 1.0
    assert lp.h_elep == pytest.approx(h_ref, abs=0.01)
    assert lp.moisture == 0.0 and lp.x == 1.0 and math.isnan(lp.p_wet)


# --------------------------------------------------------------------------------------------
# Reasons and input types
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "args, code",
    [
        ((np.nan, 811.15, 3.9, 603.15), S.MISSING_INPUT),
        ((-1.0, 811.15, 3.9, 603.15), S.OUT_OF_RANGE),
        ((3.9, 811.15, 16.55, 603.15), S.PRESSURE_NOT_FALLING),
        ((3.9, 811.15, 3.9, 603.15), S.PRESSURE_NOT_FALLING),
        ((10.0, 550.0, 1.0, 500.0), S.INLET_NOT_SUPERHEATED),  # 10 MPa, Tsat 584 K (R7-97 Table 35)
        ((3.0, 673.15, 0.1, 350.0), S.OUTLET_NOT_SUPERHEATED),  # 0.1 MPa, Tsat 372.76 K (Table 35)
        ((3.0, 673.15, 1.0, 700.0), S.NO_ENTHALPY_DROP),  # outlet hotter than inlet
        ((3.0, 2400.0, 1.0, 700.0), S.OUT_OF_RANGE),  # above 2273.15 K, the IF97 limit (R7-97 section 4)
        ((3.0, 1200.0, 1.0, 700.0), S.OUT_OF_RANGE),  # region 5: not a steam-turbine state (T_MAX)
        ((3.0, 673.15, 1.0, np.inf), S.MISSING_INPUT),
    ],
)
def test_impossible_expansions_are_nan_with_reason(args, code):
    eff, d = S.section_efficiency(*args, return_details=True)
    assert math.isnan(eff)
    assert d.reason == code
    arr, d2 = S.section_efficiency(*[np.array([a, a]) for a in args], return_details=True)
    assert np.isnan(arr).all() and (d2.reason == code).all()


def test_vectorised_equals_scalar_and_series_keeps_index():
    rng = np.random.default_rng(3)
    cases = _random_sections(rng, 8, (10.0, 18.0), (780.0, 830.0), (0.2, 0.3))
    vec = S.section_efficiency(*cases.T)
    for i, c in enumerate(cases):
        assert vec[i] == pytest.approx(S.section_efficiency(*c), rel=1e-13)  # block sums: last bit may differ
    idx = pd.date_range("2026-03-01", periods=len(cases), freq="min", tz="UTC", name="time")
    ser = S.section_efficiency(*(pd.Series(col, index=idx) for col in cases.T))
    assert isinstance(ser, pd.Series) and ser.index.equals(idx)
    np.testing.assert_array_equal(ser.to_numpy(), vec)
    # broadcasting a Series against scalars
    ser2 = S.section_efficiency(pd.Series(cases[:, 0], index=idx), 811.15, 3.9, 603.15)
    assert ser2.index.equals(idx)
    # 2-D arrays keep their shape
    grid = S.section_efficiency(np.full((2, 3), 16.55), 811.15, 3.9, 603.15)
    assert grid.shape == (2, 3)
    lp_vec = S.lp_expansion(np.array([0.95, 0.8]), np.array([623.15, 600.0]), 0.005, 0.88)
    for i, (p, t) in enumerate([(0.95, 623.15), (0.8, 600.0)]):
        assert lp_vec.h_elep[i] == pytest.approx(S.lp_expansion(p, t, 0.005, 0.88).h_elep, abs=1e-9)
    lp_ser = S.lp_expansion(
        pd.Series([0.95, 0.8], index=idx[:2]),
        pd.Series([623.15, 600.0], index=idx[:2]),
        0.005,
        pd.Series([0.88, 0.88], index=idx[:2]),
    )
    assert isinstance(lp_ser.moisture, pd.Series) and lp_ser.moisture.index.equals(idx[:2])
    np.testing.assert_allclose(lp_ser.h_elep.to_numpy(), lp_vec.h_elep, rtol=1e-13)
    assert isinstance(S.lp_expansion(0.95, 623.15, 0.005, 0.88).reason, int)


def test_bad_arguments_raise():
    with pytest.raises(ValueError, match="numbers"):
        S.section_efficiency("a lot", 811.15, 3.9, 603.15)
    with pytest.raises(ValueError, match="broadcast"):
        S.section_efficiency(np.ones(3), np.ones(2), 3.9, 603.15)
    with pytest.raises(ValueError, match="baumann"):
        S.lp_expansion(0.95, 623.15, 0.005, 0.88, baumann=-1)
    a = pd.Series([16.55], index=[0])
    b = pd.Series([811.15], index=[5])
    with pytest.raises(ValueError, match="index"):
        S.section_efficiency(a, b, 3.9, 603.15)


# --------------------------------------------------------------------------------------------
# Property-based
# --------------------------------------------------------------------------------------------
@st.composite
def expansions(draw):
    p_in = draw(st.floats(0.5, 20.0))
    t_in = float(steam.t_sat(min(p_in, 20.0))) + draw(st.floats(20.0, 250.0))
    p_out = p_in * draw(st.floats(0.05, 0.9))
    eta = draw(st.floats(0.05, 1.0))
    return p_in, t_in, p_out, eta


@SETTINGS
@given(expansions())
def test_efficiency_in_unit_interval_for_consistent_expansion(case):
    p_in, t_in, p_out, eta = case
    h_in, s_in = steam.h_pt(p_in, t_in), steam.s_pt(p_in, t_in)
    h_out = h_in - eta * (h_in - steam.h_ps(p_out, s_in))
    assume(h_out > steam.h_sat_vapour(p_out) + 5.0)  # a measurable superheated outlet
    t_out = steam.t_ph(p_out, h_out)
    e = S.section_efficiency(p_in, t_in, p_out, t_out)
    assert 0.0 < e <= 1.0 + 1e-9
    assert e == pytest.approx(eta, abs=1e-6)


@SETTINGS
@given(expansions(), st.floats(1.0, 30.0))
def test_efficiency_falls_as_outlet_temperature_rises(case, dt):
    p_in, t_in, p_out, eta = case
    h_in, s_in = steam.h_pt(p_in, t_in), steam.s_pt(p_in, t_in)
    h_out = h_in - eta * (h_in - steam.h_ps(p_out, s_in))
    assume(h_out > steam.h_sat_vapour(p_out) + 5.0)
    t1 = steam.t_ph(p_out, h_out)
    e1, e2 = S.section_efficiency(p_in, t_in, p_out, np.array([t1, t1 + dt]))
    assume(np.isfinite(e2))
    assert e2 < e1


def _unit_frame(n=1, **over):
    values = {
        "throttle_p": 16.55,
        "throttle_t": 538 + C,
        "cold_reheat_p": 3.9,
        "cold_reheat_t": 330 + C,
        "hot_reheat_p": 3.55,
        "hot_reheat_t": 538 + C,
        "crossover_p": 0.95,
        "crossover_t": 350 + C,
        "condenser_p": 0.005,
        "gross_output": 520.0,
        "main_steam_flow": 430.0,
    }
    values.update(over)
    idx = pd.date_range("2026-05-04 10:00", periods=n, freq="min", tz="UTC", name="time")
    return pd.DataFrame({k: np.full(n, float(v)) for k, v in values.items()}, index=idx)


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.floats(0.2, 3.0), st.floats(1.2, 4.0))
def test_uncertainty_grows_with_instrument_uncertainty(u_t, factor):
    f = _unit_frame()
    base = {
        r: S.InstrumentUncertainty(absolute=u_t)
        for r in ("throttle_t", "cold_reheat_t", "hot_reheat_t", "crossover_t")
    }
    more = {r: S.InstrumentUncertainty(absolute=u_t * factor) for r in base}
    r1 = S.evaluate(f, uncertainty=base)
    r2 = S.evaluate(f, uncertainty=more)
    for name in ("hp_efficiency_u", "ip_efficiency_u", "lp_moisture_u"):
        assert r2.to_frame()[name].iloc[0] > r1.to_frame()[name].iloc[0] > 0


# --------------------------------------------------------------------------------------------
# Uncertainty propagation
# --------------------------------------------------------------------------------------------
def test_propagation_law_on_linear_function():
    # JCGM 100:2008 Eq. (10): y = 2 x1 - 3 x2 -> u_y = sqrt((2 u1)^2 + (3 u2)^2), exact for
    # a linear function.
    x = {"a": np.array([1.0, 5.0]), "b": np.array([2.0, -1.0])}
    u = {"a": np.array([0.1, 0.2]), "b": 0.05}
    out = S.propagate_uncertainty(lambda d: {"y": 2 * d["a"] - 3 * d["b"]}, x, u, ("y",))
    np.testing.assert_allclose(out["y"], np.hypot(2 * np.array([0.1, 0.2]), 3 * 0.05), rtol=1e-12)


def test_exhaust_temperature_error_moves_hp_efficiency_by_the_trade_figure():
    # "A 5 K error in one exhaust temperature moves an HP or IP efficiency by roughly 2.5-3
    # points" (calc/REFERENCES.md, facts of the trade, common practice, no source).
    f = _unit_frame()
    zero = {r: 0.0 for r in S.ROLE_QUANTITY}
    r = S.evaluate(f, uncertainty={**zero, "cold_reheat_t": 5.0, "crossover_t": 5.0})
    out = r.to_frame().iloc[0]
    assert 0.02 <= out.hp_efficiency_u <= 0.035
    assert 0.02 <= out.ip_efficiency_u <= 0.035
    # against a direct iapws difference quotient on the cold reheat temperature
    e_hi = ia_section(16.55, 538 + C, 3.9, 335 + C)[3]
    e_lo = ia_section(16.55, 538 + C, 3.9, 325 + C)[3]
    assert out.hp_efficiency_u == pytest.approx(abs(e_hi - e_lo) / 2, rel=1e-3)


def test_default_uncertainties_are_documented_values():
    # pressure 0.25 % of reading, temperature 1 K (task defaults, common practice).
    d = S.default_uncertainties()
    assert d["throttle_p"].of(16.0) == pytest.approx(0.04)
    assert d["crossover_t"].of(600.0) == pytest.approx(1.0)
    r = S.evaluate(_unit_frame())
    u = r.to_frame().iloc[0]
    assert 0.003 < u.hp_efficiency_u < 0.02  # several 0.1 points: temperature dominates
    assert u.lp_moisture_u > 0


# --------------------------------------------------------------------------------------------
# Exhaust loss and UEEP
# --------------------------------------------------------------------------------------------
def test_exhaust_loss_curve_interpolates_and_refuses_to_extrapolate():
    c = S.ExhaustLossCurve([100.0, 200.0, 300.0], [40.0, 25.0, 60.0])
    np.testing.assert_allclose(c(np.array([100.0, 150.0, 250.0, 300.0])), [40.0, 32.5, 42.5, 60.0])
    assert np.isnan(c(np.array([50.0, 350.0, np.nan]))).all()
    with pytest.raises(ValueError, match="increasing"):
        S.ExhaustLossCurve([100.0, 90.0], [1.0, 2.0])
    with pytest.raises(ValueError, match="negative"):
        S.ExhaustLossCurve([100.0, 200.0], [1.0, -2.0])


def test_default_curve_has_the_published_shape():
    # Spencer, Cotton & Cannon shape (calc/REFERENCES.md, from memory): lowest at 23-35 kJ/kg near
    # 150-180 m/s, rising steeply above about 275 m/s.
    c = S.DEFAULT_EXHAUST_LOSS_CURVE
    v = np.linspace(c.velocity[0], c.velocity[-1], 500)
    loss = c(v)
    assert 150.0 <= v[np.argmin(loss)] <= 190.0
    assert 23.0 <= loss.min() <= 35.0
    assert c(np.array([300.0]))[0] > 2 * loss.min()


def test_wetness_correction_formula():
    # Spencer, Cotton & Cannon (1963), from memory: loss x 0.87 (1 - 0.01 Y)(1 - 0.0065 Y).
    assert S.wetness_corrected_exhaust_loss(30.0, 0.10) == pytest.approx(30 * 0.87 * 0.9 * 0.935)


def test_ueep_is_elep_plus_corrected_exhaust_loss():
    f = _unit_frame()
    r = S.evaluate(f, annulus_area=30.0, lp_exhaust_flow_fraction=0.65, lp_mode="expansion")
    o = r.to_frame().iloc[0]
    lp = S.lp_expansion(0.95, 350 + C, 0.005, S.ETA_LP_DESIGN_DEFAULT, 1.0)
    assert o.lp_elep == pytest.approx(lp.h_elep, abs=1e-9)
    v = IAPWS97(P=0.005, h=o.lp_elep).v  # specific volume at the ELEP, iapws
    vel = 430.0 * 0.65 * v / 30.0
    assert o.lp_annulus_velocity == pytest.approx(vel, rel=1e-6)
    loss = S.wetness_corrected_exhaust_loss(S.DEFAULT_EXHAUST_LOSS_CURVE(vel), o.lp_moisture)
    assert o.lp_exhaust_loss == pytest.approx(loss, rel=1e-6)
    assert o.lp_ueep == pytest.approx(o.lp_elep + o.lp_exhaust_loss, abs=1e-9)
    assert o.reason == S.NOT_MAPPED << 8  # only the unmapped LP dry group
    assert r.lp_mode == "expansion" and o.lp_mode == "expansion"


def test_ueep_nan_without_annulus_data_says_why():
    r = S.evaluate(_unit_frame(), lp_mode="expansion")
    o = r.to_frame().iloc[0]
    assert math.isnan(o.lp_ueep) and math.isnan(o.lp_exhaust_loss)
    assert np.isfinite(o.lp_elep) and np.isfinite(o.lp_moisture)
    assert S.decode_reason(o.reason)["lp_ueep"] == S.NO_EXHAUST_DATA
    assert any("annulus_area" in n for n in r.notes)


def test_user_curve_outside_range_flags_velocity():
    curve = [(10.0, 30.0), (50.0, 30.0)]
    r = S.evaluate(_unit_frame(), annulus_area=30.0, lp_exhaust_flow_fraction=0.65, exhaust_loss_curve=curve)
    o = r.to_frame().iloc[0]
    assert math.isnan(o.lp_ueep) and o.lp_annulus_velocity > 50.0
    assert S.decode_reason(o.reason)["lp_ueep"] == S.VELOCITY_OUTSIDE_CURVE


# --------------------------------------------------------------------------------------------
# Energy-balance mode
# --------------------------------------------------------------------------------------------
def test_energy_balance_recovers_a_consistent_end_point():
    # Build a gross output that balances an expansion-mode result (hand-written balance with
    # iapws enthalpies), then let the energy balance find the end point again.
    ff = {"hp": 0.97, "ip": 0.86, "lp": 0.74}
    losses = 7.5
    m = 430.0
    h_tp, h_cr = IAPWS97(P=16.55, T=538 + C).h, IAPWS97(P=3.9, T=330 + C).h
    h_hr, h_xo = IAPWS97(P=3.55, T=538 + C).h, IAPWS97(P=0.95, T=350 + C).h
    kw = dict(annulus_area=30.0, lp_exhaust_flow_fraction=0.65)
    ref = S.evaluate(_unit_frame(), lp_mode="expansion", **kw).to_frame().iloc[0]
    gross = (
        m * (ff["hp"] * (h_tp - h_cr) + ff["ip"] * (h_hr - h_xo) + ff["lp"] * (h_xo - ref.lp_ueep)) / 1000
        - losses
    )
    f = _unit_frame(gross_output=gross, main_steam_flow=m)
    r = S.evaluate(f, lp_mode="auto", flow_fractions=ff, losses_mw=losses, **kw)
    o = r.to_frame().iloc[0]
    assert r.lp_mode == "energy_balance" and o.lp_mode == "energy_balance"
    assert o.lp_ueep == pytest.approx(ref.lp_ueep, abs=1e-3)
    assert o.lp_elep == pytest.approx(ref.lp_elep, abs=1e-3)
    assert o.lp_moisture == pytest.approx(ref.lp_moisture, abs=1e-6)
    assert o.lp_efficiency == pytest.approx(ref.lp_efficiency, abs=1e-6)
    assert o.reason == S.NOT_MAPPED << 8  # only the unmapped LP dry group
    assert o.lp_ueep_u > 0 and o.lp_moisture_u > 0


def test_energy_balance_gives_the_end_point_of_a_textbook_reheat_cycle():
    # Moran & Shapiro, reheat-cycle example (calc/REFERENCES.md; printed answers from memory,
    # IF97 enthalpies recomputed with iapws): 8 MPa / 480 C, isentropic to 0.7 MPa (h2s
    # 2742.63), reheated to 440 C (h3 3353.81), isentropic to 8 kPa (h4s 2428.79 kJ/kg). The
    # shaft power of 100 kg/s of that ideal turbine is 100 x (606.90 + 925.02) kJ/kg: the
    # balance must return h4s as the end point. The IP drop is folded into the LP here (0).
    h1, h2s, h3, h4s = 3349.53, 2742.63, 3353.81, 2428.79
    shaft_mw = 100.0 * ((h1 - h2s) + (h3 - h4s)) / 1000.0
    ff = {"hp": 1.0, "ip": 1.0, "lp": 1.0}
    ueep = S.energy_balance_ueep(shaft_mw - 2.0, 2.0, 100.0, h1 - h2s, 0.0, h3, ff)
    assert ueep == pytest.approx(h4s, abs=1e-9)
    # with 85 % stages (the example's second case) the end point rises by 15 % of the drops:
    # h4 = h3 - 0.85 (h3 - h4s), the HP drop 0.85 (h1 - h2s)
    real = S.energy_balance_ueep(0.85 * shaft_mw, 0.0, 100.0, 0.85 * (h1 - h2s), 0.0, h3, ff)
    assert real == pytest.approx(h3 - 0.85 * (h3 - h4s), abs=1e-9)


def test_energy_balance_needs_its_roles_and_parameters():
    f = _unit_frame().drop(columns=["main_steam_flow"])
    with pytest.raises(ValueError, match="main_steam_flow"):
        S.evaluate(f, lp_mode="energy_balance", flow_fractions={"hp": 1, "ip": 0.9, "lp": 0.7}, losses_mw=5.0)
    with pytest.raises(ValueError, match="flow_fractions"):
        S.evaluate(_unit_frame(), lp_mode="energy_balance")
    r = S.evaluate(f, flow_fractions={"hp": 1, "ip": 0.9, "lp": 0.7}, losses_mw=5.0)
    assert r.lp_mode == "expansion" and any("main_steam_flow" in n for n in r.notes)
    with pytest.raises(ValueError, match="flow_fractions"):
        S.evaluate(_unit_frame(), flow_fractions={"hp": 1, "ip": 0.9}, losses_mw=5.0)


def test_energy_balance_implausible_output_is_flagged():
    # a gross output far too high for the flow: the LP would have to beat isentropic
    f = _unit_frame(gross_output=2000.0)
    r = S.evaluate(
        f,
        flow_fractions={"hp": 1.0, "ip": 0.9, "lp": 0.75},
        losses_mw=5.0,
        annulus_area=30.0,
        lp_exhaust_flow_fraction=0.65,
    )
    o = r.to_frame().iloc[0]
    assert math.isnan(o.lp_ueep) and math.isnan(o.lp_moisture)
    assert S.decode_reason(o.reason)["lp_ueep"] == S.ENERGY_BALANCE_IMPLAUSIBLE
    assert np.isfinite(o.hp_efficiency)


# --------------------------------------------------------------------------------------------
# evaluate() over frames
# --------------------------------------------------------------------------------------------
def test_evaluate_per_sample_and_per_window_and_optional_roles():
    n = 4
    f = _unit_frame(n, lp_extraction_p=0.25, lp_extraction_t=200 + C)
    f.iloc[2, f.columns.get_loc("cold_reheat_t")] = np.nan
    before = f.copy()
    r = S.evaluate(f, annulus_area=30.0, lp_exhaust_flow_fraction=0.65)
    pd.testing.assert_frame_equal(f, before)  # the input is not touched
    out = r.to_frame()
    assert out.index.equals(f.index)
    assert np.isnan(out.hp_efficiency.iloc[2]) and np.isfinite(out.ip_efficiency.iloc[2])
    assert S.decode_reason(out.reason.iloc[2])["hp"] == S.MISSING_INPUT
    assert S.reason_names(out.reason.iloc[2]) == ["hp: " + S.REASON_TEXT[S.MISSING_INPUT]]
    e = ia_section(0.95, 350 + C, 0.25, 200 + C)[3]  # LP dry group against iapws
    assert out.lp_dry_efficiency.iloc[0] == pytest.approx(e, abs=1e-7)
    assert out.hp_efficiency.iloc[0] == pytest.approx(0.8626, abs=1e-4)  # calc/REFERENCES.md case
    ok = out.drop(index=out.index[2])
    np.testing.assert_allclose(ok.hp_share + ok.ip_share + ok.lp_share, 1.0, rtol=1e-12)
    assert set(S.FIGURE_UNITS) <= set(out.columns)
    # a frame of steady-window means (extra columns, integer index) works the same way
    w = f.iloc[[0, 1]].reset_index(drop=True)
    w.insert(0, "start", f.index[:2])
    w.insert(1, "n_samples", [30, 30])
    rw = S.evaluate(w, annulus_area=30.0, lp_exhaust_flow_fraction=0.65).to_frame()
    assert list(rw.index) == [0, 1]
    np.testing.assert_allclose(rw.hp_efficiency.to_numpy(), out.hp_efficiency.iloc[:2].to_numpy())
    # without the LP extraction the dry group is off, and says so
    r2 = S.evaluate(f.drop(columns=["lp_extraction_p", "lp_extraction_t"]))
    o2 = r2.to_frame()
    assert o2.lp_dry_efficiency.isna().all()
    assert (o2.reason.map(lambda v: S.decode_reason(v)["lp_dry"]) == S.NOT_MAPPED).all()
    assert any(n.startswith("lp_dry") for n in r2.notes)


def test_measured_dry_efficiency_drives_the_lp_expansion():
    f = _unit_frame(2, lp_extraction_p=0.25, lp_extraction_t=200 + C)
    r = S.evaluate(f, lp_dry_efficiency_source="measured").to_frame()
    eta = r.lp_dry_efficiency.iloc[0]
    lp = S.lp_expansion(0.95, 350 + C, 0.005, eta, 1.0)
    assert r.lp_elep.iloc[0] == pytest.approx(lp.h_elep, abs=1e-9)
    assert r.lp_moisture.iloc[0] == pytest.approx(lp.moisture, abs=1e-12)
    assert r.lp_moisture_u.iloc[0] > 0


def test_evaluate_rejects_bad_parameters():
    f = _unit_frame()
    for kw, word in [
        (dict(baumann=5.0), "baumann"),
        (dict(eta_lp_design=1.2), "eta_lp_design"),
        (dict(lp_mode="wet"), "lp_mode"),
        (dict(annulus_area=-3.0), "annulus_area"),
        (dict(lp_exhaust_flow_fraction=0.0), "lp_exhaust_flow_fraction"),
        (dict(uncertainty={"throttle_x": 1.0}), "unknown role"),
        (dict(uncertainty={"throttle_t": -1.0}), "absolute"),
        (dict(lp_dry_efficiency_source="guess"), "lp_dry_efficiency_source"),
    ]:
        with pytest.raises(ValueError, match=word):
            S.evaluate(f, **kw)
    with pytest.raises(ValueError, match="DataFrame"):
        S.evaluate(f.to_numpy())


def test_uncertainty_off_gives_nan_u_and_a_note():
    r = S.evaluate(_unit_frame(), uncertainty=False)
    o = r.to_frame().iloc[0]
    assert math.isnan(o.hp_efficiency_u) and np.isfinite(o.hp_efficiency)
    assert any("uncertainty" in n for n in r.notes)


def test_fast_section_uncertainty_matches_whole_chain_propagation():
    # The per-property differences of section_uncertainty against the generic law applied to
    # the whole section function (JCGM 100:2008 Eq. (10), numerical sensitivities), including
    # outlets within 1 K of saturation where one side of a difference is not superheated.
    rng = np.random.default_rng(11)
    cases = _random_sections(rng, 10, (10.0, 18.0), (780.0, 830.0), (0.2, 0.3))
    near = cases[:2].copy()
    near[:, 3] = np.array([IAPWS97(P=p, x=1).T for p in near[:, 2]]) + 0.6
    cases = np.vstack([cases, near])
    names = ("p_in", "t_in", "p_out", "t_out")
    inputs = {k: cases[:, i].copy() for i, k in enumerate(names)}
    u = {
        "p_in": 0.0025 * inputs["p_in"],
        "t_in": np.full(len(cases), 1.0),
        "p_out": 0.0025 * inputs["p_out"],
        "t_out": np.full(len(cases), 1.0),
    }
    base = S.dry.section_core(*(inputs[k] for k in names))
    fast = S.uncertainty.section_uncertainty(*(inputs[k] for k in names), base, u, u)
    slow = S.propagate_uncertainty(
        lambda d: {"e": S.dry.section_core(*(d[k] for k in names))["efficiency"]},
        inputs,
        u,
        ("e",),
        base={"e": base["efficiency"]},
    )["e"]
    np.testing.assert_allclose(fast, slow, rtol=2e-3)


def test_one_pass_inlet_differences_equal_the_per_property_differences_bit_for_bit():
    # pt_derivative_hs (h and s of each perturbed state in one pass) must give exactly the
    # central / one-sided / NaN differences of pt_derivative applied to h_pt and s_pt:
    # the _u figures are stored. Points 0.5 K above saturation (iapws, reference library)
    # make the minus state wet (one-sided), a NaN pressure gives NaN.
    p = np.array([12.0, 16.0, 3.0, 0.5, 8.0, np.nan, 25.0])
    t = np.array(
        [800.0, 820.0, IAPWS97(P=3.0, x=1).T + 0.5, IAPWS97(P=0.5, x=1).T + 0.5, 700.0, 700.0, 900.0]
    )
    mask = np.isfinite(p)
    h0, s0 = steam.h_pt(p, t), steam.s_pt(p, t)
    for which, step in (("t", np.full(p.size, 1.0)), ("p", 0.0025 * p)):
        dh, ds = S.uncertainty.pt_derivative_hs(p, t, step, which, h0, s0, mask)
        ref_h = S.uncertainty.pt_derivative(steam.h_pt, p, t, step, which, h0, mask)
        ref_s = S.uncertainty.pt_derivative(steam.s_pt, p, t, step, which, s0, mask)
        assert np.array_equal(dh, ref_h, equal_nan=True)
        assert np.array_equal(ds, ref_s, equal_nan=True)
        assert np.isnan(dh[5]) and np.isfinite(dh[:5]).all()
    # (dh/dT)_p is cp to the first order: iapws (reference library), central difference error
    dh, _ = S.uncertainty.pt_derivative_hs(p, t, np.full(p.size, 1.0), "t", h0, s0, mask)
    assert dh[0] == pytest.approx(IAPWS97(P=12.0, T=800.0).cp, rel=1e-4)


def test_end_state_from_the_solve_gives_the_same_section_uncertainty():
    # section_core(..., end_state=True) takes T and v of the isentropic end point from the
    # h(p, s) solve instead of re-solving T(p, h): the figures must be bit for bit the same
    # and the uncertainty the same within 1e-12 relative (both are IF97 at one state),
    # wet end points (LP-dry-like outlets near saturation) included.
    rng = np.random.default_rng(5)
    cases = np.vstack(
        [
            _random_sections(rng, 8, (10.0, 18.0), (780.0, 830.0), (0.15, 0.3)),
            _random_sections(rng, 8, (0.3, 0.5), (570.0, 600.0), (0.1, 0.15)),
        ]
    )
    args = [cases[:, i].copy() for i in range(4)]
    old = S.dry.section_core(*args)
    new = S.dry.section_core(*args, end_state=True)
    for k, v in old.items():
        assert np.array_equal(v, new[k], equal_nan=True), k
    wet_end = np.isfinite(steam.x_ps(args[2], new["s_in"]))
    assert wet_end.any() and (~wet_end).any()
    u = {
        "p_in": 0.0025 * args[0],
        "t_in": np.full(len(cases), 1.0),
        "p_out": 0.0025 * args[2],
        "t_out": np.full(len(cases), 1.0),
    }
    a = S.uncertainty.section_uncertainty(*args, old, u, u)
    differenced = {k: v for k, v in new.items() if not k.startswith("slopes")}
    b = S.uncertainty.section_uncertainty(*args, differenced, u, u)
    assert np.isfinite(a).all()
    np.testing.assert_allclose(b, a, rtol=1e-12)


def test_analytic_sensitivities_are_the_limit_of_the_differences():
    # With end_state the sensitivity coefficients come from cp and (dv/dT)_p of the IF97
    # Gibbs equations (steam.hs_slopes_pt, checked against iapws in test_steam.py); central
    # differences with steps 1000 times smaller than the uncertainty must converge to them
    # (truncation ~ step^2, round-off ~ 1e-16 / step), while steps equal to the uncertainty
    # differ by the curvature over one step (seen: up to 5e-6 relative).
    rng = np.random.default_rng(5)
    cases = np.vstack(
        [
            _random_sections(rng, 8, (10.0, 18.0), (780.0, 830.0), (0.15, 0.3)),
            _random_sections(rng, 8, (0.3, 0.5), (570.0, 600.0), (0.1, 0.15)),
        ]
    )
    args = [cases[:, i].copy() for i in range(4)]
    new = S.dry.section_core(*args, end_state=True)
    differenced = {k: v for k, v in new.items() if not k.startswith("slopes")}
    u = {
        "p_in": 0.0025 * args[0],
        "t_in": np.full(len(cases), 1.0),
        "p_out": 0.0025 * args[2],
        "t_out": np.full(len(cases), 1.0),
    }
    small = {k: v * 1e-3 for k, v in u.items()}
    analytic = S.uncertainty.section_uncertainty(*args, new, u, u)
    fine = S.uncertainty.section_uncertainty(*args, differenced, u, small)
    coarse = S.uncertainty.section_uncertainty(*args, differenced, u, u)
    assert np.isfinite(analytic).all()
    np.testing.assert_allclose(analytic, fine, rtol=1e-7)
    assert np.max(np.abs(coarse / analytic - 1)) < 2e-5
    # rows without analytic slopes (as region 3 states have) are differenced, the others not
    mixed = {
        **new,
        "slopes_in": {k: v.copy() for k, v in new["slopes_in"].items()},
        "slopes_out": {k: v.copy() for k, v in new["slopes_out"].items()},
    }
    holes = np.arange(len(cases)) % 3 == 0
    for k in ("dh_dt", "ds_dt", "dh_dp", "ds_dp"):
        mixed["slopes_in"][k][holes] = np.nan
        mixed["slopes_out"][k][holes] = np.nan
    both = S.uncertainty.section_uncertainty(*args, mixed, u, u)
    np.testing.assert_array_equal(both[holes], coarse[holes])
    np.testing.assert_array_equal(both[~holes], analytic[~holes])


def test_shared_inlet_states_give_what_a_fresh_evaluation_gives():
    # InletStates.get must return exactly call_hs on the requested mask (NaN elsewhere),
    # whether the state was stored on a smaller, a larger or an overlapping mask.
    p = np.array([12.0, 3.0, 0.5, np.nan, 8.0, 1.0])
    t = np.array([800.0, 600.0, 500.0, 700.0, 650.0, 560.0])
    m1 = np.array([True, True, False, False, True, False])
    m2 = np.array([False, True, True, False, True, True])
    states = S.inputs.InletStates()
    h1, s1 = states.get(m1, p, t)
    h2, s2 = states.get(m2, p.copy(), t.copy())
    for (h, s), m in (((h1, s1), m1), ((h2, s2), m2)):
        rh, rs = S.inputs.call_hs(m, p, t)
        assert np.array_equal(h, rh, equal_nan=True) and np.array_equal(s, rs, equal_nan=True)
        assert np.array_equal(h, steam.h_pt(np.where(m, p, np.nan), t), equal_nan=True)
    h3, _ = states.get(m1, p, t + 1.0)  # another state: evaluated, not taken from the store
    assert np.array_equal(h3, S.inputs.call_hs(m1, p, t + 1.0)[0], equal_nan=True)


def test_flow_uncertainty_reaches_ueep_only():
    # Main steam flow enters the annulus velocity, hence the exhaust loss and the UEEP, but not
    # the expansion line (ELEP, moisture) of the expansion mode (no band on the assumed LP
    # efficiency here: that would reach every LP figure).
    zero = {r: 0.0 for r in S.ROLE_QUANTITY}
    f = _unit_frame()
    kw = dict(annulus_area=30.0, lp_exhaust_flow_fraction=0.65, lp_mode="expansion", eta_lp_band=0.0)
    o = S.evaluate(f, uncertainty={**zero, "main_steam_flow": S.InstrumentUncertainty(relative=0.02)}, **kw)
    o = o.to_frame().iloc[0]
    assert o.lp_ueep_u > 0 and o.lp_used_energy_efficiency_u > 0
    assert o.lp_moisture_u == 0 and o.lp_elep_u == 0
    # against a direct difference of the UEEP with the flow changed by +/- 2 %
    hi = S.evaluate(_unit_frame(main_steam_flow=430.0 * 1.02), uncertainty=False, **kw).lp_ueep.iloc[0]
    lo = S.evaluate(_unit_frame(main_steam_flow=430.0 * 0.98), uncertainty=False, **kw).lp_ueep.iloc[0]
    assert o.lp_ueep_u == pytest.approx(abs(hi - lo) / 2, rel=1e-9)


def test_golden_case():
    # fixtures/cases/sections_reheat_unit: expected values computed with iapws only
    # (make_expected.py in that folder; independent of isentrope).
    import tomllib
    from pathlib import Path

    case = Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "sections_reheat_unit"
    with open(case / "config.toml", "rb") as fh:
        kw = tomllib.load(fh)["evaluate"]
    frame = pd.read_csv(case / "input.csv", index_col="row")
    expected = pd.read_csv(case / "expected.csv", index_col="row")
    out = S.evaluate(frame, **kw).to_frame()
    assert list(out.index) == list(expected.index)
    for name in ("hp_efficiency", "ip_efficiency", "lp_dry_efficiency"):
        np.testing.assert_allclose(out[name], expected[name], atol=1e-8, equal_nan=True)
    np.testing.assert_allclose(out.lp_elep, expected.lp_elep, atol=0.01, equal_nan=True)
    np.testing.assert_allclose(out.lp_x, expected.lp_x, atol=1e-5, equal_nan=True)
    np.testing.assert_allclose(out.lp_ueep, expected.lp_ueep, atol=0.01, equal_nan=True)
    for row, r in out.reason.items():
        codes = S.decode_reason(r)
        for group in ("hp", "ip", "lp_dry", "lp"):
            assert codes[group] == getattr(S, expected.loc[row, f"{group}_reason"]), (row, group)


def test_every_nan_figure_has_a_reason_and_no_row_is_lost():
    # Garbage in (random scale errors, NaN, 0, negative, inf, absurd values): never an
    # exception or a warning, one output row per input row, and a figure is NaN exactly where
    # its group's reason code is set.
    rng = np.random.default_rng(5)
    n = 200
    f = _unit_frame(n, lp_extraction_p=0.25, lp_extraction_t=478.15)
    f = f * np.exp(rng.normal(0.0, 0.6, f.shape))
    for col in f.columns:
        m = rng.random(n) < 0.05
        f.loc[m, col] = rng.choice([np.nan, 0.0, -1.0, np.inf, 1e6], m.sum())
    kw = dict(annulus_area=30.0, lp_exhaust_flow_fraction=0.65, uncertainty=False)
    for extra in (
        dict(lp_mode="expansion"),
        dict(flow_fractions={"hp": 1.0, "ip": 0.9, "lp": 0.75}, losses_mw=5.0),
    ):
        out = S.evaluate(f, **kw, **extra).to_frame()
        assert out.index.equals(f.index)
        for group, col in (
            ("hp", "hp_efficiency"),
            ("ip", "ip_efficiency"),
            ("lp_dry", "lp_dry_efficiency"),
            ("lp", "lp_elep"),
            ("lp_ueep", "lp_ueep"),
        ):
            codes = out.reason.map(lambda v, g=group: S.decode_reason(v)[g])
            assert ((codes != S.OK) == out[col].isna()).all(), (group, extra)


@pytest.mark.parametrize(
    "case", [(16.55, 538 + C, 3.9, 330 + C), (3.55, 538 + C, 0.95, 350 + C), (3.0, 400 + C, 0.05, 100 + C)]
)
def test_section_efficiency_against_coolprop_if97(case):
    # Second independent IF97 implementation: CoolProp, backend IF97::Water (SI units). Its
    # h(p, s) differs from ours by up to 0.006 kJ/kg here (measured; (p, s) inputs go through
    # the IF97 backward equations), hence the looser tolerances.
    cp = pytest.importorskip("CoolProp.CoolProp")
    p_in, t_in, p_out, t_out = case
    h1 = cp.PropsSI("H", "P", p_in * 1e6, "T", t_in, "IF97::Water") / 1e3
    s1 = cp.PropsSI("S", "P", p_in * 1e6, "T", t_in, "IF97::Water")
    h2 = cp.PropsSI("H", "P", p_out * 1e6, "T", t_out, "IF97::Water") / 1e3
    h2s = cp.PropsSI("H", "P", p_out * 1e6, "S", s1, "IF97::Water") / 1e3
    eff, d = S.section_efficiency(*case, return_details=True)
    assert d.h_in == pytest.approx(h1, abs=1e-3)
    assert d.h_out == pytest.approx(h2, abs=1e-3)
    assert d.h_out_isentropic == pytest.approx(h2s, abs=0.05)
    assert eff == pytest.approx((h1 - h2) / (h1 - h2s), abs=1e-4)


def test_a_long_frame_is_evaluated_in_row_blocks_with_the_figures_of_one_piece(monkeypatch):
    # Every figure is per row, so the row blocks of evaluate give what one piece gives (to the
    # last bits of the iterated solvers: the same bound as a different chunking of the worker).
    from isentrope.daemon import synthetic

    frame, _ = synthetic.generate(days=2, freq="2min")
    whole = S.evaluate(frame)
    monkeypatch.setattr(S.frame, "EVALUATE_ROWS", 500)  # where evaluate reads it
    blocked = S.evaluate(frame)
    assert blocked.lp_mode == whole.lp_mode and blocked.notes == whole.notes
    a, b = whole.to_frame(), blocked.to_frame()
    assert a.index.equals(b.index) and list(a.columns) == list(b.columns)
    for c in a.columns:
        if c == "lp_mode":
            continue
        rtol = 1e-9 if c.endswith("_u") else 1e-12
        np.testing.assert_allclose(
            b[c].to_numpy(dtype=float), a[c].to_numpy(dtype=float), rtol=rtol, err_msg=c
        )


# --------------------------------------------------------------------------------------------
# The LP dry stage group's weight in the LP, and the estimates of the expansion
# --------------------------------------------------------------------------------------------
def _two_group_lp(eta_dry, p_x, eta_rest=0.85):
    """Whole-LP efficiency of a stage-by-stage integration with iapws (IF97): crossover
    0.95 MPa / 350 C -> p_x at eta_dry -> 5 kPa at eta_rest; and the dry group's isentropic
    drop, the LP's, and the extraction temperature."""
    a = IAPWS97(P=0.95, T=350 + C)
    h_sx = IAPWS97(P=p_x, s=a.s).h
    h_x = a.h - eta_dry * (a.h - h_sx)
    b = IAPWS97(P=p_x, h=h_x)
    h_e = h_x - eta_rest * (h_x - IAPWS97(P=0.005, s=b.s).h)
    dh_s = a.h - IAPWS97(P=0.005, s=a.s).h
    return (a.h - h_e) / dh_s, a.h - h_sx, dh_s, b.T


@pytest.mark.parametrize("p_x", [0.5, 0.25, 0.1])
def test_the_dry_group_weight_matches_a_stage_by_stage_integration(p_x):
    # One point lost in the dry group costs the whole LP less than the group's share of the
    # isentropic drop: the wet stages recover part of it. Oracle: the two-group integration
    # above with the dry efficiency lowered from 0.88 to 0.87 (iapws); measured agreement
    # 0.1-0.3 %, while the plain share of the drop is 24-60 % too high.
    eta0, g, sec, t_x = _two_group_lp(0.88, p_x)
    eta1, *_ = _two_group_lp(0.87, p_x)
    per_point = (eta0 - eta1) * 100.0
    w = S.stage_group_weight(g, sec, t_x, 0.005, 0.85)
    assert w == pytest.approx(per_point, rel=0.01)
    assert g / sec > 1.2 * per_point  # the share alone would overprice the group


def test_the_assumed_lp_efficiency_band_enters_the_moisture_uncertainty():
    # Without the Baumann correction the ELEP is h_in - eta dh_s, so the moisture moves by
    # dh_s / h_fg per unit of eta (iapws enthalpies); the band +/- b is rectangular, standard
    # uncertainty b / sqrt(3) (JCGM 100:2008, 4.3.7). It adds in quadrature to the instruments'.
    f = _unit_frame()
    kw = dict(lp_mode="expansion", baumann=0.0, eta_lp_design=0.88)
    without = S.evaluate(f, eta_lp_band=0.0, **kw).to_frame().iloc[0]
    band = S.evaluate(f, eta_lp_band=0.02, **kw).to_frame().iloc[0]
    a = IAPWS97(P=0.95, T=350 + C)
    dh_s = a.h - IAPWS97(P=0.005, s=a.s).h
    h_fg = IAPWS97(P=0.005, x=1).h - IAPWS97(P=0.005, x=0).h
    from_band = dh_s / h_fg * 0.02 / math.sqrt(3.0)
    assert math.hypot(without.lp_moisture_u, from_band) == pytest.approx(band.lp_moisture_u, rel=1e-3)
    # the LP efficiency of the expansion is the assumed one: its u is the band's
    assert band.lp_efficiency_u == pytest.approx(
        math.hypot(without.lp_efficiency_u, 0.02 / math.sqrt(3)), rel=1e-3
    )
    assert band.lp_estimate == 1.0


def test_the_energy_balance_figures_are_not_estimates():
    ff = {"hp": 0.97, "ip": 0.86, "lp": 0.74}
    f = _unit_frame(gross_output=500.0, main_steam_flow=430.0)
    r = S.evaluate(f, flow_fractions=ff, losses_mw=7.5, annulus_area=30.0, lp_exhaust_flow_fraction=0.65)
    o = r.to_frame().iloc[0]
    assert r.lp_mode == "energy_balance" and o.lp_estimate == 0.0
    # the band of an assumed efficiency plays no part
    r2 = S.evaluate(
        f,
        flow_fractions=ff,
        losses_mw=7.5,
        annulus_area=30.0,
        lp_exhaust_flow_fraction=0.65,
        eta_lp_band=0.05,
    )
    assert r2.to_frame().iloc[0].lp_moisture_u == o.lp_moisture_u
    with pytest.raises(ValueError, match="eta_lp_band"):
        S.evaluate(f, eta_lp_band=-0.01)
