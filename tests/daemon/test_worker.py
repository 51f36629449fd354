"""The worker's scheduling logic with a fake clock, retries with a fake sleep, and the rule that
the checkpoint never moves past unwritten results."""

from __future__ import annotations

import random
from itertools import pairwise

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon.stores.base import FatalStoreError, TemporaryStoreError
from isentrope.daemon.timeutil import floor_time
from isentrope.daemon.worker import backoff_delays, call_with_retry, plan_windows

T = pd.Timestamp


def utc(s: str) -> pd.Timestamp:
    return T(s, tz="UTC")


# --- plan_windows --------------------------------------------------------------------------


def test_normal_cycle_processes_from_checkpoint_minus_lookback_to_now_minus_settle():
    windows = plan_windows(utc("2025-03-01 10:00"), utc("2025-03-01 10:07:30"), "2m", "30m", "1d")
    assert windows == [(utc("2025-03-01 09:30"), utc("2025-03-01 10:05:30"))]


def test_windows_are_contiguous_and_cover_the_whole_span_after_an_outage():
    # The worker (or the database) was away for three and a half days.
    checkpoint = utc("2025-03-01 10:00")
    now = utc("2025-03-04 22:00")
    windows = plan_windows(checkpoint, now, "2m", "30m", "1d")
    assert windows[0][0] == utc("2025-03-01 09:30")
    assert windows[-1][1] == utc("2025-03-04 21:58")
    for (_, e0), (s1, _) in pairwise(windows):
        assert e0 == s1  # nothing skipped, nothing twice
    assert all(e - s <= pd.Timedelta(days=1) for s, e in windows)
    # Chunk boundaries fall on whole days (UTC), whatever the checkpoint was.
    assert [s for s, _ in windows[1:]] == [utc("2025-03-02"), utc("2025-03-03"), utc("2025-03-04")]


def test_chunk_boundaries_do_not_depend_on_where_the_catch_up_started():
    a = plan_windows(utc("2025-03-01 03:17"), utc("2025-03-05"), "0s", "0s", "6h")
    b = plan_windows(utc("2025-03-02 11:41"), utc("2025-03-05"), "0s", "0s", "6h")
    cuts_a = {e for _, e in a}
    cuts_b = {e for _, e in b}
    assert cuts_b <= cuts_a


def test_late_data_inside_the_lookback_is_processed_again():
    # A sample at 09:50 arrived after the cycle that ended at 10:00 had run.
    windows = plan_windows(utc("2025-03-01 10:00"), utc("2025-03-01 10:12"), "2m", "30m", "1d")
    late = utc("2025-03-01 09:50")
    assert any(s <= late < e for s, e in windows)


def test_nothing_to_do_when_the_checkpoint_is_ahead_of_now_minus_settle():
    assert plan_windows(utc("2025-03-01 10:00"), utc("2025-03-01 09:00"), "2m", "0s", "1d") == []
    assert plan_windows(utc("2025-03-01 10:00"), utc("2025-03-01 10:01"), "2m", "0s", "1d") == []


def test_first_run_starts_at_the_default_start_or_one_lookback_back():
    w = plan_windows(None, utc("2025-03-02 12:00"), "0s", "30m", "1d", utc("2025-03-01 06:00"))
    assert w == [(utc("2025-03-01 06:00"), utc("2025-03-02")), (utc("2025-03-02"), utc("2025-03-02 12:00"))]
    w = plan_windows(None, utc("2025-03-02 12:00"), "0s", "30m", "1d")
    assert w == [(utc("2025-03-02 11:30"), utc("2025-03-02 12:00"))]


def test_window_end_is_floored_to_whole_seconds():
    w = plan_windows(utc("2025-03-01 10:00"), utc("2025-03-01 10:05:07.123"), "0s", "0s", "1d")
    assert w == [(utc("2025-03-01 10:00"), utc("2025-03-01 10:05:07"))]


