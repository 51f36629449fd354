"""The pipeline: steady windows on fixed clock boundaries, the calc/ chain in order, determinism,
and chunk invariance (a window processed in pieces gives what it gives in one go)."""

from __future__ import annotations

from itertools import pairwise

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon.pipeline import absent_row_times, align_steady_windows


def utc(s: str) -> pd.Timestamp:
    return pd.Timestamp(s, tz="UTC")


def minute_frame(start: str, periods: int) -> pd.DataFrame:
    idx = pd.date_range(utc(start), periods=periods, freq="1min", name="time")
    return pd.DataFrame({"x": np.arange(periods, dtype=float)}, index=idx)


# --- align_steady_windows -----------------------------------------------------------------


def test_a_long_plateau_is_cut_at_whole_hours_whatever_its_start():
    frame = minute_frame("2025-05-01 00:17", 200)  # 00:17 .. 03:36
    steady = pd.Series(True, index=frame.index)
    w = align_steady_windows(frame, steady, max_length="1h", max_gap="5min", min_length="20min")
    assert list(w.index) == [
        utc("2025-05-01 00:17"),
        utc("2025-05-01 01:00"),
        utc("2025-05-01 02:00"),
        utc("2025-05-01 03:00"),
    ]
    assert list(w["n_samples"]) == [43.0, 60.0, 60.0, 37.0]
    assert w.loc[utc("2025-05-01 01:00"), "end"] == utc("2025-05-01 01:59")
    assert w.loc[utc("2025-05-01 01:00"), "duration_s"] == 3600.0
    # the mean of x over 01:00..01:59 (x counts minutes from 00:17): 43 .. 102
    assert w.loc[utc("2025-05-01 01:00"), "x"] == pytest.approx(np.mean(np.arange(43, 103)))


def test_a_non_steady_sample_or_a_long_gap_ends_a_window_and_short_ones_are_dropped():
    frame = minute_frame("2025-05-01 00:00", 60)
    steady = pd.Series(True, index=frame.index)
    steady.iloc[25] = False  # 00:25 not steady: 00:00-00:24 (25 min) and 00:26-00:59 (34 min)
    w = align_steady_windows(frame, steady, max_length="1h", max_gap="5min", min_length="20min")
    assert list(w.index) == [utc("2025-05-01 00:00"), utc("2025-05-01 00:26")]
    frame2 = frame.drop(frame.index[30:40])  # a 10-minute hole in the data
    steady2 = pd.Series(True, index=frame2.index)
    w2 = align_steady_windows(frame2, steady2, max_length="1h", max_gap="5min", min_length="20min")
    # 00:00-00:29 and 00:40-00:59 (20 samples of one minute: exactly min_length, kept)
    assert list(w2.index) == [utc("2025-05-01 00:00"), utc("2025-05-01 00:40")]
    w2b = align_steady_windows(frame2, steady2, max_length="1h", max_gap="5min", min_length="21min")
    assert list(w2b.index) == [utc("2025-05-01 00:00")]
    w3 = align_steady_windows(frame2, steady2, max_length="1h", max_gap="15min", min_length="20min")
    assert list(w3.index) == [utc("2025-05-01 00:00")] and w3["n_samples"].iloc[0] == 50.0


def test_windows_do_not_depend_on_how_time_is_cut_into_chunks():
    rng = np.random.default_rng(7)
    frame = minute_frame("2025-05-01 00:00", 6 * 60)
    frame["x"] = rng.normal(size=len(frame))
    steady = pd.Series(rng.random(len(frame)) > 0.02, index=frame.index)
    kw = dict(max_length="1h", max_gap="5min", min_length="10min")
    whole = align_steady_windows(
        frame, steady, start=utc("2025-05-01 00:00"), end=utc("2025-05-01 06:00"), **kw
    )
    parts = []
    for a, b in [("00:00", "01:37"), ("01:37", "04:02"), ("04:02", "06:00")]:
        s, e = utc(f"2025-05-01 {a}"), utc(f"2025-05-01 {b}")
        sub = frame.loc[s - pd.Timedelta("2h") : e]  # the chunk and its margin
        parts.append(align_steady_windows(sub, steady.reindex(sub.index), start=s, end=e, **kw))
    pd.testing.assert_frame_equal(pd.concat(parts), whole)
    assert len(whole) >= 6


