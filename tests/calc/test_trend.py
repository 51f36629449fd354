"""Degradation rate, step detection and projection on synthetic deviation series.

The series are synthetic (known slope, known step, Gaussian noise; invented for the checks).
Reference implementation for the slope and its interval: scipy.stats.theilslopes (Sen 1968).
In-control average run length of a two-sided CUSUM with k = 0.5, h = 5: about 465 points
(Montgomery, Introduction to Statistical Quality Control, CUSUM ARL table; from memory).
"""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from isentrope.calc import trend
from isentrope.calc.trend import degradation_rate, detect_steps, operating_hours, project


def series(n=300, slope=-0.4, noise=0.3, span_h=8000.0, seed=0, step_at=None, step=0.0):
    rng = np.random.default_rng(seed)
    h = np.linspace(0.0, span_h, n)
    d = slope * h / 1000.0 + rng.normal(0.0, noise, n)
    if step_at is not None:
        d[step_at:] += step
    return h, d


def test_rate_interval_contains_true_slope():
    h, d = series(seed=1)
    r = degradation_rate(h, d)
    assert r.status == "ok" and r.n == 300
    assert r.low < -0.4 < r.high
    assert r.slope_per_1000h == pytest.approx(-0.4, abs=0.05)
    assert r.per_month == pytest.approx(r.slope_per_1000h * 0.730, rel=1e-12)  # 730 h month
    assert r.per_month_low == pytest.approx(r.low * 0.730, rel=1e-12)


def test_rate_matches_scipy_theilslopes():
    h, d = series(seed=2, n=120)
    r = degradation_rate(h, d, serial_correction=False)
    ref = stats.theilslopes(d, h / 1000.0, alpha=0.95)  # reference library
    assert (r.slope_per_1000h, r.low, r.high, r.intercept) == pytest.approx(
        (ref.slope, ref.low_slope, ref.high_slope, ref.intercept), rel=1e-12
    )
    # the blocked estimator with one block (break before every point) is the same estimator
    rb = degradation_rate(h, d, breaks=[-1.0], serial_correction=False)
    assert (rb.slope_per_1000h, rb.low, rb.high, rb.intercept) == pytest.approx(
        (ref.slope, ref.low_slope, ref.high_slope, ref.intercept), rel=1e-12
    )


def test_rate_interval_coverage_over_seeds():
    # Sen's 95 % interval should cover the true slope about 95 % of the time (iid noise).
    hits = sum(
        (lambda r: r.low <= -0.4 <= r.high)(degradation_rate(*series(n=80, seed=500 + s))) for s in range(200)
    )
    assert 0.90 <= hits / 200 <= 0.99


@pytest.mark.parametrize(
    "h, d, reason",
    [
        (np.arange(5.0) * 500, np.zeros(5), "5 valid points"),
        (np.linspace(0, 100, 50), np.zeros(50), "100 operating hours"),
        (np.linspace(0, 5000, 50), np.full(50, np.nan), "0 valid points"),
    ],
)
def test_rate_insufficient_data_is_not_a_number(h, d, reason):
    r = degradation_rate(h, d)
    assert r.status == "insufficient data"
    assert reason in r.reason
    assert all(math.isnan(v) for v in (r.slope_per_1000h, r.low, r.high, r.per_month))
    assert r.to_dict()["slope_per_1000h"] is None


def test_rate_skips_nan_and_checks_shapes():
    h, d = series(seed=3)
    d[::7] = np.nan
    r = degradation_rate(h, d)
    assert r.n == 300 - len(range(0, 300, 7))
    with pytest.raises(ValueError, match="must match"):
        degradation_rate(h[:-1], d)


def test_operating_hours_counts_online_only():
    t = pd.date_range("2026-05-01", periods=6, freq="1h", tz="UTC")
    on = [True, True, False, False, True, True]
    oh = operating_hours(t, on)
    # hand count, left-point rule: 0, 1, 2, 2, 2, 3
    assert oh.tolist() == [0.0, 1.0, 2.0, 2.0, 2.0, 3.0]
    assert oh.index.equals(t)
    t2 = t.delete(3)  # a 2 h hole
    oh2 = operating_hours(t2, [True] * 5, max_gap="90min")
    assert oh2.tolist() == [0.0, 1.0, 2.0, 2.0, 3.0]
    with pytest.raises(ValueError, match="ascending"):
        operating_hours(t[::-1], on)


