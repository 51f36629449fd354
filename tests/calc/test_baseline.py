"""Baseline model: fit, refusal to extrapolate, deviation, JSON artefact.

The efficiency curves here are synthetic (invented for the checks); the reference for the
fit is numpy.polyfit (ordinary least squares, a reference library) on outlier-free data.
"""

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import baseline
from isentrope.calc.baseline import DEVIATION_COLUMNS, BaselineModel, deviation, fit_baseline

RATING = 600.0  # [MW] invented unit


def true_eta(x):
    # invented smooth HP curve: 0.80 + 0.12 x - 0.05 x^2 (about 0.85-0.87 at 0.5-1.0 load)
    return 0.80 + 0.12 * x - 0.05 * x * x


def make_windows(n=60, seed=0, noise=0.002, lo=0.5, hi=1.0, outliers=0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(lo, hi, n)
    eta = true_eta(x) + rng.normal(0, noise, n)
    if outliers:
        eta[:outliers] -= 0.05  # transients that slipped through (5 points low)
    idx = pd.date_range("2026-03-01", periods=n, freq="6h", tz="UTC", name="time")
    return pd.DataFrame(
        {
            "hp_efficiency": eta,
            "hp_efficiency_u": 0.004,
            "gross_output": x * RATING,
            "valve_position": 40 + 50 * x + rng.normal(0, 1, n),
        },
        index=idx,
    )


def test_noise_free_fit_matches_polyfit():
    w = make_windows(noise=0.0)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    x = w["gross_output"].to_numpy() / RATING
    ref = np.polyfit(x, w["hp_efficiency"].to_numpy(), 2)[::-1]  # numpy.polyfit, OLS reference
    np.testing.assert_allclose(m.coefficients, ref, atol=1e-9)
    np.testing.assert_allclose(m.coefficients, [0.80, 0.12, -0.05], atol=1e-9)


def test_noisy_fit_close_to_ols_and_reports_quality():
    w = make_windows(noise=0.002, seed=3)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    x = w["gross_output"].to_numpy() / RATING
    ols = np.polyval(np.polyfit(x, w["hp_efficiency"].to_numpy(), 2), x)
    exp, u, flag = m.predict(w)
    assert not flag.any()
    # Huber and OLS agree closely on Gaussian scatter (both estimate the same curve)
    assert np.max(np.abs(exp - ols)) < 0.001
    assert m.n_windows == 60
    assert 0.0012 < m.residual_std < 0.003  # true scatter 0.002
    assert m.robust_r2 is not None and m.robust_r2 > 0.5
    assert m.load_range[0] >= 0.5 and m.load_range[1] <= 1.0


def test_outliers_do_not_pull_the_curve():
    w = make_windows(noise=0.001, seed=5, outliers=6)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    x = np.linspace(0.55, 0.95, 9)
    probe = pd.DataFrame({"gross_output": x * RATING})
    exp, _, _ = m.predict(probe)
    ols = np.polyval(np.polyfit(w["gross_output"] / RATING, w["hp_efficiency"], 2), x)
    robust_err = np.max(np.abs(exp - true_eta(x)))
    ols_err = np.max(np.abs(ols - true_eta(x)))
    assert robust_err < 0.0015
    assert ols_err > 2 * robust_err  # the plain fit is pulled by the six bad windows


def test_uncertainty_coverage_over_seeds():
    # The model's expected_u should cover the true curve about 95 % of the time at 2 u.
    hits = 0
    trials = 100
    probe = pd.DataFrame({"gross_output": [0.75 * RATING]})
    for seed in range(trials):
        w = make_windows(n=40, seed=100 + seed)
        m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
        e, u, _ = m.predict(probe)
        hits += abs(e[0] - true_eta(0.75)) <= 2 * u[0]
    assert 0.85 <= hits / trials <= 1.0


def test_refuses_extrapolation():
    w = make_windows(lo=0.6, hi=0.9)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, load_margin=0.05)
    lo, hi = m.load_range
    probe = pd.DataFrame(
        {"gross_output": np.array([lo - 0.06, lo - 0.04, 0.75, hi + 0.04, hi + 0.06, np.nan]) * RATING}
    )
    exp, u, flag = m.predict(probe)
    assert flag.tolist() == [True, False, False, False, True, False]
    assert np.isnan(exp[0]) and np.isnan(exp[4]) and np.isnan(u[0])
    assert np.isfinite(exp[1:4]).all()
    assert np.isnan(exp[5])  # missing load: no number, not flagged as extrapolated