def test_plan_windows_rejects_bad_arguments():
    with pytest.raises(ValueError, match="time zone"):
        plan_windows(None, T("2025-03-01"), "2m", "30m", "1d")
    with pytest.raises(ValueError, match="chunk must be a positive duration"):
        plan_windows(None, utc("2025-03-01"), "2m", "30m", "0s")
    with pytest.raises(ValueError, match="settle: expected a duration .* no sign"):
        plan_windows(None, utc("2025-03-01"), "-2m", "30m", "1d")


def test_floor_time_counts_from_the_epoch():
    assert floor_time(utc("2025-03-01 10:47:13"), pd.Timedelta("1h")) == utc("2025-03-01 10:00")
    assert floor_time(utc("2025-03-01 10:47:13"), pd.Timedelta("15min")) == utc("2025-03-01 10:45")


# --- retries with a fake sleep ---------------------------------------------------------------


class Flaky:
    """Fails with the given exception ``n`` times, then returns ``value``."""

    def __init__(self, n: int, exc: Exception, value="done"):
        self.n, self.exc, self.value, self.calls = n, exc, value, 0

    def __call__(self):
        self.calls += 1
        if self.calls <= self.n:
            raise self.exc
        return self.value


def test_temporary_errors_are_retried_with_growing_capped_jittered_delays():
    slept: list[float] = []
    fn = Flaky(4, TemporaryStoreError("connection refused"))
    out = call_with_retry(
        fn, what="test", retries=5, backoff="2s", backoff_max="10s", sleep=slept.append, rng=random.Random(1)
    )
    assert out == "done" and fn.calls == 5
    assert len(slept) == 4
    nominal = [2, 4, 8, 10]  # doubling, capped at backoff_max
    for d, n in zip(slept, nominal, strict=True):
        assert 0.5 * n <= d <= n


def test_retries_give_up_with_the_last_temporary_error():
    slept: list[float] = []
    fn = Flaky(10, TemporaryStoreError("timeout"))
    with pytest.raises(TemporaryStoreError, match="timeout"):
        call_with_retry(
            fn,
            what="test",
            retries=3,
            backoff="1s",
            backoff_max="1m",
            sleep=slept.append,
            rng=random.Random(2),
        )
    assert fn.calls == 4 and len(slept) == 3


def test_fatal_errors_are_not_retried():
    slept: list[float] = []
    fn = Flaky(1, FatalStoreError("bucket not found"))
    with pytest.raises(FatalStoreError):
        call_with_retry(fn, what="test", retries=5, backoff="1s", backoff_max="1m", sleep=slept.append)
    assert fn.calls == 1 and slept == []


def test_jitter_spreads_workers_apart():
    a = backoff_delays(4, "2s", "60s", random.Random(1))
    b = backoff_delays(4, "2s", "60s", random.Random(2))
    assert a != b


# --- the worker over a store, with a fake clock and a fake sleep ------------------------------

import logging  # noqa: E402

import worker_support as ws  # noqa: E402

from isentrope.daemon.config import load_config  # noqa: E402
from isentrope.daemon.pipeline import Pipeline  # noqa: E402
from isentrope.daemon.worker import STATUS_MEASUREMENT, Worker  # noqa: E402

FIRST = ws.START + pd.Timedelta("5h")  # leaves the pipeline its 3h50 of history before


@pytest.fixture(scope="module")
def config(tmp_path_factory):
    path = ws.write_config(
        tmp_path_factory.mktemp("cfg") / "unit.toml", ws.store_toml("sqlite", path="x.sqlite")
    )
    return load_config(path)


@pytest.fixture(scope="module")
def pipeline(config):
    return Pipeline(config)


@pytest.fixture(scope="module")
def raw():
    return ws.plant_history(1.0, freq="5min")


