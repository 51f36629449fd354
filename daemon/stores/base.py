"""The one interface every store implements.

A store reads raw samples for mapped roles over a time window, and writes and reads result
series, the worker's checkpoint and the alarm state. Every store names which of its
exceptions are temporary (worth retrying: the server is restarting, a timeout) and which are
fatal (bad credentials, a missing database), by raising or wrapping them as
``TemporaryStoreError`` / ``FatalStoreError``.

Contract (checked by tests/daemon/stores/test_contract.py against every implementation):

* ``read_raw(mappings, start, end)`` returns a DataFrame with a UTC ``DatetimeIndex`` named
  ``time`` (sorted, unique: duplicates in the raw data keep the last value), one float column
  per role in ``mappings`` in the *plant* unit, NaN where a sample is missing or not a number.
  The window is half-open, ``start <= t < end``. ``read`` does the same and converts to
  internal units through ``isentrope.calc.units``.
* ``write_raw(mappings, frame)`` writes a wide role frame (plant units) as raw samples; used
  by the demo, ``import-csv`` and tests.
* ``write_results(measurement, frame, tags)`` writes every numeric/bool column of ``frame``
  (UTC index) as a field of ``measurement`` with the given tags. Idempotent: writing the same
  (measurement, tags, time, field) again replaces the value, never duplicates it.
* ``read_results(measurement, start, end, tags)`` reads them back, one column per field.
* ``delete_results(measurement, start, end, tags)`` deletes every row of ``measurement`` in
  ``[start, end)`` whose tags include ``tags`` (all fields): what a re-run owns before it
  writes again, so that the store reads as if only that run had happened. An unknown
  measurement or tag is no error (there is nothing to delete).
* ``get_checkpoint(name)`` / ``set_checkpoint(name, time)``: the worker's progress.
* ``load_state(name)`` / ``save_state(name, dict)``: JSON-serialisable state (alarm state
  machines, baseline model references) that must survive a restart.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence

import pandas as pd

from isentrope.daemon.roles import RoleMapping


class StoreError(Exception):
    """Base of the store errors."""


class TemporaryStoreError(StoreError):
    """The store is unreachable or overloaded for now; the same call may succeed later."""


class FatalStoreError(StoreError):
    """Retrying will not help: bad credentials, missing database or bucket, malformed request."""


class Store(ABC):
    """Abstract store. Subclasses implement the raw I/O; conversion lives here."""

    #: Short name used in configuration (``[store] kind = "..."``) and in log lines.
    kind: str = "abstract"

    #: True when the worker may write a chunk's results from a second thread while it reads
    #: and computes the next chunk (``isentrope.daemon.worker``): the store's reads and
    #: writes must then be safe to call from two threads at once. A store whose writes need
    #: the CPU in this process (SQLite: each row is bound by the interpreter) gains nothing.
    write_behind: bool = False

    # --- raw samples --------------------------------------------------------------------
    @abstractmethod
    def read_raw(
        self, mappings: Sequence[RoleMapping], start: pd.Timestamp, end: pd.Timestamp
    ) -> pd.DataFrame:
        """Raw samples of each mapped role in ``[start, end)``, plant units, UTC index."""

    @abstractmethod
    def write_raw(self, mappings: Sequence[RoleMapping], frame: pd.DataFrame) -> int:
        """Write a wide role frame (plant units) as raw samples; returns samples written."""

    def read(
        self,
        mappings: Sequence[RoleMapping],
        start: pd.Timestamp,
        end: pd.Timestamp,
        barometric_kpa: float | None = None,
    ) -> pd.DataFrame:
        """Like ``read_raw``, converted to internal units (MPa abs, K, kg/s, MW, %)."""
        from isentrope.calc import units

        raw = self.read_raw(mappings, start, end)
        unit_of = {m.role: m.unit for m in mappings}
        return units.to_internal(raw, unit_of, barometric_kpa=barometric_kpa)

    # --- results ------------------------------------------------------------------------
    @abstractmethod
    def write_results(self, measurement: str, frame: pd.DataFrame, tags: Mapping[str, str]) -> int:
        """Write each column of ``frame`` as a field; idempotent per (tags, time, field)."""

    def prepare_results(self, measurement: str, frame: pd.DataFrame, tags: Mapping[str, str]):
        """The part of ``write_results`` that can be done ahead, in the calling thread (the
        worker calls it before handing a batch to its write-behind thread). Returns what
        ``write_prepared`` takes; here nothing is done ahead."""
        return (measurement, frame, dict(tags))

    def write_prepared(self, prepared) -> int:
        """``write_results`` of what ``prepare_results`` returned."""
        measurement, frame, tags = prepared
        return self.write_results(measurement, frame, tags)

    @abstractmethod
    def read_results(
        self,
        measurement: str,
        start: pd.Timestamp,
        end: pd.Timestamp,
        tags: Mapping[str, str],
    ) -> pd.DataFrame:
        """Result fields of ``measurement`` in ``[start, end)``, one column per field."""

    @abstractmethod
    def delete_results(
        self,
        measurement: str,
        start: pd.Timestamp,
        end: pd.Timestamp,
        tags: Mapping[str, str],
    ) -> None:
        """Delete the rows of ``measurement`` in ``[start, end)`` whose tags include ``tags``."""

    # --- worker state -------------------------------------------------------------------
    @abstractmethod
    def get_checkpoint(self, name: str) -> pd.Timestamp | None:
        """Last processed time of the named worker, or None when it never ran."""

    @abstractmethod
    def set_checkpoint(self, name: str, time: pd.Timestamp) -> None:
        """Record the last processed time of the named worker."""

    @abstractmethod
    def load_state(self, name: str) -> dict:
        """Saved JSON state under ``name`` ({} when none)."""

    @abstractmethod
    def save_state(self, name: str, state: Mapping) -> None:
        """Save JSON-serialisable state under ``name``, replacing what was there."""

    def close(self) -> None:  # noqa: B027 (optional hook: a store without connections keeps it)
        """Release connections. Safe to call twice."""

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
