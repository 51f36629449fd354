"""The worker's writes: a chunk's result series, then its alarm state, then the checkpoint
(``flush``), and the heartbeat row of each cycle (``heartbeat``)."""

from __future__ import annotations

import functools
import logging
from collections.abc import Callable

import numpy as np
import pandas as pd

from isentrope.daemon.series import STATUS_MEASUREMENT
from isentrope.daemon.stores.base import AuthorizationError, FatalStoreError, TemporaryStoreError
from isentrope.daemon.timeutil import DEFAULT_RESOLUTION, epoch_seconds, floor_time

logger = logging.getLogger("isentrope.worker")


class ResultWriter:
    """Writes for one worker.

    Parameters
    ----------
    store : isentrope.daemon.stores.base.Store
    retry : callable
        ``retry(fn, what)``: the worker's retrying call of a store operation.
    unit : str
        The unit (tag ``unit`` of the heartbeat).
    checkpoint_name : str
        The worker's checkpoint; its alarm state is ``alarms/<checkpoint_name>``.
    """

    def __init__(self, store, retry: Callable, unit: str, checkpoint_name: str):
        self.store = store
        self._retry = retry
        self.unit = unit
        self.checkpoint_name = checkpoint_name
        self.alarm_state_name = f"alarms/{checkpoint_name}"
        self.tags = {"unit": unit}

    def flush(self, batch) -> None:
        """Write what is left of ``batch``, save its state, then advance the checkpoint."""
        while batch.written < len(batch.writes):
            measurement, frame, tags = batch.writes[batch.written]
            if batch.prepared is not None:
                write = functools.partial(self.store.write_prepared, batch.prepared[batch.written])
            else:
                write = functools.partial(self.store.write_results, measurement, frame, tags)
            self._retry(
                write,
                f"writing {measurement} ({len(frame)} rows) for {batch.start.isoformat()} "
                f"to {batch.end.isoformat()}",
            )
            batch.written += 1
        if batch.alarm_state is not None and not batch.state_saved:
            self._retry(
                lambda: self.store.save_state(self.alarm_state_name, batch.alarm_state),
                f"saving state {self.alarm_state_name!r}",
            )
            batch.state_saved = True
        self._retry(
            lambda: self.store.set_checkpoint(self.checkpoint_name, batch.end),
            f"setting checkpoint {self.checkpoint_name!r} to {batch.end.isoformat()}",
        )

    def heartbeat(self, report, pending) -> None:
        """One row of ``worker_status`` (``pending``: the batch kept for the next cycle, or
        None); a failure here is logged and never ends the worker, except a refused token or
        permission (``AuthorizationError``): a configuration error that every later cycle
        would meet too."""
        last = report.checkpoint
        if last is None:
            try:
                last = self.store.get_checkpoint(self.checkpoint_name)
            except AuthorizationError:
                raise
            except (TemporaryStoreError, FatalStoreError):
                last = None
        lag = (report.started - last).total_seconds() if last is not None else np.nan
        row = pd.DataFrame(
            {
                "last_processed_s": [epoch_seconds(last) if last is not None else np.nan],
                "lag_s": [float(lag)],
                "rows_read": [float(report.rows_read)],
                "rows_flagged": [float(report.rows_flagged)],
                "chunks": [float(report.chunks_done)],
                "cycle_duration_s": [float(report.duration_s)],
                "ok": [bool(report.ok)],
                "pending_writes": [float(0 if pending is None else len(pending.writes) - pending.written)],
            },
            index=pd.DatetimeIndex([floor_time(report.started, DEFAULT_RESOLUTION)], name="time"),
        )
        try:
            self.store.write_results(STATUS_MEASUREMENT, row, {**self.tags, "worker": self.checkpoint_name})
        except AuthorizationError:
            raise
        except (TemporaryStoreError, FatalStoreError) as exc:
            logger.warning(
                "unit %s: heartbeat at %s not written: %s", self.unit, report.started.isoformat(), exc
            )