def test_no_steady_sample_gives_an_empty_frame_with_the_columns():
    frame = minute_frame("2025-05-01 00:00", 30)
    w = align_steady_windows(
        frame, pd.Series(False, index=frame.index), max_length="1h", max_gap="5min", min_length="20min"
    )
    assert len(w) == 0 and {"end", "duration_s", "n_samples", "x"} <= set(w.columns)


# --- the chain on a synthetic history -------------------------------------------------------

import worker_support as ws  # noqa: E402  (tests/daemon is on sys.path under pytest)

from isentrope.daemon.config import load_config  # noqa: E402
from isentrope.daemon.pipeline import CycleResults, Pipeline, spike_samples  # noqa: E402


@pytest.fixture(scope="module")
def pipeline(tmp_path_factory):
    path = ws.write_config(
        tmp_path_factory.mktemp("cfg") / "unit.toml", ws.store_toml("sqlite", path="unit.sqlite")
    )
    return Pipeline(load_config(path))


def _slice(frame, pipeline, s, e):
    before, after = pipeline.margins
    return frame.loc[(frame.index >= s - before) & (frame.index < e + after)]


def test_margins_cover_the_look_ahead_and_look_back_of_the_screens(pipeline):
    before, after = pipeline.margins
    # steady window 30m + flatline 2h + spike noise block 1h (longer than the 15m spike
    # window), and before also one 1h steady bucket + a 5m gap
    assert after == pd.Timedelta("3h30min")
    assert before == pd.Timedelta("4h35min")


def test_results_are_for_the_window_only_and_carry_flags_and_figures(pipeline):
    frame = ws.history(1.0)
    s, e = ws.START + pd.Timedelta("8h"), ws.START + pd.Timedelta("14h")
    r = pipeline.process(_slice(frame, pipeline, s, e), s, e)
    assert isinstance(r, CycleResults)
    assert r.samples.index.min() >= s and r.samples.index.max() < e
    assert r.counts["rows_in_window"] == len(r.samples) == ((frame.index >= s) & (frame.index < e)).sum()
    for col in (
        "hp_efficiency",
        "hp_efficiency_u",
        "ip_efficiency",
        "lp_moisture",
        "quality_flags",
        "ok",
        "steady",
    ):
        assert col in r.samples.columns
    # the synthetic unit's HP runs about 0.86, IP about 0.91 near rating (the generator's own
    # design curves; invented demo values): the chain recovers them within a point
    ok = r.samples["ok"]
    assert abs(r.samples.loc[ok, "hp_efficiency"].median() - 0.86) < 0.015
    assert abs(r.samples.loc[ok, "ip_efficiency"].median() - 0.91) < 0.015
    assert (r.samples["steady"] <= r.samples["ok"]).all()  # flagged samples are never steady
    assert len(r.windows) >= 1
    assert (r.windows.index >= s - pd.Timedelta("1h")).all()
    assert ((r.windows.index.floor("1h") + pd.Timedelta("1h")) <= e).all()
    assert {"hp_efficiency", "ip_efficiency", "throttle_p", "n_samples", "duration_s"} <= set(
        r.windows.columns
    )


def test_the_same_input_gives_identical_output(pipeline):
    frame = ws.history(1.0)
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("12h")
    a = pipeline.process(_slice(frame, pipeline, s, e), s, e)
    b = pipeline.process(_slice(frame, pipeline, s, e).copy(), s, e)
    pd.testing.assert_frame_equal(a.samples, b.samples)
    pd.testing.assert_frame_equal(a.windows, b.windows)
    assert a.counts == b.counts


def _chunked_equals_whole(pipeline, frame, S, E, cuts):
    whole = pipeline.process(_slice(frame, pipeline, S, E), S, E)
    parts = [pipeline.process(_slice(frame, pipeline, s, e), s, e) for s, e in pairwise(cuts)]
    pd.testing.assert_frame_equal(pd.concat([p.samples for p in parts]), whole.samples)
    pd.testing.assert_frame_equal(pd.concat([p.windows for p in parts]), whole.windows)
    return whole


def test_processing_in_chunks_equals_processing_in_one_go(pipeline):
    frame = ws.history(1.5, faults=False, freq="5min")
    S, E = ws.START + pd.Timedelta("4h"), ws.START + pd.Timedelta("32h")
    cuts = [S, S + pd.Timedelta("5h13min"), S + pd.Timedelta("17h"), E]
    whole = _chunked_equals_whole(pipeline, frame, S, E, cuts)
    assert len(whole.windows) >= 3


