"""Alarm state machines: persistence, hysteresis, reprocessing, split windows.

The rule levels are the project defaults (no source) and the 12 % moisture limit (common
practice, no source); the observation values are invented for the checks.
"""

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from isentrope.calc import alarms
from isentrope.calc.alarms import Rule, default_rules, evaluate_alarms, to_observations

T0 = pd.Timestamp("2026-06-01", tz="UTC")


def obs(values, section="hp", quantity="deviation", freq="4h", start=T0, steady=None):
    t = pd.date_range(start, periods=len(values), freq=freq, tz="UTC")
    f = pd.DataFrame(
        {"time": t, "section": section, "quantity": quantity, "value": np.asarray(values, dtype=float)}
    )
    if steady is not None:
        f["steady"] = steady
    return f


WARN = [r for r in default_rules() if r.name == "deviation_warning"]


def kinds(events):
    return list(zip(events["rule"], events["kind"], strict=True))


def test_persistence_needs_consecutive_windows():
    # warning below -1.0 for 3 windows: a break at window 3 restarts the count
    vals = [-1.2, -1.3, -0.5, -1.2, -1.1, -1.4, -1.5]
    state, ev = evaluate_alarms({}, obs(vals), WARN)
    assert kinds(ev) == [("deviation_warning", "raised")]
    assert ev.index[0] == T0 + pd.Timedelta(hours=4 * 5)  # the 6th window completes the streak
    assert ev["value"].iloc[0] == -1.4 and ev["threshold"].iloc[0] == -1.0
    assert ev["section"].iloc[0] == "hp"
    assert "raised" in ev["message"].iloc[0] and "\n" not in ev["message"].iloc[0]
    assert state["machines"]["deviation_warning|hp"]["state"] == "raised"
    assert alarms.active(state) == [("deviation_warning", "hp")]


def test_hysteresis_band_holds_and_clear_needs_persistence():
    # raised, then values inside the band (-1.0 .. -0.7) do not clear; -0.6 three times clears,
    # with a break after the first two that restarts the clear count
    vals = [-1.2, -1.2, -1.2, -0.9, -0.8, -0.6, -0.6, -0.8, -0.6, -0.6, -0.6]
    state, ev = evaluate_alarms({}, obs(vals), WARN)
    assert kinds(ev) == [("deviation_warning", "raised"), ("deviation_warning", "cleared")]
    assert ev.index[1] == T0 + pd.Timedelta(hours=4 * 10)
    assert ev["threshold"].iloc[1] == -0.7
    assert "cleared" in ev["message"].iloc[1]
    assert state["machines"]["deviation_warning|hp"]["state"] == "normal"


def test_warning_and_alarm_levels_are_separate_machines():
    vals = [-2.5] * 3 + [-1.5] * 3 + [-0.5] * 3
    _, ev = evaluate_alarms({}, obs(vals))
    assert kinds(ev) == [
        ("deviation_warning", "raised"),
        ("deviation_alarm", "raised"),
        ("deviation_alarm", "cleared"),
        ("deviation_warning", "cleared"),
    ]


def test_reprocessing_gives_identical_events_and_no_duplicates():
    vals = [-1.2, -1.2, -1.2, -0.5, -0.5, -0.5, -2.2, -2.3, -2.4]
    o = obs(vals)
    s1, e1 = evaluate_alarms({}, o)
    s2, e2 = evaluate_alarms({}, o)
    pd.testing.assert_frame_equal(e1, e2)
    assert s1 == s2
    # the same window again from the state saved after it: nothing new, state unchanged
    s3, e3 = evaluate_alarms(s1, o)
    assert len(e3) == 0 and s3 == s1
    # the state survives a JSON round trip (the store saves it as JSON)
    s4, e4 = evaluate_alarms(json.loads(json.dumps(s1)), o)
    assert len(e4) == 0 and s4 == s1


@settings(max_examples=30, deadline=None)
@given(
    vals=st.lists(
        st.sampled_from([-2.6, -2.1, -1.8, -1.2, -0.9, -0.6, 0.1, float("nan")]), min_size=2, max_size=40
    ),
    cut=st.floats(0.0, 1.0),
)
def test_split_windows_equal_one_window(vals, cut):
    o = obs(vals)
    k = int(round(cut * len(vals)))
    s_all, e_all = evaluate_alarms({}, o)
    s_a, e_a = evaluate_alarms({}, o.iloc[:k])
    s_b, e_b = evaluate_alarms(json.loads(json.dumps(s_a)), o.iloc[k:])
    pd.testing.assert_frame_equal(pd.concat([e_a, e_b]), e_all, check_index_type=False)
    assert s_b == s_all


