"""The worker's scheduling logic with a fake clock, retries with a fake sleep, and the rule that
the checkpoint never moves past unwritten results."""

from __future__ import annotations

import random

import pandas as pd
import pytest

from isentrope.daemon.stores.base import FatalStoreError, TemporaryStoreError
from isentrope.daemon.worker import backoff_delays, call_with_retry, floor_time, plan_windows

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
    for (s0, e0), (s1, e1) in zip(windows, windows[1:]):
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
    with pytest.raises(ValueError, match="settle must be a non-negative"):
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
    out = call_with_retry(fn, what="test", retries=5, backoff="2s", backoff_max="10s",
                          sleep=slept.append, rng=random.Random(1))
    assert out == "done" and fn.calls == 5
    assert len(slept) == 4
    nominal = [2, 4, 8, 10]  # doubling, capped at backoff_max
    for d, n in zip(slept, nominal):
        assert 0.5 * n <= d <= n


def test_retries_give_up_with_the_last_temporary_error():
    slept: list[float] = []
    fn = Flaky(10, TemporaryStoreError("timeout"))
    with pytest.raises(TemporaryStoreError, match="timeout"):
        call_with_retry(fn, what="test", retries=3, backoff="1s", backoff_max="1m", sleep=slept.append,
                        rng=random.Random(2))
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
