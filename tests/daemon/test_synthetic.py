"""Checks of the synthetic unit history (isentrope.daemon.synthetic).

The physics is checked against an independent IF97 implementation, the ``iapws`` package
(reference library, point by point): the efficiencies implied by the generated readings must
equal the injected truth. Tolerances on noisy data follow from the generator's own noise
levels (0.4 K, 0.07 % of reading), stated beside each check.
"""

from __future__ import annotations

import json
import math
import tomllib
from itertools import pairwise

import numpy as np
import pandas as pd
import pytest
from iapws import IAPWS97

from isentrope.daemon import synthetic as syn
from isentrope.daemon.roles import ROLES

SPAN = dict(start="2025-03-03", days=20, freq="1min", seed=7)


@pytest.fixture(scope="module")
def history():
    frame, truth, state = syn.generate_with_state(**SPAN)
    return frame, truth, state


@pytest.fixture(scope="module")
def clean():
    """The same span with no sensor noise and no faults."""
    frame, truth, state = syn.generate_with_state(**SPAN, noise=0.0, faults=False)
    return frame, truth, state


def _eff_iapws(p_in, t_in, p_out, t_out):
    """Enthalpy-drop efficiency with iapws (reference library): (h1 - h2) / (h1 - h2s)."""
    inlet = IAPWS97(P=float(p_in), T=float(t_in))
    outlet = IAPWS97(P=float(p_out), T=float(t_out))
    ideal = IAPWS97(P=float(p_out), s=inlet.s)
    return (inlet.h - outlet.h) / (inlet.h - ideal.h)


def _good_rows(frame, truth, state, min_load=0.3):
    """Online, loaded rows outside every injected fault."""
    st = state.reindex(frame.index)
    ok = st["online"] & (st["load_fraction"] >= min_load)
    for key in ("flatline", "spike"):
        fault = truth.get(key)
        if fault:
            ok &= ~(
                (frame.index >= pd.Timestamp(fault["start"])) & (frame.index < pd.Timestamp(fault["end"]))
            )
    # skip the first hours after each start-up (temperatures still rising)
    for t_on in truth["startups"]:
        t_on = pd.Timestamp(t_on)
        ok &= ~((frame.index >= t_on) & (frame.index < t_on + pd.Timedelta(hours=4)))
    return frame.index[ok.to_numpy()]


# --- shape and determinism ------------------------------------------------------------------
def test_frame_has_every_role_utc_index_internal_units(history):
    frame, truth, state = history
    assert list(frame.columns) == list(ROLES)
    assert frame.index.name == "time"
    assert str(frame.index.tz) == "UTC"
    assert frame.index.is_monotonic_increasing and frame.index.is_unique
    assert all(dtype == np.float64 for dtype in frame.dtypes)
    assert len(state) == 20 * 1440
    # internal units: throttle near 16.55 MPa abs and 811 K at full load (the scenario's design)
    full = state["load_fraction"] > 0.97
    assert 16.3 < frame.loc[full[full].index.intersection(frame.index), "throttle_p"].median() < 16.8
    assert 805 < frame["throttle_t"][state["online"].reindex(frame.index)].median() < 815


def test_same_seed_same_history_other_seed_differs():
    a, ta = syn.generate(start="2025-05-01", days=3, seed=11)
    b, tb = syn.generate(start="2025-05-01", days=3, seed=11)
    c, _ = syn.generate(start="2025-05-01", days=3, seed=12)
    pd.testing.assert_frame_equal(a, b)
    assert json.dumps(ta, sort_keys=True) == json.dumps(tb, sort_keys=True)
    assert not np.allclose(
        a["throttle_t"].to_numpy(), c["throttle_t"].reindex(a.index).to_numpy(), equal_nan=True
    )


# --- physical consistency -------------------------------------------------------------------
def test_pressures_fall_through_the_cycle(history):
    frame, truth, state = history
    rows = _good_rows(frame, truth, state, min_load=0.05)
    f = frame.loc[rows]
    chain = [
        "throttle_p",
        "first_stage_p",
        "cold_reheat_p",
        "hot_reheat_p",
        "crossover_p",
        "lp_extraction_p",
        "condenser_p",
    ]
    for upstream, downstream in pairwise(chain):
        assert (f[upstream] > f[downstream]).all(), (upstream, downstream)
    # reheater pressure drop 8 % of cold reheat (common practice: 7-10 %)
    drop = 1 - f["hot_reheat_p"] / f["cold_reheat_p"]
    assert abs(drop.median() - 0.08) < 0.002


