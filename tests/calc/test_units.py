"""Checks of isentrope.calc.units against NIST SP 811 (2008), Appendix B.8/B.9."""

import re
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from isentrope.calc import units
from isentrope.calc.units import UnitWarning, convert, to_internal

# (unit, value in that unit, SI value [Pa or kg], relative tolerance); source of each SI value:
# NIST SP 811 (2008) Appendix B.8, factors printed to 7 significant digits.
NIST_PRESSURE = [
    ("psia", 1.0, 6.894757e3, 1e-7),  # pound-force per square inch: 6.894 757 E+03 Pa
    ("inHgA", 1.0, 3.38638e3, 1e-9),  # inch of mercury (32 degF): 3.386 38 E+03 Pa
    ("mmHgA", 1.0, 1.333224e2, 1e-9),  # millimeter of mercury, conventional: 1.333 224 E+02 Pa
    ("bar(a)", 1.0, 1.0e5, 1e-12),  # bar: 1.0 E+05 Pa
    ("kPa(a)", 1.0, 1.0e3, 1e-12),  # SI prefix
]


@pytest.mark.parametrize("unit,value,pa,rtol", NIST_PRESSURE)
def test_pressure_factors_match_nist_sp811(unit, value, pa, rtol):
    assert convert(value, unit, "MPa(a)") == pytest.approx(pa * 1e-6, rel=rtol)


def test_pound_factor_matches_nist_sp811():
    # NIST SP 811 (2008) B.8: pound (avoirdupois) = 4.535 924 E-01 kg; hour = 3600 s.
    assert convert(3600.0, "lb/h", "kg/s") == pytest.approx(0.4535924, rel=1e-7)
    assert convert(3600.0, "klb/h", "kg/s") == pytest.approx(453.5924, rel=1e-7)
    # NIST SP 811 (2008) B.8: ton, metric = 1.0 E+03 kg.
    assert convert(3.6, "t/h", "kg/s") == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(
    "value,unit,kelvin",
    [
        (32.0, "degF", 273.15),  # NIST SP 811 B.9: T/K = (t/degF + 459.67)/1.8
        (212.0, "degF", 373.15),  # same formula
        (-459.67, "degF", 0.0),  # same formula: absolute zero
        (0.0, "degC", 273.15),  # NIST SP 811 B.9: T/K = t/degC + 273.15
        (538.0, "degC", 811.15),  # same formula
        (300.0, "K", 300.0),
    ],
)
def test_temperature_formulas_match_nist_sp811(value, unit, kelvin):
    assert convert(value, unit, "K") == pytest.approx(kelvin, abs=1e-9)


def test_fahrenheit_celsius_meet_at_minus_40():
    # NIST SP 811 B.9 formulas: -40 degF = -40 degC.
    assert convert(-40.0, "degF", "degC") == pytest.approx(-40.0, abs=1e-12)


def test_power_and_percent():
    assert convert(2500.0, "kW", "MW") == pytest.approx(2.5, rel=1e-12)  # SI prefixes
    assert convert(57.0, "%", "%") == 57.0