def test_processing_in_chunks_equals_processing_in_one_go_across_faults(pipeline):
    frame = ws.history(2.0, faults=True, freq="5min")  # a trip, a flatline, a data gap, a spike burst
    S, E = ws.START + pd.Timedelta("4h"), ws.START + pd.Timedelta("44h")
    cuts = [S, S + pd.Timedelta("5h13min"), S + pd.Timedelta("17h"), S + pd.Timedelta("29h59min"), E]
    whole = _chunked_equals_whole(pipeline, frame, S, E, cuts)
    assert whole.counts["rows_flagged"] > 0


def test_final_end_holds_back_windows_whose_look_ahead_is_not_there_yet(pipeline):
    frame = ws.history(1.0)
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("12h")
    held = pipeline.process(_slice(frame, pipeline, s, e), s, e, final_end=s + pd.Timedelta("3h"))
    full = pipeline.process(_slice(frame, pipeline, s, e), s, e)
    assert len(held.samples) == len(full.samples)  # per-sample rows still written (provisional)
    assert (held.windows.index.floor("1h") + pd.Timedelta("1h") <= s + pd.Timedelta("3h")).all()
    assert len(held.windows) < len(full.windows)


def test_bad_raw_data_is_flagged_never_a_crash(pipeline):
    frame = ws.history(1.0).copy()
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("12h")
    sub = _slice(frame, pipeline, s, e).astype(object)
    t0 = s + pd.Timedelta("1h")
    sub.loc[t0, "throttle_p"] = "n/a"  # a string from the historian
    sub.loc[t0 + pd.Timedelta("2min"), "throttle_t"] = np.nan
    sub.loc[t0 + pd.Timedelta("4min"), "cold_reheat_p"] = 250.0  # far outside the 0..6 MPa range
    dup = sub.loc[[t0 + pd.Timedelta("6min")]].copy()
    dup["gross_output"] = 1.0
    sub = pd.concat([sub, dup])  # a duplicate time stamp: the later sample wins
    sub = sub.drop(
        sub.index[(sub.index > t0 + pd.Timedelta("20min")) & (sub.index < t0 + pd.Timedelta("50min"))]
    )
    r = pipeline.process(sub, s, e)
    flags = r.samples["quality_flags"]
    for t in (t0, t0 + pd.Timedelta("2min"), t0 + pd.Timedelta("4min")):
        assert flags.loc[t] != 0 and not r.samples.loc[t, "ok"]
    assert np.isnan(r.samples.loc[t0, "hp_efficiency"])
    assert r.samples.index.is_unique and r.samples.index.is_monotonic_increasing
    assert not r.samples.loc[t0 + pd.Timedelta("6min"), "steady"]
    assert r.counts["rows_flagged"] >= 3


def test_spike_window_in_samples_follows_the_sample_spacing():
    idx = pd.date_range(utc("2025-01-01"), periods=10, freq="1min")
    assert spike_samples(idx, pd.Timedelta("15min")) == 15
    idx = pd.date_range(utc("2025-01-01"), periods=10, freq="2min")
    assert spike_samples(idx, pd.Timedelta("15min")) == 9  # 7.5 -> 8 -> odd
    assert spike_samples(idx[:2], pd.Timedelta("15min")) == 15  # too short to tell: 1 min assumed


# --- baseline deviation and alarms ----------------------------------------------------------


@pytest.fixture(scope="module")
def baseline_pipeline(tmp_path_factory):
    # reference period: the first day of the history
    extra = f"""
[baseline]
start = "{ws.START.isoformat()}"
end = "{(ws.START + pd.Timedelta(days=1)).isoformat()}"
"""
    path = ws.write_config(
        tmp_path_factory.mktemp("cfgb") / "unit.toml",
        ws.store_toml("sqlite", path="unit.sqlite"),
        extra=extra,
    )
    return Pipeline(load_config(path))