def make_worker(config, pipeline, store, clock, slept=None, **kw):
    return Worker.from_config(
        config,
        store,
        pipeline=pipeline,
        start_default=FIRST,
        clock=clock,
        sleep=(slept.append if slept is not None else (lambda s: None)),
        rng=random.Random(3),
        **kw,
    )


def results_of(store):
    return {
        m: store.read_results(m, ws.START, ws.START + pd.Timedelta(days=2), {"unit": "Greywater Bend 2"})
        for m in ws.RESULT_MEASUREMENTS
    }


def run_cycles(worker, clock, times):
    reports = []
    for t in times:
        clock.now = t
        reports.append(worker.run_cycle())
    return reports


def test_the_checkpoint_trails_now_by_settle_and_look_ahead_and_results_are_written(config, pipeline, raw):
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    store = ws.MemoryStore(raw, clock=clock)
    worker = make_worker(config, pipeline, store, clock)
    report = worker.run_cycle()
    assert report.ok and report.chunks_done == 2  # 05:00-06:00 and 06:00-09:58 (6h chunks)
    _, after = pipeline.margins
    assert store.checkpoints[worker.checkpoint_name] == clock.now - pd.Timedelta("2min") - after
    samples = results_of(store)["section_samples"]
    assert samples.index.min() == FIRST and samples.index.max() < clock.now - pd.Timedelta("2min")
    status = store.read_results(
        STATUS_MEASUREMENT, ws.START, ws.START + pd.Timedelta(days=1), {"unit": "Greywater Bend 2"}
    )
    assert len(status) == 1
    row = status.iloc[0]
    assert row["lag_s"] == (pd.Timedelta("2min") + after).total_seconds()
    assert row["rows_read"] == report.rows_read > 0 and row["ok"] == 1.0


def test_catch_up_after_an_outage_gives_the_results_of_an_uninterrupted_run(config, pipeline, raw):
    times = [ws.START + pd.Timedelta("9h") + k * pd.Timedelta("1h30min") for k in range(5)]
    clock_a = ws.FakeClock(times[0])
    a = ws.MemoryStore(raw, clock=clock_a)
    run_cycles(make_worker(config, pipeline, a, clock_a), clock_a, times)
    # The same unit, but the worker was away from the second to the fourth cycle.
    clock_b = ws.FakeClock(times[0])
    b = ws.MemoryStore(raw, clock=clock_b)
    reports = run_cycles(make_worker(config, pipeline, b, clock_b), clock_b, times[:1] + times[4:])
    assert reports[1].chunks_done >= 2  # caught up in chunks
    assert a.checkpoints == b.checkpoints
    ra, rb = results_of(a), results_of(b)
    for m in ws.RESULT_MEASUREMENTS:
        if len(ra[m]) or len(rb[m]):
            ws.assert_same_results(ra[m], rb[m])
    assert len(ra["section_samples"]) > 100 and len(ra["steady_windows"]) >= 2


def test_temporary_store_errors_are_retried_within_the_cycle(config, pipeline, raw):
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    slept: list[float] = []
    store = ws.FailingStore(ws.MemoryStore(raw, clock=clock), read_raw=1, write_results=2)
    worker = make_worker(config, pipeline, store, clock, slept=slept)
    report = worker.run_cycle()
    assert report.ok and store.failures == 3 and len(slept) == 3
    assert all(0.5 <= s <= 2.0 for s in slept)  # backoff 1s doubling, capped at 2s, with jitter


