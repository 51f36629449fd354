"""The scheduled worker: which windows to process, reading, the pipeline, writing, checkpoint.

One worker serves one unit. Each *cycle* processes the time from the checkpoint (minus a
look-back, so late-arriving samples are picked up) to ``now - settle`` in bounded chunks
(``plan_windows``). For each chunk it

1. reads raw samples over the chunk widened by the pipeline's margins (rolling screens and
   steady windows need history before the chunk, and a little after it),
2. runs the ``Pipeline`` (pure computation, no I/O),
3. writes every result series for the chunk (idempotent writes: re-processing replaces),
4. saves the alarm state, and only then
5. advances the checkpoint to the chunk end.

The checkpoint never moves past results that were not written. A failed write keeps its batch
in memory (one batch at most, so memory stays bounded) and the next cycle writes it before
anything else. Store calls that fail with ``TemporaryStoreError`` are retried within the cycle
with exponential backoff and jitter; when the retries are spent the worker logs one line and
tries again at the next cycle. ``FatalStoreError`` is not retried.

With a store that sets ``write_behind = True`` (the InfluxDB stores: line protocol over HTTP,
where the server's ingest takes about half of a backfill's time), step 3-5 of a chunk run in
one background thread while the next chunk is read and computed; the order of writes, state and
checkpoint is the same, the next chunk's alarm state is the one just computed (the one being
saved), and the cycle waits for the last batch before it ends. A failure there is a failure of
that chunk: its batch stays pending and the chunk computed meanwhile is dropped.

``plan_windows`` takes the clock as an argument, and ``Worker`` takes ``clock`` and ``sleep``
callables, so the tests need no real waiting. ``stop()`` (wired to SIGTERM/SIGINT by the
``run`` and ``backfill`` commands) ends the work between chunks, never in the middle of one.
"""

from __future__ import annotations

import json
import logging
import random
import threading
import time as _time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from isentrope.daemon import analysis
from isentrope.daemon.baselines import Baselines, reference_period
from isentrope.daemon.pipeline import (
    Pipeline,
)
from isentrope.daemon.series import (
    ALARMS_MEASUREMENT,
    DEVIATION_MEASUREMENT,
    SAMPLES_MEASUREMENT,
    STATUS_MEASUREMENT,
    WINDOWS_MEASUREMENT,
)
from isentrope.daemon.stores.base import AuthorizationError, FatalStoreError, Store, TemporaryStoreError
from isentrope.daemon.timeutil import DEFAULT_RESOLUTION, as_timedelta, epoch_seconds, floor_time, utc
from isentrope.daemon.writer import ResultWriter

logger = logging.getLogger("isentrope.worker")


def plan_windows(
    checkpoint: pd.Timestamp | None,
    now: pd.Timestamp,
    settle,
    lookback,
    chunk,
    start_default: pd.Timestamp | None = None,
    *,
    resolution=DEFAULT_RESOLUTION,
) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """Windows ``[start, end)`` one cycle must process, in time order.

    Parameters
    ----------
    checkpoint : Timestamp or None
        End of the last processed window (UTC), None when the worker never ran.
    now : Timestamp
        The current time (UTC); passed in so tests can use a fake clock.
    settle : str or Timedelta
        Delay before data is considered complete: nothing after ``now - settle`` is processed.
    lookback : str or Timedelta
        How far before the checkpoint to start again, so late-arriving samples are picked up.
    chunk : str or Timedelta
        Longest window; chunk boundaries fall on multiples of ``chunk`` from the Unix epoch, so
        a catch-up after an outage and an uninterrupted run cut time at the same instants.
    start_default : Timestamp or None
        Where to start when there is no checkpoint; None means ``now - settle - lookback``.
    resolution : str or Timedelta
        Window ends are floored to this [default 1 s].

    Returns
    -------
    list of (Timestamp, Timestamp)
        Contiguous, non-overlapping chunks covering ``[start, now - settle)``; empty when
        there is nothing to do. Nothing is skipped, however long the outage was.
    """
    now = utc(now)
    settle = as_timedelta(settle, "settle")
    lookback = as_timedelta(lookback, "lookback")
    chunk = as_timedelta(chunk, "chunk")
    resolution = as_timedelta(resolution, "resolution")
    if chunk <= pd.Timedelta(0):
        raise ValueError(f"chunk must be a positive duration, found {chunk!r}")
    end = floor_time(now - settle, resolution) if resolution > pd.Timedelta(0) else now - settle
    if checkpoint is not None:
        start = utc(checkpoint) - lookback
    elif start_default is not None:
        start = utc(start_default)
    else:
        start = end - lookback
    if start >= end:
        return []
    windows = []
    s = start
    while s < end:
        boundary = floor_time(s, chunk) + chunk
        e = min(boundary, end)
        windows.append((s, e))
        s = e
    return windows


