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
* ``read_grid(mappings, start, end, grid)``: the same frame on the fixed grid of a
  ``grid.ReadGrid`` (values held up to a maximum age, or interpolated, between stored points;
  see ``isentrope.daemon.stores.grid``); ``read(..., grid=...)`` converts it. Its native
  step, ``read_window_last``, is the last stored value of each grid interval.
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
* ``acquire_lease(unit, holder, lease)`` / ``renew_lease`` / ``release_lease``: one worker per
  unit and store. A second holder is refused with ``UnitBusyError`` naming the holder; a
  holder that dies without releasing stops holding (SQLite: the lock file's ``flock`` ends
  with the process; InfluxDB: its lease point expires ``lease`` after its last renewal).
  ``renew_lease`` raises ``UnitBusyError`` when another holder has taken the unit meanwhile
  (this one's lease had expired).

Configuration: a store class declares its ``[store]`` keys in ``OPTIONS``
(``isentrope.daemon.stores.options.Option``), the rules between them in ``check_options``, the
names it can write in ``NAME_CHECKS``, and what ``open(create=False)`` refuses in
``refuse_to_create``; ``isentrope.daemon.config`` reads and checks a kind from these alone.
"""

from __future__ import annotations

import os
import socket
from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import pandas as pd

from isentrope.calc import units
from isentrope.daemon.redact import redact
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common, escape
from isentrope.daemon.stores import grid as g
from isentrope.daemon.stores.grid import ReadGrid
from isentrope.daemon.stores.options import Option

#: Default ``timeout`` of every store [s]: an HTTP request to InfluxDB, or SQLite's wait for a
#: locked database. ``[store] timeout`` has the same default (project choice, no source).
DEFAULT_TIMEOUT_S = 10.0


class StoreError(Exception):
    """Base of the store errors. A text argument is redacted (``isentrope.daemon.redact``) when
    the error is made: a server's answer quoted in the message may echo the credentials."""

    def __init__(self, *args):
        super().__init__(*(redact(a) if isinstance(a, str) else a for a in args))


class TemporaryStoreError(StoreError):
    """The store is unreachable or overloaded for now; the same call may succeed later."""


class FatalStoreError(StoreError):
    """Retrying will not help: bad credentials, missing database or bucket, malformed request."""


class CertificateError(FatalStoreError):
    """The server's TLS certificate failed verification: a configuration problem (the URL, the
    ``ca_bundle`` or ``verify_ssl``), never an outage; the command line exits 2."""


class AuthorizationError(FatalStoreError):
    """The server refused the credentials (401) or what they allow (403): a configuration error,
    never retried as an outage. The message names the store key and what the token lacks and
    never shows the token."""


@dataclass(frozen=True)
class LeaseHolder:
    """Who holds (or asks for) a unit: the command, the host, the process and its start."""

    command: str
    host: str
    pid: int
    started: pd.Timestamp

    @classmethod
    def this_process(cls, command: str) -> LeaseHolder:
        return cls(command, socket.gethostname(), os.getpid(), _PROCESS_START)

    @property
    def id(self) -> str:
        """Unique per process start: host, pid and the start time in ns."""
        return f"{self.host}/{self.pid}/{self.started.value}"

    def as_dict(self) -> dict:
        return {
            "command": self.command,
            "host": self.host,
            "pid": self.pid,
            "started": self.started.isoformat(),
        }

    @classmethod
    def from_dict(cls, d: Mapping) -> LeaseHolder:
        return cls(str(d["command"]), str(d["host"]), int(d["pid"]), pd.Timestamp(d["started"]))

    def describe(self) -> str:
        return f"`{self.command}` on host {self.host}, pid {self.pid}, started {_when(self.started)}"

    def vanished(self) -> bool:
        """True when this holder ran on this host and its process no longer exists (it was
        killed or crashed): its lease need not be waited out. A pid taken again by another
        process counts as alive (the lease then expires as usual)."""
        if self.host != socket.gethostname() or self.pid == os.getpid():
            return False
        try:
            os.kill(self.pid, 0)
        except ProcessLookupError:
            return True
        except OSError:  # exists, owned by another user
            return False
        return False


_PROCESS_START = pd.Timestamp.now(tz="UTC")


def _when(t: pd.Timestamp) -> str:
    return t.tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ")


class UnitBusyError(Exception):
    """Another worker holds this unit on this store (``acquire_lease``), or took it while this
    one's lease had expired (``renew_lease``). The command line exits 6."""

    def __init__(
        self,
        unit: str,
        store: str,
        holder: LeaseHolder | None,
        expires: pd.Timestamp | None = None,
        *,
        lost: bool = False,
        until: str = "",
    ):
        self.unit, self.store, self.holder, self.expires, self.lost = unit, store, holder, expires, lost
        who = holder.describe() if holder is not None else "another process (it has not said who)"
        if expires is not None:
            until = f"its lease expires at {_when(expires)} unless renewed"
        head = (
            f"unit {unit!r} on {store} was taken over by {who} while this worker's lease had expired"
            if lost
            else f"unit {unit!r} on {store} is held by {who}"
        )
        tail = "; stop that worker or wait, then run this again" if not lost else "; this worker stops"
        super().__init__(head + (f"; {until}" if until else "") + tail)


class Store(ABC):
    """Abstract store. Subclasses implement the raw I/O; conversion lives here."""

    #: Short name used in configuration (``[store] kind = "..."``) and in log lines.
    kind: str = "abstract"

    #: True when the worker may write a chunk's results from a second thread while it reads
    #: and computes the next chunk (``isentrope.daemon.worker``): the store's reads and
    #: writes must then be safe to call from two threads at once. A store whose writes need
    #: the CPU in this process (SQLite: each row is bound by the interpreter) gains nothing.
    write_behind: bool = False

    #: The smallest time step the store keeps: samples closer than this are one sample.
    time_resolution: pd.Timedelta = pd.Timedelta(1, "ns")

    # --- configuration ------------------------------------------------------------------
    #: The ``[store]`` keys of this kind besides ``kind``, in the order they are read; each
    #: is a keyword argument of the constructor (``options.Option``).
    OPTIONS: tuple[Option, ...] = ()

    #: Checks of the names this kind writes, each raising ``ValueError`` for a name it cannot
    #: write as it is read (``escape``): "unit" the unit name (a tag value of every result and
    #: part of the checkpoint and state names), "measurement", "field", "tag_key" and
    #: "tag_value" those of a role's raw series (the tag name itself is the field or tag of
    #: "tag" as written). The configuration refuses such a name at load, naming the key.
    NAME_CHECKS: Mapping[str, tuple] = {
        "unit": (escape.check_name,),
        "measurement": (escape.check_name,),
        "field": (escape.check_name,),
        "tag_key": (escape.check_name,),
        "tag_value": (escape.check_name,),
    }

    @classmethod  # noqa: B027 (a hook, empty by default)
    def check_options(cls, values: Mapping, given: set[str], problem) -> None:
        """Rules between options. ``values``: option name -> value read (defaults filled in,
        a secret as an object with ``reveal()`` or None); ``given``: the options written in
        the file (a secret also as ``<name>_file``); ``problem(name, message)`` reports a
        problem at a key. None by default."""

    @classmethod  # noqa: B027 (a hook, empty by default)
    def refuse_to_create(cls, options: Mapping) -> None:
        """Raise ``FatalStoreError`` when opening with the constructor's ``options`` would
        create a new, empty store (``StoreConfig.open(create=False)``, for the commands that
        only read). Nothing by default: a server store is never created by opening it."""

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
        grid: ReadGrid | None = None,
    ) -> pd.DataFrame:
        """Like ``read_raw`` (or ``read_grid`` with a ``grid``), converted to internal units
        (MPa abs, K, kg/s, MW, %)."""
        raw = (
            self.read_raw(mappings, start, end)
            if grid is None
            else self.read_grid(mappings, start, end, grid)
        )
        unit_of = {m.role: m.unit for m in mappings}
        return units.to_internal(raw, unit_of, barometric_kpa=barometric_kpa)

    def read_grid(
        self, mappings: Sequence[RoleMapping], start: pd.Timestamp, end: pd.Timestamp, grid: ReadGrid
    ) -> pd.DataFrame:
        """Each mapped role on the grid times of ``grid`` in ``[start, end)`` (plant units):
        held roles from ``read_window_last`` (one request for all of them, reaching back the
        longest max_age), interpolated roles from ``read_raw`` around the window. Rows where
        no role has a value are left out. See ``isentrope.daemon.stores.grid``."""
        mappings = common.check_mappings(mappings)
        start, end = common.window(start, end)
        times = g.grid_ns(start, end, grid.interval)
        series: dict[str, pd.Series] = {}
        if len(times):
            one_ns = pd.Timedelta(1, unit="ns")
            first = pd.Timestamp(int(times[0]), unit="ns", tz="UTC")
            last = pd.Timestamp(int(times[-1]), unit="ns", tz="UTC")
            held = [m for m in mappings if grid.fill_of(m.role).method == g.HOLD]
            if held:
                back = max(grid.fill_of(m.role).max_age for m in held)
                lasts = self.read_window_last(held, first - back, last, grid.interval)
                for m in held:
                    s = lasts.get(m.role)
                    if s is None or not len(s):
                        continue
                    values = g.hold_on_grid(
                        pd.DatetimeIndex(s.index).as_unit("ns").asi8,
                        s.to_numpy(dtype=float),
                        times,
                        grid.fill_of(m.role).max_age,
                        grid.interval,
                    )
                    series[m.role] = g.series_on_grid(values, times)
            linear = [m for m in mappings if grid.fill_of(m.role).method == g.LINEAR]
            if linear:
                reach = max(grid.fill_of(m.role).max_age for m in linear)
                raw = self.read_raw(linear, first - reach, last + reach + one_ns)
                for m in linear:
                    col = raw[m.role]
                    values = g.linear_on_grid(
                        raw.index.as_unit("ns").asi8,
                        col.to_numpy(dtype=float),
                        times,
                        grid.fill_of(m.role).max_age,
                    )
                    series[m.role] = g.series_on_grid(values, times)
        frame = common.role_frame(mappings, series)
        return frame.dropna(how="all")

    def read_window_last(
        self,
        mappings: Sequence[RoleMapping],
        after: pd.Timestamp,
        until: pd.Timestamp,
        interval: pd.Timedelta,
    ) -> dict[str, pd.Series]:
        """Per role: the last stored number in each grid interval ``(t - interval, t]`` that
        holds one, stamped ``t``, for the stored points in ``(after, until]`` (``after`` and
        ``until`` on the grid). Stores override this with their native windowing; here it is
        ``read_raw`` and numpy (``grid.window_last``)."""
        one_ns = pd.Timedelta(1, unit="ns")
        raw = self.read_raw(mappings, after + one_ns, until + one_ns)
        out = {}
        for m in mappings:
            stamps, values = g.window_last(
                raw.index.as_unit("ns").asi8, raw[m.role].to_numpy(dtype=float), interval
            )
            out[m.role] = pd.Series(values, index=pd.to_datetime(stamps, unit="ns", utc=True))
        return out

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

    # --- one worker per unit and store -------------------------------------------------------
    @abstractmethod
    def acquire_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        """Take the unit for ``holder`` for ``lease`` (renewed by ``renew_lease``), or raise
        ``UnitBusyError`` naming the present holder. Taking a unit this store already holds
        for the same holder renews it."""

    @abstractmethod
    def renew_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        """Extend the holder's lease to ``lease`` from now; ``UnitBusyError`` (``lost``) when
        another holder has the unit now."""

    @abstractmethod
    def release_lease(self, unit: str, holder: LeaseHolder) -> None:
        """Give the unit up (nothing when not held)."""

    def close(self) -> None:  # noqa: B027 (optional hook: a store without connections keeps it)
        """Release connections. Safe to call twice."""

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