def test_outlet_temperatures_below_inlets_and_expansion_superheated(history):
    frame, truth, state = history
    rows = _good_rows(frame, truth, state, min_load=0.05)
    f = frame.loc[rows]
    assert (f["cold_reheat_t"] < f["throttle_t"]).all()
    assert (f["crossover_t"] < f["hot_reheat_t"]).all()
    assert (f["lp_extraction_t"] < f["crossover_t"]).all()
    sample = f.iloc[:: max(1, len(f) // 60)]
    for _, r in sample.iterrows():
        # saturation temperature from iapws (reference library); 10 K margin of superheat
        for p_role, t_role in (
            ("cold_reheat_p", "cold_reheat_t"),
            ("crossover_p", "crossover_t"),
            ("lp_extraction_p", "lp_extraction_t"),
        ):
            t_sat = IAPWS97(P=float(r[p_role]), x=0.0).T
            assert r[t_role] > t_sat + 10.0, (p_role, r[p_role], r[t_role], t_sat)


def test_full_load_figures_match_the_scenario(history):
    frame, truth, state = history
    st = state.reindex(frame.index)
    full = frame[(st["load_fraction"] > 0.97) & st["online"]]
    # Invented design point of the scenario (fixtures/README.md), cf. calc/REFERENCES.md "large
    # reheat unit": cold reheat ~330 degC, crossover ~350 degC at full load.
    assert 590 < full["cold_reheat_t"].median() < 610
    assert 615 < full["crossover_t"].median() < 635
    assert 3.8 < full["cold_reheat_p"].median() < 4.0
    # gross output follows the dispatched load (530 MW rating) within its noise
    resid = frame["gross_output"] - 530.0 * st["load_fraction"]
    assert abs(resid[st["online"]].median()) < 0.1
    assert resid[st["online"]].abs().max() < 6 * (0.05 + 0.0015 * 530)
    assert 525 < frame["gross_output"].max() < 545


def test_clean_readings_give_back_the_true_efficiencies_iapws(clean):
    """Noise-free readings -> iapws enthalpy-drop efficiencies equal the injected truth."""
    frame, truth, state = clean
    rows = _good_rows(frame, truth, state, min_load=0.1)
    sample = rows[:: max(1, len(rows) // 40)]
    for t in sample:
        r = frame.loc[t]
        s = state.loc[t]
        hp = _eff_iapws(r["throttle_p"], r["throttle_t"], r["cold_reheat_p"], r["cold_reheat_t"])
        ip = _eff_iapws(r["hot_reheat_p"], r["hot_reheat_t"], r["crossover_p"], r["crossover_t"])
        lp = _eff_iapws(r["crossover_p"], r["crossover_t"], r["lp_extraction_p"], r["lp_extraction_t"])
        # 2e-5 covers the difference between isentrope.calc.steam and iapws (both IF97)
        assert hp == pytest.approx(s["eta_hp"], abs=2e-5)
        assert ip == pytest.approx(s["eta_ip"], abs=2e-5)
        assert lp == pytest.approx(s["eta_lp"], abs=2e-5)


def test_noisy_readings_give_the_truth_within_noise(history):
    frame, truth, state = history
    rows = _good_rows(frame, truth, state, min_load=0.6)
    sample = rows[:: max(1, len(rows) // 60)]
    err = {"hp": [], "ip": []}
    for t in sample:
        r = frame.loc[t]
        s = state.loc[t]
        err["hp"].append(
            _eff_iapws(r["throttle_p"], r["throttle_t"], r["cold_reheat_p"], r["cold_reheat_t"]) - s["eta_hp"]
        )
        err["ip"].append(
            _eff_iapws(r["hot_reheat_p"], r["hot_reheat_t"], r["crossover_p"], r["crossover_t"]) - s["eta_ip"]
        )
    for section, e in err.items():
        e = np.asarray(e)
        # 0.4 K on each temperature and 0.07 % on each pressure give a per-sample standard
        # deviation of roughly 0.15-0.3 point (calc/REFERENCES.md: 5 K -> 2.5-3 points); the mean
        # of ~60 samples (standard error ~0.03 point) must sit within 0.1 point of the truth.
        assert 0.0005 < e.std() < 0.005, (section, e.std())
        assert abs(e.mean()) < 0.001, (section, e.mean())


# --- the injected truth ---------------------------------------------------------------------
def test_hp_loses_about_1_6_points_after_4000_operating_hours():
    frame, truth, state = syn.generate_with_state(start="2025-01-01", days=200, freq="10min", seed=3)
    st = state.reindex(frame.index)
    near_full = st["online"] & (st["load_fraction"].between(0.96, 1.0))

    def implied(rows):
        out = []
        for t in rows:
            r = frame.loc[t]
            out.append(
                _eff_iapws(r["throttle_p"], r["throttle_t"], r["cold_reheat_p"], r["cold_reheat_t"])
                - (syn.design_efficiency("hp", st.loc[t, "load_fraction"]) - syn.design_efficiency("hp", 1.0))
                - st.loc[t, "wander_hp"] / 100.0  # the slow wander the generator records
            )  # refer to full load
        return np.mean(out)

    early = near_full & (st["operating_hours"] < 300)
    late = near_full & st["operating_hours"].between(4000, 4300)
    e_rows = frame.index[early.to_numpy()][:60]
    l_rows = frame.index[late.to_numpy()][:60]
    assert len(e_rows) == 60 and len(l_rows) == 60
    h_e = st.loc[e_rows, "operating_hours"].mean()
    h_l = st.loc[l_rows, "operating_hours"].mean()
    expected = -0.4 * (h_l - h_e) / 1000.0  # points, the injected rate
    found = 100 * (implied(l_rows) - implied(e_rows))
    assert expected == pytest.approx(-1.55, abs=0.15)
    # noise of a 60-sample mean ~0.03 point per mean (0.2 point per sample)
    assert found == pytest.approx(expected, abs=0.15)
    assert truth["hp"]["rate_points_per_1000h"] == -0.4
    assert truth["operating_hours"] > 4000


def test_ip_steps_down_one_point_at_the_restart_after_the_trip(history):
    frame, truth, state = history
    trip = pd.Timestamp(truth["trip"]["time"])
    restart = pd.Timestamp(truth["trip"]["restart"])
    assert pd.Timestamp(truth["ip"]["step_time"]) == restart
    assert truth["ip"]["step_points"] == -1.0
    rows = _good_rows(frame, truth, state, min_load=0.5)
    before = rows[(rows < trip) & (rows > trip - pd.Timedelta(days=2))][::10][:40]
    after = rows[(rows > restart) & (rows < restart + pd.Timedelta(days=3))][::10][:40]
    assert len(before) == 40 and len(after) == 40

    def implied(rows):
        return np.mean(
            [
                _eff_iapws(
                    frame.at[t, "hot_reheat_p"],
                    frame.at[t, "hot_reheat_t"],
                    frame.at[t, "crossover_p"],
                    frame.at[t, "crossover_t"],
                )
                - syn.design_efficiency("ip", state.at[t, "load_fraction"])
                - state.at[t, "wander_ip"] / 100.0  # the slow wander the generator records
                for t in rows
            ]
        )

    step = 100 * (implied(after) - implied(before))
    assert step == pytest.approx(-1.0, abs=0.15)  # 40-sample means: noise ~0.035 point each
    # no change in the true IP efficiency apart from the step
    st = state[state["online"]]
    resid = st["eta_ip"] - syn.design_efficiency("ip", st["load_fraction"]) - st["wander_ip"] / 100.0
    assert set(np.round(resid.unique() * 100, 9)) == {0.0, -1.0}


def test_lp_dry_efficiency_constant_and_recovered(history):
    frame, truth, state = history
    rows = _good_rows(frame, truth, state, min_load=0.6)
    first, last = rows[:1800:60], rows[-1800::60]

    def implied(rows):
        return np.mean(
            [
                _eff_iapws(
                    frame.at[t, "crossover_p"],
                    frame.at[t, "crossover_t"],
                    frame.at[t, "lp_extraction_p"],
                    frame.at[t, "lp_extraction_t"],
                )
                - syn.design_efficiency("lp", state.at[t, "load_fraction"])
                + syn.design_efficiency("lp", 1.0)
                - state.at[t, "wander_lp"] / 100.0  # the slow wander the generator records
                for t in rows
            ]
        )

    a, b = implied(first), implied(last)
    assert a == pytest.approx(0.880, abs=0.003)  # the scenario's LP dry design value
    assert abs(a - b) < 0.003


def test_outages_trip_and_startups(history):
    frame, truth, state = history
    kinds = [e["kind"] for e in truth["outages"]]
    assert kinds.count("trip") == 1 and kinds.count("shutdown") >= 2
    for e in truth["outages"]:
        off, on = pd.Timestamp(e["offline"]), pd.Timestamp(e["online"])
        inside = state.loc[off : on - pd.Timedelta("1min")]
        assert not inside["online"].any()
        assert state.loc[off - pd.Timedelta("1min"), "online"]
        assert state.loc[on, "online"]
        assert (frame["gross_output"].reindex(inside.index).dropna().abs() < 2.0).all()
    trip = pd.Timestamp(truth["trip"]["time"])
    # a trip drops from load at once; a shutdown ramps down first
    assert state.loc[trip - pd.Timedelta("1min"), "load_fraction"] > 0.3
    for e in truth["outages"]:
        if e["kind"] == "shutdown":
            assert state.loc[pd.Timestamp(e["offline"]) - pd.Timedelta("1min"), "load_fraction"] < 0.15
    hours = state["online"].sum() / 60.0
    assert truth["operating_hours"] == pytest.approx(hours)
    assert state["operating_hours"].iloc[-1] == pytest.approx(hours)


def test_load_cycles_daily_with_weekend_lows_and_limited_ramps(history):
    frame, truth, state = history
    st = state[state["online"]]
    load = st["load_fraction"]
    hour = load.index.hour
    weekend = load.index.day_of_week >= 5
    day = load[(~weekend) & (hour >= 9) & (hour < 20)].mean()
    night = load[(~weekend) & ((hour < 5) | (hour >= 23))].mean()
    assert day - night > 0.25
    assert load[weekend].mean() < load[~weekend].mean() - 0.1
    # ramp limit 1.5 %/min plus the small control wander (common practice 1-3 %/min)
    steps = load.diff()[(st.index.to_series().diff() == pd.Timedelta("1min"))]
    assert steps.abs().max() < 0.03
    # plateaus long enough for steady windows: load within +/-1 % of rating for >= 1 h
    held = (load.rolling("60min").max() - load.rolling("60min").min()) < 0.02
    assert held.mean() > 0.3


def test_condenser_pressure_is_seasonal():
    frame, truth, state = syn.generate_with_state(
        start="2025-01-01", days=365, freq="1h", seed=5, faults=False
    )
    st = state.reindex(frame.index)
    p = frame["condenser_p"][st["online"] & (st["load_fraction"] > 0.9)] * 1000  # kPa
    jan = p[p.index.month == 1].mean()
    jul = p[p.index.month == 7].mean()
    assert 2.5 < jan < 5.0 and 7.0 < jul < 10.0, (jan, jul)


# --- injected faults ------------------------------------------------------------------------
def test_flatline_gap_and_spike_are_where_the_truth_says(history):
    frame, truth, state = history
    plant = syn.to_plant_units(frame)

    fl = truth["flatline"]
    f0, f1 = pd.Timestamp(fl["start"]), pd.Timestamp(fl["end"])
    held = plant.loc[(plant.index >= f0) & (plant.index < f1), fl["role"]]
    assert len(held) > 0.9 * 2 * 1440  # two days (less any overlap with the gap)
    assert held.nunique() == 1 and held.iloc[0] == pytest.approx(fl["held_value"])
    outside = plant.loc[(plant.index >= f1) & (plant.index < f1 + pd.Timedelta(hours=2)), fl["role"]]
    assert outside.nunique() > 100

    gap = truth["gap"]
    g0, g1 = pd.Timestamp(gap["start"]), pd.Timestamp(gap["end"])
    assert not ((frame.index >= g0) & (frame.index < g1)).any()
    assert g1 - g0 == pd.Timedelta(hours=12)
    assert len(frame) == len(state) - gap["missing_samples"]
    assert state["in_gap"].sum() == gap["missing_samples"]

    sp = truth["spike"]
    s0, s1 = pd.Timestamp(sp["start"]), pd.Timestamp(sp["end"])
    col = plant[sp["role"]]
    lo, hi = sp["range"]
    out_of_range = (col < lo) | (col > hi)
    in_burst = (col.index >= s0) & (col.index < s1)
    assert out_of_range[in_burst].sum() == sp["samples"] >= 8
    # everything else stays inside its instrument range, online or offline
    for role, entry in syn.TAG_MAP.items():
        lo_r, hi_r = entry["range"]
        x = plant[role]
        bad = (x < lo_r) | (x > hi_r)
        if role == sp["role"]:
            bad &= ~in_burst
        assert not bad.any(), (role, x[bad].head())


def test_faults_can_be_placed_and_switched_off():
    t0 = pd.Timestamp("2025-06-02", tz="UTC")
    frame, truth, state = syn.generate_with_state(
        start=t0,
        days=6,
        seed=1,
        shutdowns=[],
        trip_at=t0 + pd.Timedelta(days=3, hours=15),
        flatline_at=t0 + pd.Timedelta(days=1),
        flatline_role="crossover_p",
        flatline_days=1,
        gap_at=t0 + pd.Timedelta(days=4),
        gap_hours=3,
        spike_at=None,
    )
    assert truth["spike"] is None and truth["flatline"]["role"] == "crossover_p"
    assert truth["gap"]["missing_samples"] == 180
    assert [e["kind"] for e in truth["outages"]] == ["trip"]
    # a frozen gauge/absolute transmitter holds its *plant* reading
    plant = syn.to_plant_units(frame)
    fl = truth["flatline"]
    held = plant.loc[fl["start"] : pd.Timestamp(fl["end"]) - pd.Timedelta("1min"), "crossover_p"]
    assert held.nunique() == 1 and len(held) == 1440
    frame2, truth2 = syn.generate(start=t0, days=6, seed=1, faults=False, trip_at=None, shutdowns=[])
    assert truth2["flatline"] is None and truth2["gap"] is None and truth2["trip"] is None
    assert truth2["ip"]["step_points"] == 0.0 and len(frame2) == 6 * 1440


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(freq="2h"), "freq"),
        (dict(days=0), "days"),
        (dict(days=400, freq="1s"), "rows"),
        (dict(flatline_role="boiler_drum_level"), "boiler_drum_level"),
        (dict(trip_at="2024-12-01"), "outside"),
        (dict(shutdowns=[("2025-01-02", 10)], trip_at="2025-01-02 05:00"), "starts before"),
        (dict(gap_at="2026-01-01"), "outside"),
        (dict(gap_at="2025-01-01 22:00", flatline_at="2025-01-02", flatline_days=1), "overlaps the flatline"),
    ],
)
def test_bad_arguments_raise_clear_errors(kwargs, message):
    args = dict(start="2025-01-01", days=5, seed=1)
    args.update(kwargs)
    with pytest.raises(ValueError, match=message):
        syn.generate(**args)


# --- truth file, units and tag mapping ------------------------------------------------------
def test_truth_is_json_and_round_trips(history, tmp_path):
    frame, truth, state = history
    path = syn.write_truth(truth, tmp_path / "truth.json")
    back = syn.read_truth(path)
    assert back == json.loads(json.dumps(truth))
    for key in (
        "hp",
        "ip",
        "trip",
        "outages",
        "startups",
        "shutdowns",
        "flatline",
        "gap",
        "spike",
        "operating_hours",
        "efficiency_daily",
        "scenario",
        "generator",
    ):
        assert key in back
    daily = back["efficiency_daily"]
    assert len(daily["date"]) == len(daily["eta_hp_mean"]) == 20
    assert back["hp"]["at_rating_end"] < back["hp"]["at_rating_start"]
    assert "not a protective function" in back["caution"]


def test_plant_units_round_trip_and_match_calc_units(history):
    frame, truth, state = history
    plant = syn.to_plant_units(frame)
    assert list(plant.columns) == list(frame.columns)
    baro = frame["barometric_p"].to_numpy()
    for role, entry in syn.TAG_MAP.items():
        back = syn.plant_to_internal(plant[role].to_numpy(), entry["unit"], baro)
        np.testing.assert_allclose(back, frame[role].to_numpy(), rtol=1e-12, atol=1e-12)
    # 1 inHg (32 degF) = 3.38638 kPa (NIST SP 811, appendix B)
    assert syn.internal_to_plant(0.00338638, "inHgA") == pytest.approx(1.0)
    assert syn.internal_to_plant(1.101325, "bar(g)") == pytest.approx(10.0)
    from isentrope.calc import units

    unit_of = {role: entry["unit"] for role, entry in syn.TAG_MAP.items()}
    internal = units.to_internal(plant.iloc[:3000], unit_of)
    for role in syn.TAG_MAP:
        np.testing.assert_allclose(
            internal[role].to_numpy(), frame[role].iloc[:3000].to_numpy(), rtol=1e-6, atol=1e-9, err_msg=role
        )


def test_tag_map_toml_and_role_mappings():
    parsed = tomllib.loads(syn.tag_map_toml())
    assert parsed["roles"] == syn.TAG_MAP
    assert set(syn.TAG_MAP) == set(ROLES)
    tags = [e["tag"] for e in syn.TAG_MAP.values()]
    assert len(set(tags)) == len(tags)
    maps = syn.role_mappings()
    assert {m.role for m in maps} == set(ROLES)
    m = next(m for m in maps if m.role == "condenser_p")
    assert m.unit == "inHgA" and m.range == (0.0, 31.0)
    with pytest.raises(ValueError, match="furlongs"):
        syn.internal_to_plant(1.0, "furlongs")


def test_command_line_writes_history_truth_and_config(tmp_path):
    assert syn.main(["-o", str(tmp_path), "--days", "1", "--freq", "5min", "--seed", "2"]) == 0
    data = pd.read_csv(tmp_path / "history.csv", index_col=0)
    truth = json.loads((tmp_path / "truth.json").read_text())
    assert len(data) == 288 - truth["gap"]["missing_samples"]
    assert "GB2-MST-P01" in data.columns
    assert tomllib.loads((tmp_path / "config.toml").read_text())["roles"]["throttle_p"]["unit"] == "bar(g)"
    assert not math.isnan(data["GB2-GEN-MW01"].max())


# --- the golden case ------------------------------------------------------------------------
CASE = __import__("pathlib").Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "greywater_u2_2day"


def _approx_equal(a, b, path="truth"):
    if isinstance(a, dict):
        assert isinstance(b, dict) and a.keys() == b.keys(), path
        for k in a:
            _approx_equal(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _approx_equal(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert a == pytest.approx(b, rel=1e-7, abs=1e-9), path
    else:
        assert a == b, path


def test_wander_correlates_successive_windows_and_can_be_switched_off():
    frame, truth, state = syn.generate_with_state(start="2025-02-01", days=60, freq="10min", seed=5)
    w = state["wander_lp"].to_numpy()
    # AR(1) at 10-minute steps with a 12 h correlation time (the generator's WANDER, invented)
    assert np.std(w) == pytest.approx(0.15, rel=0.35)
    lag3h = np.corrcoef(w[:-18], w[18:])[0, 1]
    assert lag3h == pytest.approx(np.exp(-3.0 / 12.0), abs=0.1)
    assert truth["wander"]["sd_points"] == 0.15
    _, _, still = syn.generate_with_state(start="2025-02-01", days=5, freq="10min", seed=5, wander=0.0)
    assert (still["wander_hp"] == 0.0).all()
    eta = still["eta_lp"][still["online"]]
    np.testing.assert_allclose(eta, syn.design_efficiency("lp", still["load_fraction"][still["online"]]))


def test_golden_case_regenerates_identically(tmp_path):
    """fixtures/cases/greywater_u2_2day is what the generator writes today."""
    assert syn.main(["-o", str(tmp_path), "--days", "2", "--freq", "5min", "--seed", "20250101"]) == 0
    new = pd.read_csv(tmp_path / "history.csv", index_col="time")
    old = pd.read_csv(CASE / "history.csv", index_col="time")
    assert list(new.index) == list(old.index) and list(new.columns) == list(old.columns)
    # the CSV keeps 6 significant digits
    np.testing.assert_allclose(new.to_numpy(), old.to_numpy(), rtol=2e-6, atol=1e-9)
    _approx_equal(
        json.loads((tmp_path / "truth.json").read_text()), json.loads((CASE / "truth.json").read_text())
    )
    assert (tmp_path / "config.toml").read_text() == (CASE / "config.toml").read_text()


def test_golden_case_config_loads_and_maps_every_column():
    from isentrope.daemon import config

    cfg = config.load_config(CASE / "config.toml")
    assert cfg.unit.rating_mw == 530.0 and cfg.store.kind == "sqlite"
    header = (CASE / "history.csv").read_text().splitlines()[0].split(",")
    assert header[0] == "time"
    assert sorted(header[1:]) == sorted(e["tag"] for e in syn.TAG_MAP.values())


def test_events_table_lists_every_injection(history):
    frame, truth, state = history
    table = syn.events_table(truth)
    assert table["start"].is_monotonic_increasing
    kinds = table["kind"].tolist()
    assert kinds.count("shutdown") == 2 and kinds.count("trip") == 1
    assert {"ip_step", "flatline", "gap", "spike"} <= set(kinds)
    offline = table[table["kind"].isin(["shutdown", "trip"])]
    for _, row in offline.iterrows():
        assert not state.loc[row["start"] : row["end"] - pd.Timedelta("1min"), "online"].any()
    # outside the offline rows the unit is online
    mask = pd.Series(True, index=state.index)
    for _, row in offline.iterrows():
        mask &= ~((state.index >= row["start"]) & (state.index < row["end"]))
    assert state.loc[mask, "online"].all()
    assert table.loc[table["kind"] == "flatline", "role"].item() == "cold_reheat_t"


def test_generate_matches_generate_with_state():
    a, ta = syn.generate(start="2025-08-01", days=2, freq="10min", seed=4)
    b, tb, state = syn.generate_with_state(start="2025-08-01", days=2, freq="10min", seed=4)
    pd.testing.assert_frame_equal(a, b)
    assert ta == tb
    assert "true_throttle_p" in state.columns


def test_benchmark_script_runs():
    # A smoke run: tests/bench/bench_synthetic.py works and prints its figures (no timing asserted).
    import subprocess
    import sys
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "bench" / "bench_synthetic.py"
    args = ["--days", "2", "--freq", "10min"]
    proc = subprocess.run([sys.executable, str(script), *args], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    figures = dict(item.split("=") for item in proc.stdout.split())
    assert int(figures["rows"]) == 288 and float(figures["steam_reference_s"]) > 0


def test_spec_defaults_are_the_wrappers_defaults():
    """ScenarioSpec carries exactly the arguments and defaults of generate_with_state."""
    import dataclasses
    import inspect

    params = {
        name: p.default
        for name, p in inspect.signature(syn.generate_with_state).parameters.items()
        if not name.startswith("_")
    }
    fields = {f.name: f.default for f in dataclasses.fields(syn.ScenarioSpec)}
    assert fields == params


def test_steps_run_alone_and_compose_to_generate_with_state():
    spec = syn.ScenarioSpec(start="2025-08-01", days=3, freq="10min", seed=4, spike_role="cold_reheat_t")
    frame, truth, state = syn.generate_from_spec(spec)
    f2, t2, s2 = syn.generate_with_state(
        start="2025-08-01", days=3, freq="10min", seed=4, spike_role="cold_reheat_t"
    )
    pd.testing.assert_frame_equal(frame, f2, check_exact=True)
    pd.testing.assert_frame_equal(state, s2, check_exact=True)
    assert truth == t2
    assert not any(c.startswith("true_") for c in syn.generate_from_spec(spec, full_state=False)[2].columns)

    # the steps by hand, in the same order and on the same stream, give the same readings
    tl = syn.timeline(spec)
    assert tl.n == 3 * 144 and tl.index[0] == pd.Timestamp("2025-08-01", tz="UTC")
    rng = np.random.default_rng(spec.seed)
    op = syn.load_profile(tl, rng)
    eff = syn.true_efficiencies(spec, tl, op)
    true = syn.boundary_states(tl, op, eff, rng)
    for role in ROLES:
        np.testing.assert_array_equal(true[role], state[f"true_{role}"].to_numpy())
    measured = syn.sensor_readings(true, rng, spec.noise)
    before = {role: x.copy() for role, x in measured.items()}
    faults = syn.inject_faults(spec, tl, measured)
    for role in ROLES:  # the faults are written into copies, the step's input is left alone
        np.testing.assert_array_equal(measured[role], before[role])
    # flatline and spike on the same transmitter: both land in the one faulted copy
    changed = [r for r in ROLES if not np.array_equal(faults.measured[r], measured[r], equal_nan=True)]
    assert changed == ["cold_reheat_t"]
    assert set(faults.record) == {"flatline", "spike", "gap"}
    pd.testing.assert_frame_equal(
        syn.readings_frame(tl, faults.measured, faults.in_gap), frame, check_exact=True
    )

    # no noise: the readings are the true values exactly
    quiet = syn.sensor_readings(true, np.random.default_rng(0), 0.0)
    for role in ROLES:
        np.testing.assert_array_equal(quiet[role], true[role])
