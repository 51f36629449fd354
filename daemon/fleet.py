"""Fleet backfill: many units and years, partitioned by (unit, month), executed on Dask.

``run_fleet(client, config_paths, start, end)`` cuts each unit's period into partitions on
calendar-month boundaries (UTC; ``period`` changes the length) and runs them on a
``dask.distributed.Client``: a ``LocalCluster`` on one machine, or the address of an existing
scheduler (``isentrope fleet-backfill --scheduler tcp://host:8786``). Workers share nothing but
the stores named in the units' configurations; every task opens its own store connection.

How a partition stays independent and idempotent:

* Each partition is a ``Worker`` backfill of ``[start, end)`` under its own checkpoint name
  ``fleet/<unit>/<start>-<end>``. It reads its period plus the pipeline margins
  (``Pipeline.margins``) and writes results inside its period only (the pipeline returns
  results for the window and nothing else), with the stores' idempotent writes.
* Baseline: deviations need the baseline model, which is fitted on the steady windows of the
  reference period ``[baseline] start..end``. Partitions are also cut at ``[baseline] end``
  and run in two phases per unit: the partitions that end at or before it first (they give no
  deviation, as in a sequential backfill), then one task fits and saves the model (state
  ``baseline/<unit>``, exactly as ``Worker`` does; a model already saved is used as it is
  unless ``refit=True``), then every later partition in parallel.
* Alarms: the state machines of ``calc.alarms`` carry state from one observation to the next
  (a data-quality streak or a raised deviation alarm crosses month ends), so they cannot run
  per partition. Each partition returns its alarm observations (``Pipeline.alarm_observations``)
  instead of evaluating them; one small task per partition then runs the machines in time order,
  chained per unit (each starts from the state the previous one left), writes the events and
  saves the state as ``fleet/<unit>/<start>-<end>`` (state name = the partition name). That
  saved state is the partition's completion record: a re-run skips every partition that has
  it and starts the chain of a unit from the last one saved. Because ``evaluate_alarms`` gives
  the same events however a batch is split, the events equal those of a sequential backfill.

The result of a unit equals a plain sequential ``isentrope backfill`` cut at the same instants
(tests/daemon/test_fleet.py); a different chunking changes at most the last bits of a figure
(see daemon/DECISIONS.md, "The worker": how results stay identical however time is cut).
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from itertools import pairwise

import pandas as pd

from isentrope.calc import alarms
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import (
    HISTORIAN_SECTION,
    CycleResults,
    Pipeline,
    absent_row_times,
    no_events,
    sample_spacing,
)
from isentrope.daemon.redact import install_log_filter
from isentrope.daemon.stores import open_store
from isentrope.daemon.timeutil import utc
from isentrope.daemon.worker import Worker

logger = logging.getLogger("isentrope.fleet")

#: Default partition length: calendar months (pandas offset alias "MS", month starts, UTC).
DEFAULT_PERIOD = "MS"


@dataclass(frozen=True)
class Partition:
    """One unit's period ``[start, end)`` (UTC).

    Attributes
    ----------
    config_path : str
        The unit's configuration file (read again by the task on its worker).
    unit : str
        ``[unit] name``.
    start, end : pandas.Timestamp
        The period (UTC).
    phase : int
        1: ends at or before ``[baseline] end`` (runs before the baseline fit); 2: after.
    """

    config_path: str
    unit: str
    start: pd.Timestamp
    end: pd.Timestamp
    phase: int

    @property
    def name(self) -> str:
        """Checkpoint and completion-state name of the partition."""
        return f"fleet/{self.unit}/{self.start:%Y%m%dT%H%M%SZ}-{self.end:%Y%m%dT%H%M%SZ}"


def plan_partitions(config_path: str, config, start, end, period=DEFAULT_PERIOD) -> list[Partition]:
    """Partitions of one unit: ``[start, end)`` cut at every ``period`` boundary and at
    ``[baseline] end``.

    Parameters
    ----------
    config_path : str
        The unit's configuration file.
    config : isentrope.daemon.config.Config
        The same, loaded.
    start, end : timestamp
        The period to backfill (UTC).
    period : str
        pandas offset alias of the partition boundaries: "MS" (month starts, default), "7D",
        "1D", ... Fixed offsets are counted from the Unix epoch, so cuts do not depend on
        ``start``.

    Returns
    -------
    list of Partition
        In time order.
    """
    start, end = utc(start), utc(end)
    if end <= start:
        raise ValueError(f"end ({end.isoformat()}) must be after start ({start.isoformat()})")
    try:  # a fixed length ("7D", "12h"): boundaries on its multiples from the epoch
        step = pd.Timedelta(period)
    except ValueError:  # a calendar offset ("MS", "QS", "YS")
        step = None
    if step is not None:
        if step <= pd.Timedelta(0):
            raise ValueError(f"period must be positive, found {period!r}")
        epoch = pd.Timestamp("1970-01-01", tz="UTC")
        first = epoch + ((start - epoch) // step + 1) * step
        edges = set(pd.date_range(first, end, freq=step, inclusive="left"))
    else:
        offset = pd.tseries.frequencies.to_offset(period)
        edges = set(pd.date_range(start, end, freq=offset, inclusive="neither"))
    ref_end = config.baseline.end
    ref_end = None if ref_end is None else utc(ref_end)
    if ref_end is not None and start < ref_end < end:
        edges.add(ref_end)
    cuts = [start, *sorted(t for t in edges if start < t < end), end]
    return [
        Partition(str(config_path), config.unit.name, a, b, 1 if ref_end is not None and b <= ref_end else 2)
        for a, b in pairwise(cuts)
    ]


class _ObservingPipeline(Pipeline):
    """The pipeline with the alarm machines deferred: each window's observations are kept."""

    def __init__(self, config):
        super().__init__(config)
        self.observations: list[pd.DataFrame] = []
        self.last_no_data = None  # time of the last no_data observation (stands in for the state)
        self.spacing = None  # sample spacing of the last frame with rows

    def cycle_alarms(self, windows, deviation, state, final_end, notes, rows=None, **where):
        # The alarm state is not at hand here (the machines run later, in alarm_partition):
        # an absence of rows that goes on from the previous chunk continues from this
        # pipeline's own last no_data observation; one from the previous partition is filled
        # in by alarm_partition.
        key = f"no_data|{HISTORIAN_SECTION}"
        seen = (
            {"machines": {key: {"last_time": self.last_no_data.isoformat()}}} if self.last_no_data else None
        )
        if rows is not None and len(rows) > 2:
            self.spacing = sample_spacing(rows)
        obs = self.alarm_observations(windows, deviation, final_end, rows=rows, state=seen, **where)
        if obs is not None:
            mine = obs["time"][obs["section"] == HISTORIAN_SECTION]
            if len(mine):
                last = pd.Timestamp(mine.max())
                self.last_no_data = last if self.last_no_data is None else max(last, self.last_no_data)
            obs["section"] = obs["section"].astype("category")  # smaller between processes
            obs["quantity"] = obs["quantity"].astype("category")
            self.observations.append(obs)
        return no_events(), None


