"""Outage-aware quality: while the unit is offline the tag-quality rules are suspended and one
unit-level state says so (``unit_offline``: raised when the unit goes offline, cleared when it
returns); a tag that goes bad while the unit runs still raises its own alarm, and a silent
historian still raises ``no_data``.

Data: a three-day synthetic history of the fictional unit (isentrope.daemon.synthetic) with
its trip, a flatlined transmitter, a gap of absent rows and a spike burst; their times come
from the generator's own record (``truth``), so the expectations are set by construction.
The generator's offline readings stay plausible; a plant historian's do not (tags stop, read
a constant zero, or leave their range), so the outage is given that picture here (``offline_picture``,
invented).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import worker_support as ws

from isentrope.calc import quality
from isentrope.daemon import synthetic
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import Pipeline


def offline_picture(frame, start, end):
    """What a historian shows of a unit that is off: output, flow and valve a constant zero,
    the condenser at atmospheric pressure (above its range), the crossover and LP extraction
    transmitters missing, the throttle temperature frozen at its last value."""
    out = frame.copy()
    off = (out.index >= start) & (out.index < end)
    out.loc[off, ["gross_output", "main_steam_flow", "valve_position"]] = 0.0
    out.loc[off, "condenser_p"] = 0.1015  # [MPa abs], above one atmosphere
    out.loc[off, ["crossover_t", "lp_extraction_p", "lp_extraction_t"]] = np.nan
    out.loc[off, "throttle_t"] = out.loc[off, "throttle_t"].iloc[0]
    return out


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    frame, truth = synthetic.generate(start=ws.START, days=3, seed=11, faults=True, freq="2min")
    frame = offline_picture(frame, _t(truth["trip"]["time"]), _t(truth["trip"]["restart"]))
    path = tmp_path_factory.mktemp("outage") / "unit.toml"
    config = load_config(ws.write_config(path, ws.store_toml("sqlite", path="unit.sqlite")))
    pipe = Pipeline(config)
    res = pipe.process(frame, frame.index[0], frame.index[-1] + pd.Timedelta("2min"))
    return frame, truth, config, pipe, res


def _t(text):
    return pd.Timestamp(text).tz_convert("UTC")


def test_a_trip_gives_one_unit_event_and_its_return_not_one_alarm_per_tag(run):
    frame, truth, config, pipe, res = run
    trip, restart = _t(truth["trip"]["time"]), _t(truth["trip"]["restart"])
    # Without the suspension the trip would raise tag alarms: screening flags several roles
    # bad through the whole outage, far longer than data_quality_limit (1 h).
    screen = quality.screen(frame, **pipe.screen_kwargs(frame))
    during = (screen.flags.index >= trip + pd.Timedelta("10min")) & (screen.flags.index < restart)
    bad_all_along = [r for r in pipe.roles if (screen.flags.loc[during, r] != 0).all()]
    assert len(bad_all_along) >= 3, bad_all_along
    assert restart - trip > config.alarms.data_quality_limit

    ev = res.alarm_events
    around = ev[(ev.index >= trip - pd.Timedelta("1h")) & (ev.index < restart + pd.Timedelta("3h"))]
    assert list(zip(around["section"], around["rule"], around["kind"], strict=True)) == [
        ("unit", "unit_offline", "raised"),
        ("unit", "unit_offline", "cleared"),
    ]
    raised, cleared = around.index
    # raised once it has lasted OFFLINE_AFTER (10 min); cleared at the first row back at or above
    # online_mw after the restart
    assert trip + pd.Timedelta("10min") <= raised <= trip + pd.Timedelta("14min")
    online = quality.unit_online(frame, config.unit.online_mw)
    back = online[(online.index > restart - pd.Timedelta("1min")) & online].index[0]
    assert cleared == back


def test_a_tag_bad_while_the_unit_runs_and_a_silent_historian_still_raise(run):
    frame, truth, config, pipe, res = run
    ev = res.alarm_events
    raised = ev[ev["kind"] == "raised"]
    flat = truth["flatline"]
    mine = raised[(raised["rule"] == "data_quality") & (raised["section"] == flat["role"])]
    # the stuck transmitter: its own alarm, once the flat stretch (2 h) plus data_quality_limit
    # (1 h) have passed, while the unit ran
    assert len(mine) == 1
    assert _t(flat["start"]) < mine.index[0] <= _t(flat["start"]) + pd.Timedelta("3h10min")
    gap = raised[raised["rule"] == "no_data"]
    assert len(gap) == 1 and _t(truth["gap"]["start"]) < gap.index[0] < _t(truth["gap"]["end"])
    # nothing else raised data_quality: only the flatline (the spike burst is shorter than 1 h)
    assert set(raised.loc[raised["rule"] == "data_quality", "section"]) == {flat["role"]}


def test_a_tag_bad_at_the_trip_does_not_raise_at_once_after_the_restart(run):
    # A transmitter that fails 30 min before the trip and stays failed: the suspension restarts
    # its streak, so after the restart it needs data_quality_limit (1 h) of running again.
    frame, truth, config, pipe, _ = run
    trip, restart = _t(truth["trip"]["time"]), _t(truth["trip"]["restart"])
    broken = frame.copy()
    broken.loc[broken.index >= trip - pd.Timedelta("30min"), "crossover_t"] = np.nan
    res = pipe.process(broken, broken.index[0], broken.index[-1] + pd.Timedelta("2min"))
    ev = res.alarm_events
    mine = ev[(ev["rule"] == "data_quality") & (ev["section"] == "crossover_t")]
    online = quality.unit_online(frame, config.unit.online_mw)
    back = online[(online.index > restart - pd.Timedelta("1min")) & online].index[0]
    assert list(mine["kind"]) == ["raised"]
    assert back + config.alarms.data_quality_limit <= mine.index[0] <= back + pd.Timedelta("1h5min")


def test_unit_online_rules():
    idx = pd.date_range("2026-01-01", periods=4, freq="1min", tz="UTC")
    frame = pd.DataFrame(
        {
            "gross_output": [400.0, 20.0, np.nan, np.nan],
            "throttle_p": [16.5, 3.0, 16.4, np.nan],
            "throttle_t": [811.0, 600.0, 811.0, np.nan],
            "condenser_p": [0.005, 0.02, np.nan, np.nan],
        },
        index=idx,
    )
    got = quality.unit_online(frame, 60.0)
    # online; output under online_mw; output missing but the other readings there (a failed
    # output transmitter: online, its MISSING flag stays in force); nothing at all: offline
    assert list(got) == [True, False, True, False]
    with pytest.raises(ValueError, match="gross_output"):
        quality.unit_online(frame.drop(columns=["gross_output"]), 60.0)