def test_a_failed_write_keeps_its_batch_and_the_checkpoint_stays(config, pipeline, raw, caplog):
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    inner = ws.MemoryStore(raw, clock=clock)
    store = ws.FailingStore(inner, write_results=0)
    worker = make_worker(config, pipeline, store, clock)
    worker.run_cycle()  # a first good cycle
    checkpoint = inner.checkpoints[worker.checkpoint_name]
    clock.advance("1h")
    store.fail["write_results"] = 100  # the database goes away for writes
    with caplog.at_level(logging.WARNING, logger="isentrope.worker"):
        report = worker.run_cycle()
    assert not report.ok and "store unreachable" in report.error
    assert inner.checkpoints[worker.checkpoint_name] == checkpoint  # not past unwritten results
    assert worker.pending is not None and worker.pending.written == 0
    lines = [r for r in caplog.records if "cycle ended" in r.getMessage()]
    assert len(lines) == 1 and "writes kept for the next cycle" in lines[0].getMessage()
    # it comes back: the kept batch is written first, then the cycle goes on
    store.fail["write_results"] = 0
    clock.advance("30min")
    report = worker.run_cycle()
    assert report.ok and worker.pending is None
    assert inner.checkpoints[worker.checkpoint_name] > checkpoint
    # ... and what is in the store equals a run that never failed
    clock_ref = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    ref = ws.MemoryStore(raw, clock=clock_ref)
    run_cycles(
        make_worker(config, pipeline, ref, clock_ref),
        clock_ref,
        [ws.START + pd.Timedelta("10h"), ws.START + pd.Timedelta("11h30min")],
    )
    ra, rb = results_of(ref), results_of(inner)
    for m in ws.RESULT_MEASUREMENTS:
        if len(ra[m]) or len(rb[m]):
            ws.assert_same_results(ra[m], rb[m])


def test_a_failing_checkpoint_write_leaves_the_checkpoint_behind_the_results(config, pipeline, raw):
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    inner = ws.MemoryStore(raw, clock=clock)
    store = ws.FailingStore(inner, set_checkpoint=100)
    worker = make_worker(config, pipeline, store, clock)
    report = worker.run_cycle()
    assert not report.ok and worker.checkpoint_name not in inner.checkpoints
    assert len(results_of(inner)["section_samples"]) > 0  # written; the next cycle redoes them


def test_fatal_errors_end_the_cycle_and_propagate(config, pipeline, raw):
    from isentrope.daemon.stores.base import FatalStoreError as Fatal

    class Broken(ws.MemoryStore):
        def read_raw(self, mappings, start, end):
            raise Fatal("database 'unit2' not found")

    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    worker = make_worker(config, pipeline, Broken(raw), clock)
    with pytest.raises(Fatal):
        worker.run_cycle()


def test_stop_ends_the_work_between_chunks(config, pipeline, raw):
    clock = ws.FakeClock(ws.START + pd.Timedelta("23h"))
    store = ws.MemoryStore(raw, clock=clock)
    worker = make_worker(config, pipeline, store, clock, chunk="2h")
    done = []

    def progress(s, e):
        done.append((s, e))
        worker.stop()  # e.g. SIGTERM arrived while this chunk was being processed

    report = worker.run_cycle(progress=progress)
    assert report.stopped and report.chunks_done == 1 and len(done) == 1
    assert store.checkpoints[worker.checkpoint_name] == done[0][1]


def test_the_baseline_is_fitted_once_the_reference_period_is_done_and_deviations_follow(tmp_path):
    first, ref_end = ws.START + pd.Timedelta("4h"), ws.START + pd.Timedelta("30h")
    extra = f'[baseline]\nstart = "{first.isoformat()}"\nend = "{ref_end.isoformat()}"\n'
    cfg = load_config(
        ws.write_config(tmp_path / "unit.toml", ws.store_toml("sqlite", path="x.sqlite"), extra=extra)
    )
    clock = ws.FakeClock(ref_end + pd.Timedelta("9h"))
    store = ws.MemoryStore(ws.plant_history(2.0, freq="5min"), clock=clock)
    worker = Worker.from_config(cfg, store, start_default=first, clock=clock, sleep=lambda s: None)
    report = worker.run_cycle()
    assert report.ok
    assert any(e == ref_end for _, e in report.windows)  # a chunk ends exactly at the reference end
    saved = store.load_state(worker.baseline_state_name)
    assert {"hp", "ip"} <= set(saved["models"])
    dev = store.read_results("deviation", ws.START, clock.now, {"unit": "Greywater Bend 2", "section": "hp"})
    assert len(dev) > 0 and (dev.index >= ref_end).all()
    assert abs(dev["deviation"].median()) < 0.3  # a day later: no measurable loss yet


