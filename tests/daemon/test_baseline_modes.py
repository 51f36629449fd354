"""The pipeline's baseline corrects the HP section for the operating mode.

At one load, another valve point (constant throttle pressure, valves throttling) or another
sliding-pressure curve changes the HP efficiency measured from upstream of the stop valves,
because the valve throttling counts against the section (ASME PTC 6 enthalpy-drop method).
The baseline therefore carries valve position, first-stage/throttle pressure ratio and
throttle pressure terms where those roles are mapped; these tests check, on steady windows of
a unit whose true HP efficiency depends on load and valve point, that a change of mode after
the reference period is not reported as degradation while a real loss still is.

The unit model is invented for these checks (documented beside each figure): first-stage
pressure proportional to steam flow (choked first-stage nozzles, Stodola's cone law; common
practice, no source), the HP efficiency falling with the pressure ratio across the control
valves, steam flow rising 0.25 % per point lost as the unit holds output (the output
sensitivity of an HP point, calc/REFERENCES.md, from memory), window-to-window scatter
correlated (AR(1), phi 0.6).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import baseline
from isentrope.daemon import synthetic
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import FIRST_STAGE_RATIO, Pipeline

START = pd.Timestamp("2025-01-06", tz="UTC")
REFERENCE_DAYS = 40
RATING_MW = 520.0
P_THROTTLE_RATED = 16.55  # MPa, constant-pressure set point (invented)
P_FIRST_STAGE_RATED = 12.6  # MPa at rated flow (invented)
THROTTLING_PER_RATIO = 0.08  # HP efficiency per unit of first-stage/throttle ratio (invented)


def _config(tmp_path, roles_left_out=(), start=START):
    tags = {k: v for k, v in synthetic.TAG_MAP.items() if k not in roles_left_out}
    text = f"""
[unit]
name = "Greywater Bend 2"
rating_mw = {RATING_MW}
online_mw = 60.0

[store]
kind = "sqlite"
path = "unit.sqlite"

{synthetic.tag_map_toml(tags)}