def test_steady_only_and_nan_are_skipped():
    vals = [-1.5, -1.5, np.nan, -1.5, -1.5]
    steady = [True, True, True, False, True]
    _, ev = evaluate_alarms({}, obs(vals, steady=steady), WARN)
    # steady, finite values: windows 0, 1, 4 -> three in a row
    assert len(ev) == 1 and ev.index[0] == T0 + pd.Timedelta(hours=16)


def test_moisture_rule_lp_only():
    rules = [r for r in default_rules() if r.name == "exhaust_moisture"]
    hi = [0.125, 0.13, 0.126, 0.118, 0.114, 0.113, 0.112]
    o = pd.concat([obs(hi, "lp", "lp_exhaust_moisture"), obs(hi, "ip", "lp_exhaust_moisture")])
    _, ev = evaluate_alarms({}, o, rules)
    assert kinds(ev) == [("exhaust_moisture", "raised"), ("exhaust_moisture", "cleared")]
    assert set(ev["section"]) == {"lp"}
    assert ev["threshold"].iloc[0] == 0.12  # 12 % (common practice, no source)
    # 0.118 is inside the band (0.115 .. 0.12): the clear takes 0.114, 0.113, 0.112
    assert ev.index[1] == T0 + pd.Timedelta(hours=4 * 6)


def test_data_quality_needs_duration():
    rules = [r for r in default_rules() if r.name == "data_quality"]
    bad = [1, 1, 1, 1, 1, 0, 1, 1]
    o = obs(bad, "crossover_t", "tag_bad", freq="10min")
    _, ev = evaluate_alarms({}, o, rules)
    # first bad at 0 min; 30 min later (the 4th sample) it has held long enough
    assert kinds(ev) == [("data_quality", "raised"), ("data_quality", "cleared")]
    assert ev.index.tolist() == [T0 + pd.Timedelta(minutes=30), T0 + pd.Timedelta(minutes=50)]
    assert ev["section"].tolist() == ["crossover_t"] * 2


def test_step_rule_raised_by_step_down_cleared_by_step_up():
    rules = [r for r in default_rules() if r.name == "step"]
    o = obs([-0.3, -0.8, -0.2, 0.6], "hp", "step_size", freq="7D")
    _, ev = evaluate_alarms({}, o, rules)
    assert kinds(ev) == [("step", "raised"), ("step", "cleared")]
    assert ev["value"].tolist() == [-0.8, 0.6]


def test_rate_rule():
    rules = [r for r in default_rules() if r.name == "degradation_rate"]
    _, ev = evaluate_alarms({}, obs([-0.1, -0.3, -0.22, -0.15], "ip", "rate_per_1000h", freq="1D"), rules)
    assert kinds(ev) == [("degradation_rate", "raised"), ("degradation_rate", "cleared")]
    assert ev.index[1] == T0 + pd.Timedelta(days=3)


def test_no_events_frame_shape():
    state, ev = evaluate_alarms(None, obs([0.0, 0.1]))
    assert len(ev) == 0 and list(ev.columns) == alarms.EVENT_COLUMNS
    assert isinstance(ev.index, pd.DatetimeIndex) and str(ev.index.tz) == "UTC"
    json.dumps(state)


def test_empty_observations_keep_the_state():
    state, _ = evaluate_alarms({}, obs([-1.5, -1.5, -1.5]), WARN)
    empty = pd.DataFrame(columns=["time", "section", "quantity", "value"])
    s2, ev = evaluate_alarms(state, empty, WARN)
    assert s2 == state and len(ev) == 0
    s3, ev = evaluate_alarms(
        state, to_observations(pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC")), {}), WARN
    )
    assert s3 == state and len(ev) == 0


def test_to_observations():
    idx = pd.date_range(T0, periods=3, freq="1h", tz="UTC", name="time")
    wide = pd.DataFrame({"hp_deviation": [-1.5, -1.5, -1.5], "steady": [True, True, True]}, index=idx)
    o = to_observations(wide, {"hp_deviation": ("hp", "deviation")}, steady_col="steady")
    assert o.columns.tolist() == ["time", "section", "quantity", "value", "steady"]
    _, ev = evaluate_alarms({}, o, WARN)
    assert len(ev) == 1
    with pytest.raises(ValueError, match="not in"):
        to_observations(wide, {"nope": ("hp", "deviation")})


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(name="x", quantity="deviation", direction="below", threshold=-1.0, clear_at=-1.5), "clear_at"),
        (dict(name="x", quantity="deviation", direction="sideways", threshold=-1.0), "direction"),
        (
            dict(name="x", quantity="deviation", direction="below", threshold=-1.0, raise_after=0),
            "raise_after",
        ),
        (
            dict(name="x", quantity="q", direction="above", threshold=1.0, raise_after_duration="soon"),
            "duration",
        ),
        (dict(name="a|b", quantity="q", direction="above", threshold=1.0), "name"),
    ],
)
def test_bad_rules(kwargs, match):
    with pytest.raises(ValueError, match=match):
        Rule(**kwargs)