def test_the_daemon_stops_with_exit_1_on_a_fatal_store_error(config, pipeline, raw, caplog):
    from isentrope.daemon.commands.run import _serve
    from isentrope.daemon.stores.base import FatalStoreError as Fatal

    class Gone(ws.MemoryStore):
        def get_checkpoint(self, name):
            raise Fatal("bucket 'unit2' not found")

    worker = Worker.from_config(config, Gone(raw), pipeline=pipeline, sleep=lambda s: None)
    with caplog.at_level(logging.ERROR, logger="isentrope.run"):
        assert _serve(worker, config) == 1
    lines = [r.getMessage() for r in caplog.records if r.name == "isentrope.run"]
    assert lines == ["unit Greywater Bend 2: stopping the worker: bucket 'unit2' not found"]


def test_a_refused_token_stops_the_daemon_with_exit_2_after_one_attempt(config, pipeline, raw, caplog):
    """401/403 is a configuration error: no retry, exit 2 (which the systemd unit does not restart),
    even when only the heartbeat meets it."""
    from isentrope.daemon.commands.run import _serve
    from isentrope.daemon.stores.base import AuthorizationError

    class Refused(ws.MemoryStore):
        calls = 0

        def write_results(self, measurement, frame, tags):
            Refused.calls += 1
            raise AuthorizationError("write_results: HTTP 403: lacks write access ([store] results_bucket)")

    slept: list[float] = []
    worker = Worker.from_config(config, Refused(raw), pipeline=pipeline, sleep=slept.append, retries=5)
    worker.clock = lambda: ws.START  # nothing to process yet: only the heartbeat writes
    with caplog.at_level(logging.ERROR, logger="isentrope.run"):
        assert _serve(worker, config) == 2
    assert Refused.calls == 1 and slept == []
    lines = [r.getMessage() for r in caplog.records if r.name == "isentrope.run"]
    assert lines == [
        "unit Greywater Bend 2: stopping the worker: configuration error: "
        "write_results: HTTP 403: lacks write access ([store] results_bucket)"
    ]


def test_a_late_sample_inside_the_lookback_is_picked_up_by_the_next_cycle(config, pipeline, raw):
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    _, after = pipeline.margins
    checkpoint = clock.now - pd.Timedelta("2min") - after
    late = (checkpoint - pd.Timedelta("10min")).floor("5min")
    store = ws.MemoryStore(raw.drop(index=[late]), clock=clock)  # not there yet
    worker = make_worker(config, pipeline, store, clock)
    assert worker.run_cycle().ok
    assert store.checkpoints[worker.checkpoint_name] == checkpoint
    samples = results_of(store)["section_samples"]
    assert late not in samples.index
    store.write_raw(ws.mappings(), raw.loc[[late]])  # it arrives late
    clock.advance("5min")
    assert worker.run_cycle().ok
    samples = results_of(store)["section_samples"]
    assert late in samples.index and np.isfinite(samples.loc[late, "hp_efficiency"])


