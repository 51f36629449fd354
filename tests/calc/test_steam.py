"""Checks of isentrope.calc.steam against IAPWS R7-97(2012) and the iapws package.

Sources: "R7-97(2012) Table N" values are the verification values printed in the IAPWS
release, recalled from memory and each cross-checked against the iapws package (they agree
to all nine printed digits); "iapws" means the iapws package (IAPWS97 class) computed in
the test itself.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from iapws import IAPWS97

from isentrope.calc import steam

REL = 1e-8  # tolerance on the printed verification values (they carry nine digits)

# ------------------------------------------------------------------------------------------
# Verification values of the release.

# R7-97(2012) Table 5, from memory (cross-checked against iapws): region 1 at (T, p).
TABLE5 = [
    # T [K], p [MPa], v [m3/kg], h [kJ/kg], s [kJ/(kg K)], cp [kJ/(kg K)]
    (300.0, 3.0, 0.100215168e-2, 0.115331273e3, 0.392294792, 0.417301218e1),
    (300.0, 80.0, 0.971180894e-3, 0.184142828e3, 0.368563852, 0.401008987e1),
    (500.0, 3.0, 0.120241800e-2, 0.975542239e3, 0.258041912e1, 0.465580682e1),
]

# R7-97(2012) Table 15, from memory (cross-checked against iapws): region 2 at (T, p).
TABLE15 = [
    (300.0, 0.0035, 0.394913866e2, 0.254991145e4, 0.852238967e1, 0.191300162e1),
    (700.0, 0.0035, 0.923015898e2, 0.333568375e4, 0.101749996e2, 0.208141274e1),
    (700.0, 30.0, 0.542946619e-2, 0.263149474e4, 0.517540298e1, 0.103505092e2),
]

# R7-97(2012) Table 35 (p_sat) and Table 36 (T_sat); also in calc/REFERENCES.md.
TABLE35 = [(300.0, 0.353658941e-2), (500.0, 0.263889776e1), (600.0, 0.123443146e2)]
TABLE36 = [(0.1, 0.372755919e3), (1.0, 0.453035632e3), (10.0, 0.584149488e3)]

# R7-97(2012) Table 7, from memory (cross-checked against iapws): backward T(p,h), region 1.
TABLE7 = [(3.0, 500.0, 0.391798509e3), (80.0, 500.0, 0.378108626e3), (80.0, 1500.0, 0.611041229e3)]

# R7-97(2012) Table 9, from memory (cross-checked against iapws): backward T(p,s), region 1.
TABLE9 = [(3.0, 0.5, 0.307842258e3), (80.0, 0.5, 0.309979785e3), (80.0, 3.0, 0.565899909e3)]

# R7-97(2012) Table 24, from memory (cross-checked against iapws): backward T(p,h), region 2.
TABLE24 = [
    ("_t2a_ph", 0.001, 3000.0, 0.534433241e3),
    ("_t2a_ph", 3.0, 3000.0, 0.575373370e3),
    ("_t2a_ph", 3.0, 4000.0, 0.101077577e4),
    ("_t2b_ph", 5.0, 3500.0, 0.801299102e3),
    ("_t2b_ph", 5.0, 4000.0, 0.101531583e4),
    ("_t2b_ph", 25.0, 3500.0, 0.875279054e3),
    ("_t2c_ph", 40.0, 2700.0, 0.743056411e3),
    ("_t2c_ph", 60.0, 2700.0, 0.791137067e3),
    ("_t2c_ph", 60.0, 3200.0, 0.882756860e3),
]

# R7-97(2012) Table 29, from memory (cross-checked against iapws): backward T(p,s), region 2.
TABLE29 = [
    ("_t2a_ps", 0.1, 7.5, 0.399517097e3),
    ("_t2a_ps", 0.1, 8.0, 0.514127081e3),
    ("_t2a_ps", 2.5, 8.0, 0.103984917e4),
    ("_t2b_ps", 8.0, 6.0, 0.600484040e3),
    ("_t2b_ps", 8.0, 7.5, 0.106495556e4),
    ("_t2b_ps", 90.0, 6.0, 0.103801126e4),
    ("_t2c_ps", 20.0, 5.75, 0.697992849e3),
    ("_t2c_ps", 80.0, 5.25, 0.854011484e3),
    ("_t2c_ps", 80.0, 5.75, 0.949017998e3),
]


@pytest.mark.parametrize("t, p, v, h, s, cp", TABLE5 + TABLE15)
def test_forward_verification_values(t, p, v, h, s, cp):
    assert steam.h_pt(p, t) == pytest.approx(h, rel=REL)
    assert steam.s_pt(p, t) == pytest.approx(s, rel=REL)
    assert steam.v_pt(p, t) == pytest.approx(v, rel=REL)
    assert steam.cp_pt(p, t) == pytest.approx(cp, rel=REL)


@pytest.mark.parametrize("t, p", [(t, p) for t, p in TABLE35])
def test_saturation_pressure_table35(t, p):
    assert steam.p_sat(t) == pytest.approx(p, rel=REL)


@pytest.mark.parametrize("p, t", TABLE36)
def test_saturation_temperature_table36(p, t):
    assert steam.t_sat(p) == pytest.approx(t, rel=REL)


def test_b23_boundary():
    # R7-97(2012) section 4, check of eqs. (5)/(6), from memory (iapws _P23_T agrees):
    # T = 623.15 K <-> p = 0.165291643e2 MPa.
    assert steam._p_b23(623.15) == pytest.approx(0.165291643e2, rel=REL)
    assert steam._t_b23(0.165291643e2) == pytest.approx(623.15, rel=REL)


def test_b2bc_boundary():
    # R7-97(2012) section 6.3.1, check of eqs. (20)/(21), from memory (iapws _P_2bc agrees):
    # h = 0.3516004323e4 kJ/kg <-> p = 0.100e3 MPa.
    assert steam._p_b2bc(0.3516004323e4) == pytest.approx(100.0, rel=REL)
    assert steam._h_b2bc(100.0) == pytest.approx(0.3516004323e4, rel=REL)


@pytest.mark.parametrize("p, h, t", TABLE7)
def test_backward_t_ph_region1_table7(p, h, t):
    assert steam._t1_ph(np.array([p]), np.array([h]))[0] == pytest.approx(t, rel=REL)


@pytest.mark.parametrize("p, s, t", TABLE9)
def test_backward_t_ps_region1_table9(p, s, t):
    assert steam._t1_ps(np.array([p]), np.array([s]))[0] == pytest.approx(t, rel=REL)


@pytest.mark.parametrize("fn, p, h, t", TABLE24)
def test_backward_t_ph_region2_table24(fn, p, h, t):
    assert getattr(steam, fn)(np.array([p]), np.array([h]))[0] == pytest.approx(t, rel=REL)
    # The subregion choice of the combined start-value function picks the same equation.
    assert steam._t2_ph(np.array([p]), np.array([h]))[0] == pytest.approx(t, rel=REL)


@pytest.mark.parametrize("fn, p, s, t", TABLE29)
def test_backward_t_ps_region2_table29(fn, p, s, t):
    assert getattr(steam, fn)(np.array([p]), np.array([s]))[0] == pytest.approx(t, rel=REL)
    assert steam._t2_ps(np.array([p]), np.array([s]))[0] == pytest.approx(t, rel=REL)


@pytest.mark.parametrize("t, p", [(300.0, 3.0), (500.0, 3.0), (300.0, 80.0)])
def test_polished_inverse_at_table5_points(t, p):
    # Newton polish: t_ph and t_ps return the temperature of the forward equation exactly.
    h = steam.h_pt(p, t)
    s = steam.s_pt(p, t)
    assert steam.t_ph(p, h) == pytest.approx(t, abs=1e-9)
    assert steam.t_ps(p, s) == pytest.approx(t, abs=1e-9)
    assert abs(steam.s_pt(p, steam.t_ps(p, s)) - s) <= 1e-9


# ------------------------------------------------------------------------------------------
# Against the iapws package on a dense grid of turbine duty.


def _grid_pt():
    p = np.geomspace(0.001, 35.0, 36)
    t = np.linspace(273.16, 1073.15, 50)
    pp, tt = (a.ravel() for a in np.meshgrid(p, t))
    # Both sides of the saturation line and of the B23 line.
    ps = np.geomspace(0.001, 16.0, 30)
    ts = steam.t_sat(ps)
    pb = np.linspace(16.6, 35.0, 12)
    tb = steam._t_b23(pb)
    extra_p = np.concatenate([ps] * 4 + [pb] * 2)
    extra_t = np.concatenate([ts - 0.5, ts - 1e-3, ts + 1e-3, ts + 0.5, tb + 1e-3, tb + 0.5])
    return np.concatenate([pp, extra_p]), np.concatenate([tt, extra_t])


def _iapws_pt(p, t):
    h = np.empty(p.size)
    s = np.empty(p.size)
    for k, (a, b) in enumerate(zip(p, t, strict=True)):
        w = IAPWS97(P=float(a), T=float(b))
        h[k], s[k] = w.h, w.s
    return h, s


def test_h_s_against_iapws_dense_grid():
    p, t = _grid_pt()
    reg = steam.region(p, t)
    keep = (reg == 1) | (reg == 2)  # region 3 points would be iapws against itself
    p, t = p[keep], t[keep]
    h, dh = steam.h_pt(p, t, return_details=True)
    s = steam.s_pt(p, t)
    h_ref, s_ref = _iapws_pt(p, t)
    assert dh.n_fallback == 0
    assert np.all(dh.reason == steam.OK)
    # h and s pass through zero near the triple point (273.16 K): relative difference where
    # they exceed 1 kJ/kg and 0.01 kJ/(kg K), absolute difference below that.
    big = np.abs(h_ref) > 1.0
    assert np.max(np.abs(h[big] / h_ref[big] - 1.0)) <= 1e-9
    assert np.max(np.abs(h[~big] - h_ref[~big])) <= 1e-9
    big = np.abs(s_ref) > 0.01
    assert np.max(np.abs(s[big] / s_ref[big] - 1.0)) <= 1e-9
    assert np.max(np.abs(s[~big] - s_ref[~big])) <= 1e-11


def test_region_against_iapws_dense_grid():
    p, t = _grid_pt()
    reg = steam.region(p, t)
    ref = np.array([IAPWS97(P=float(a), T=float(b)).region for a, b in zip(p[::7], t[::7], strict=True)])
    assert np.array_equal(reg[::7], ref)


def _grid_ps():
    # Pressures of turbine duty, entropies from compressed liquid through wet to superheated.
    p = np.geomspace(0.001, 35.0, 26)
    s = np.linspace(0.05, 9.6, 40)
    pp, ss = (a.ravel() for a in np.meshgrid(p, s))
    return pp, ss


def test_h_ps_against_iapws_dense_grid():
    p, s = _grid_ps()
    h, d = steam.h_ps(p, s, return_details=True)
    ref = np.full(p.size, np.nan)
    for k, (a, b) in enumerate(zip(p, s, strict=True)):
        if d.region[k] in (3, 5):
            continue  # sent to iapws: nothing independent to compare
        try:
            w = IAPWS97(P=float(a), s=float(b))
        except NotImplementedError:
            continue
        if w.status:
            ref[k] = w.h
    both = np.isfinite(ref) & np.isfinite(h)
    assert both.sum() > 700
    assert np.max(np.abs(h[both] - ref[both])) <= 1e-6
    # A point iapws evaluates in regions 1, 2 or 4 is never NaN here.
    assert not np.any(np.isfinite(ref) & ~np.isfinite(h))
    wet = both & (d.region == 4)
    assert wet.sum() > 120


def test_t_ph_and_x_ph_against_iapws():
    p = np.geomspace(0.002, 30.0, 25)
    h = np.linspace(100.0, 4000.0, 40)
    pp, hh = (a.ravel() for a in np.meshgrid(p, h))
    t, d = steam.t_ph(pp, hh, return_details=True)
    x = steam.x_ph(pp, hh)
    s = steam.s_ph(pp, hh)
    v = steam.v_ph(pp, hh)
    for k in range(0, pp.size, 4):
        if d.region[k] not in (1, 2, 4):
            continue
        w = IAPWS97(P=float(pp[k]), h=float(hh[k]))
        assert t[k] == pytest.approx(w.T, rel=1e-9, abs=1e-7)
        assert s[k] == pytest.approx(w.s, rel=1e-9, abs=1e-10)
        assert v[k] == pytest.approx(w.v, rel=1e-8)
        if w.region == 4:
            assert x[k] == pytest.approx(w.x, abs=1e-9)
        else:
            assert math.isnan(x[k])


# ------------------------------------------------------------------------------------------
# Worked cross-checks (calc/REFERENCES.md, IF97 figures computed with iapws).


def test_turbine_end_points_references_md():
    # Large reheat unit, HP section: 16.55 MPa / 538 degC -> 3.9 MPa: h_s 2988.58 kJ/kg.
    s_in = steam.s_pt(16.55, 538.0 + 273.15)
    assert steam.h_pt(16.55, 811.15) == pytest.approx(3400.32, abs=0.01)
    assert steam.h_ps(3.9, s_in) == pytest.approx(2988.58, abs=0.01)
    # LP: 0.95 MPa / 350 degC -> 5 kPa: h_s 2234.47 kJ/kg, x 0.8653 (wet end point).
    s_lp = steam.s_pt(0.95, 623.15)
    assert steam.h_ps(0.005, s_lp) == pytest.approx(2234.47, abs=0.01)
    assert steam.x_ps(0.005, s_lp) == pytest.approx(0.8653, abs=1e-4)
    # Textbook adiabatic turbine, 3 MPa / 400 degC -> 50 kPa: h2s 2407.82 kJ/kg (iapws).
    assert steam.h_ps(0.05, steam.s_pt(3.0, 673.15)) == pytest.approx(2407.82, abs=0.01)


def test_wet_end_point_matches_iapws_exactly():
    s = steam.s_pt(0.95, 623.15)
    ref = IAPWS97(P=0.005, s=s)
    assert steam.h_ps(0.005, s) == pytest.approx(ref.h, abs=1e-6)
    assert steam.x_ps(0.005, s) == pytest.approx(ref.x, abs=1e-10)
    assert steam.t_ps(0.005, s) == pytest.approx(ref.T, abs=1e-8)
    h = steam.h_ps(0.005, s)
    assert steam.x_ph(0.005, h) == pytest.approx(ref.x, abs=1e-9)


def test_saturation_properties_against_iapws():
    p = np.array([0.001, 0.005, 0.1, 1.0, 5.0, 10.0, 16.0, 18.0, 21.0])
    out = {
        f: getattr(steam, f)(p)
        for f in (
            "h_sat_liquid",
            "h_sat_vapour",
            "s_sat_liquid",
            "s_sat_vapour",
            "v_sat_liquid",
            "v_sat_vapour",
        )
    }
    for k, pk in enumerate(p):
        liq, vap = IAPWS97(P=float(pk), x=0.0), IAPWS97(P=float(pk), x=1.0)
        assert out["h_sat_liquid"][k] == pytest.approx(liq.h, rel=1e-9)
        assert out["h_sat_vapour"][k] == pytest.approx(vap.h, rel=1e-9)
        assert out["s_sat_liquid"][k] == pytest.approx(liq.s, rel=1e-9)
        assert out["s_sat_vapour"][k] == pytest.approx(vap.s, rel=1e-9)
        assert out["v_sat_liquid"][k] == pytest.approx(liq.v, rel=1e-9)
        assert out["v_sat_vapour"][k] == pytest.approx(vap.v, rel=1e-9)
    _, d = steam.h_sat_vapour(p, return_details=True)
    assert d.n_fallback == 2  # 18 and 21 MPa lie in region 3
    assert np.array_equal(d.reason, np.zeros(p.size, dtype=np.int64))


def test_region3_and_region5_fall_back_to_iapws():
    p = np.array([25.0, 30.0, 5.0])
    t = np.array([650.0, 680.0, 1200.0])  # region 3, region 3, region 5
    h, d = steam.h_pt(p, t, return_details=True)
    assert d.region.tolist() == [3, 3, 5]
    assert d.n_fallback == 3
    for k in range(3):
        assert h[k] == pytest.approx(IAPWS97(P=float(p[k]), T=float(t[k])).h, rel=1e-12)
    hs, ds = steam.h_ps(np.array([25.0]), steam.s_pt(25.0, 650.0), return_details=True)
    assert ds.n_fallback == 1
    assert hs[0] == pytest.approx(h[0], abs=1e-5)


# ------------------------------------------------------------------------------------------
# Properties (hypothesis).

pressures = st.floats(min_value=0.001, max_value=35.0)
temperatures = st.floats(min_value=273.16, max_value=1073.15)


def _in_12(p, t):
    return int(steam.region(p, t)) in (1, 2)


@settings(max_examples=40, deadline=None)
@given(pressures, temperatures)
def test_h_ps_inverts_s_pt(p, t):
    if not _in_12(p, t):
        return
    s = steam.s_pt(p, t)
    h = steam.h_pt(p, t)
    assert steam.h_ps(p, s) == pytest.approx(h, rel=1e-11, abs=1e-7)
    assert abs(steam.s_pt(p, steam.t_ps(p, s)) - s) <= 1e-9


@settings(max_examples=40, deadline=None)
@given(pressures, temperatures)
def test_t_ph_inverts_h_pt(p, t):
    if not _in_12(p, t):
        return
    assert steam.t_ph(p, steam.h_pt(p, t)) == pytest.approx(t, abs=1e-7)


@settings(max_examples=40, deadline=None)
@given(pressures, temperatures, temperatures)
def test_h_rises_with_t(p, t1, t2):
    lo, hi = min(t1, t2), max(t1, t2)
    if hi - lo < 1e-6 or not (_in_12(p, lo) and _in_12(p, hi)):
        return
    assert steam.h_pt(p, hi) > steam.h_pt(p, lo)


# ------------------------------------------------------------------------------------------
# Input types, errors, reason codes.


def test_scalar_in_float_out():
    h = steam.h_pt(3.0, 300.0)
    assert type(h) is float
    assert type(steam.h_ps(1.0, 6.5)) is float
    assert type(steam.region(3.0, 300.0)) is int


def test_ndarray_broadcasting_keeps_shape():
    p = np.array([[1.0], [10.0]])
    t = np.array([400.0, 500.0, 800.0])
    h = steam.h_pt(p, t)
    assert h.shape == (2, 3)
    assert h[1, 2] == pytest.approx(steam.h_pt(10.0, 800.0), rel=1e-15)
    h2, d = steam.h_ps(p, np.array([1.0, 6.0, 7.0]), return_details=True)
    assert h2.shape == d.reason.shape == d.region.shape == (2, 3)


def test_series_in_series_out_same_index():
    idx = pd.date_range("2026-01-01", periods=4, freq="1min", tz="UTC", name="time")
    p = pd.Series([16.5, 16.6, 16.4, 16.55], index=idx)
    t = pd.Series([811.0, 812.0, 810.0, 811.5], index=idx)
    h = steam.h_pt(p, t)
    assert isinstance(h, pd.Series)
    assert h.index.equals(idx)
    s = steam.s_pt(p, t)
    h_end = steam.h_ps(3.9, s)
    assert isinstance(h_end, pd.Series) and h_end.index.equals(idx)
    assert h_end.iloc[0] == pytest.approx(steam.h_ps(3.9, steam.s_pt(16.5, 811.0)), rel=1e-14)


def test_series_with_different_index_is_an_error():
    a = pd.Series([1.0, 2.0], index=[0, 1])
    b = pd.Series([400.0, 500.0], index=[1, 2])
    with pytest.raises(ValueError, match="share one index"):
        steam.h_pt(a, b)


@pytest.mark.parametrize(
    "fn, args, code",
    [
        (steam.h_pt, (120.0, 500.0), steam.OUT_OF_RANGE_P),
        (steam.h_pt, (1.0, 200.0), steam.OUT_OF_RANGE_T),
        (steam.h_pt, (60.0, 1500.0), steam.OUT_OF_RANGE_P),
        (steam.h_pt, (-1.0, 500.0), steam.OUT_OF_RANGE_P),
        (steam.s_pt, (float("nan"), 500.0), steam.NOT_FINITE),
        (steam.t_sat, (30.0,), steam.OUT_OF_RANGE_P),
        (steam.p_sat, (700.0,), steam.OUT_OF_RANGE_T),
        (steam.h_ps, (1.0, -3.0), steam.OUT_OF_RANGE_S),
        (steam.h_ps, (0.0001, 7.0), steam.OUT_OF_RANGE_P),
        (steam.t_ph, (1.0, -500.0), steam.OUT_OF_RANGE_H),
        (steam.h_sat_liquid, (23.0,), steam.OUT_OF_RANGE_P),
    ],
)
def test_out_of_range_scalar_raises_array_flags(fn, args, code):
    with pytest.raises(ValueError, match="valid"):
        fn(*args)
    arrays = [np.array([a, a]) for a in args]
    value, d = fn(*arrays, return_details=True)
    assert np.all(np.isnan(value))
    assert np.all(d.reason == code)


def test_bad_point_does_not_spoil_its_neighbours():
    p = np.array([16.55, 120.0, np.nan, 3.9])
    t = np.array([811.15, 800.0, 800.0, 603.15])
    h, d = steam.h_pt(p, t, return_details=True)
    assert d.reason.tolist() == [steam.OK, steam.OUT_OF_RANGE_P, steam.NOT_FINITE, steam.OK]
    assert h[0] == pytest.approx(steam.h_pt(16.55, 811.15), rel=1e-15)
    assert h[3] == pytest.approx(steam.h_pt(3.9, 603.15), rel=1e-15)
    assert np.isnan(h[1]) and np.isnan(h[2])


def test_x_is_nan_for_single_phase_not_an_error():
    assert math.isnan(steam.x_ph(1.0, 3000.0))
    x, d = steam.x_ph(np.array([1.0, 1.0]), np.array([3000.0, 2000.0]), return_details=True)
    assert math.isnan(x[0]) and 0.0 < x[1] < 1.0
    assert d.reason.tolist() == [steam.SINGLE_PHASE, steam.OK]


def test_non_numeric_input_is_a_clear_error():
    with pytest.raises(ValueError, match="expected numbers"):
        steam.h_pt("hot", 500.0)


def test_every_reason_has_a_text():
    for code in (
        steam.OK,
        steam.OUT_OF_RANGE_P,
        steam.OUT_OF_RANGE_T,
        steam.OUT_OF_RANGE_H,
        steam.OUT_OF_RANGE_S,
        steam.NOT_FINITE,
        steam.NO_CONVERGENCE,
        steam.FALLBACK_FAILED,
        steam.SINGLE_PHASE,
    ):
        assert steam.REASON_TEXT[code]


def test_large_input_is_evaluated_in_blocks_consistently():
    n = 3 * steam._BLOCK + 17
    p = np.full(n, 0.5)
    t = np.linspace(300.0, 1000.0, n)
    h = steam.h_pt(p, t)
    assert h[-1] == pytest.approx(steam.h_pt(0.5, 1000.0), rel=1e-15)
    assert h[steam._BLOCK] == pytest.approx(steam.h_pt(0.5, float(t[steam._BLOCK])), rel=1e-15)


def test_above_region2_goes_to_region5_or_is_out_of_range():
    # Region 5 (1073.15-2273.15 K, p <= 50 MPa) through iapws; beyond it, or above 50 MPa,
    # the point is out of range (R7-97(2012) section 4).
    p = np.array([1.0, 40.0, 1.0, 60.0])
    s = np.array([9.0, 7.0, 12.0, 8.0])
    h, d = steam.h_ps(p, s, return_details=True)
    assert d.region[:2].tolist() == [5, 5]
    assert h[0] == pytest.approx(IAPWS97(P=1.0, s=9.0).h, abs=1e-6)
    assert h[1] == pytest.approx(IAPWS97(P=40.0, s=7.0).h, abs=1e-6)
    assert d.reason.tolist() == [steam.OK, steam.OK, steam.OUT_OF_RANGE_S, steam.OUT_OF_RANGE_S]
    t, d = steam.t_ph(np.array([1.0, 60.0]), np.array([5000.0, 4500.0]), return_details=True)
    assert t[0] == pytest.approx(IAPWS97(P=1.0, h=5000.0).T, abs=1e-6)
    assert d.reason.tolist() == [steam.OK, steam.OUT_OF_RANGE_H]


def test_wet_states_above_16_5_mpa_fall_back_to_iapws():
    # Between 16.529 and 22.064 MPa the saturation line lies in region 3.
    p = 20.0
    s_mid = 0.5 * (steam.s_sat_liquid(p) + steam.s_sat_vapour(p))
    h, d = steam.h_ps(np.array([p]), np.array([s_mid]), return_details=True)
    ref = IAPWS97(P=p, s=s_mid)
    assert d.n_fallback == 1 and d.region[0] == 4
    assert h[0] == pytest.approx(ref.h, abs=1e-6)
    assert steam.x_ps(p, s_mid) == pytest.approx(ref.x, abs=1e-9)


def test_newton_that_cannot_converge_is_flagged_not_returned():
    # An entropy no region-1 temperature between the bounds reaches: not converged, no value.
    p = np.array([1.0])
    t, conv, props = steam._newton(
        1, "s", p, np.array([5.0]), np.array([300.0]), np.array([250.0]), np.array([400.0]), ("h",)
    )
    assert not conv[0]
    assert np.isnan(props["h"][0])


@settings(max_examples=30, deadline=None)
@given(st.floats(min_value=0.002, max_value=16.0), st.floats(min_value=0.0, max_value=1.0))
def test_wet_quality_round_trip(p, x):
    s = steam.s_sat_liquid(p) + x * (steam.s_sat_vapour(p) - steam.s_sat_liquid(p))
    h = steam.h_ps(p, s)
    h_mix = steam.h_sat_liquid(p) + x * (steam.h_sat_vapour(p) - steam.h_sat_liquid(p))
    assert h == pytest.approx(h_mix, rel=1e-12, abs=1e-9)
    if 1e-9 < x < 1.0 - 1e-9:
        assert steam.x_ps(p, s) == pytest.approx(x, abs=1e-9)
        assert steam.x_ph(p, h) == pytest.approx(x, abs=1e-9)
        assert steam.t_ph(p, h) == pytest.approx(steam.t_sat(p), rel=1e-14)


def test_benchmark_script_runs_and_reports_every_function():
    # A smoke run on tiny arrays: tests/bench/bench_steam.py works and prints its table (no
    # timing asserted).
    import subprocess
    import sys
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "bench" / "bench_steam.py"
    args = ["--n", "3000", "--sample", "10", "--repeat", "1", "--no-coolprop"]
    proc = subprocess.run([sys.executable, str(script), *args], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    for name in ("h_pt", "s_pt", "h_ps"):
        assert any(line.startswith(name) for line in out.splitlines())
    assert "targets" in out


def test_empty_and_nullable_inputs():
    assert steam.h_ps(np.array([]), np.array([])).shape == (0,)
    assert steam.x_ph(np.empty((0, 3)), 1.0).shape == (0, 3)
    s = pd.Series([1.0, None, 3.0], dtype="Float64")
    h, d = steam.h_pt(s, 600.0, return_details=True)
    assert isinstance(h, pd.Series) and np.isnan(h.iloc[1])
    assert d.reason.tolist() == [steam.OK, steam.NOT_FINITE, steam.OK]
    assert h.iloc[0] == pytest.approx(steam.h_pt(1.0, 600.0), rel=1e-15)


def test_h_and_s_in_one_pass_equal_h_pt_and_s_pt_bit_for_bit():
    # The private one-pass helper used by the section uncertainty must give exactly what the
    # public functions give (the figures it feeds are stored), including across blocks, at
    # region 3/5 fallback points, and NaN outside IF97; and it must match iapws (reference).
    p, t = _grid_pt()
    p = np.concatenate([p, [25.0, 5.0, -1.0, np.nan, 200.0], np.full(20000, 10.0)])
    t = np.concatenate([t, [650.0, 1200.0, 600.0, 600.0, 600.0], np.linspace(600.0, 900.0, 20000)])
    h, s = steam.hs_pt(p, t)
    assert np.array_equal(h, steam.h_pt(p, t), equal_nan=True)
    assert np.array_equal(s, steam.s_pt(p, t), equal_nan=True)
    assert np.isnan(h[-20003:-20000]).all() and np.isnan(s[-20003:-20000]).all()
    # iapws (reference library) at a region-1, a region-2, a region-3 and a region-5 point
    for pk, tk in ((3.0, 500.0), (0.0035, 700.0), (25.0, 650.0), (5.0, 1200.0)):
        hk, sk = steam.hs_pt(np.array([pk]), np.array([tk]))
        ref = IAPWS97(P=pk, T=tk)
        assert hk[0] == pytest.approx(ref.h, rel=1e-9)
        assert sk[0] == pytest.approx(ref.s, rel=1e-9)


def test_h_s_and_their_partial_derivatives_in_one_pass_match_iapws():
    # The sensitivity coefficients of the section uncertainty: (dh/dT)_p = cp,
    # (ds/dT)_p = cp/T, (dh/dp)_T = v - T (dv/dT)_p, (ds/dp)_T = -(dv/dT)_p (Maxwell), from
    # cp and alpha_v of R7-97(2012) Tables 3 and 12; reference: iapws's cp, alfav and v at the
    # same state (independent implementation). h and s bit for bit hs_pt, region 3/5 points
    # included (their derivatives NaN: the caller differences there).
    p, t = _grid_pt()
    p = np.concatenate([p, [25.0, 5.0, -1.0, np.nan], np.full(20000, 10.0)])
    t = np.concatenate([t, [650.0, 1200.0, 600.0, 600.0], np.linspace(600.0, 900.0, 20000)])
    d = steam.hs_slopes_pt(p, t)
    h, s = steam.hs_pt(p, t)
    assert np.array_equal(d["h"], h, equal_nan=True) and np.array_equal(d["s"], s, equal_nan=True)
    reg = steam.region(p, t)
    in12 = (reg == 1) | (reg == 2)
    assert in12.sum() > 100
    for k in ("dh_dt", "ds_dt", "dh_dp", "ds_dp"):
        assert np.isfinite(d[k][in12]).all() and np.isnan(d[k][~in12]).all(), k
    rng = np.random.default_rng(11)
    for i in rng.choice(np.flatnonzero(in12[:-20000]), size=60, replace=False).tolist() + [len(p) - 1]:
        ref = IAPWS97(P=float(p[i]), T=float(t[i]))
        dvdt = ref.alfav * ref.v
        assert d["dh_dt"][i] == pytest.approx(ref.cp, rel=1e-9)
        assert d["ds_dt"][i] == pytest.approx(ref.cp / t[i], rel=1e-9)
        assert d["dh_dp"][i] == pytest.approx(1000.0 * (ref.v - t[i] * dvdt), rel=1e-8, abs=1e-9)
        assert d["ds_dp"][i] == pytest.approx(-1000.0 * dvdt, rel=1e-8, abs=1e-12)


def test_saturation_states_in_one_pass_equal_the_public_functions_bit_for_bit():
    # The private one-pass saturation states (LP exhaust chain) must give exactly what the six
    # public saturation functions give, across blocks, near the critical point (their iapws
    # fallback) and NaN outside 611.213 Pa .. 22.064 MPa; and agree with iapws (reference).
    rng = np.random.default_rng(4)
    p = np.concatenate(
        [
            rng.uniform(0.002, 0.02, 20000),
            rng.uniform(0.001, 22.0, 2000),
            [16.6, 21.9, 22.064, 23.0, 0.0005, -1.0, np.nan],
        ]
    )
    d = steam.saturation_states(p)
    for key, fn in (
        ("hf", steam.h_sat_liquid),
        ("hg", steam.h_sat_vapour),
        ("sf", steam.s_sat_liquid),
        ("sg", steam.s_sat_vapour),
        ("vf", steam.v_sat_liquid),
        ("vg", steam.v_sat_vapour),
    ):
        assert np.array_equal(d[key], fn(p), equal_nan=True), key
    assert np.isnan(d["hf"][-4:]).all()
    liquid, vapour = IAPWS97(P=0.005, x=0.0), IAPWS97(P=0.005, x=1.0)
    d5 = steam.saturation_states(np.array([0.005]))
    assert d5["hf"][0] == pytest.approx(liquid.h, rel=1e-9) and d5["hg"][0] == pytest.approx(
        vapour.h, rel=1e-9
    )
    assert d5["sf"][0] == pytest.approx(liquid.s, rel=1e-9) and d5["vg"][0] == pytest.approx(
        vapour.v, rel=1e-9
    )


def test_end_state_from_one_solve_matches_h_ps_t_ps_and_v_ph():
    # The private one-solve end state: h bit for bit h_ps, T bit for bit t_ps, v within
    # 1e-12 of v_ph at that h (dry and wet states, a region-3 fallback point, NaN outside),
    # and iapws (reference library) at a dry and a wet point.
    p = np.array([3.0, 0.05, 0.01, 8.0, 25.0, -1.0, 0.5])
    s = np.array([7.0, 7.0, 8.3, 6.0, 5.0, 7.0, np.nan])
    h, t, v = steam.end_state_ps(p, s)
    assert np.array_equal(h, steam.h_ps(p, s), equal_nan=True)
    assert np.array_equal(t, steam.t_ps(p, s), equal_nan=True)
    np.testing.assert_allclose(v[:5], steam.v_ph(p[:5], h[:5]), rtol=1e-12)
    assert np.isnan(h[5:]).all() and np.isnan(t[5:]).all() and np.isnan(v[5:]).all()
    for k in (0, 1):
        ref = IAPWS97(P=float(p[k]), s=float(s[k]))
        assert h[k] == pytest.approx(ref.h, rel=1e-9)
        assert t[k] == pytest.approx(ref.T, rel=1e-9)
        assert v[k] == pytest.approx(ref.v, rel=1e-8)


def test_every_public_function_has_a_numpydoc_docstring():
    # a docstring built as an expression is no docstring (__doc__ None): each public function
    # documents its parameters with units, what it returns and the IAPWS reference
    missing = []
    for name in steam.__all__:
        fn = getattr(steam, name)
        if not callable(fn) or isinstance(fn, type):
            continue
        doc = fn.__doc__ or ""
        for part in ("Parameters\n", "Returns\n", "References\n", "[MPa]", "IAPWS R7-97"):
            if part not in doc:
                missing.append(f"{name}: {part.strip()}")
    assert not missing, missing


def _plain_rows_sum(b):
    # the reference order: row 0, then each next row added one by one
    out = b[0].copy()
    for r in range(1, b.shape[0]):
        out = out + b[r]
    return out


@pytest.mark.parametrize("rows", [1, 6, 9, 13, 27, 34])
def test_rows_sum_adds_rows_in_order_for_every_block_size(rows):
    # Property under test (issue 13 item 7), not a value: each point's sum is the plain
    # row-by-row sum, whatever the number of points; numpy's pairwise summation over one
    # point (rows >= 9) would differ in the last bits with these wide-ranging terms.
    rng = np.random.default_rng(rows)
    for m in [*range(1, 71), 127, 128, 129, steam._BLOCK - 1, steam._BLOCK]:
        b = rng.normal(size=(rows, m)) * 10.0 ** rng.integers(-8, 8, size=(rows, m))
        assert np.array_equal(steam._rows_sum(b), _plain_rows_sum(b)), m


def test_a_point_gives_the_same_bits_alone_and_in_any_block():
    # h, s and h(p, s) of a point do not depend on the points evaluated with it (issue 13
    # item 7): alone, in a block of 2, in a full block and across a block boundary.
    rng = np.random.default_rng(3)
    n = steam._BLOCK + 50
    p = np.exp(rng.uniform(np.log(0.005), np.log(20.0), n))
    t = steam.t_sat(p) + rng.uniform(5.0, 200.0, n)
    h, s = steam.h_pt(p, t), steam.s_pt(p, t)
    hs = steam.h_ps(p * 0.3, s)
    for k in (0, 1, 17, steam._BLOCK - 1, steam._BLOCK, n - 1):
        assert steam.h_pt(p[k : k + 1], t[k : k + 1])[0] == h[k]
        assert steam.s_pt(p[k : k + 2], t[k : k + 2])[0] == s[k]
        assert steam.h_ps(p[k : k + 1] * 0.3, s[k : k + 1])[0] == hs[k]