def test_rule_from_dict_rejects_unknown_keys():
    r = Rule.from_dict({"name": "x", "quantity": "deviation", "direction": "below", "threshold": -1.0})
    assert r.clear_level == -1.0
    with pytest.raises(ValueError, match="thresold"):
        Rule.from_dict({"name": "x", "quantity": "deviation", "direction": "below", "thresold": -1.0})


def test_bad_inputs():
    with pytest.raises(ValueError, match="version"):
        evaluate_alarms({"version": 7, "machines": {}}, obs([0.0]))
    naive = obs([0.0])
    naive["time"] = naive["time"].dt.tz_localize(None)
    with pytest.raises(ValueError, match="timezone"):
        evaluate_alarms({}, naive)
    with pytest.raises(ValueError, match="lack columns"):
        evaluate_alarms({}, obs([0.0]).drop(columns="quantity"))
    with pytest.raises(ValueError, match="unique"):
        evaluate_alarms({}, obs([0.0]), WARN + WARN)


def test_step_and_rate_observations_from_trend():
    from isentrope.calc import trend

    t = pd.date_range(T0, periods=300, freq="8h", tz="UTC")
    d = np.random.default_rng(3).normal(0.0, 0.2, 300)  # invented series, a -1 point step at 150
    d[150:] -= 1.0
    steps = trend.detect_steps(t, d)
    o = alarms.step_observations(steps, "hp")
    assert len(o) == 1 and o["time"].iloc[0] == steps[0].detected_at
    rate = trend.degradation_rate(np.arange(300) * 8.0, d, breaks=[steps[0].index * 8.0])
    r = alarms.rate_observation(t[-1], "hp", rate)
    # flat after the step: the interval includes zero, so the rule sees no rate
    assert rate.low < 0.0 < rate.high
    assert len(r) == 1 and r["value"].iloc[0] == 0.0
    _, ev = evaluate_alarms(
        {}, pd.concat([o, r]), [x for x in default_rules() if x.name in ("step", "degradation_rate")]
    )
    assert kinds(ev) == [("step", "raised")]  # the step, blocked out of the rate, raises only itself
    short = trend.degradation_rate(np.arange(3.0), np.zeros(3))
    assert len(alarms.rate_observation(t[-1], "hp", short)) == 0


def test_rate_alarm_watches_the_rate_only_where_its_interval_excludes_zero():
    from isentrope.calc import trend

    h = np.arange(400) * 3.0
    noise = np.random.default_rng(4).normal(0.0, 0.2, 400)  # invented
    steep = trend.degradation_rate(h, noise - 2.0 * h / 1000.0)
    assert steep.high < 0 and alarms.rate_alarm_value(steep) == steep.slope_per_1000h
    flat = trend.degradation_rate(h, noise)
    assert flat.low < 0 < flat.high and alarms.rate_alarm_value(flat) == 0.0
    rising = trend.degradation_rate(h, noise + 2.0 * h / 1000.0)
    assert rising.low > 0 and alarms.rate_alarm_value(rising) == rising.slope_per_1000h
    assert math.isnan(alarms.rate_alarm_value(trend.degradation_rate(h[:3], noise[:3])))