def test_a_historian_outage_raises_no_data_even_when_whole_cycles_see_no_row(tmp_path):
    # The no_data limit (6 h here) is longer than the pipeline's before-margin (4 h 35),
    # so the alarm is raised in a cycle whose frame holds no row at all: the absence goes on
    # from the time the saved alarm state saw last. One alarm, cleared by the first row back.
    path = ws.write_config(
        tmp_path / "unit.toml",
        ws.store_toml("sqlite", path="x.sqlite"),
        extra='[alarms]\nno_data_limit = "6h"\n',
    )
    config = load_config(path)
    pipeline = Pipeline(config)
    raw = ws.plant_history(1.5, freq="5min")
    stop, back = ws.START + pd.Timedelta("8h"), ws.START + pd.Timedelta("26h")
    clock = ws.FakeClock(ws.START + pd.Timedelta("9h"))
    store = ws.MemoryStore(raw.loc[(raw.index < stop) | (raw.index >= back)], clock=clock)
    worker = make_worker(config, pipeline, store, clock)
    hours = pd.date_range(ws.START + pd.Timedelta("9h"), ws.START + pd.Timedelta("34h"), freq="1h")
    reports = run_cycles(worker, clock, hours)
    assert all(r.ok for r in reports)
    events = store.read_results(
        "alarm_events",
        ws.START,
        ws.START + pd.Timedelta(days=2),
        {"unit": "Greywater Bend 2", "section": "historian", "rule": "no_data"},
    )
    last = raw.index[raw.index < stop][-1]
    assert list(events.index) == [last + pd.Timedelta("5min") + pd.Timedelta("6h"), back]
    assert list(events["raised"]) == [1.0, 0.0]
    # the raising cycle read no row: its window and both margins lie inside the outage
    before, after = pipeline.margins
    raised_at = events.index[0]
    assert raised_at - before > last and raised_at + after < back


def test_a_live_outage_is_alarmed_a_settle_after_the_limit_not_an_after_margin_later(config, pipeline, raw):
    # Whether rows arrive needs no look-ahead: the no_data alarm (limit 1 h) appears in the
    # store at the first cycle after outage + 1 h + settle (2 min), while the final results
    # still lag by the after-margin (3 h 30).
    stop = ws.START + pd.Timedelta("8h")
    clock = ws.FakeClock(ws.START + pd.Timedelta("8h"))
    store = ws.MemoryStore(raw.loc[raw.index < stop], clock=clock)
    worker = make_worker(config, pipeline, store, clock)
    tags = {"unit": "Greywater Bend 2", "section": "historian", "rule": "no_data"}
    last = raw.index[raw.index < stop][-1]
    raised_at = last + pd.Timedelta("5min") + pd.Timedelta("1h")
    seen = None
    for now in pd.date_range(stop, stop + pd.Timedelta("3h"), freq="5min"):
        clock.now = now
        assert worker.run_cycle().ok
        ev = store.read_results("alarm_events", ws.START, ws.START + pd.Timedelta(days=2), tags)
        if len(ev):
            seen = now
            break
    assert seen is not None and list(ev.index) == [raised_at] and list(ev["raised"]) == [1.0]
    assert raised_at + pd.Timedelta("2min") <= seen <= raised_at + pd.Timedelta("2min") + pd.Timedelta("5min")
    assert pipeline.margins[1] > pd.Timedelta("3h")  # what the alarm no longer waits for


# --- writes behind, in a second thread (stores with write_behind, e.g. InfluxDB) ---------------


class _BehindStore(ws.FailingStore):
    """A MemoryStore behind the failure injector, written from the worker's second thread; each
    write waits a little so that the next chunk really is computed while it runs, and the
    thread of every write is recorded."""

    write_behind = True

    def __init__(self, inner, **fail):
        super().__init__(inner, **fail)
        self.write_threads = set()
        self.order = []  # ("write", measurement, start) / ("checkpoint", time) in call order

    def write_results(self, measurement, frame, tags):
        import threading
        import time

        if measurement != STATUS_MEASUREMENT:  # the heartbeat is written at the end of the cycle
            self.write_threads.add(threading.current_thread().name)
        time.sleep(0.01)
        out = super().write_results(measurement, frame, tags)
        self.order.append(("write", measurement, frame.index.min() if len(frame) else None))
        return out

    def set_checkpoint(self, name, time):
        out = super().set_checkpoint(name, time)
        self.order.append(("checkpoint", pd.Timestamp(time)))
        return out


TWENTY_HOURS = pd.Timedelta("20h")