def _open(config_path: str):

    install_log_filter()  # in a worker process too: no secret in its log lines
    config = load_config(config_path)
    return config, open_store(config.store.kind, **config.store.open_options())


def compute_partition(part: Partition, chunk=None, redo: bool = False, *_after) -> dict:
    """Task: backfill one partition (everything but the alarm machines).

    Returns ``{"skipped": bool, "rows_read": int, "seconds": float, "observations": frame or
    None}``. A partition whose completion state exists is skipped unless ``redo``. ``chunk`` is the worker's
    chunk inside the partition (default ``[schedule] chunk``); ``_after`` are futures this
    task waits for (the baseline fit).
    """

    t0 = time.perf_counter()
    config, store = _open(part.config_path)
    try:
        if not redo and store.load_state(part.name):
            return {
                "skipped": True,
                "rows_read": 0,
                "seconds": time.perf_counter() - t0,
                "observations": None,
            }
        pipeline = _ObservingPipeline(config)
        # restart the partition from its start: its alarm observations are not stored, so a
        # partition computed but not completed (killed before its alarm task) runs again whole
        store.set_checkpoint(part.name, part.start)
        worker = Worker.from_config(
            config,
            store,
            checkpoint_name=part.name,
            start_default=part.start,
            lookback="0s",
            settle="0s",
            pipeline=pipeline,
            **({} if chunk is None else {"chunk": chunk}),
        )
        report = worker.run_cycle(until=part.end)
        if not report.ok:
            raise RuntimeError(f"partition {part.name}: {report.error}")
        obs = pd.concat(pipeline.observations, ignore_index=True) if pipeline.observations else None
        return {
            "skipped": False,
            "rows_read": report.rows_read,
            "seconds": time.perf_counter() - t0,
            "observations": obs,
            "spacing": pipeline.spacing,
        }
    finally:
        store.close()


