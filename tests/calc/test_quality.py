"""Checks of isentrope.calc.quality: each reason code from a constructed frame; a clean frame
raises none. Section states are the "large reheat unit" cases of calc/REFERENCES.md (invented for
checks, computed with iapws); saturation and efficiency oracles are the iapws package (IF97).
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from iapws import IAPWS97

from isentrope.calc import quality
from isentrope.calc.quality import Reason, screen

# calc/REFERENCES.md, "Large reheat unit, section by section" (invented for checks, iapws):
# HP 16.55 MPa / 538 degC -> 3.9 MPa / 330 degC, efficiency 0.8626;
# IP 3.55 MPa / 538 degC -> 0.95 MPa / 350 degC, efficiency 0.9022.
STATE = {
    "throttle_p": 16.55,
    "throttle_t": 538.0 + 273.15,
    "cold_reheat_p": 3.9,
    "cold_reheat_t": 330.0 + 273.15,
    "hot_reheat_p": 3.55,
    "hot_reheat_t": 538.0 + 273.15,
    "crossover_p": 0.95,
    "crossover_t": 350.0 + 273.15,
    "condenser_p": 0.005,  # 5 kPa, calc/REFERENCES.md LP case
    "gross_output": 480.0,  # invented (demo-style) load of the fictional unit [MW]
}
# Noise levels: invented, typical transmitter noise (common practice, no source).
NOISE = {
    "throttle_p": 0.01,
    "throttle_t": 0.3,
    "cold_reheat_p": 0.003,
    "cold_reheat_t": 0.3,
    "hot_reheat_p": 0.003,
    "hot_reheat_t": 0.3,
    "crossover_p": 0.001,
    "crossover_t": 0.3,
    "condenser_p": 0.00002,
    "gross_output": 0.5,
}


def _index(n, start="2031-05-04"):
    return pd.date_range(start, periods=n, freq="1min", tz="UTC", name="time")


def _plant(n=180, seed=7, roles=None, noise=True):
    rng = np.random.default_rng(seed)
    roles = roles or list(STATE)
    return pd.DataFrame(
        {r: STATE[r] + (rng.normal(0.0, NOISE[r], n) if noise else 0.0) for r in roles}, index=_index(n)
    )


def _only(mask, reason):
    return mask.to_numpy() & int(reason) != 0


def test_clean_frame_triggers_nothing():
    f = _plant()
    res = screen(f, return_details=True)
    assert res.ok.all()
    assert (res.flags.to_numpy() == 0).all()
    assert (res.section_flags.to_numpy() == 0).all()
    summary = res.summary()
    assert summary["flagged"].sum() == 0
    assert (summary["samples"] == len(f)).all()
    assert set(res.section_flags.columns) == {"hp", "ip", "lp"}
    assert res.describe_rows().empty


def test_efficiencies_in_details_match_reference_cases():
    res = screen(_plant(n=20, noise=False), return_details=True)
    # calc/REFERENCES.md large reheat unit (iapws): HP 0.8626, IP 0.9022
    assert res.details["hp_efficiency"].to_numpy() == pytest.approx(0.8626, abs=1e-4)
    assert res.details["ip_efficiency"].to_numpy() == pytest.approx(0.9022, abs=1e-4)


def test_shape_and_index_kept_and_nothing_dropped():
    f = _plant(n=50)
    f.iloc[3] = np.nan
    res = screen(f)
    assert res.flags.index.equals(f.index) and list(res.flags.columns) == list(f.columns)
    assert len(res.row_flags) == len(res.ok) == len(f)
    assert res.flags.dtypes.eq(np.int64).all() and res.row_flags.dtype == np.int64


def test_missing():
    f = _plant(n=60)
    f.iloc[10, f.columns.get_loc("throttle_t")] = np.nan
    f.iloc[11, f.columns.get_loc("condenser_p")] = np.inf
    res = screen(f)
    assert res.flags["throttle_t"].iloc[10] == Reason.MISSING
    assert res.flags["condenser_p"].iloc[11] == Reason.MISSING
    assert np.flatnonzero(~res.ok.to_numpy()).tolist() == [10, 11]
    assert res.section_flags["hp"].iloc[10] == Reason.MISSING  # via the role
    assert res.section_flags["ip"].iloc[10] == 0
    assert res.names(res.row_flags.iloc[10]) == ["MISSING"]


def test_out_of_range_configured_and_default():
    f = _plant(n=60, roles=["throttle_p", "throttle_t"])
    f.iloc[5, 0] = 19.0
    f.iloc[6, 1] = 1200.0  # above 1073.15 K, the IF97 limit (IAPWS R7-97(2012))
    res = screen(f, ranges={"throttle_p": (10.0, 18.0)}, spike=None)
    assert res.flags["throttle_p"].iloc[5] == Reason.OUT_OF_RANGE
    assert res.flags["throttle_t"].iloc[6] == Reason.OUT_OF_RANGE
    assert np.count_nonzero(res.flags.to_numpy()) == 2
    # with the spike test on, such jumps are spikes as well
    assert res.names(screen(f).flags["throttle_t"].iloc[6]) == ["OUT_OF_RANGE", "SPIKE"]
    # a range switched off
    res = screen(f, ranges={"throttle_t": None}, spike=None)
    assert res.flags["throttle_t"].iloc[6] == 0


def test_flatline_flags_the_whole_stuck_stretch_only():
    f = _plant(n=400, roles=["throttle_t", "hot_reheat_t"])
    f.iloc[100:250, 0] = 811.42  # stuck for 150 min (> 2 h)
    f.iloc[300:360, 1] = 811.0  # constant for 60 min (< 2 h): not a flatline
    res = screen(f)
    flat = _only(res.flags["throttle_t"], Reason.FLATLINE)
    assert np.flatnonzero(flat).tolist() == list(range(100, 250))
    assert not _only(res.flags["hot_reheat_t"], Reason.FLATLINE).any()
    # shorter duration configured: the hour-long stretch is caught too
    res = screen(f, flatline="45m")
    assert np.flatnonzero(_only(res.flags["hot_reheat_t"], Reason.FLATLINE)).tolist() == list(range(300, 360))
    # switched off
    assert not _only(screen(f, flatline=None).flags["throttle_t"], Reason.FLATLINE).any()


def test_flatline_tolerates_missing_samples_and_irregular_grid():
    f = _plant(n=400, roles=["throttle_t"])
    f.iloc[100:250, 0] = 811.42
    f.iloc[150:153, 0] = np.nan
    res = screen(f)
    flat = _only(res.flags["throttle_t"], Reason.FLATLINE)
    assert np.flatnonzero(flat).tolist() == [i for i in range(100, 250) if i not in (150, 151, 152)]
    # irregular grid: drop every 7th sample
    g = f.drop(f.index[::7])
    res = screen(g)
    stuck = (g.index >= f.index[100]) & (g.index < f.index[250]) & np.isfinite(g["throttle_t"].to_numpy())
    assert (_only(res.flags["throttle_t"], Reason.FLATLINE) == stuck).all()


def test_spike():
    f = _plant(n=120, roles=["hot_reheat_t", "gross_output"])
    f.iloc[60, 0] += 25.0  # a 25 K jump for one sample
    f.iloc[80, 1] -= 60.0  # a 60 MW dip for one sample
    res = screen(f, return_details=True)
    assert np.flatnonzero(_only(res.flags["hot_reheat_t"], Reason.SPIKE)).tolist() == [60]
    assert np.flatnonzero(_only(res.flags["gross_output"], Reason.SPIKE)).tolist() == [80]
    assert res.details["hot_reheat_t_spike_score"].iloc[60] > 20
    # a step change (load change) is not a spike
    g = _plant(n=120, roles=["gross_output"])
    g.iloc[60:, 0] += 50.0
    assert not _only(screen(g).flags["gross_output"], Reason.SPIKE).any()
    assert not _only(screen(f, spike=None).flags["hot_reheat_t"], Reason.SPIKE).any()


def test_p_not_falling():
    f = _plant(n=30)
    f.iloc[7, f.columns.get_loc("cold_reheat_p")] = 17.0  # above the throttle pressure
    res = screen(f, spike=None)  # such a jump is also a spike; keep to the physics here
    assert res.section_flags["hp"].iloc[7] & Reason.P_NOT_FALLING
    assert res.row_flags.iloc[7] & Reason.P_NOT_FALLING
    assert res.flags["cold_reheat_p"].iloc[7] == 0  # a row-level finding, not a role flag
    assert np.flatnonzero(~res.ok.to_numpy()).tolist() == [7]


def test_inlet_not_superheated():
    # T_sat(16.55 MPa) = 623.25 K (IF97 via iapws); 620 K is below it.
    assert IAPWS97(P=16.55, x=1).T == pytest.approx(623.25, abs=0.01)
    f = _plant(n=30)
    f.iloc[4, f.columns.get_loc("throttle_t")] = 620.0
    res = screen(f)
    assert res.section_flags["hp"].iloc[4] & Reason.INLET_NOT_SUPERHEATED
    assert not res.section_flags["hp"].iloc[4] & Reason.T_RISES  # 603 K outlet still below
    # LP inlet (crossover) below T_sat(0.95 MPa) = 450.8 K (iapws)
    g = _plant(n=30)
    g.iloc[9, g.columns.get_loc("crossover_t")] = 445.0
    res = screen(g)
    assert res.section_flags["lp"].iloc[9] & Reason.INLET_NOT_SUPERHEATED
    assert res.ok.sum() == 29


def test_supercritical_inlet_compared_with_critical_temperature():
    # IAPWS R7-97(2012): critical point 22.064 MPa, 647.096 K. A 24.1 MPa / 600 degC throttle is fine.
    f = _plant(n=20, noise=False)
    f["throttle_p"] = 24.1
    f["throttle_t"] = 873.15
    f["cold_reheat_p"] = 4.5
    f["cold_reheat_t"] = 600.0 + 273.15 - 260.0
    res = screen(f, return_details=True)
    assert not (res.section_flags["hp"].to_numpy() & int(Reason.INLET_NOT_SUPERHEATED)).any()
    f["throttle_t"] = 640.0
    res = screen(f)
    assert (res.section_flags["hp"].to_numpy() & int(Reason.INLET_NOT_SUPERHEATED)).all()


def test_t_rises():
    f = _plant(n=30)
    f.iloc[12, f.columns.get_loc("crossover_t")] = 820.0  # above the hot reheat temperature
    res = screen(f, spike=None)
    assert res.section_flags["ip"].iloc[12] & Reason.T_RISES
    assert res.names(res.row_flags.iloc[12]) == ["T_RISES"]


@pytest.mark.parametrize("t_out,expected", [(700.0, 0.2950), (560.0, 1.1484)])
def test_efficiency_implausible(t_out, expected):
    # Oracle: HP efficiency 16.55 MPa / 811.15 K -> 3.9 MPa / t_out with iapws (IF97).
    a = IAPWS97(P=16.55, T=811.15)
    b, c = IAPWS97(P=3.9, T=t_out), IAPWS97(P=3.9, s=a.s)
    assert (a.h - b.h) / (a.h - c.h) == pytest.approx(expected, abs=1e-3)
    f = _plant(n=30, noise=False)
    f.iloc[3, f.columns.get_loc("cold_reheat_t")] = t_out
    res = screen(f, spike=None, return_details=True)
    assert res.names(res.section_flags["hp"].iloc[3]) == ["EFFICIENCY_IMPLAUSIBLE"]
    assert res.details["hp_efficiency"].iloc[3] == pytest.approx(expected, abs=1e-3)
    assert np.flatnonzero(~res.ok.to_numpy()).tolist() == [3]
    # a wider band accepts the low one
    res = screen(f, spike=None, efficiency_band=(0.2, 1.0))
    assert res.ok.iloc[3] == (expected <= 1.0)


def _lp_group_case():
    """LP dry group 0.25 MPa / 503.15 K -> 0.05 MPa with efficiency 0.85 (invented, iapws)."""
    inlet = IAPWS97(P=0.25, T=503.15)
    h_s = IAPWS97(P=0.05, s=inlet.s).h
    out = IAPWS97(P=0.05, h=inlet.h - 0.85 * (inlet.h - h_s))
    assert out.x == 1 and out.T > IAPWS97(P=0.05, x=1).T  # still superheated
    f = _plant(n=10, noise=False)
    f["crossover_p"] = 0.25
    f["crossover_t"] = 503.15
    f["lp_extraction_p"] = 0.05
    f["lp_extraction_t"] = out.T
    # keep the IP section consistent with the lower crossover state
    f["hot_reheat_p"] = 0.9
    f["hot_reheat_t"] = 673.15
    return f


def test_gauge_absolute_hint_on_impossible_expansion():
    f = _lp_group_case()
    res = screen(f, return_details=True)
    assert (res.section_flags["lp_group"] == 0).all()
    assert res.details["lp_group_efficiency"].to_numpy() == pytest.approx(0.85, abs=1e-6)
    # the extraction transmitter reads absolute but was declared gauge: +1 atm
    f["lp_extraction_p"] = 0.05 + 0.101325
    res = screen(f)
    names = res.names(res.section_flags["lp_group"].iloc[0])
    assert "GAUGE_ABSOLUTE_SUSPECT" in names and "EFFICIENCY_IMPLAUSIBLE" in names
    assert "gauge" in quality.describe(res.section_flags["lp_group"].iloc[0])
    # the LP dry group is optional: it does not spoil the row by default
    assert res.ok.all()
    res = screen(f, needed=tuple(f.columns))
    assert not res.ok.any()


def test_gauge_absolute_hint_not_given_when_a_shift_does_not_help():
    f = _plant(n=10, noise=False)
    f["crossover_p"] = 3.6  # above the hot reheat pressure by more than one atmosphere
    res = screen(f)
    m = res.section_flags["ip"].iloc[0]
    assert m & Reason.P_NOT_FALLING and not m & Reason.GAUGE_ABSOLUTE_SUSPECT


def test_gauge_absolute_hint_on_out_of_range_pressure():
    f = _plant(n=10, roles=["condenser_p"], noise=False)
    f.iloc[2, 0] = 0.005 + 0.101325  # an absolute 5 kPa declared kPa(g): above the atmosphere
    f.iloc[3, 0] = 0.005 - 0.101325  # a gauge vacuum reading declared absolute: negative
    f.iloc[4, 0] = 0.5  # far off: no hint
    res = screen(f)
    flags = res.flags["condenser_p"]
    assert res.names(flags.iloc[2]) == ["OUT_OF_RANGE", "GAUGE_ABSOLUTE_SUSPECT"]
    assert res.names(flags.iloc[3]) == ["OUT_OF_RANGE", "GAUGE_ABSOLUTE_SUSPECT"]
    assert res.names(flags.iloc[4]) == ["OUT_OF_RANGE"]


def test_optional_role_flags_do_not_spoil_the_row():
    f = _plant(n=200)
    f["valve_position"] = 100.0  # wide open for hours: legitimate, no flatline test
    f["main_steam_flow"] = np.nan
    res = screen(f)
    assert res.ok.all()
    assert (res.flags["main_steam_flow"] == int(Reason.MISSING)).all()
    assert (res.flags["valve_position"] == 0).all()


def test_summary_counts_and_row_labels():
    f = _plant(n=60)
    f.iloc[[1, 2], f.columns.get_loc("throttle_t")] = np.nan
    f.iloc[5, f.columns.get_loc("crossover_t")] = 820.0
    res = screen(f)
    s = res.summary()
    assert s.loc["crossover_t", "SPIKE"] == 1  # the jump is a spike of the role too
    assert s.loc["throttle_t", "MISSING"] == 2
    assert s.loc["section:hp", "MISSING"] == 2
    assert s.loc["section:ip", "T_RISES"] == 1
    assert s.loc["row", "flagged"] == 3
    labels = res.describe_rows()
    assert labels.tolist() == ["MISSING", "MISSING", "SPIKE,T_RISES"]
    assert list(labels.index) == list(f.index[[1, 2, 5]])


def test_reason_names_and_errors():
    assert quality.reason_names(Reason.MISSING | Reason.SPIKE) == ["MISSING", "SPIKE"]
    assert quality.reason_names(0) == []
    assert quality.describe(0) == ""
    with pytest.raises(ValueError, match="not Reason codes"):
        quality.reason_names(1 << 20)


def test_needed_roles_match_the_role_table():
    from isentrope.daemon.roles import REQUIRED_ROLES

    assert set(quality.NEEDED_ROLES) == set(REQUIRED_ROLES)


def test_bad_arguments():
    f = _plant(n=20, roles=["throttle_t"])
    with pytest.raises(ValueError, match="DatetimeIndex"):
        screen(f.reset_index(drop=True))
    with pytest.raises(ValueError, match="sorted"):
        screen(f.iloc[::-1])
    with pytest.raises(ValueError, match="odd number"):
        screen(f, spike=4)
    with pytest.raises(ValueError, match="duration"):
        screen(f, flatline="soon")
    with pytest.raises(ValueError, match="efficiency_band"):
        screen(f, efficiency_band=(0.9, 0.5))
    with pytest.raises(ValueError, match="low <= high"):
        screen(f, ranges={"throttle_t": (900.0, 300.0)})
    with pytest.raises(ValueError, match="not columns"):
        screen(f, needed=("throttle_p",))
    g = f.astype(object)
    g.iloc[0, 0] = "n/a"
    with pytest.raises(ValueError, match="not numeric"):
        screen(g)


@settings(max_examples=20, deadline=None)
@given(
    p_in=st.floats(5.0, 20.0),
    superheat=st.floats(30.0, 200.0),
    ratio=st.floats(0.15, 0.6),
    eta=st.floats(0.6, 0.95),
)
def test_physically_consistent_sections_are_clean(p_in, superheat, ratio, eta):
    # Oracle: an expansion built with iapws (IF97) at the given efficiency, outlet superheated.
    t_in = IAPWS97(P=p_in, x=1).T + superheat
    inlet = IAPWS97(P=p_in, T=t_in)
    p_out = p_in * ratio
    out = IAPWS97(P=p_out, h=inlet.h - eta * (inlet.h - IAPWS97(P=p_out, s=inlet.s).h))
    if not (out.x == 1 and out.T > IAPWS97(P=p_out, x=1).T + 0.5):
        return  # a wet outlet: p and T do not fix the state, not a case for this check
    f = pd.DataFrame(
        {"throttle_p": [p_in], "throttle_t": [t_in], "cold_reheat_p": [p_out], "cold_reheat_t": [out.T]},
        index=_index(1),
    )
    res = screen(f, return_details=True)
    assert res.section_flags["hp"].iloc[0] == 0
    assert res.details["hp_efficiency"].iloc[0] == pytest.approx(eta, abs=1e-5)


@settings(max_examples=25, deadline=None)
@given(st.lists(st.booleans(), min_size=5, max_size=60))
def test_missing_exactly_where_nan(holes):
    f = _plant(n=len(holes), roles=["throttle_t", "gross_output"])
    f.loc[np.array(holes), "throttle_t"] = np.nan
    res = screen(f)
    assert ((res.flags["throttle_t"].to_numpy() & int(Reason.MISSING)) != 0).tolist() == holes
    assert (~res.ok).tolist() == holes


def test_empty_and_single_row_frames():
    empty = _plant(n=0)
    res = screen(empty)
    assert res.ok.empty and res.flags.shape == (0, len(STATE))
    assert (res.summary()["samples"] == 0).all()
    one = _plant(n=1, noise=False)
    assert screen(one).ok.tolist() == [True]


def test_precomputed_efficiencies_are_used():
    f = _plant(n=40)
    own = screen(f, return_details=True)
    given = {"hp": own.details["hp_efficiency"], "ip": own.details["ip_efficiency"].to_numpy()}
    again = screen(f, efficiencies=given, return_details=True)
    pd.testing.assert_frame_equal(own.section_flags, again.section_flags)
    # a given value outside the band is flagged: the given figures are what is tested
    bad = own.details["hp_efficiency"].copy()
    bad.iloc[5] = 0.3
    res = screen(f, efficiencies={"hp": bad})
    assert np.flatnonzero(~res.ok.to_numpy()).tolist() == [5]
    assert res.names(res.section_flags["hp"].iloc[5]) == ["EFFICIENCY_IMPLAUSIBLE"]
    with pytest.raises(ValueError, match="unknown section 'lp'"):
        screen(f, efficiencies={"lp": bad})
    with pytest.raises(ValueError, match="one value per row"):
        screen(f, efficiencies={"hp": bad.to_numpy()[:-1]})
    with pytest.raises(ValueError, match="same index"):
        screen(f, efficiencies={"hp": bad.reset_index(drop=True)})


def _noise_oracle(values, index, block="1h"):
    """Per-sample robust noise level by plain pandas grouping on clock blocks (test oracle)."""
    s = pd.Series(values, index=index).dropna()
    key = s.index.floor(block)
    d = s.diff().abs().where(key == np.roll(key, 1))  # pairs inside one block only
    d.iloc[0] = np.nan
    med = d.groupby(key).median() * 1.482602218505602 / np.sqrt(2.0)
    return pd.Series(med.reindex(key).to_numpy(), index=s.index).reindex(index)


@pytest.mark.parametrize("irregular", [False, True])
def test_noise_level_per_clock_block(irregular):
    rng = np.random.default_rng(4)
    idx = pd.date_range("2031-05-04 00:17", periods=400, freq="1min", tz="UTC")
    v = rng.normal(0, 1, 400) * np.repeat([0.5, 2.0, 1.0, 3.0, 1.0, 1.0, 1.0], 60)[:400]
    v[[5, 6, 70, 300]] = np.nan
    if irregular:
        keep = np.ones(400, dtype=bool)
        keep[rng.choice(400, 40, replace=False)] = False
        idx, v = idx[keep], v[keep]
    t = idx.as_unit("ns").asi8
    got = quality._noise_scale(v, t, int(pd.Timedelta("1h").value))
    want = _noise_oracle(v, idx).to_numpy()
    finite = np.isfinite(v)
    np.testing.assert_allclose(got[finite], want[finite], rtol=1e-12)


@settings(max_examples=15, deadline=None)
@given(cut=st.integers(1, 300))
def test_flags_do_not_depend_on_where_the_frame_starts(cut):
    # A sample's flags depend only on data within the flatline duration, the spike window
    # and its clock hour; so far from the cut, a frame that starts later gives the same flags.
    f = _plant(n=900, roles=["throttle_t", "gross_output", "crossover_t"], seed=12)
    rng = np.random.default_rng(12)
    rows = rng.choice(900, 40, replace=False)
    f.iloc[rows, 0] += rng.uniform(1.0, 4.0, 40)  # jumps near the spike threshold
    f.iloc[400:560, 1] = 480.25  # a stuck load transmitter for 160 min
    whole = screen(f)
    part = screen(f.iloc[cut:])
    safe = f.index >= f.index[cut] + pd.Timedelta("3h")
    pd.testing.assert_frame_equal(whole.flags.loc[safe], part.flags.loc[safe[cut:]])


# --- the relative flatline tolerance -------------------------------------------------------
def _flat_oracle(values, k, tol, rel):
    """Plain definition on a regular grid without gaps: a sample is flagged when it lies in a
    window of k + 1 successive samples (the flatline duration) whose readings span no more than
    max(tol, rel * largest |reading| of the window). Loops, no pre-check (test oracle)."""
    n = len(values)
    flagged = np.zeros(n, dtype=bool)
    for e in range(k, n):
        w = values[e - k : e + 1]
        hi, lo = w.max(), w.min()
        if hi - lo <= max(tol, rel * max(abs(hi), abs(lo))):
            flagged[e - k : e + 1] = True
    return flagged


def test_relative_flatline_tolerance_changes_what_is_flagged_and_keeps_the_floors():
    # Invented readings (common practice, no source): a throttle thermocouple wandering
    # +-0.02 K around 811 K for 150 min (a span of 0.04 K), and a condenser transmitter
    # wandering +-0.3 Pa around 5 kPa; otherwise live noise.
    f = _plant(n=400, roles=["throttle_t", "condenser_p"])
    wobble = np.sin(np.arange(150) / 3.0)
    f.iloc[100:250, 0] = 811.0 + 0.02 * wobble
    f.iloc[100:250, 1] = 0.005 + 3e-7 * wobble
    stuck = list(range(100, 250))

    def flat(res, role):
        return np.flatnonzero(_only(res.flags[role], Reason.FLATLINE)).tolist()

    # default 1e-6 relative: 811 K x 1e-6 = 0.8 mK, below the 0.01 K floor; the 0.04 K span
    # is a live reading. The condenser's 0.6 Pa span is within its 1 Pa floor: flagged.
    res = screen(f)
    assert flat(res, "throttle_t") == [] and flat(res, "condenser_p") == stuck
    # 1e-4 relative: 811 K x 1e-4 = 0.081 K > 0.04 K, the thermocouple counts as stuck
    res = screen(f, flatline_relative=1e-4)
    assert flat(res, "throttle_t") == stuck and flat(res, "condenser_p") == stuck
    # no relative part: the absolute floors alone, the same as the default here
    pd.testing.assert_frame_equal(screen(f, flatline_relative=0.0).flags, screen(f).flags)
    # a floor of 0 leaves the relative part alone: 5 kPa x 1e-6 = 5 mPa < 0.6 Pa, not flat
    res = screen(f, flatline_tolerance={"condenser_p": 0.0})
    assert flat(res, "condenser_p") == []
    res = screen(f, flatline_tolerance={"condenser_p": 0.0}, flatline_relative=2e-4)  # 1 Pa
    assert flat(res, "condenser_p") == stuck
    # roles without a flatline test stay without one, whatever the relative tolerance
    g = _plant(n=200, roles=["throttle_t"])
    g["valve_position"] = 100.0
    assert not _only(screen(g, flatline_relative=1e-3).flags["valve_position"], Reason.FLATLINE).any()


def test_flatline_samples_is_the_test_of_screen():
    f = _plant(n=400, roles=["throttle_t"])
    f.iloc[100:250, 0] = 811.0 + 0.02 * np.sin(np.arange(150) / 3.0)
    f.iloc[170:175, 0] = np.nan
    for rel in (0.0, 1e-6, 1e-4):
        res = screen(f, flatline_relative=rel, spike=None)
        got = quality.flatline_samples(f["throttle_t"], "2h", quality.FLATLINE_TOLERANCE["throttle_t"], rel)
        assert got.index.equals(f.index) and got.dtype == bool
        assert (got.to_numpy() == _only(res.flags["throttle_t"], Reason.FLATLINE)).all()
    assert quality.flatline_limit(811.0, 810.9, 0.01, 1e-4) == pytest.approx(0.0811, rel=1e-12)
    assert quality.flatline_limit(-811.0, -810.9, 0.01, 1e-4) == pytest.approx(0.0811, rel=1e-12)
    assert quality.flatline_limit(811.0, 810.9, 0.01, 0.0) == 0.01


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    rel=st.sampled_from([0.0, 1e-6, 1e-4, 1e-3, 0.02]),
    tol=st.sampled_from([0.0, 0.01, 0.05]),
    level=st.sampled_from([811.0, -40.0, 0.0, 3.0e-3]),
)
def test_vectorised_flatline_equals_the_plain_definition(seed, rel, tol, level):
    # Plateaus whose spread sits around the limit, so that both sides of it occur; steps
    # between neighbours often exceed the limit of a single pair while the window passes.
    rng = np.random.default_rng(seed)
    n, k = 240, 20  # 1-min samples, 20-min flatline
    limit = max(tol, rel * abs(level)) or 1e-3
    spread = rng.choice([0.0, 0.5, 0.98, 1.0, 1.02, 2.0], size=n // 30)
    v = level + np.repeat(spread, 30)[:n] * limit * rng.uniform(-0.5, 0.5, n)
    v[rng.random(n) < 0.1] = level  # some samples at the level itself
    idx = _index(n)
    got = quality.flatline_samples(pd.Series(v, index=idx), "20min", tol, rel).to_numpy()
    assert (got == _flat_oracle(v, k, tol, rel)).all()


def test_flatline_without_the_relative_part_where_the_floor_decides_gives_the_same_flags(monkeypatch):
    # The synthetic unit (isentrope.daemon.synthetic; it injects one stuck transmitter): at the
    # default 1e-6 the floors decide for every role, so the relative part is left out; forcing
    # it back in must give the same flags. At 1e-3 it matters for the temperatures.
    from isentrope.daemon import synthetic

    frame, truth = synthetic.generate(days=8)
    frame = frame.copy()
    frame.iloc[3000:3200, frame.columns.get_loc("condenser_p")] = 0.0061  # a second stuck one
    real = quality._relative_part_matters
    for c, tol in quality.FLATLINE_TOLERANCE.items():
        if tol is not None:
            v = frame[c].to_numpy()
            rel_step = quality.DEFAULT_FLATLINE_RELATIVE * (1.0 + 1e-9)
            assert not real(v, np.isfinite(v), tol, rel_step), c
    assert real(frame["throttle_t"].to_numpy(), np.isfinite(frame["throttle_t"].to_numpy()), 0.01, 1e-3)
    for rel in (quality.DEFAULT_FLATLINE_RELATIVE, 1e-4, 1e-3):
        shortcut = screen(frame, flatline_relative=rel, spike=None).flags
        with monkeypatch.context() as m:
            m.setattr(quality, "_relative_part_matters", lambda *args: True)
            full = screen(frame, flatline_relative=rel, spike=None).flags
        pd.testing.assert_frame_equal(shortcut, full)
        flat = _only(shortcut, Reason.FLATLINE)
        assert flat[:, frame.columns.get_loc(truth["flatline"]["role"])].any()
        assert flat[3000:3200, frame.columns.get_loc("condenser_p")].all()


@pytest.mark.parametrize(
    "level, largest, matters", [(999.97, 999.99, False), (999.98, 1000.0, True), (1000.02, 1000.04, True)]
)
def test_flatline_at_the_edge_of_the_relative_shortcut_equals_the_plain_definition(level, largest, matters):
    # rel x 1000 = 1e-5 x 1000 = 0.01, the floor: the relative part is left out when the
    # largest reading is below 1000 and kept from 1000 on (rel widened by 1e-9 there); plateaus
    # spread 0.5..2 x the floor so that windows fall on both sides of the limit.
    rng = np.random.default_rng(11)
    n, k, tol, rel = 240, 20, 0.01, 1e-5
    spread = np.repeat([0.98, 1.0, 1.02, 0.5, 2.0, 0.99, 1.01, 0.999], 30)
    v = level + spread * tol * rng.uniform(-0.5, 0.5, n)
    v[::7] = level
    v[-1] = largest
    assert quality._relative_part_matters(v, np.isfinite(v), tol, rel * (1.0 + 1e-9)) is matters
    got = quality.flatline_samples(pd.Series(v, index=_index(n)), "20min", tol, rel).to_numpy()
    expected = _flat_oracle(v, k, tol, rel)
    assert expected.any() and not expected.all()
    assert (got == expected).all()


def test_flatline_tolerance_arguments_are_checked():
    f = _plant(n=20, roles=["throttle_t"])
    for bad in (1.0, -1e-6, float("nan"), "1e-6", True):
        with pytest.raises(ValueError, match="flatline_relative"):
            screen(f, flatline_relative=bad)
    with pytest.raises(ValueError, match="flatline tolerance of throttle_t"):
        screen(f, flatline_tolerance={"throttle_t": -0.01})
    with pytest.raises(ValueError, match="flatline tolerance"):
        quality.flatline_samples(f["throttle_t"], "2h", float("inf"))
    with pytest.raises(ValueError, match="Series"):
        quality.flatline_samples(f, "2h", 0.01)