def test_gauge_needs_barometric_and_warns_on_default():
    # 1 atm = 101.325 kPa: NIST SP 811 (2008) B.8 (standard atmosphere, exact).
    with pytest.warns(UnitWarning, match="101.325"):
        p = convert(0.0, "psig", "kPa(a)")
    assert p == pytest.approx(101.325, rel=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert convert(10.0, "bar(g)", "bar(a)", barometric_kpa=95.0) == pytest.approx(10.95, rel=1e-12)
        # gauge to gauge needs no barometer
        assert convert(1.0, "bar(g)", "kPa(g)") == pytest.approx(100.0, rel=1e-12)


def test_types_follow_input():
    assert isinstance(convert(1.0, "psia", "MPa(a)"), float)
    arr = convert(np.array([1.0, 2.0]), "psia", "MPa(a)")
    assert isinstance(arr, np.ndarray) and arr.shape == (2,)
    s = pd.Series([1.0, 2.0], index=pd.Index([5, 7]), name="x")
    out = convert(s, "psia", "MPa(a)")
    assert isinstance(out, pd.Series) and list(out.index) == [5, 7] and out.name == "x"


def test_spellings_are_accepted_case_insensitively():
    assert units.canonical_unit("BARA") == "bar(a)"
    assert units.canonical_unit(" kpag ") == "kPa(g)"
    assert units.canonical_unit("°F") == "degF"
    assert units.canonical_unit("klb/hr") == "klb/h"
    assert units.quantity("inhga") == "pressure"


def test_unknown_unit_lists_known_ones():
    with pytest.raises(ValueError, match="unknown unit 'furlong'") as err:
        convert(1.0, "furlong", "MPa(a)")
    for name in units.KNOWN_UNITS:
        assert name in str(err.value)


def test_ambiguous_pressure_unit_is_refused():
    with pytest.raises(ValueError, match="absolute or gauge"):
        units.canonical_unit("bar")
    # the message says what to write instead, and that spelling is accepted
    for said, instead in (
        ("psi", "psia or psig"),
        ("bar", "bar(a) or bar(g)"),
        ("mbar", "mbar(a) or mbar(g)"),
        ("inHg", "inHgA"),
    ):
        with pytest.raises(ValueError, match=re.escape(f"write {instead}")):
            units.canonical_unit(said)
        units.canonical_unit(instead.split(" ")[0])


def test_millibar_for_condenser_pressures():
    # 1 mbar = 100 Pa (NIST SP 811, 1 bar = 1e5 Pa exactly): 50 mbar(a) = 5 kPa(a); gauge
    # millibar refers to the barometric pressure like the other gauge units.
    assert convert(50.0, "mbar(a)", "kPa(a)") == pytest.approx(5.0, rel=1e-15)
    assert convert(-950.0, "mbar(g)", "kPa(a)", barometric_kpa=101.325) == pytest.approx(6.325, rel=1e-12)
    assert units.canonical_unit("MBARA") == "mbar(a)" and units.canonical_unit("psi(g)") == "psig"


def test_different_quantities_refused():
    with pytest.raises(ValueError, match="different quantities"):
        convert(1.0, "degC", "MPa(a)")


def test_implausible_barometric_constant_refused():
    with pytest.raises(ValueError, match="plausible range"):
        convert(1.0, "psig", "psia", barometric_kpa=14.7)


def _index(n):
    return pd.date_range("2031-04-01", periods=n, freq="1min", tz="UTC", name="time")


def test_to_internal_table_driven():
    idx = _index(3)
    raw = pd.DataFrame(
        {
            "throttle_p": [2400.0, 2400.0, "bad"],
            "throttle_t": [1000.0, 1005.0, 1010.0],
            "condenser_p": [1.5, 2.0, np.nan],
            "main_steam_flow": [4.0e6, 4.1e6, 4.2e6],
            "gross_output": [500000.0, 510000.0, 520000.0],
            "valve_position": [80.0, 81.0, 82.0],
        },
        index=idx,
    )
    before = raw.copy()
    unit_of = {
        "throttle_p": "psig",
        "throttle_t": "degF",
        "condenser_p": "inHgA",
        "main_steam_flow": "lb/h",
        "gross_output": "kW",
        "valve_position": "%",
        "hot_reheat_p": "psig",  # not in the frame: ignored
    }
    out = to_internal(raw, unit_of, barometric_kpa=100.0)
    pd.testing.assert_frame_equal(raw, before)  # input untouched
    assert list(out.columns) == list(raw.columns) and out.index.equals(idx)
    assert all(dtype == np.float64 for dtype in out.dtypes)
    # psi factor NIST SP 811 B.8 (6.894 757 E+03 Pa) plus the configured 100 kPa
    assert out["throttle_p"].iloc[0] == pytest.approx(2400 * 6.894757e-3 + 0.1, rel=1e-7)
    assert np.isnan(out["throttle_p"].iloc[2])  # not a number -> NaN, row kept
    assert out["throttle_t"].iloc[0] == pytest.approx((1000 + 459.67) / 1.8, rel=1e-12)  # NIST B.9
    assert out["condenser_p"].iloc[0] == pytest.approx(1.5 * 3.38638e-3, rel=1e-9)  # NIST B.8
    assert np.isnan(out["condenser_p"].iloc[2])
    assert out["main_steam_flow"].iloc[0] == pytest.approx(4.0e6 * 0.4535924 / 3600, rel=1e-7)  # NIST B.8
    assert out["gross_output"].iloc[1] == pytest.approx(510.0, rel=1e-12)
    assert out["valve_position"].iloc[2] == 82.0


def test_to_internal_gauge_uses_barometric_column_then_constant():
    idx = _index(3)
    raw = pd.DataFrame({"throttle_p": [100.0, 100.0, 100.0], "barometric_p": [29.0, np.nan, 30.0]}, index=idx)
    out = to_internal(raw, {"throttle_p": "bar(g)", "barometric_p": "inHgA"}, barometric_kpa=98.0)
    inhg = 3.38638e-3  # MPa per inHg (32 degF), NIST SP 811 B.8
    assert out["throttle_p"].tolist() == pytest.approx(
        [10.0 + 29 * inhg, 10.098, 10.0 + 30 * inhg], rel=1e-12
    )
    # the barometric column itself is converted like any absolute pressure; the hole stays NaN
    assert out["barometric_p"].iloc[0] == pytest.approx(29 * inhg, rel=1e-12)
    assert np.isnan(out["barometric_p"].iloc[1])
    # with no constant, the hole falls back to the standard atmosphere, with a warning
    with pytest.warns(UnitWarning, match="1 sample"):
        out = to_internal(raw, {"throttle_p": "bar(g)", "barometric_p": "inHgA"})
    assert out["throttle_p"].iloc[1] == pytest.approx(10.101325, rel=1e-12)


def test_to_internal_default_atmosphere_warns():
    raw = pd.DataFrame({"crossover_p": [120.0]}, index=_index(1))
    with pytest.warns(UnitWarning, match="crossover_p"):
        out = to_internal(raw, {"crossover_p": "psig"})
    assert out["crossover_p"].iloc[0] == pytest.approx(120 * 6.894757e-3 + 0.101325, rel=1e-7)


def test_to_internal_no_warning_without_gauge():
    raw = pd.DataFrame({"crossover_p": [120.0]}, index=_index(1))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        to_internal(raw, {"crossover_p": "psia"})


def test_to_internal_errors():
    raw = pd.DataFrame({"throttle_p": [1.0], "throttle_t": [500.0]}, index=_index(1))
    with pytest.raises(ValueError, match="no unit declared for column.*throttle_t"):
        to_internal(raw, {"throttle_p": "MPa(a)"})
    with pytest.raises(ValueError, match="unknown unit 'Pa'"):
        to_internal(raw, {"throttle_p": "Pa", "throttle_t": "K"})
    with pytest.raises(ValueError, match="throttle_t is temperature but its unit psia is pressure"):
        to_internal(
            raw,
            {"throttle_p": "MPa(a)", "throttle_t": "psia"},
            quantity_of={"throttle_p": "pressure", "throttle_t": "temperature"},
        )
    baro = pd.DataFrame({"throttle_p": [1.0], "barometric_p": [0.0]}, index=_index(1))
    with pytest.raises(ValueError, match="absolute pressure unit"):
        to_internal(baro, {"throttle_p": "psig", "barometric_p": "psig"})
    with pytest.raises(ValueError, match="DataFrame"):
        to_internal({"throttle_p": [1.0]}, {"throttle_p": "psia"})


@settings(max_examples=60, deadline=None)
@given(
    st.sampled_from([u for u in units.KNOWN_UNITS if units.UNITS[u].quantity == "pressure"]),
    st.sampled_from([u for u in units.KNOWN_UNITS if units.UNITS[u].quantity == "pressure"]),
    st.floats(-1e3, 1e4, allow_nan=False),
    st.floats(60.0, 105.0),
)
def test_pressure_round_trip(a, b, value, baro):
    there = convert(value, a, b, barometric_kpa=baro)
    back = convert(there, b, a, barometric_kpa=baro)
    assert back == pytest.approx(value, rel=1e-9, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(st.floats(-200.0, 1500.0, allow_nan=False), st.floats(-200.0, 1500.0, allow_nan=False))
def test_temperature_conversion_is_monotonic(t1, t2):
    # A conversion between temperature scales keeps order (common practice, no source).
    k1, k2 = convert(t1, "degF", "K"), convert(t2, "degF", "K")
    assert (k1 - k2) * (t1 - t2) >= 0