def backoff_delays(retries: int, backoff, backoff_max, rng: random.Random) -> list[float]:
    """Sleep times [s] between attempts: exponential, capped, with jitter.

    Attempt k (k = 0, 1, ...) waits ``d = min(backoff_max, backoff * 2**k)`` scaled by a
    uniform factor in [0.5, 1.0] ("equal jitter", common practice, no source), so many
    workers restarting together do not hit the database in step.
    """
    base = as_timedelta(backoff).total_seconds()
    cap = as_timedelta(backoff_max).total_seconds()
    out = []
    for k in range(int(retries)):
        d = min(cap, base * (2.0**k))
        out.append(d * (0.5 + 0.5 * rng.random()))
    return out


def call_with_retry(
    fn: Callable,
    *,
    what: str,
    retries: int,
    backoff,
    backoff_max,
    sleep: Callable[[float], None] = _time.sleep,
    rng: random.Random | None = None,
    stop_event: threading.Event | None = None,
):
    """Call ``fn()``; on ``TemporaryStoreError`` retry up to ``retries`` times with backoff.

    ``FatalStoreError`` and any other exception propagate at once. When the retries are spent
    the last ``TemporaryStoreError`` propagates (the caller logs it once). A set ``stop_event``
    ends the retrying early.
    """
    rng = rng or random.Random()
    delays = backoff_delays(retries, backoff, backoff_max, rng)
    attempt = 0
    while True:
        try:
            return fn()
        except TemporaryStoreError as exc:
            if attempt >= len(delays) or (stop_event is not None and stop_event.is_set()):
                raise
            delay = delays[attempt]
            attempt += 1
            logger.debug("%s failed (%s); retry %d of %d in %.1f s", what, exc, attempt, len(delays), delay)
            sleep(delay)


@dataclass
class Batch:
    """Results of one chunk waiting to be written, and the checkpoint they allow."""

    start: pd.Timestamp
    end: pd.Timestamp
    writes: list  # of (measurement, frame, tags), written in order
    alarm_state: dict | None
    written: int = 0  # how many of ``writes`` are already in the store
    state_saved: bool = False
    prepared: list | None = None  # ``Store.prepare_results`` of each write, when done ahead
    events: object = None  # the chunk's alarm events (DataFrame), logged once they are written


@dataclass
class CycleReport:
    """What one cycle did (also written as the heartbeat series)."""

    started: pd.Timestamp
    windows: list = field(default_factory=list)
    chunks_done: int = 0
    rows_read: int = 0
    rows_flagged: int = 0
    checkpoint: pd.Timestamp | None = None
    duration_s: float = 0.0
    error: str | None = None
    stopped: bool = False

    @property
    def ok(self) -> bool:
        return self.error is None