def test_deviation_from_a_fitted_baseline_only_after_the_reference_period(baseline_pipeline):
    pl = baseline_pipeline
    frame = ws.history(2.0, freq="5min")
    ref_end = ws.START + pd.Timedelta(days=1)
    ref = pl.process(_slice(frame, pl, ws.START, ref_end), ws.START, ref_end)
    models, problems = pl.fit_baselines(ref.windows)
    assert {"hp", "ip"} <= set(models), problems
    s, e = ref_end - pd.Timedelta("3h"), ref_end + pd.Timedelta("12h")
    r = pl.process(_slice(frame, pl, s, e), s, e, baselines=models)
    assert len(r.deviation) > 0
    assert (r.deviation.index >= ref_end).all()  # windows of the reference period get none
    hp = r.deviation[r.deviation["section"] == "hp"]
    # one day later the synthetic unit has lost about 0.4 points per 1000 h (its injected
    # truth): nothing measurable, so the deviation is near zero
    assert abs(hp["deviation"].median()) < 0.3
    assert (hp["deviation_u"] > 0).all()
    writes = {(m, t.get("section")) for m, _, t in r.writes({"unit": "u"})}
    assert ("deviation", "hp") in writes and ("deviation", "ip") in writes


def test_alarm_events_are_not_raised_twice_when_a_window_is_processed_again(pipeline):
    frame = ws.history(1.0, freq="5min").copy()
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("14h")
    frame.loc[
        (frame.index >= s + pd.Timedelta("1h")) & (frame.index < s + pd.Timedelta("3h")), "crossover_t"
    ] = np.nan
    sub = _slice(frame, pipeline, s, e)
    first = pipeline.process(sub, s, e, alarm_state=None)
    ev = first.alarm_events
    raised = ev[(ev["rule"] == "data_quality") & (ev["section"] == "crossover_t") & (ev["kind"] == "raised")]
    # the default data-quality limit is 1 h: raised one hour after the tag went missing
    assert list(raised.index) == [s + pd.Timedelta("2h")]
    import json

    state = json.loads(json.dumps(first.alarm_state))  # as the store keeps it
    again = pipeline.process(sub, s, e, alarm_state=state)
    assert len(again.alarm_events) == 0  # nothing twice
    # two halves from the saved state give the events of the whole
    m = s + pd.Timedelta("2h30min")
    a = pipeline.process(_slice(frame, pipeline, s, m), s, m, alarm_state=None)
    b = pipeline.process(_slice(frame, pipeline, m, e), m, e, alarm_state=a.alarm_state)
    both = pd.concat([a.alarm_events, b.alarm_events])
    pd.testing.assert_frame_equal(both, ev)


def test_absent_rows_raise_one_no_data_alarm_and_no_tag_alarms(pipeline):
    # The historian delivers nothing for three hours (the rows are absent, not NaN): one
    # no_data alarm for the historian once the data-quality limit (1 h) has passed, cleared by
    # the first row after the hole; the per-tag data-quality machines see no observation.
    frame = ws.history(1.0, freq="5min")
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("14h")
    last = s + pd.Timedelta("1h")  # the last row before the hole
    back = s + pd.Timedelta("4h")  # the first row after it
    holed = frame.loc[(frame.index <= last) | (frame.index >= back)]
    r = pipeline.process(_slice(holed, pipeline, s, e), s, e, alarm_state=None)
    ev = r.alarm_events
    mine = ev[ev["rule"] == "no_data"]
    assert list(mine["section"]) == ["historian", "historian"]
    assert list(mine["kind"]) == ["raised", "cleared"]
    # absent from 5 min after the last row (the sample spacing); raised 1 h after that
    assert list(mine.index) == [last + pd.Timedelta("5min") + pd.Timedelta("1h"), back]
    assert not (ev["rule"] == "data_quality").any()
    # a hole shorter than the limit raises nothing
    short = frame.loc[(frame.index <= last) | (frame.index >= last + pd.Timedelta("50min"))]
    r2 = pipeline.process(_slice(short, pipeline, s, e), s, e, alarm_state=None)
    assert not (r2.alarm_events["rule"] == "no_data").any()


def test_no_data_limit_zero_switches_the_historian_alarm_off(tmp_path):
    # for historians that store exceptions only: [alarms] no_data_limit = "0s"
    path = ws.write_config(
        tmp_path / "unit.toml",
        ws.store_toml("sqlite", path="unit.sqlite"),
        extra='[alarms]\nno_data_limit = "0s"\n',
    )
    off = Pipeline(load_config(path))
    assert "no_data" not in [r.name for r in off.alarm_rules()]
    frame = ws.history(1.0, freq="5min")
    s, e = ws.START + pd.Timedelta("6h"), ws.START + pd.Timedelta("14h")
    holed = frame.loc[(frame.index <= s + pd.Timedelta("1h")) | (frame.index >= s + pd.Timedelta("4h"))]
    r = off.process(_slice(holed, off, s, e), s, e, alarm_state=None)
    assert not (r.alarm_events["section"] == "historian").any()


