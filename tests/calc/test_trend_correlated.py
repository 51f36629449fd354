"""Rate interval, steps and the slow alarms on serially correlated windows.

Series from ``tests/calc/correlated.py`` (invented: AR(1) window-to-window deviations, phi 0,
0.5 and 0.9, marginal sd 0.35 point, windows 1-5 h apart, and AR(1) 0.9 plus a 0.3-point
daily wave). The targets are the project's (no source): the 95 % rate interval covers the
true slope in at least 90 % of series at every setting, for 400 and 2500 windows, and is at
most 1.3 times as wide as Sen's plain interval on independent noise; at most 5 % of
400-window series without a step show a step of 0.25 point or more, and a -1.0 point step
is found, dated within 10 windows, in at least 80 % of series at phi 0.9; the rate alarm
(rate below -1 point per 1000 h, interval below zero) is raised on at most 5 % of flat
series. The figures measured when written are in calc/DECISIONS.md.
"""

import numpy as np
import pytest
from correlated import SETTINGS, correlated_series

from isentrope.calc import alarms, trend

SEEDS = 200
TRUE_SLOPE = -0.3  # points per 1000 h (invented)


def _coverage(n):
    out = {}
    for label, phi, daily in SETTINGS:
        hours, dev = correlated_series(SEEDS, n, phi, daily=daily, slope=TRUE_SLOPE)
        rates = [trend.degradation_rate(h, d) for h, d in zip(hours, dev, strict=True)]
        out[label] = np.mean([r.low <= TRUE_SLOPE <= r.high for r in rates])
    return out


def test_rate_interval_covers_the_slope_under_correlation_400_windows():
    cover = _coverage(400)
    assert all(c >= 0.90 for c in cover.values()), cover
    # the uncorrected interval of the same estimator does not hold at phi 0.9 (33 % in the
    # issue's measurement; here a check that the settings are hard enough to matter)
    hours, dev = correlated_series(SEEDS, 400, 0.9, slope=TRUE_SLOPE)
    plain = [trend.degradation_rate(h, d, serial_correction=False) for h, d in zip(hours, dev, strict=True)]
    assert np.mean([r.low <= TRUE_SLOPE <= r.high for r in plain]) < 0.6


@pytest.mark.slow
def test_rate_interval_covers_the_slope_under_correlation_2500_windows():
    cover = _coverage(2500)
    assert all(c >= 0.90 for c in cover.values()), cover


def test_rate_interval_on_independent_noise_is_at_most_a_third_wider():
    hours, dev = correlated_series(SEEDS, 400, 0.0, slope=TRUE_SLOPE)
    ratio = []
    for h, d in zip(hours, dev, strict=True):
        r = trend.degradation_rate(h, d)
        plain = trend.degradation_rate(h, d, serial_correction=False)
        ratio.append((r.high - r.low) / (plain.high - plain.low))
    assert np.median(ratio) <= 1.3 and np.mean(ratio) <= 1.3
    assert min(ratio) >= 1.0  # never narrower than Sen's plain interval


def test_variance_factor_of_an_ar1_matches_the_long_run_limit():
    # n/n* -> (1 + phi) / (1 - phi) for large n (AR(1) long-run variance; textbook result)
    assert trend.variance_factor_ar1(100_000, 0.5) == pytest.approx(3.0, rel=1e-3)
    assert trend.variance_factor_ar1(100_000, 0.9) == pytest.approx(19.0, rel=2e-3)
    assert trend.variance_factor_ar1(400, 0.0) == 1.0


def _steps(hours, dev):
    return [trend.detect_steps(h, d, hours=h, refine=True) for h, d in zip(hours, dev, strict=True)]


@pytest.mark.parametrize(("label", "phi", "daily"), SETTINGS)
def test_no_false_steps_and_no_step_alarm_under_correlation(label, phi, daily):
    hours, dev = correlated_series(SEEDS, 400, phi, daily=daily)
    found = _steps(hours, dev)
    # the analysis reports steps of at least [alarms] min_step_points = 0.25 point
    any_step = np.mean([any(abs(s.size) >= 0.25 for s in st) for st in found])
    assert any_step <= 0.05, (label, any_step)
    # the step alarm: the net of the reported steps below -0.25 point
    alarm = np.mean([sum(s.size for s in st if abs(s.size) >= 0.25) < -0.25 for st in found])
    assert alarm <= 0.05, (label, alarm)


@pytest.mark.parametrize(("label", "phi", "daily"), SETTINGS)
def test_a_one_point_step_is_found_and_dated_under_correlation(label, phi, daily):
    hours, dev = correlated_series(SEEDS, 400, phi, daily=daily, step=-1.0, step_at=200)
    found = _steps(hours, dev)
    hit = np.mean([any(s.size <= -0.25 and abs(s.index - 200) <= 10 for s in st) for st in found])
    assert hit >= 0.80, (label, hit)


def test_noise_scale_is_the_innovation_sd_not_the_short_term_scatter():
    # AR(1) phi 0.9, marginal sd 0.35: innovations 0.35 sqrt(1 - 0.81) = 0.153 point
    hours, dev = correlated_series(50, 400, 0.9)
    st = _steps(hours, dev)
    assert np.median([s.phi for s in st]) == pytest.approx(0.9, abs=0.03)
    assert np.median([s.sigma for s in st]) == pytest.approx(0.35 * np.sqrt(1 - 0.81), rel=0.1)


def test_variogram_phi_is_not_moved_by_a_step():
    hours, dev = correlated_series(50, 400, 0.5, step=-1.5, step_at=200)
    assert np.median([trend.variogram_phi(d) for d in dev]) == pytest.approx(0.5, abs=0.06)


@pytest.mark.parametrize(("label", "phi", "daily"), SETTINGS)
def test_rate_alarm_on_flat_series_under_correlation(label, phi, daily):
    """The degradation-rate rule (below -1 point per 1000 h, as the analysis's default
    ``rate_limit_per_1000h``) on the expanding history at 200, 300 and 400 windows."""
    hours, dev = correlated_series(SEEDS, 400, phi, daily=daily)
    raised = 0
    for h, d in zip(hours, dev, strict=True):
        values = [
            alarms.rate_alarm_value(trend.degradation_rate(h[:end] - h[0], d[:end]))
            for end in (200, 300, 400)
        ]
        raised += any(v < -1.0 for v in values if np.isfinite(v))
    assert raised / SEEDS <= 0.05, (label, raised / SEEDS)


def test_no_false_step_across_an_outage():
    """A 48 h outage at window 200: the wander after it is independent of the one before.

    Measured when written: 4 % of series with a step of 0.25 point or more when the clock
    times show the outage; 14 % when the times hide it (the jump then reads as a step).
    """
    hours, dev = correlated_series(SEEDS, 400, 0.9)
    _, other = correlated_series(SEEDS + 1, 400, 0.9)
    dev = np.concatenate([dev[:, :200], other[:SEEDS, 200:]], axis=1)
    clock = hours.copy()
    clock[:, 200:] += 48.0
    online = hours  # operating hours do not count the outage
    found = [
        trend.detect_steps(c, d, hours=o, refine=True) for c, o, d in zip(clock, online, dev, strict=True)
    ]
    assert np.mean([any(abs(s.size) >= 0.25 for s in st) for st in found]) <= 0.05