class Worker:
    """Processes a unit's data from its checkpoint forward; one instance per unit.

    Parameters
    ----------
    store : Store
        Where raw samples are read and results, state and checkpoints written.
    pipeline : isentrope.daemon.pipeline.Pipeline
        The computation (no I/O).
    mappings : sequence of RoleMapping
        The unit's role mapping.
    unit : str
        Unit name; the ``unit`` tag of every result series.
    settle, lookback, chunk : str or Timedelta
        See ``plan_windows``.
    retries : int
        Retries of a failing store call within one cycle.
    backoff, backoff_max : str or Timedelta
        First retry delay and its cap.
    checkpoint_name : str
        Name of the checkpoint (``backfill`` uses its own so it never disturbs ``run``).
    start_default : Timestamp or None
        Where to start when there is no checkpoint.
    barometric_kpa : float or None
        Constant barometric pressure for gauge transmitters when no barometric tag is mapped.
    grid : isentrope.daemon.stores.grid.ReadGrid or None
        Read onto this fixed grid (``[read]``); None reads the rows as stored.
    clock : callable
        Returns the current UTC time; injectable for tests.
    sleep : callable
        ``sleep(seconds)``; injectable for tests.
    rng : random.Random
        Jitter source.
    """

    def __init__(
        self,
        store: Store,
        pipeline,
        mappings,
        unit: str,
        *,
        settle="2m",
        lookback="30m",
        chunk="1d",
        retries: int = 4,
        backoff="2s",
        backoff_max="60s",
        checkpoint_name: str | None = None,
        start_default: pd.Timestamp | None = None,
        barometric_kpa: float | None = None,
        grid=None,
        clock: Callable[[], pd.Timestamp] | None = None,
        sleep: Callable[[float], None] = _time.sleep,
        rng: random.Random | None = None,
    ):
        self.store = store
        self.pipeline = pipeline
        self.mappings = list(mappings)
        self.unit = unit
        self.settle = as_timedelta(settle, "settle")
        self.lookback = as_timedelta(lookback, "lookback")
        self.chunk = as_timedelta(chunk, "chunk")
        self.retries = int(retries)
        self.backoff = as_timedelta(backoff, "backoff")
        self.backoff_max = as_timedelta(backoff_max, "backoff_max")
        self.checkpoint_name = checkpoint_name or f"run/{unit}"
        self.start_default = None if start_default is None else utc(start_default)
        self.barometric_kpa = barometric_kpa
        self.grid = grid
        self.clock = clock or (lambda: pd.Timestamp.now(tz="UTC"))
        self.sleep = sleep
        self.rng = rng or random.Random()
        self.stop_event = threading.Event()
        self.config = None  # set by from_config; gives the baseline period
        self.baseline_models = Baselines(
            store, pipeline, unit, self._retry, lambda: reference_period(self.config)
        )
        self.writer = ResultWriter(store, self._retry, unit, self.checkpoint_name)
        self.pending: Batch | None = None
        self.last_report: CycleReport | None = None
        self._lock = threading.Lock()
        self._flusher: ThreadPoolExecutor | None = None  # write-behind thread (see module doc)

    @classmethod
    def from_config(cls, config, store: Store, **overrides) -> Worker:
        """A worker for ``config`` (``isentrope.daemon.config.Config``); keyword arguments
        override the ``[schedule]`` values and the other constructor arguments."""

        sch = config.schedule
        kwargs = dict(
            settle=sch.settle,
            lookback=sch.lookback,
            chunk=sch.chunk,
            retries=sch.retries,
            backoff=sch.backoff,
            backoff_max=sch.backoff_max,
            barometric_kpa=config.screening.barometric_kpa,
            grid=config.read_grid,
        )
        kwargs.update(overrides)
        pipeline = kwargs.pop("pipeline", None) or Pipeline(config)
        worker = cls(store, pipeline, config.mappings, config.unit.name, **kwargs)
        worker.config = config
        return worker

    # --- names of the saved state ---------------------------------------------------------
    @property
    def alarm_state_name(self) -> str:
        return f"alarms/{self.checkpoint_name}"

    @property
    def baseline_state_name(self) -> str:
        return f"baseline/{self.unit}"

    @property
    def tags(self) -> dict[str, str]:
        return {"unit": self.unit}

    # --- the analysis job and owned periods ------------------------------------------------
    @property
    def analysis_status_name(self) -> str:
        return f"analysis/{self.unit}"

    def own_period(self, start: pd.Timestamp, end: pd.Timestamp) -> None:
        """Delete every result row of the unit's cycle series (per-sample figures, steady
        windows, deviations of any baseline model, alarm events) in ``[start, end)``: a
        backfill or refit that processes the period again owns it, so rows an earlier run wrote
        where this one writes none do not stay behind."""

        start, end = utc(start), utc(end)
        for m in (SAMPLES_MEASUREMENT, WINDOWS_MEASUREMENT, DEVIATION_MEASUREMENT, ALARMS_MEASUREMENT):
            self._retry(
                lambda m=m: self.store.delete_results(m, start, end, self.tags),
                f"deleting {m} of unit {self.unit} from {start.isoformat()} to {end.isoformat()}",
            )
        logger.info(
            "unit %s: results from %s to %s deleted before processing the period again",
            self.unit,
            start.isoformat(),
            end.isoformat(),
        )

    def analyse(self, end: pd.Timestamp | None = None, *, rebuild: bool = False):
        """Bring the stored degradation analysis (``isentrope.daemon.analysis.run_analysis``)
        up to ``end`` (None: this worker's checkpoint); days before the checkpoint less the
        look-back and one steady window, whose results no later cycle changes, become final.
        Writes one ``worker_status`` row (tag ``worker`` = ``analysis/<unit>``) and returns what
        this run computed (``run_analysis(..., load=False)``: the rows and alarm events since
        the last final day); None when there is nothing processed yet. Temporary store trouble
        is logged and the job tried again at its next run; it is serialised with the cycles."""

        with self._lock:
            t0 = _time.monotonic()
            started = self.clock()
            checkpoint = self._retry(
                lambda: self.store.get_checkpoint(self.checkpoint_name),
                f"reading checkpoint {self.checkpoint_name!r}",
            )
            end = utc(end) if end is not None else checkpoint
            if end is None:
                return None
            final_until = end
            if checkpoint is not None and self.config is not None:
                final_until = min(end, checkpoint - self.lookback - self.config.steady.max_length)
            ok, result, error = True, None, ""
            try:
                result = analysis.run_analysis(
                    self.store, self.config, end, final_until=final_until, rebuild=rebuild, load=False
                )
            except TemporaryStoreError as exc:
                ok, error = False, str(exc)
                logger.warning(
                    "unit %s: analysis up to %s not done: %s; tried again at its next run",
                    self.unit,
                    end.isoformat(),
                    exc,
                )
            duration = _time.monotonic() - t0
            row = pd.DataFrame(
                {
                    "analysis_end_s": [epoch_seconds(end)],
                    "duration_s": [float(duration)],
                    "ok": [ok],
                    "sections": [float(len(result.sections)) if result is not None else np.nan],
                },
                index=pd.DatetimeIndex([floor_time(started, DEFAULT_RESOLUTION)], name="time"),
            )
            try:
                self.store.write_results(
                    STATUS_MEASUREMENT, row, {**self.tags, "worker": self.analysis_status_name}
                )
            except AuthorizationError:
                raise  # a refused token or permission is a configuration error, as in _heartbeat
            except (TemporaryStoreError, FatalStoreError) as exc:
                logger.warning("unit %s: analysis heartbeat not written: %s", self.unit, exc)
            if ok:
                logger.info(
                    "unit %s: analysis up to %s in %.1f s%s",
                    self.unit,
                    end.isoformat(),
                    duration,
                    "" if result is None or result.sections else " (nothing to analyse yet: no baseline)",
                )
            elif error:
                return None
            return result

    # --- control --------------------------------------------------------------------------
    def stop(self) -> None:
        """Ask the worker to stop after the chunk in progress."""
        self.stop_event.set()

    @property
    def stopping(self) -> bool:
        return self.stop_event.is_set()

    def _retry(self, fn, what: str):
        return call_with_retry(
            fn,
            what=what,
            retries=self.retries,
            backoff=self.backoff,
            backoff_max=self.backoff_max,
            sleep=self.sleep,
            rng=self.rng,
            stop_event=self.stop_event,
        )

    # --- one cycle ------------------------------------------------------------------------
    def plan(self, now: pd.Timestamp | None = None, until: pd.Timestamp | None = None):
        """The windows the next cycle would process (reads the checkpoint)."""
        now = self.clock() if now is None else now
        checkpoint = self._retry(
            lambda: self.store.get_checkpoint(self.checkpoint_name),
            f"reading checkpoint {self.checkpoint_name!r}",
        )
        windows = plan_windows(checkpoint, now, self.settle, self.lookback, self.chunk, self.start_default)
        if until is not None:
            until = utc(until)
            windows = [(s, min(e, until)) for s, e in windows if s < until]
        return windows

    def run_cycle(self, until: pd.Timestamp | None = None, progress: Callable | None = None) -> CycleReport:
        """Process everything from the checkpoint to ``now - settle`` (or ``until``).

        Never raises for store trouble: a ``TemporaryStoreError`` that outlives its retries
        ends the cycle with one log line and ``report.error`` set; the next cycle resumes from
        the checkpoint. ``FatalStoreError`` is re-raised at once, not logged here (retrying
        will not help; the caller reports it and exits non-zero). ``progress(start, end)`` is
        called after each chunk is committed.
        """
        with self._lock:
            return self._run_cycle(until, progress)

    def _run_cycle(self, until, progress) -> CycleReport:
        t0 = _time.monotonic()
        now = self.clock()
        report = CycleReport(started=now)
        try:
            if self.pending is not None:
                self._flush(self.pending)
                report.checkpoint = self.pending.end
                self.pending = None
            windows = self.plan(now, until)
            period = self.baseline_period()
            if period is not None:  # the chunk after the reference period sees the fitted model
                windows = [
                    w
                    for s, e in windows
                    for w in (((s, period[1]), (period[1], e)) if s < period[1] < e else ((s, e),))
                ]
            report.windows = windows
            data_end = now - self.settle  # nothing later is in the store yet
            checkpoint = (
                self._retry(
                    lambda: self.store.get_checkpoint(self.checkpoint_name),
                    f"reading checkpoint {self.checkpoint_name!r}",
                )
                if windows
                else None
            )
            behind = bool(getattr(self.store, "write_behind", False))
            inflight = None  # (future, batch, start, end, rows_read, rows_flagged) being written
            looped = False
            try:
                for start, end in windows:
                    if self.stopping:
                        report.stopped = True
                        break
                    if inflight is not None and self._fit_reads_windows(start):
                        self._settle(inflight, report, progress)  # the fit reads those windows
                        inflight = None
                    carry = None
                    if inflight is not None:  # its alarm state, as the store will give it back
                        carry = (
                            json.loads(json.dumps(inflight[1].alarm_state)) if inflight[1].alarm_state else {}
                        )
                    rows_read, rows_flagged, new_checkpoint, batch = self._compute(
                        start, end, data_end, checkpoint, carry
                    )
                    if inflight is not None:
                        self._settle(inflight, report, progress)
                        inflight = None
                    self.pending = batch
                    checkpoint = new_checkpoint
                    if behind:
                        # formatting here, sending there (see Store.prepare_results)
                        batch.prepared = [self.store.prepare_results(m, f, t) for m, f, t in batch.writes]
                        if self._flusher is None:
                            self._flusher = ThreadPoolExecutor(
                                max_workers=1, thread_name_prefix="isentrope-write"
                            )
                        inflight = (
                            self._flusher.submit(self._flush, batch),
                            batch,
                            start,
                            end,
                            rows_read,
                            rows_flagged,
                        )
                    else:
                        self._flush(batch)
                        self._account(batch, start, end, rows_read, rows_flagged, report, progress)
                looped = True
            finally:
                if inflight is not None:
                    try:
                        self._settle(inflight, report, progress)
                    except (TemporaryStoreError, FatalStoreError):
                        if looped:
                            raise
                        # the loop's own error is the one reported; this batch stays pending
        except TemporaryStoreError as exc:
            report.error = f"store unreachable: {exc}"
            where = (
                f" (window {self.pending.start.isoformat()} to {self.pending.end.isoformat()}, "
                f"{len(self.pending.writes) - self.pending.written} writes kept for the next cycle)"
                if self.pending is not None
                else ""
            )
            logger.warning(
                "unit %s: cycle ended after %d retries: %s%s; checkpoint stays at %s",
                self.unit,
                self.retries,
                exc,
                where,
                report.checkpoint.isoformat() if report.checkpoint is not None else "its last value",
            )
        except FatalStoreError as exc:
            report.error = f"store error: {exc}"
            report.duration_s = _time.monotonic() - t0
            self.last_report = report
            raise
        report.duration_s = _time.monotonic() - t0
        self.last_report = report
        self._heartbeat(report)
        return report

    def _compute(
        self,
        start: pd.Timestamp,
        end: pd.Timestamp,
        data_end: pd.Timestamp,
        checkpoint: pd.Timestamp | None,
        alarm_state: dict | None = None,
    ):
        """One chunk up to its batch: read with margins, compute. Returns ``(rows_read,
        rows_flagged, new_checkpoint, batch)``; ``_flush(batch)`` then writes it, saves the
        state and advances the checkpoint.

        Results are final up to ``final_end = min(end, data_end - after margin)``; the
        checkpoint moves there (never backwards). Per-sample rows after it are written as
        provisional and replaced by a later cycle, which starts at most a look-back before.
        ``alarm_state``: the state to start from when the previous batch is still being
        written (None: load the saved one).
        """
        before, after = self.pipeline.margins
        read_start, read_end = start - before, end + after
        final_end = min(end, data_end - after)
        frame = self._retry(
            lambda: self.store.read(
                self.mappings, read_start, read_end, barometric_kpa=self.barometric_kpa, grid=self.grid
            ),
            f"reading unit {self.unit} from {read_start.isoformat()} to {read_end.isoformat()}",
        )
        if alarm_state is None:
            alarm_state = self._retry(
                lambda: self.store.load_state(self.alarm_state_name),
                f"loading state {self.alarm_state_name!r}",
            )
        baselines = self.baselines(start)
        results = self.pipeline.process(
            frame, start, end, final_end=final_end, alarm_state=alarm_state or None, baselines=baselines
        )
        new_checkpoint = final_end if checkpoint is None else max(checkpoint, final_end)
        batch = Batch(
            start=start,
            end=new_checkpoint,
            writes=results.writes(self.tags),
            alarm_state=results.alarm_state,
            events=results.alarm_events,
        )
        return results.counts["rows_read"], results.counts["rows_flagged"], new_checkpoint, batch

    def _account(
        self,
        batch: Batch,
        start,
        end,
        rows_read: int,
        rows_flagged: int,
        report: CycleReport,
        progress: Callable | None,
    ) -> None:
        """A batch is in the store: count it in the report, log its alarm events (raised as
        warnings, cleared as information: the journal of a service shows them) and tell
        ``progress``."""
        if self.pending is batch:
            self.pending = None
        events = batch.events
        if events is not None and len(events):
            for t, kind, message in zip(events.index, events["kind"], events["message"], strict=True):
                logger.log(
                    logging.WARNING if kind == "raised" else logging.INFO,
                    "unit %s: alarm %s at %s: %s",
                    self.unit,
                    kind,
                    pd.Timestamp(t).isoformat(),
                    message,
                )
            batch.events = None  # once
        report.rows_read += rows_read
        report.rows_flagged += rows_flagged
        report.chunks_done += 1
        report.checkpoint = batch.end
        if progress is not None:
            progress(start, end)

    def _settle(self, inflight, report: CycleReport, progress: Callable | None) -> None:
        """Wait for the batch being written behind; its error (the batch stays pending) is
        raised here."""
        future, batch, start, end, rows_read, rows_flagged = inflight
        future.result()
        self._account(batch, start, end, rows_read, rows_flagged, report, progress)

    # --- baselines and writes (daemon.baselines, daemon.writer) -----------------------------
    def _fit_reads_windows(self, chunk_start: pd.Timestamp) -> bool:
        """Whether ``baselines(chunk_start)`` may read the steady windows just written."""
        return self.baseline_models.fit_reads_windows(chunk_start)

    def baseline_period(self) -> tuple[pd.Timestamp, pd.Timestamp] | None:
        """The reference period ``[baseline] start..end`` (UTC), None when not configured."""
        return reference_period(self.config)

    def baselines(self, chunk_start: pd.Timestamp) -> dict:
        """Baseline models for a chunk starting at ``chunk_start`` (``Baselines.for_chunk``)."""
        return self.baseline_models.for_chunk(chunk_start)

    def warn_if_baseline_changed(self) -> bool:
        """Warn when the saved models were fitted on another period than ``[baseline]``
        (``Baselines.warn_if_changed``); called by the commands at start."""
        return self.baseline_models.warn_if_changed()

    def _flush(self, batch: Batch) -> None:
        self.writer.flush(batch)

    def _heartbeat(self, report: CycleReport) -> None:
        self.writer.heartbeat(report, self.pending)