def test_extra_regressor_range_is_guarded():
    w = make_windows()
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, extra_cols=["valve_position"])
    zlo, zhi = m.extra_ranges[0]
    span = zhi - zlo
    probe = pd.DataFrame(
        {"gross_output": [0.75 * RATING] * 2, "valve_position": [zhi + 0.05 * span, zhi + 0.2 * span]}
    )
    exp, _, flag = m.predict(probe)
    assert flag.tolist() == [False, True]
    assert np.isfinite(exp[0]) and np.isnan(exp[1])
    with pytest.raises(ValueError, match="valve_position"):
        m.predict(pd.DataFrame({"gross_output": [450.0]}))


def test_json_round_trip_exact_and_id_checked():
    w = make_windows(seed=9)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, extra_cols=["valve_position"])
    text = m.to_json()
    back = BaselineModel.from_json(text)
    assert back == m
    assert back.to_json() == text
    d = json.loads(text)
    assert d["schema_version"] == baseline.SCHEMA_VERSION
    assert d["reference_period"] == ["2026-03-01T00:00:00+00:00", w.index[-1].isoformat()]
    assert len(m.model_id) == 16
    # predictions identical after the round trip
    np.testing.assert_array_equal(back.predict(w)[0], m.predict(w)[0])
    # an edited artefact is refused
    d["coefficients"][0] += 1e-6
    with pytest.raises(ValueError, match="does not match"):
        BaselineModel.from_json(json.dumps(d))
    d = json.loads(text)
    d["schema_version"] = 99
    with pytest.raises(ValueError, match="schema version"):
        BaselineModel.from_json(json.dumps(d))
    with pytest.raises(ValueError, match="not valid JSON"):
        BaselineModel.from_json("{")


def test_model_id_depends_on_content():
    a = fit_baseline(make_windows(seed=1), "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    b = fit_baseline(make_windows(seed=2), "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    c = fit_baseline(make_windows(seed=1), "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    assert a.model_id != b.model_id
    assert a.model_id == c.model_id


def test_reference_period_selects_windows():
    w = make_windows(n=80)
    m = fit_baseline(
        w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, reference_period=(w.index[0], w.index[39])
    )
    assert m.n_windows == 40
    assert m.reference_end == w.index[39].isoformat()
    open_start = fit_baseline(
        w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, reference_period=(None, w.index[29])
    )
    assert open_start.n_windows == 30
    assert (
        fit_baseline(
            w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING, reference_period=(None, None)
        ).n_windows
        == 80
    )


def test_deviation_points_and_uncertainty():
    w = make_windows(noise=0.0)
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    later = w.copy()
    later["hp_efficiency"] -= 0.015  # 1.5 points of wear
    d = deviation(m, later, "hp_efficiency", "hp_efficiency_u")
    np.testing.assert_allclose(d["deviation"], -1.5, atol=1e-6)
    # model part is ~0 on noise-free data, so deviation_u is the 0.4-point measurement part
    np.testing.assert_allclose(d["deviation_u"], 0.4, atol=1e-6)
    assert (d["model_id"] == m.model_id).all()
    assert list(d.columns) == [
        "expected",
        "expected_u",
        "deviation",
        "deviation_u",
        "extrapolated",
        "model_id",
    ]
    assert tuple(d.columns) == DEVIATION_COLUMNS
    assert d.index.equals(later.index)
    far = later.iloc[:2].copy()
    far["gross_output"] = [0.1 * RATING, 0.7 * RATING]
    d2 = deviation(m, far)
    assert d2["extrapolated"].tolist() == [True, False]
    assert np.isnan(d2["deviation"].iloc[0]) and np.isnan(d2["deviation_u"].iloc[0])


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"rating_mw": 0.0}, "rating_mw"),
        ({"rating_mw": RATING, "degree": 3}, "degree"),
        ({"rating_mw": RATING, "efficiency_col": "nope"}, "nope"),
        ({"rating_mw": RATING, "min_windows": 100}, "at least 100"),
    ],
)
def test_bad_arguments(kwargs, match):
    kw = {"efficiency_col": "hp_efficiency"} | kwargs
    with pytest.raises(ValueError, match=match):
        fit_baseline(make_windows(), "hp", **kw)