def test_step_found_at_its_time_with_its_size():
    # slope of -0.3 points/1000 h, noise 0.25 points, a rub of -1.5 points at window 200
    n = 400
    h, d = series(n=n, slope=-0.3, noise=0.25, seed=7, step_at=200, step=-1.5)
    t = pd.date_range("2026-01-01", periods=n, freq="20h", tz="UTC")
    steps = detect_steps(t, d, hours=h)
    assert steps.status == "ok"
    assert len(steps) == 1
    s = steps[0]
    assert abs(s.index - 200) <= 3
    assert abs(s.time - t[200]) <= pd.Timedelta(hours=60)
    assert s.direction == "down"
    assert s.size == pytest.approx(-1.5, abs=max(0.15, 3 * s.size_u))
    assert s.detected_at >= s.time
    assert steps.sigma == pytest.approx(0.25, rel=0.2)
    # with the step as a break, the slope's interval holds the true slope
    r = degradation_rate(h, d, breaks=[h[s.index]])
    assert r.low < -0.3 < r.high
    # without the break the step passes for a much steeper slope
    assert degradation_rate(h, d).slope_per_1000h < -0.45


def test_step_up_and_numeric_time():
    h, d = series(n=200, slope=0.0, noise=0.2, seed=11, step_at=120, step=+0.8)
    steps = detect_steps(h, d, drift=False)
    assert len(steps) == 1 and steps[0].direction == "up"
    assert abs(steps[0].index - 120) <= 4
    assert steps[0].time == pytest.approx(h[steps[0].index])
    assert steps[0].size == pytest.approx(0.8, abs=0.15)


def test_two_steps_and_restart():
    h, d = series(n=450, slope=0.0, noise=0.2, seed=12, step_at=150, step=-1.0)
    d[300:] += 1.2  # recovery after a wash (invented)
    steps = detect_steps(h, d)
    assert [s.direction for s in steps] == ["down", "up"]
    # the last CUSUM zero can run a few points early when noise keeps the sum above zero
    assert abs(steps[0].index - 150) <= 8 and abs(steps[1].index - 300) <= 8
    assert steps[0].size == pytest.approx(-1.0, abs=0.2)
    assert steps[1].size == pytest.approx(1.2, abs=0.2)
    fine = detect_steps(h, d, refine=True)
    assert [s.index for s in fine] == pytest.approx([150, 300], abs=2)
    assert fine[0].size == pytest.approx(-1.0, abs=3 * fine[0].size_u + 0.02)
    assert fine[1].size == pytest.approx(1.2, abs=3 * fine[1].size_u + 0.02)


def test_slope_alone_is_not_a_step():
    h, d = series(n=400, slope=-0.5, noise=0.25, seed=13)
    assert len(detect_steps(h, d, hours=h)) == 0
    # a level-only scheme reads the same slope as a staircase of steps
    assert len(detect_steps(h, d, hours=h, drift=False)) >= 2


def test_false_alarm_rate_on_pure_noise():
    """Measured over 200 seeds of 500 points of N(0, 1) noise (the CUSUM variant on points
    taken as independent, phi = 0, as the published ARL assumes).

    Measured when written: default h = 8 (k = 0.5, drift on): 15 of 200 series (7.5 %) had
    a false step, 15 false steps in 100 000 points (one per about 6 700 points).
    h = 5: 68 % of series, consistent with the published in-control ARL of about 465 points
    (1 - exp(-495/465) = 0.66).
    """

    def rate(hh):
        hit = 0
        for s in range(200):
            x = np.random.default_rng(1000 + s).normal(0.0, 1.0, 500)
            hit += len(detect_steps(np.arange(500.0), x, h=hh, phi=0.0, method="cusum")) > 0
        return hit / 200

    assert rate(trend.DEFAULT_CUSUM_H) <= 0.15
    assert 0.55 <= rate(5.0) <= 0.80


