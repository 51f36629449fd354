"""The degradation analysis (isentrope.daemon.analysis.analyse) on in-memory histories.

The histories are invented here: a flat deviation with small seeded noise and steps of known
size at known times, so what the analysis must find is set by construction (no outside
source); the CUSUM and Theil-Sen methods themselves are checked in tests/calc/test_trend.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from isentrope.calc.trend import detect_steps
from isentrope.daemon.analysis import analyse
from isentrope.daemon.commands.demo import demo_config_toml
from isentrope.daemon.config import load_config

START = pd.Timestamp("2025-02-01", tz="UTC")
DAYS = 130
STEP_DOWN = START + pd.Timedelta(days=20, hours=2)  # 2025-02-21 02:00, a loss of 1 point
STEP_UP = START + pd.Timedelta(days=100, hours=2)  # 2025-05-12 02:00, the point recovered


@pytest.fixture(scope="module")
def config(tmp_path_factory):
    folder = tmp_path_factory.mktemp("analysis")
    path = folder / "unit.toml"
    path.write_text(demo_config_toml("unit.sqlite", START, DAYS), encoding="utf-8")
    return load_config(path)


def _history(steps: list[tuple[pd.Timestamp, float]], noise: float = 0.05, seed: int = 7):
    """Windows every 4 h online all the time; deviation 0 plus the steps plus noise [points]."""
    times = pd.date_range(START, START + pd.Timedelta(days=DAYS), freq="4h", inclusive="left", tz="UTC")
    dev = np.random.default_rng(seed).normal(0.0, noise, len(times))
    for t, size in steps:
        dev[times >= t] += size
    frame = pd.DataFrame(
        {"deviation": dev, "deviation_u": 0.33, "extrapolated": False},
        index=pd.DatetimeIndex(times, name="time"),
    )
    samples = pd.date_range(START, START + pd.Timedelta(days=DAYS), freq="1h", inclusive="left", tz="UTC")
    online = pd.Series(True, index=samples)
    output = pd.Series(450.0, index=samples)
    return {"ip": frame}, online, output, START + pd.Timedelta(days=DAYS)


def test_step_alarm_carries_the_signed_size_and_stays_raised_until_a_step_takes_it_back(config):
    deviation, online, output, end = _history([(STEP_DOWN, -1.0), (STEP_UP, +1.0)])
    result = analyse(deviation, online, output, config, end)
    steps = result.sections["ip"].steps
    assert [s.direction for s in steps] == ["down", "up"]
    assert steps[0].size == pytest.approx(-1.0, abs=0.05)  # injected above
    ev = result.alarm_events[result.alarm_events["rule"] == "step_change"]
    # evaluated at each UTC midnight: the scan at the first midnight after the loss finds it,
    # the next midnight's confirms it (daemon.analysis._confirmed) and raises the alarm, with
    # the signed size and the configured threshold; not cleared at the midnights while the
    # loss stands; cleared at the second midnight after the step back (found, then confirmed),
    # with the net offset left
    day = pd.Timedelta(days=1)
    assert list(ev["kind"]) == ["raised", "cleared"]
    assert list(ev.index) == [STEP_DOWN.ceil("D") + day, STEP_UP.ceil("D") + day]
    assert all(ev.index - pd.DatetimeIndex([STEP_DOWN, STEP_UP]) <= 2 * day)
    raised, cleared = ev.iloc[0], ev.iloc[1]
    # each midnight sees the steps as a scan of the windows before it found them: the loss
    # as the windows of a day and a half after it measured it (within 0.05 point of the injected -1.0), and
    # the net offset once the recovery shows (near 0, above half the threshold)
    frame = deviation["ip"]
    for event, row in zip(ev.index, (raised, cleared), strict=True):
        before = frame[frame.index < event]
        # online all the time: the operating hours are the elapsed hours (the default)
        known = detect_steps(
            before.index, before["deviation"].to_numpy(), threshold=config.alarms.step_threshold
        )
        assert row["value"] == pytest.approx(sum(s.size for s in known), rel=1e-9)
    assert raised["value"] == pytest.approx(-1.0, abs=0.05)
    assert raised["threshold"] == -config.alarms.min_step_points
    assert cleared["value"] == pytest.approx(0.0, abs=0.05)
    assert cleared["threshold"] == -0.5 * config.alarms.min_step_points
    # the series written: signed value and real threshold reach the store as they are
    written = [
        f for m, f, t in result.writes({"unit": "U"}) if m == "alarm_events" and t["rule"] == "step_change"
    ]
    assert len(written) == 1
    assert list(written[0]["value"]) == [raised["value"], cleared["value"]]
    assert list(written[0]["threshold"]) == [-0.25, -0.125]


def test_a_step_up_alone_raises_no_step_alarm(config):
    deviation, online, output, end = _history([(STEP_DOWN, +1.0)])
    result = analyse(deviation, online, output, config, end)
    assert [s.direction for s in result.sections["ip"].steps] == ["up"]
    assert not (result.alarm_events["rule"] == "step_change").any()


def test_a_step_at_a_trip_is_placed_at_the_first_window_after_the_restart(config):
    # No steady window from the trip to 21 h later; the loss applies from the restart. The
    # last windows before the trip read a little low (-0.04 point, under one noise standard
    # deviation), so the CUSUM's sum had left zero before the trip and its own estimate falls
    # before it (seed 0: 2025-02-20 12:00); the least-squares change point is the first window
    # after the restart. Invented history; the true step time is set by construction.
    times = pd.date_range(START, START + pd.Timedelta(days=60), freq="2h", inclusive="left", tz="UTC")
    trip = START + pd.Timedelta(days=20, hours=9)
    first = trip + pd.Timedelta(hours=21)
    times = times[(times < trip) | (times >= first)]
    dev = np.random.default_rng(0).normal(0.0, 0.05, len(times))
    dev[np.flatnonzero(times < trip)[-3:]] = -0.04
    dev[times >= first] -= 1.0
    frame = pd.DataFrame(
        {"deviation": dev, "deviation_u": 0.33, "extrapolated": False},
        index=pd.DatetimeIndex(times, name="time"),
    )
    samples = pd.date_range(START, START + pd.Timedelta(days=60), freq="1h", inclusive="left", tz="UTC")
    online = pd.Series(~((samples >= trip) & (samples < first - pd.Timedelta(hours=14))), index=samples)
    result = analyse(
        {"ip": frame}, online, pd.Series(450.0, index=samples), config, START + pd.Timedelta(days=60)
    )
    steps = result.sections["ip"].steps
    assert [pd.Timestamp(s.time) for s in steps] == [first]
    assert steps[0].size == pytest.approx(-1.0, abs=0.05)


def test_the_current_deviation_carries_both_uncertainties(config):
    # current_u is the standard error of the 7-day median from the windows' scatter
    # (1.4826 MAD / sqrt(n), the normal-consistent MAD: common practice, no source);
    # current_window_u is the windows' own deviation_u (0.33 pt here, set above), which a
    # change of instrument bias would act through. Both are checked against a direct
    # computation on the invented history.
    deviation, online, output, end = _history([])
    o = analyse(deviation, online, output, config, end).sections["ip"]
    last = deviation["ip"]["deviation"]
    last = last[last.index >= end - pd.Timedelta(days=7)].to_numpy()
    med = np.median(last)
    assert o.current == pytest.approx(med, rel=1e-12)
    assert o.current_u == pytest.approx(
        1.4826 * np.median(np.abs(last - med)) / np.sqrt(last.size), rel=1e-12
    )
    assert o.current_u < 0.01  # 42 windows of 0.05 pt noise: the level is known to < 0.01 pt
    assert o.current_window_u == pytest.approx(0.33, rel=1e-12)
    assert o.daily["deviation_now_window_u"].iloc[-1] == pytest.approx(0.33, rel=1e-12)


def test_the_sections_scanned_in_threads_give_the_figures_of_one_after_another(config, monkeypatch):
    """The scans run in threads (daemon.analysis.SCAN_THREADS); each section's figures must be
    those of a run with one thread, bit for bit (no shared state between the scans)."""
    from isentrope.daemon import analysis

    deviation, online, output, end = _history([(STEP_DOWN, -1.0), (STEP_UP, +1.0)])
    other = deviation["ip"].copy()
    other["deviation"] = other["deviation"].to_numpy()[::-1]
    deviation = {"hp": other, "ip": deviation["ip"], "lp": deviation["ip"] * 0.5}
    monkeypatch.setattr(analysis, "SCAN_THREADS", 1)
    one = analyse(deviation, online, output, config, end)
    monkeypatch.setattr(analysis, "SCAN_THREADS", 3)
    many = analyse(deviation, online, output, config, end)
    assert set(one.sections) == set(many.sections) == {"hp", "ip", "lp"}
    for name in one.sections:
        pd.testing.assert_frame_equal(one.sections[name].daily, many.sections[name].daily, check_exact=True)
        assert [(s.time, s.size) for s in one.sections[name].steps] == [
            (s.time, s.size) for s in many.sections[name].steps
        ]
    pd.testing.assert_frame_equal(one.alarm_events, many.alarm_events, check_exact=True)