def _summary(computed: dict) -> dict:
    """Task: a partition's result without its observations (small, for the client)."""
    return {k: v for k, v in computed.items() if k != "observations"}


def fit_baseline(config_path: str, refit: bool = False, *_after) -> list[str]:
    """Task: fit and save ``baseline/<unit>`` from the stored reference-period windows, the
    way ``Worker`` does for a sequential backfill. Returns the sections fitted."""

    config, store = _open(config_path)
    try:
        worker = Worker.from_config(config, store, checkpoint_name=f"fleet/{config.unit.name}/baseline")
        if refit:
            store.save_state(worker.baseline_state_name, {})
        period = worker.baseline_period()
        if period is None:
            return []
        return sorted(worker.baselines(period[1]))
    finally:
        store.close()


def alarm_partition(part: Partition, previous: dict | None, computed: dict, redo: bool = False) -> dict:
    """Task: run the alarm machines over one partition's observations, starting from the
    state ``previous`` left (None: the state saved by the partition before, or fresh), write the
    events and save the completion state. Returns the alarm state."""

    config, store = _open(part.config_path)
    try:
        done = None if redo else store.load_state(part.name)
        if done:
            return done.get("alarms") or {}
        state = previous or {}
        obs = computed.get("observations")
        empty = pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC", name="time"))
        pipeline = Pipeline(config)
        obs = _continue_absence(pipeline, part, state, obs, computed.get("spacing"))
        if obs is not None and len(obs):
            state, events = alarms.evaluate_alarms(state or None, obs, pipeline.alarm_rules())
            results = CycleResults(
                start=part.start,
                end=part.end,
                final_end=part.end,
                samples=empty,
                windows=empty,
                deviation=empty,
                alarm_events=events,
                alarm_state=state,
                counts={},
            )
            for measurement, frame, tags in results.writes({"unit": config.unit.name}):
                store.write_results(measurement, frame, tags)
        store.save_state(
            part.name,
            {"alarms": state, "done": True, "start": part.start.isoformat(), "end": part.end.isoformat()},
        )
        return state
    finally:
        store.close()


def _continue_absence(pipeline: Pipeline, part: Partition, state: dict, obs, spacing):
    """``obs`` with the absence of rows that the previous partition ended in carried on up to
    this partition's first ``no_data`` observation (its compute task could not see it when its
    before-margin held no row), on a grid from the last observation the state saw, with this
    partition's sample spacing."""

    if not any(r.name == "no_data" for r in pipeline.alarm_rules()):
        return obs
    machine = ((state or {}).get("machines") or {}).get(f"no_data|{HISTORIAN_SECTION}") or {}
    if not machine.get("last_time"):
        return obs
    mine = None if obs is None else obs["time"][obs["section"].astype(str) == HISTORIAN_SECTION]
    until = pd.Timestamp(mine.min()) if mine is not None and len(mine) else part.end
    empty = pd.DatetimeIndex([], tz="UTC", name="time")
    _, absent = absent_row_times(
        empty, part.start, until, last_seen=machine["last_time"], spacing=spacing or sample_spacing(empty)
    )
    if not len(absent):
        return obs
    fill = pd.DataFrame(
        {
            "time": absent,
            "section": HISTORIAN_SECTION,
            "quantity": alarms.QUANTITY_NO_DATA,
            "value": 1.0,
            "steady": True,
        }
    )
    if obs is None:
        return fill
    return pd.concat([obs.astype({"section": str, "quantity": str}), fill], ignore_index=True)