def test_percent_efficiency_and_naive_bounds():
    w = make_windows()
    pct = w.assign(hp_efficiency=w["hp_efficiency"] * 100)
    with pytest.raises(ValueError, match="fractions"):
        fit_baseline(pct, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    m = fit_baseline(
        w,
        "hp",
        efficiency_col="hp_efficiency",
        rating_mw=np.int64(600),
        reference_period=("2026-03-01", "2026-03-05 23:00"),
    )  # naive bounds: UTC
    assert m.n_windows == 20 and m.rating_mw == 600.0


def test_single_load_cannot_fit_quadratic():
    w = make_windows()
    w["gross_output"] = 500.0
    with pytest.raises(ValueError, match="distinct loads"):
        fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)


def test_nan_rows_dropped():
    w = make_windows(n=30)
    w.iloc[:5, 0] = np.nan
    m = fit_baseline(w, "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    assert m.n_windows == 25


def _perturbed(model: BaselineModel, rel: float, seed: int) -> BaselineModel:
    """``model`` with every coefficient and covariance entry moved by ``rel`` relative, in a
    random direction each, and its id made again from that content."""
    rng = np.random.default_rng(seed)

    def move(v: float) -> float:
        return v * (1.0 + rel * rng.choice([-1.0, 1.0]))

    moved = dataclasses.replace(
        model,
        coefficients=tuple(move(v) for v in model.coefficients),
        covariance=tuple(tuple(move(v) for v in r) for r in model.covariance),
        residual_std=move(model.residual_std),
        rmse=move(model.rmse),
    )
    return dataclasses.replace(moved, model_id=baseline.content_id(moved._content()))


@pytest.mark.parametrize("seed", range(5))
def test_model_id_does_not_change_with_rounding_noise(seed):
    # Windows whose figures differ in the last bits (a period cut into other chunks) give fits
    # that differ by about 1e-12 relative: the same model, so the same id and series key.
    m = fit_baseline(
        make_windows(seed=seed),
        "hp",
        efficiency_col="hp_efficiency",
        rating_mw=RATING,
        extra_cols=["valve_position"],
    )
    noisy = _perturbed(m, 1e-12, seed)
    assert noisy.coefficients != m.coefficients  # the perturbation is there
    assert noisy.model_id == m.model_id
    # a real change of the model (1e-4 relative) gives another id
    assert _perturbed(m, 1e-4, seed).model_id != m.model_id
    assert BaselineModel.from_json(noisy.to_json()) == noisy


def test_model_id_made_before_the_rounding_is_still_accepted():
    m = fit_baseline(make_windows(seed=4), "hp", efficiency_col="hp_efficiency", rating_mw=RATING)
    d = json.loads(m.to_json())
    d["model_id"] = baseline.content_id(m._content(), digits=None)  # an artefact of an earlier version
    assert d["model_id"] != m.model_id
    back = BaselineModel.from_json(json.dumps(d))
    assert back.model_id == d["model_id"] and back.coefficients == m.coefficients