def test_absent_row_times_marks_the_sample_grid_inside_gaps_only():
    idx = pd.date_range(utc("2025-01-01"), periods=600, freq="1min")
    rows = idx[(idx < idx[100]) | (idx >= idx[400])]
    got, absent = absent_row_times(rows, idx[50], idx[590])
    assert len(got) == 50 + 190 and list(absent) == list(idx[100:400])
    # data stops: marked up to the end of the window
    got, absent = absent_row_times(rows[:100], idx[50], idx[590])
    assert list(absent) == list(idx[100:590])
    # no row in the frame: continues from what the alarm saw last, else nothing
    assert list(absent_row_times(rows[:0], idx[50], idx[60], last_seen=idx[40])[1]) == list(idx[50:60])
    assert len(absent_row_times(rows[:0], idx[50], idx[60])[1]) == 0
    # one late or missing sample is not an absence (two spacings or less)
    assert len(absent_row_times(rows.delete(10), idx[0], idx[99])[1]) == 0


# --- configuration keys the chain honours ---------------------------------------------------


def _pipeline_with(folder, extra: str) -> Pipeline:
    folder.mkdir(parents=True, exist_ok=True)
    path = ws.write_config(folder / "unit.toml", ws.store_toml("sqlite", path="unit.sqlite"), extra=extra)
    return Pipeline(load_config(path))


def _wobbling_throttle_t(amplitude_k: float) -> tuple[pd.DataFrame, pd.Timestamp, pd.Timestamp, np.ndarray]:
    """One day of the synthetic unit whose throttle thermocouple reads 811 K +- amplitude for
    three hours (a sensor sticking near one value; invented, common practice, no source)."""
    frame = ws.history(1.0).copy()
    t0, t1 = ws.START + pd.Timedelta("3h"), ws.START + pd.Timedelta("6h")  # the unit is online
    held = (frame.index >= t0) & (frame.index < t1)
    frame.loc[held, "throttle_t"] = 811.0 + amplitude_k * np.sin(np.arange(held.sum()) / 3.0)
    return frame, t0, t1, held


def test_screening_flatline_tolerance_changes_what_the_worker_flags(tmp_path):
    from isentrope.calc.quality import Reason

    # A span of 0.07 K: above the 0.01 K floor of calc.quality.FLATLINE_TOLERANCE and above
    # 1e-6 x 811 K, below 1e-4 x 811 K = 0.081 K.
    frame, t0, t1, held = _wobbling_throttle_t(0.035)
    s, e = ws.START + pd.Timedelta("1h"), ws.START + pd.Timedelta("9h")
    default = _pipeline_with(tmp_path / "a", "")
    wide = _pipeline_with(tmp_path / "b", "[screening]\nflatline_tolerance = 1e-4\n")
    assert default.screen_kwargs(frame)["flatline_relative"] == 1e-6
    assert wide.screen_kwargs(frame)["flatline_relative"] == 1e-4

    def flat(pl):
        r = pl.process(_slice(frame, pl, s, e), s, e)
        return r.samples, (r.samples["quality_flags"].to_numpy() & int(Reason.FLATLINE)) != 0

    samples, f_default = flat(default)
    assert not f_default.any()
    samples_wide, f_wide = flat(wide)
    in_held = (samples_wide.index >= t0) & (samples_wide.index < t1)
    assert (f_wide == in_held).all() and in_held.sum() == 90  # 3 h of 2-min samples
    assert not samples_wide.loc[in_held, "ok"].any() and not samples_wide.loc[in_held, "steady"].any()
    assert samples.loc[in_held, "ok"].any()