@dataclass
class FleetReport:
    """What ``run_fleet`` did."""

    partitions: int = 0
    skipped: int = 0
    rows_read: int = 0
    seconds: float = 0.0
    task_seconds: float = 0.0  # sum of the partition tasks' own wall time (worker time)
    baselines: dict = field(default_factory=dict)  # unit -> sections fitted


def run_fleet(
    client, config_paths, start, end, *, period=DEFAULT_PERIOD, chunk=None, refit=False
) -> FleetReport:
    """Backfill every unit of ``config_paths`` over ``[start, end)`` on a Dask client.

    Parameters
    ----------
    client : dask.distributed.Client
        A client of a ``LocalCluster`` or of a running scheduler.
    config_paths : sequence of str
        One configuration file per unit (unit names must differ).
    start, end : timestamp
        The period (UTC).
    period : str
        Partition length (pandas offset alias, default "MS": calendar months).
    chunk : str or Timedelta or None
        Worker chunk inside a partition (default ``[schedule] chunk`` of each unit).
    refit : bool
        Fit the baseline again even when one is saved (after changing the reference period)
        and recompute every partition after the baseline end, done or not (their deviations
        and alarms depend on the model). Alarm events of the earlier run at instants where the
        new run has none stay in the store: clear the ``alarm_events`` series of the unit first
        when the baseline changed.

    Returns
    -------
    FleetReport
    """

    t0 = time.perf_counter()
    plans = []
    for path in config_paths:
        config = load_config(path)  # ConfigError before any task is sent
        plans.append((str(path), config.unit.name, plan_partitions(str(path), config, start, end, period)))
    units = [u for _, u, _ in plans]
    if len(set(units)) != len(units):
        raise ValueError(f"unit names must differ between configurations; found {units}")
    report = FleetReport()
    ends, metas = [], []
    for path, unit, parts in plans:
        computed = {}
        for p in parts:
            if p.phase == 1:
                computed[p] = client.submit(compute_partition, p, chunk, False, pure=False)
        # the fit waits for small summaries of the phase-1 partitions, so their alarm
        # observations stay where they were computed (Dask runs _summary beside its input)
        phase1 = [client.submit(_summary, f, pure=False) for f in computed.values()]
        fit = client.submit(fit_baseline, path, refit, *phase1, pure=False)
        for p in parts:
            if p.phase == 2:
                computed[p] = client.submit(compute_partition, p, chunk, refit, fit, pure=False)
        state = None
        for p in parts:  # the alarm chain of the unit, in time order
            state = client.submit(alarm_partition, p, state, computed[p], refit and p.phase == 2, pure=False)
        metas += phase1 + [client.submit(_summary, computed[p], pure=False) for p in parts if p.phase == 2]
        ends.append((unit, state, fit))
        report.partitions += len(parts)
        del computed  # the client keeps no reference: observations are freed once their alarm task ran
    for unit, state, fit in ends:
        state.result()
        report.baselines[unit] = fit.result()
    for f in metas:
        r = f.result()
        report.skipped += int(r["skipped"])
        report.rows_read += int(r["rows_read"])
        report.task_seconds += float(r["seconds"])
    report.seconds = time.perf_counter() - t0
    logger.info(
        "fleet backfill of %d unit(s) from %s to %s: %d partitions (%d already done) in %.1f s",
        len(plans),
        utc(start).isoformat(),
        utc(end).isoformat(),
        report.partitions,
        report.skipped,
        report.seconds,
    )
    return report


__all__ = [
    "Partition",
    "plan_partitions",
    "run_fleet",
    "FleetReport",
    "compute_partition",
    "fit_baseline",
    "alarm_partition",
    "DEFAULT_PERIOD",
]