[baseline]
start = "{start.isoformat()}"
end = "{(start + pd.Timedelta(days=REFERENCE_DAYS)).isoformat()}"
"""
    path = tmp_path / "unit.toml"
    path.write_text(text)
    return load_config(path)


def _windows(after: str, *, step_day=None, step_points=0.0, seed=3, days=100):
    """Steady windows every 3 h: load uniform in 50-100 % of rating; in the reference period
    each window at constant throttle pressure or on a sliding curve (factor 0.85-1.0), after
    it the mode ``after`` ("constant" or "sliding") at every window."""
    rng = np.random.default_rng(seed)
    t = START + pd.to_timedelta(np.arange(0, days * 24, 3), unit="h")
    n = len(t)
    load = rng.uniform(0.5, 1.0, n)
    in_ref = t < START + pd.Timedelta(days=REFERENCE_DAYS)
    constant = np.where(in_ref, rng.random(n) < 0.5, after == "constant")
    curve = np.where(in_ref, rng.uniform(0.85, 1.0, n), 0.88)
    lost = np.zeros(n)
    if step_day is not None:
        lost[t >= START + pd.Timedelta(days=step_day)] = -step_points
    flow = (0.04 + 0.96 * load) * (1.0 + 0.0025 * lost)  # holds output: +0.25 % flow per point lost
    p1 = P_FIRST_STAGE_RATED * flow
    sliding = np.clip(curve * P_THROTTLE_RATED * flow / 0.808, 8.0, P_THROTTLE_RATED)
    p_thr = np.where(constant, P_THROTTLE_RATED, sliding)
    ratio = p1 / p_thr
    valve = 100.0 * np.clip((ratio - 0.3) / 0.5, 0.0, 1.0) ** 0.6  # opening, not linear in ratio
    eta = 0.862 - 0.06 * (1.0 - load) ** 2 + THROTTLING_PER_RATIO * (ratio - 0.76) - lost / 100.0
    scatter = np.zeros(n)  # AR(1) window-to-window scatter, phi 0.6, marginal sd 0.15 point
    e = rng.normal(0.0, 0.0015 * np.sqrt(1 - 0.6**2), n)
    for i in range(n):
        scatter[i] = (0.6 * scatter[i - 1] if i else 0.0) + e[i]
    return pd.DataFrame(
        {
            "gross_output": RATING_MW * load * (1 + rng.normal(0, 0.001, n)),
            "throttle_p": p_thr * (1 + rng.normal(0, 0.001, n)),
            "first_stage_p": p1 * (1 + rng.normal(0, 0.001, n)),
            "valve_position": valve + rng.normal(0, 0.3, n),
            "hp_efficiency": eta + scatter,
            "hp_efficiency_u": np.full(n, 0.005),
        },
        index=pd.DatetimeIndex(t, name="time"),
    )


def _after(dev, lo_day, hi_day=None):
    t = dev.index
    sel = t >= START + pd.Timedelta(days=lo_day)
    if hi_day is not None:
        sel &= t < START + pd.Timedelta(days=hi_day)
    return dev.loc[sel, "deviation"]


@pytest.mark.parametrize("after", ["constant", "sliding"])
@pytest.mark.parametrize("left_out", [(), ("first_stage_p",), ("valve_position",)])
def test_a_change_of_valve_point_or_sliding_curve_is_not_degradation(tmp_path, after, left_out):
    pipe = Pipeline(_config(tmp_path, left_out))
    windows = _windows(after)
    models, problems = pipe.fit_baselines(windows)
    assert not problems and "hp" in models
    # valve position and first-stage pressure ratio say the same thing here (one follows from
    # the other): the first mapped is taken, the second and throttle pressure are left out
    first = "valve_position" if "valve_position" not in left_out else FIRST_STAGE_RATIO
    assert models["hp"].extra_cols == (first,), pipe.baseline_notes
    dev = pipe.deviation(windows, models)
    d = _after(dev[dev["section"] == "hp"], REFERENCE_DAYS)
    assert np.isfinite(d).mean() > 0.9  # the new mode lies inside the covered ranges
    # the mode change alone moves the median deviation by less than 0.25 point ...
    assert abs(d.median()) < 0.25, d.describe()
    # ... where a baseline on load alone reports it as a change of about a point: the check
    # above can fail
    load_only = baseline.fit_baseline(
        windows,
        "hp",
        efficiency_col="hp_efficiency",
        rating_mw=RATING_MW,
        reference_period=(START, START + pd.Timedelta(days=REFERENCE_DAYS)),
    )
    plain = baseline.deviation(load_only, windows.loc[d.index])
    # (measured: -0.40 point after the change to constant pressure, +0.57 after the sliding one)
    assert abs(plain["deviation"].median()) > 0.3, plain["deviation"].describe()


def test_real_degradation_is_still_reported_after_a_change_of_mode(tmp_path):
    pipe = Pipeline(_config(tmp_path))
    windows = _windows("sliding", step_day=70, step_points=-1.0)
    models, problems = pipe.fit_baselines(windows)
    assert not problems
    dev = pipe.deviation(windows, models)
    hp = dev[dev["section"] == "hp"]
    before, after = _after(hp, REFERENCE_DAYS, 70), _after(hp, 70)
    assert abs(before.median()) < 0.25
    # the injected 1.0-point loss, although the flow it costs moves throttle and first-stage
    # pressures too
    assert after.median() == pytest.approx(-1.0, abs=0.25)


def test_a_reference_in_one_operating_mode_takes_no_mode_terms(tmp_path):
    # In the reference period of the synthetic unit every term is fixed by load (constant
    # pressure above 80 % load, sliding below): their variance inflation against the load
    # polynomial is 30-100, so the model is fitted on load alone and says why.
    import worker_support as ws  # tests/daemon is on sys.path under pytest

    pipe = Pipeline(_config(tmp_path, start=ws.START))
    frame = ws.history(14.0, freq="5min")
    on = frame[frame["gross_output"] > 100.0].resample("1h").mean().dropna()
    on.index.name = "time"
    eta = synthetic.design_efficiency("hp", on["gross_output"] / synthetic.RATING_MW)
    models, problems = pipe.fit_baselines(on.assign(hp_efficiency=eta, hp_efficiency_u=0.005))
    assert models["hp"].extra_cols == ()
    assert len(pipe.baseline_notes) == 3 and all("variance inflation" in n for n in pipe.baseline_notes)


def test_variance_inflation_is_one_over_one_minus_r_squared():
    # For one other regressor (and a constant) the variance inflation factor is 1 / (1 - r^2)
    # with r the Pearson correlation of the two (Kutner et al. 2004, section 10.5, from memory);
    # r computed here by numpy.corrcoef.
    rng = np.random.default_rng(5)
    u = rng.normal(size=200)
    z = 0.9 * u + 0.3 * rng.normal(size=200)
    r = np.corrcoef(u, z)[0, 1]
    got = baseline.variance_inflation(z, np.column_stack([np.ones(200), u]))
    assert got == pytest.approx(1.0 / (1.0 - r**2), rel=1e-9)
    assert baseline.variance_inflation(2 * u + 1, np.column_stack([np.ones(200), u])) == np.inf


def test_other_sections_carry_no_mode_terms(tmp_path):
    pipe = Pipeline(_config(tmp_path))
    assert pipe.mode_terms("ip") == [] and pipe.mode_terms("lp") == []
    assert pipe.mode_terms("hp") == ["valve_position", FIRST_STAGE_RATIO, "throttle_p"]
    bare = Pipeline(_config(tmp_path, ("valve_position", "first_stage_p")))
    assert bare.mode_terms("hp") == []


def test_a_dead_valve_transmitter_costs_the_term_not_the_baseline(tmp_path):
    pipe = Pipeline(_config(tmp_path))
    windows = _windows("constant")
    windows["valve_position"] = np.nan
    models, problems = pipe.fit_baselines(windows)
    assert not problems
    assert "valve_position" not in models["hp"].extra_cols