def _backfill(config, pipeline, store, chunk="2h", until=ws.START + TWENTY_HOURS, **kw):
    clock = ws.FakeClock(ws.START + pd.Timedelta(days=3))
    worker = make_worker(config, pipeline, store, clock, chunk=chunk, lookback="0s", settle="0s", **kw)
    return worker, worker.run_cycle(until=until)


def test_writes_behind_give_what_writes_in_line_give(config, pipeline, raw):
    # 15 h in 2 h chunks: each chunk's results are written from the second thread while the
    # next is computed, in the same order (results, state, checkpoint), and the store ends up
    # with exactly what the in-line writes give.
    line = ws.MemoryStore(raw)
    wl, rl = _backfill(config, pipeline, line)
    behind_inner = ws.MemoryStore(raw)
    behind = _BehindStore(behind_inner)
    wb, rb = _backfill(config, pipeline, behind)
    assert rl.ok and rb.ok and rb.chunks_done == rl.chunks_done >= 7
    assert rb.checkpoint == rl.checkpoint and rb.rows_read == rl.rows_read
    assert behind.write_threads and all(n.startswith("isentrope-write") for n in behind.write_threads)
    assert wb.pending is None
    assert behind_inner.checkpoints == line.checkpoints
    assert behind_inner.states == line.states
    ra, rb_ = results_of(line), results_of(behind_inner)
    for m in ws.RESULT_MEASUREMENTS:
        assert len(ra[m]) == len(rb_[m]), m
        if len(ra[m]):
            pd.testing.assert_frame_equal(ra[m], rb_[m], check_exact=True, obj=m)
    # a checkpoint is set only after that chunk's results are in, and never goes back
    cps = [e[1] for e in behind.order if e[0] == "checkpoint"]
    assert cps == sorted(cps)


def test_a_failed_write_behind_keeps_its_batch_drops_the_next_chunk_and_catches_up(
    config, pipeline, raw, caplog
):
    # The database refuses writes from the third chunk on: the cycle ends with the error of
    # that chunk, the checkpoint stays at the end of the last chunk written, the batch is kept,
    # and the chunk computed meanwhile is dropped (it is computed again). Back, the next cycle
    # writes the kept batch first and the store equals an uninterrupted run.
    inner = ws.MemoryStore(raw)
    store = _BehindStore(inner)
    progress = []
    clock = ws.FakeClock(ws.START + pd.Timedelta(days=1))
    worker = make_worker(config, pipeline, store, clock, chunk="2h", lookback="0s", settle="0s")
    calls = {"n": 0}
    original = store.write_results

    def refuse_from_third_chunk(measurement, frame, tags):
        if measurement == "section_samples":
            calls["n"] += 1
        if calls["n"] >= 3:
            raise TemporaryStoreError("write: connection refused (injected)")
        return original(measurement, frame, tags)

    store.write_results = refuse_from_third_chunk
    until = ws.START + pd.Timedelta("20h")
    with caplog.at_level(logging.WARNING, logger="isentrope.worker"):
        report = worker.run_cycle(until=until, progress=lambda s, e: progress.append((s, e)))
    assert not report.ok and "store unreachable" in report.error
    assert report.chunks_done == 2 and len(progress) == 2  # the two chunks written, in order
    assert progress == sorted(progress)
    kept = worker.pending
    assert kept is not None and kept.written == 0 and kept.start == progress[-1][1]
    assert inner.checkpoints[worker.checkpoint_name] == report.checkpoint == progress[-1][1]
    # back
    store.write_results = original
    again = worker.run_cycle(until=until)
    assert again.ok and worker.pending is None
    ref = ws.MemoryStore(raw)
    _backfill(config, pipeline, ref)
    assert inner.checkpoints == ref.checkpoints
    ra, rb = results_of(ref), results_of(inner)
    for m in ws.RESULT_MEASUREMENTS:
        if len(ra[m]) or len(rb[m]):
            ws.assert_same_results(ra[m], rb[m])