def test_check_and_the_worker_mean_the_same_by_flatline_tolerance(tmp_path):
    # `isentrope check` judges the plant-unit readings (degC here) with the worker's test on
    # internal units: 1e-4 of 811 K (0.081 K) holds the 0.07 K span, 1e-4 of 537.85 degC
    # (0.054 K) would not.
    from isentrope.calc.quality import Reason
    from isentrope.daemon import synthetic
    from isentrope.daemon.commands import check

    frame, t0, t1, held = _wobbling_throttle_t(0.035)
    plant = synthetic.to_plant_units(frame)
    end = frame.index[-1] + pd.Timedelta("2min")
    for extra, expect_flat in (("", False), ("[screening]\nflatline_tolerance = 1e-4\n", True)):
        pl = _pipeline_with(tmp_path / str(expect_flat), extra)
        rows = {r["role"]: r for r in check.judge(pl.config, plant, end)}
        verdict = rows["throttle_t"]["verdict"]
        assert ("flat for" in verdict) == expect_flat, verdict
        r = pl.process(frame, frame.index[0], end)
        worker_flat = (r.samples["quality_flags"].to_numpy() & int(Reason.FLATLINE)) != 0
        if expect_flat:
            first = r.samples.index[worker_flat][0]
            last = r.samples.index[worker_flat][-1]
            hours = (last - first).total_seconds() / 3600
            assert verdict == f"PROBLEM: flat for {hours:.1f} h from {first:%Y-%m-%d %H:%M}"
            assert first == t0 and last == frame.index[held][-1]
        else:
            assert not worker_flat.any()


def test_lp_dry_efficiency_source_measured_reaches_calc_sections(tmp_path):
    from isentrope.calc import sections

    frame = ws.history(1.0)
    s, e = ws.START + pd.Timedelta("2h"), ws.START + pd.Timedelta("10h")  # online (a shutdown follows)
    design = _pipeline_with(tmp_path / "d", "")
    measured = _pipeline_with(tmp_path / "m", '[sections]\nlp_dry_efficiency_source = "measured"\n')
    assert design.section_kwargs()["lp_dry_efficiency_source"] == "design"
    assert measured.section_kwargs()["lp_dry_efficiency_source"] == "measured"
    sub = _slice(frame, design, s, e)
    a = design.process(sub, s, e)
    b = measured.process(sub, s, e)
    ok = a.samples["ok"] & np.isfinite(a.samples["lp_elep"]) & np.isfinite(b.samples["lp_elep"])
    assert ok.sum() >= 150
    # the LP dry group itself is the same figure either way; the expansion to the condenser is not
    np.testing.assert_array_equal(
        a.samples["lp_dry_efficiency"].to_numpy(), b.samples["lp_dry_efficiency"].to_numpy()
    )
    for col in ("lp_elep", "lp_efficiency", "lp_moisture"):
        assert (np.abs(a.samples.loc[ok, col] - b.samples.loc[ok, col]) > 1e-6).mean() > 0.9, col
    # the HP and IP figures do not depend on the option
    np.testing.assert_array_equal(
        a.samples["hp_efficiency"].to_numpy(), b.samples["hp_efficiency"].to_numpy()
    )
    # what the pipeline gives with "measured" is calc.sections.evaluate called with that option
    kwargs = dict(design.section_kwargs(), lp_dry_efficiency_source="measured")
    direct = sections.evaluate(sub[measured.roles], **kwargs).to_frame().set_axis(sub.index, axis=0)
    direct = direct.loc[(direct.index >= s) & (direct.index < e)]
    for col in (
        "lp_elep",
        "lp_efficiency",
        "lp_used_energy_efficiency",
        "lp_moisture",
        "lp_x",
        "lp_enthalpy_drop",
        "lp_elep_u",
        "lp_efficiency_u",
        "lp_moisture_u",
        "lp_dry_efficiency",
    ):
        rtol = ws.SAME_RTOL_U if col.endswith("_u") else ws.SAME_RTOL
        np.testing.assert_allclose(
            b.samples[col].to_numpy(), direct[col].to_numpy(), rtol=rtol, atol=0, equal_nan=True, err_msg=col
        )
    # steady windows are computed from their mean readings with the same option
    assert len(b.windows) >= 1
    means = b.windows[measured.roles].reset_index(drop=True)
    of_windows = sections.evaluate(means, **kwargs).to_frame()
    np.testing.assert_allclose(
        b.windows["lp_elep"].to_numpy(), of_windows["lp_elep"].to_numpy(), rtol=ws.SAME_RTOL, equal_nan=True
    )
    assert not np.allclose(a.windows["lp_elep"].to_numpy(), b.windows["lp_elep"].to_numpy(), rtol=1e-6)