# --- the run-at-a-time machines against the plain observation-by-observation machine -------
def _stepwise(state, observations, rules):
    """Reference: the state machine of the calc.alarms docstring, one observation at a time
    (the original implementation of evaluate_alarms, kept here as the oracle)."""
    machines = json.loads(json.dumps(state or {"version": 1, "machines": {}}))["machines"]
    obs_ = observations.sort_values("time", kind="mergesort")
    records = []
    for r_i, rule in enumerate(rules):
        sel = obs_[(obs_["quantity"] == rule.quantity) & np.isfinite(obs_["value"])]
        if rule.sections is not None:
            sel = sel[sel["section"].isin(rule.sections)]
        if rule.steady_only and "steady" in sel.columns:
            sel = sel[sel["steady"].astype(bool)]
        duration = pd.Timedelta(rule.raise_after_duration) if rule.raise_after_duration else None
        for section in sorted(set(sel["section"])):
            key = f"{rule.name}|{section}"
            m = machines.get(key) or {
                "state": "normal",
                "count": 0,
                "since": None,
                "clear_count": 0,
                "last_time": None,
            }
            last = None if m.get("last_time") is None else pd.Timestamp(m["last_time"])
            for t, v in zip(
                sel.loc[sel["section"] == section, "time"],
                sel.loc[sel["section"] == section, "value"],
                strict=True,
            ):
                if last is not None and t <= last:
                    continue
                if m["state"] == "normal":
                    if rule._beyond(v):
                        m["count"] += 1
                        if m["since"] is None:
                            m["since"] = t.isoformat()
                        held = duration is None or t - pd.Timestamp(m["since"]) >= duration
                        if m["count"] >= rule.raise_after and held:
                            records.append((t, r_i, section, "raised", float(v)))
                            m.update(state="raised", count=0, since=None, clear_count=0)
                    else:
                        m.update(count=0, since=None)
                else:
                    if rule._cleared(v):
                        m["clear_count"] += 1
                        if m["clear_count"] >= rule.clear_after:
                            records.append((t, r_i, section, "cleared", float(v)))
                            m.update(state="normal", count=0, since=None, clear_count=0)
                    else:
                        m["clear_count"] = 0
                m["last_time"] = t.isoformat()
            machines[key] = m
    records.sort(key=lambda r: (r[0], r[1], r[2]))
    return {"version": 1, "machines": machines}, records


@settings(max_examples=30, deadline=None)
@given(
    classes=st.lists(
        st.lists(st.sampled_from([0, 1, 2, 3]), min_size=0, max_size=60), min_size=1, max_size=3
    ),
    raise_after=st.integers(1, 4),
    clear_after=st.integers(1, 4),
    duration=st.sampled_from([None, "0s", "5min", "17min", "2h"]),
    cuts=st.lists(st.integers(0, 60), max_size=3),
    repeat_times=st.booleans(),
)
def test_run_at_a_time_equals_observation_by_observation(
    classes, raise_after, clear_after, duration, cuts, repeat_times
):
    # values below -1.0 (beyond), in the band -1.0..-0.7, above -0.7 (cleared), NaN (skipped)
    level = {0: -1.5, 1: -0.85, 2: -0.2, 3: np.nan}
    rules = [
        Rule("r", "deviation", "below", -1.0, -0.7, raise_after, clear_after, raise_after_duration=duration),
        Rule("q", "tag_bad", "above", 0.5, 0.5, raise_after=1, raise_after_duration="5min"),
    ]
    parts = []
    for k, seq in enumerate(classes):
        freq = "1min" if k % 2 == 0 else "3min"
        t = pd.date_range(T0, periods=len(seq), freq=freq, tz="UTC")
        if repeat_times and len(seq) > 2:  # two observations at the same instant
            t = t.insert(1, t[1]).delete(2)
        parts.append(
            pd.DataFrame(
                {"time": t, "section": f"s{k}", "quantity": "deviation", "value": [level[c] for c in seq]}
            )
        )
        parts.append(
            pd.DataFrame(
                {"time": t, "section": f"s{k}", "quantity": "tag_bad", "value": [float(c == 0) for c in seq]}
            )
        )
    allobs = pd.concat(parts, ignore_index=True)
    # whole batch and split into pieces by time, each against the reference
    edges = sorted({T0 + pd.Timedelta(minutes=c) for c in cuts})
    pieces, lo = [], None
    for e in edges + [None]:
        sel = np.ones(len(allobs), dtype=bool)
        if lo is not None:
            sel &= allobs["time"] >= lo
        if e is not None:
            sel &= allobs["time"] < e
        pieces.append(allobs[sel])
        lo = e
    for batches in ([allobs], pieces):
        state, ref_state = {}, None
        got, want = [], []
        for b in batches:
            state, ev = evaluate_alarms(state, b, rules)
            ref_state, rec = _stepwise(ref_state, b, rules)
            got += [
                (t, r, s, k, v)
                for t, r, s, k, v in zip(
                    ev.index, ev["rule"], ev["section"], ev["kind"], ev["value"], strict=True
                )
            ]
            want += [(t, rules[ri].name, s, k, v) for t, ri, s, k, v in rec]
        assert got == want
        assert state == ref_state