def test_a_read_error_while_a_batch_is_written_behind_still_counts_that_batch(config, pipeline, raw):
    inner = ws.MemoryStore(raw)
    store = _BehindStore(inner, read_raw=0)
    clock = ws.FakeClock(ws.START + pd.Timedelta(days=1))
    worker = make_worker(config, pipeline, store, clock, chunk="2h", lookback="0s", settle="0s", retries=0)
    reads = {"n": 0}
    original = store.read_raw

    def fail_third_read(mappings, start, end):
        reads["n"] += 1
        if reads["n"] == 3:
            raise TemporaryStoreError("read: timed out (injected)")
        return original(mappings, start, end)

    store.read_raw = fail_third_read
    report = worker.run_cycle(until=ws.START + pd.Timedelta("20h"))
    assert not report.ok and report.chunks_done == 2  # the batch in flight was written and counted
    assert worker.pending is None
    assert inner.checkpoints[worker.checkpoint_name] == report.checkpoint


def test_the_baseline_fit_waits_for_the_windows_written_behind(tmp_path):
    # The chunk after the reference period fits the models on the steady windows the store
    # holds for it: the last of them are still being written behind when that chunk starts,
    # so the fit must wait for them, and the deviations equal those of in-line writes.
    extra = f"""
[baseline]
start = "{ws.START.isoformat()}"
end = "{(ws.START + pd.Timedelta(days=1)).isoformat()}"
"""
    path = ws.write_config(tmp_path / "unit.toml", ws.store_toml("sqlite", path="x.sqlite"), extra=extra)
    config = load_config(path)
    pipeline = Pipeline(config)
    raw = ws.plant_history(2.0, freq="5min")
    until = ws.START + pd.Timedelta(days=1, hours=12)
    line, behind_inner = ws.MemoryStore(raw), ws.MemoryStore(raw)
    _, rl = _backfill(config, pipeline, line, chunk="6h", until=until)
    _, rb = _backfill(config, pipeline, _BehindStore(behind_inner), chunk="6h", until=until)
    assert rl.ok and rb.ok
    assert behind_inner.states == line.states  # the same models (and alarm state)
    dev_l, dev_b = results_of(line)["deviation"], results_of(behind_inner)["deviation"]
    assert len(dev_l) > 0
    pd.testing.assert_frame_equal(dev_b, dev_l, check_exact=True)


def test_alarm_events_are_logged_once_when_written(config, pipeline, raw, caplog):
    # A service's journal shows each raise (warning) and clear (information), once, even though
    # the next cycle processes the look-back again.
    frame = raw.copy()
    bad = (frame.index >= ws.START + pd.Timedelta("6h")) & (frame.index < ws.START + pd.Timedelta("8h"))
    frame.loc[bad, "crossover_t"] = np.nan
    clock = ws.FakeClock(ws.START + pd.Timedelta("13h"))
    store = ws.MemoryStore(frame, clock=clock)
    worker = make_worker(config, pipeline, store, clock)
    with caplog.at_level(logging.INFO, logger="isentrope.worker"):
        assert worker.run_cycle().ok
        clock.advance("30min")
        assert worker.run_cycle().ok
    said = [
        r for r in caplog.records if "alarm raised" in r.getMessage() or "alarm cleared" in r.getMessage()
    ]
    raised = [r for r in said if "crossover_t" in r.getMessage() and "raised" in r.getMessage()]
    assert len(raised) == 1 and raised[0].levelno == logging.WARNING
    assert "data" in raised[0].getMessage() or "tag" in raised[0].getMessage()
    stored = store.read_results(
        "alarm_events",
        ws.START,
        ws.START + pd.Timedelta(days=1),
        {"unit": "Greywater Bend 2", "section": "crossover_t", "rule": "data_quality"},
    )
    assert len(stored) == len([r for r in said if "crossover_t" in r.getMessage()])