def test_steps_insufficient_data_and_nan():
    s = detect_steps(np.arange(10.0), np.zeros(10))
    assert s.status == "insufficient data" and len(s) == 0 and "10 valid points" in s.reason
    s = detect_steps(np.arange(50.0), np.ones(50))
    assert s.status == "insufficient data" and "constant" in s.reason
    h, d = series(n=200, slope=0.0, noise=0.2, seed=14, step_at=100, step=-1.0)
    d[[5, 50, 150]] = np.nan
    s = detect_steps(h, d)
    assert s.n == 197 and len(s) == 1
    assert s[0].time == pytest.approx(h[100], abs=h[4] - h[0])
    with pytest.raises(ValueError, match="k >= 0"):
        detect_steps(h, d, h=0.0)


def test_project_hand_worked():
    r = trend.RateResult("ok", -0.4, -0.5, -0.3, -0.292, -0.365, -0.219, 0.0, 100, 5000.0)
    p = project(r, -1.0, 2500.0)
    # -1.0 + (-0.4)(2.5) = -2.0; interval -1.0 + (-0.5)(2.5) = -2.25 and -1.0 + (-0.3)(2.5) = -1.75
    assert (p.value, p.low, p.high) == pytest.approx((-2.0, -2.25, -1.75))
    p = project(r, -1.0, 2500.0, current_u=0.1)
    # sides in quadrature with 1.96 x 0.1 = 0.196: 0.25 -> hypot(0.25, 0.196) = 0.3177
    assert p.low == pytest.approx(-2.0 - math.hypot(0.25, 1.959964 * 0.1), rel=1e-6)
    bad = degradation_rate(np.arange(3.0), np.zeros(3))
    q = project(bad, -1.0, 100.0)
    assert q.status == "insufficient data" and math.isnan(q.value)
    with pytest.raises(ValueError, match="hours_to_date"):
        project(r, -1.0, -5.0)


def test_many_points_are_grouped_into_medians():
    rng = np.random.default_rng(21)
    h = np.sort(rng.uniform(0.0, 20000.0, 6000))
    d = -0.3 * h / 1000.0 + rng.normal(0.0, 0.3, h.size)
    r = degradation_rate(h, d, max_points=500)
    assert r.n == 6000 and r.n_used == 500
    assert r.low < -0.3 < r.high
    d2 = d.copy()
    d2[h >= 10000.0] -= 1.5  # a step: groups never straddle the break
    rb = degradation_rate(h, d2, breaks=[10000.0], max_points=500)
    assert rb.n_used <= 502 and rb.low < -0.3 < rb.high
    small = degradation_rate(h[:800], d[:800])
    assert small.n_used == 800
    with pytest.raises(ValueError, match="max_points"):
        degradation_rate(h, d, max_points=5)


def test_refined_step_is_the_least_squares_change_point_of_a_direct_fit():
    # The refinement solves all candidates at once from sums; here each candidate is fitted
    # directly (numpy.linalg.lstsq of level, slope and offset) and the smallest residual sum
    # of squares must be where detect_steps put the step. Invented series (one step of -0.8
    # point in 0.2 point noise with a slope), the answer set by the direct fit itself.
    rng = np.random.default_rng(11)
    n = 3000
    hours = np.arange(n) * 2.0
    dev = -0.3 * hours / 1000.0 + rng.normal(0.0, 0.2, n)
    dev[1700:] -= 0.8
    times = pd.date_range("2024-01-01", periods=n, freq="2h", tz="UTC")
    rough = trend.detect_steps(times, dev, hours=hours)
    fine = trend.detect_steps(times, dev, hours=hours, refine=True)
    assert len(rough) == len(fine) == 1
    tau, alarm = rough[0].index, int(np.searchsorted(times, rough[0].detected_at))
    x = hours / 1000.0
    best, best_rss = None, np.inf
    for c in range(max(1, tau - (alarm - tau) - 5), alarm + 1):
        design = np.column_stack([np.ones(n), x, (np.arange(n) >= c).astype(float)])
        beta, *_ = np.linalg.lstsq(design, dev, rcond=None)
        r = dev - design @ beta
        if float(r @ r) < best_rss:
            best, best_rss = c, float(r @ r)
    assert fine[0].index == best
    assert abs(best - 1700) <= 3
