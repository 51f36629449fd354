"""The embedded store: one SQLite file in WAL mode, readable with plain SQL.

Schema (times are integers since 1970-01-01 UTC; ``*_utc`` columns are ISO text for people)::

    -- raw plant samples, long format: one row per (tag, time)
    CREATE TABLE samples (
        tag   TEXT    NOT NULL,          -- plant tag name (RoleMapping.tag)
        time  INTEGER NOT NULL,          -- epoch milliseconds, UTC
        value REAL,                      -- plant unit of the tag
        PRIMARY KEY (tag, time)
    ) WITHOUT ROWID;

    -- one wide table per result measurement, e.g. "sections":
    CREATE TABLE "<measurement>" (
        "<tag key>" TEXT NOT NULL DEFAULT '',   -- one column per tag key (unit, ...)
        time        INTEGER NOT NULL,           -- epoch milliseconds, UTC
        time_utc    TEXT GENERATED ALWAYS AS (strftime('%Y-%m-%dT%H:%M:%fZ', time / 1000.0, 'unixepoch')) VIRTUAL,
        "<field>"   REAL,                       -- one column per field, added as fields appear
        PRIMARY KEY ("<tag key>", ..., time)
    ) WITHOUT ROWID;

    CREATE TABLE isentrope_results    (measurement TEXT PRIMARY KEY, tag_keys TEXT NOT NULL);  -- JSON list
    CREATE TABLE isentrope_checkpoint (name TEXT PRIMARY KEY, time_ns INTEGER NOT NULL,
                                       time_utc TEXT NOT NULL, updated_utc TEXT NOT NULL);
    CREATE TABLE isentrope_state      (name TEXT PRIMARY KEY, state TEXT NOT NULL,   -- JSON object
                                       updated_utc TEXT NOT NULL);

A dashboard reads results with e.g.
``SELECT time_utc, hp_efficiency FROM sections WHERE unit = 'U1' ORDER BY time``.

Behaviour worth knowing:

* Times are stored in milliseconds: sub-millisecond parts are dropped (floored), so two
  samples less than 1 ms apart become one (the later write wins).
* ``INSERT OR REPLACE`` / upserts make writes idempotent. A NaN (or a non-number) is *no
  value*: raw NaN samples are not written, and a NaN result field leaves an earlier value of
  that field in place, the same as the InfluxDB stores, whose line protocol has no NaN.
* Result bools and integers are stored as REAL (0.0/1.0).
* A new tag key on an existing measurement rebuilds its table once with the wider key.
* ``delete_results`` is a plain ``DELETE ... WHERE <tags> AND time >= ? AND time < ?``.
* Table names ``samples`` and those starting with ``isentrope_`` or ``sqlite_`` are reserved.
* One worker per unit: ``acquire_lease`` takes an exclusive ``flock`` on the lock file
  ``<database>.<unit, percent-encoded>.lock`` beside the database and holds it until
  ``release_lease`` or ``close``; the operating system releases it when the process ends,
  however it ends, so the lease needs no expiry here. The file says who holds it (JSON) for
  the refusal message; it is left in place (removing a lock file races with its next taker).
* Grid reads (``Store.read_grid``) take the plain ``read_raw`` SELECT and the numpy windowing of
  ``Store.read_window_last``. A SQL ``GROUP BY (time + iv - 1) / iv`` with ``MAX(time)`` gives
  the same values but was slower: 30 days of one-minute rows of 16 tags, 2.2-3.2 s against
  1.3-2.4 s for SELECT and numpy (1.3-2.0 s for the SELECT alone), on the shared 2-core machine
  at a load average near 9; SQLite groups an expression through a temporary b-tree.
"""

from __future__ import annotations

import errno
import fcntl
import itertools
import json
import os
import sqlite3
import threading
from collections.abc import Mapping, Sequence
from pathlib import Path
from urllib.parse import quote

import numpy as np
import pandas as pd

from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common
from isentrope.daemon.stores.base import (
    DEFAULT_TIMEOUT_S,
    FatalStoreError,
    LeaseHolder,
    Store,
    TemporaryStoreError,
    UnitBusyError,
)
from isentrope.daemon.stores.escape import check_name
from isentrope.daemon.stores.options import Option

_SCHEMA = """
CREATE TABLE IF NOT EXISTS samples (
    tag TEXT NOT NULL, time INTEGER NOT NULL, value REAL, PRIMARY KEY (tag, time)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS isentrope_results (measurement TEXT PRIMARY KEY, tag_keys TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS isentrope_checkpoint (
    name TEXT PRIMARY KEY, time_ns INTEGER NOT NULL, time_utc TEXT NOT NULL, updated_utc TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS isentrope_state (name TEXT PRIMARY KEY, state TEXT NOT NULL, updated_utc TEXT NOT NULL);
"""

_TIME_UTC = "strftime('%Y-%m-%dT%H:%M:%fZ', time / 1000.0, 'unixepoch')"
_NS_PER_MS = 1_000_000


def _ident(name: str) -> str:
    """A double-quoted SQL identifier."""
    return '"' + name.replace('"', '""') + '"'


def _file_location(path: Path) -> None:
    """``check`` of ``[store] path``: a file in a directory that exists."""
    if not path.parent.is_dir():
        raise ValueError(f"the directory {path.parent} does not exist (create it first)")
    if path.is_dir():
        raise ValueError(f"{path} is a directory; give the SQLite file in it")


def _now_utc() -> str:
    return pd.Timestamp.now(tz="UTC").strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class SqliteStore(Store):
    """Store in one SQLite file (created when missing). Thread-safe: one connection, one lock.

    Parameters
    ----------
    path : str or Path
        The database file; ``":memory:"`` for a private in-memory database (tests).
    timeout : float
        Seconds to wait for another writer's lock before ``TemporaryStoreError`` [s].
    """

    kind = "sqlite"
    time_resolution = pd.Timedelta(1, "ms")  # times are kept in milliseconds (floored)
    OPTIONS = (Option("path", path=True, check=_file_location),)

    @classmethod
    def refuse_to_create(cls, options):
        path = options["path"]
        if not Path(path).is_file():
            raise FatalStoreError(
                f"no SQLite store at {path} (check [store] path; "
                "the file is created by import-csv, run, backfill or demo)"
            )

    def __init__(self, path: str | Path, timeout: float = DEFAULT_TIMEOUT_S):
        self.path = str(path)
        self._lock = threading.RLock()
        self._leases: dict[str, tuple[int, str]] = {}  # unit -> (lock file descriptor, holder id)
        try:
            if self.path != ":memory:":
                parent = Path(self.path).parent
                if not parent.is_dir():
                    raise FatalStoreError(f"sqlite store {self.path}: directory {parent} does not exist")
                try:  # owner and group only (0640 less the umask); SQLite gives -wal/-shm the same
                    os.close(os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o640))
                except FileExistsError:
                    pass
                except OSError as exc:
                    raise FatalStoreError(
                        f"sqlite store {self.path}: cannot create it: {exc.strerror}"
                    ) from None
            self._db = sqlite3.connect(
                self.path, timeout=timeout, check_same_thread=False, isolation_level=None
            )
            self._db.execute(f"PRAGMA busy_timeout = {int(timeout * 1000)}")
            mode = self._db.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if self.path != ":memory:" and mode.lower() != "wal":
                raise FatalStoreError(f"sqlite store {self.path}: could not switch to WAL mode (got {mode})")
            self._db.execute("PRAGMA synchronous = NORMAL")
            self._db.executescript(_SCHEMA)
        except sqlite3.Error as exc:
            raise self._error(exc, "open") from exc
        self._closed = False

    def __repr__(self) -> str:
        return f"SqliteStore({self.path!r})"

    # --- plumbing ------------------------------------------------------------------------
    def _error(self, exc: Exception, doing: str) -> Exception:
        msg = f"sqlite store {self.path}: {doing}: {exc}"
        text = str(exc).lower()
        if isinstance(exc, sqlite3.OperationalError) and (
            "locked" in text or "busy" in text or "disk i/o" in text
        ):
            return TemporaryStoreError(msg)
        return FatalStoreError(msg)

    def _run(self, doing: str, fn):
        with self._lock:
            if getattr(self, "_closed", False):
                raise FatalStoreError(f"sqlite store {self.path}: {doing}: the store is closed")
            try:
                return fn(self._db)
            except sqlite3.Error as exc:
                self._rollback()
                raise self._error(exc, doing) from exc
            except BaseException:  # a ValueError half-way must not leave the transaction open
                self._rollback()
                raise

    def _rollback(self) -> None:
        if self._db.in_transaction:
            self._db.execute("ROLLBACK")

    # --- raw samples ---------------------------------------------------------------------
    def read_raw(self, mappings: Sequence[RoleMapping], start, end) -> pd.DataFrame:
        mappings = common.check_mappings(mappings)
        for m in mappings:
            check_name(m.tag, "tag")
        start, end = common.window(start, end)
        lo = int(np.floor(start.value / _NS_PER_MS))
        hi = -(-end.value // _NS_PER_MS)  # ceil: start <= t < end, in ms
        # typeof() keeps only numbers: text put there by hand reads as a missing sample.
        sql = (
            "SELECT time, value FROM samples WHERE tag = ? AND time >= ? AND time < ? "
            "AND typeof(value) IN ('real', 'integer') ORDER BY time"
        )

        def go(db):
            out = {}
            for m in mappings:
                # cursor.fetchall() dominates (tests/bench/bench_stores.py). Flattening its
                # tuples with numpy.fromiter: 30 days of 16 tags in 0.39 s, against 0.53 s
                # through pandas.read_sql_query. Faster readers (connectorx, the ADBC driver)
                # carry their own copy of SQLite: two copies in one process break SQLite's
                # POSIX locks (sqlite.org/howtocorrupt.html, 2.2.1), and tried here the stdlib
                # connection then failed with "disk I/O error".
                rows = db.execute(sql, (m.tag, lo, hi)).fetchall()
                flat = np.fromiter(itertools.chain.from_iterable(rows), dtype=np.float64, count=2 * len(rows))
                ms = flat[0::2].astype(np.int64)  # epoch ms are exact in a float64 (below 2**53)
                idx = pd.DatetimeIndex(pd.to_datetime(ms * _NS_PER_MS, unit="ns", utc=True), name="time")
                s = pd.Series(flat[1::2], index=idx)
                out[m.role] = s[(s.index >= start) & (s.index < end)]
            return out

        return common.role_frame(mappings, self._run("read_raw", go))

    def write_raw(self, mappings: Sequence[RoleMapping], frame: pd.DataFrame) -> int:
        mappings = common.check_mappings(mappings)
        for m in mappings:
            check_name(m.tag, "tag")
        idx = common.utc_index(frame, "raw frame")
        frame = frame.set_axis(idx, axis=0)
        by_role = {m.role: m for m in mappings}
        columns = common.wide_to_role_columns(mappings, frame)

        def go(db):
            n = 0
            db.execute("BEGIN IMMEDIATE")
            for role, s in columns.items():
                tag = by_role[role].tag
                ms = (common.epoch_ns(s.index) // _NS_PER_MS).tolist()
                db.executemany(
                    "INSERT OR REPLACE INTO samples (tag, time, value) VALUES (?, ?, ?)",
                    zip([tag] * len(ms), ms, s.to_numpy().tolist(), strict=True),
                )
                n += len(ms)
            db.execute("COMMIT")
            return n

        return self._run("write_raw", go)

    # --- results -------------------------------------------------------------------------
    @staticmethod
    def _check_measurement(measurement: str) -> str:
        check_name(measurement, "measurement")
        low = measurement.lower()
        if low == "samples" or low.startswith("isentrope_") or low.startswith("sqlite_"):
            raise ValueError(f"measurement {measurement!r} is a reserved table name in the sqlite store")
        return measurement

    def _tag_keys(self, db, measurement: str) -> list[str] | None:
        row = db.execute(
            "SELECT tag_keys FROM isentrope_results WHERE measurement = ?", (measurement,)
        ).fetchone()
        return None if row is None else json.loads(row[0])

    def _columns(self, db, measurement: str) -> list[str]:
        return [r[1] for r in db.execute(f"PRAGMA table_xinfo({_ident(measurement)})")]

    def _create(self, db, table: str, tag_keys: list[str], fields: list[str]) -> None:
        cols = [f"{_ident(k)} TEXT NOT NULL DEFAULT ''" for k in tag_keys]
        cols.append("time INTEGER NOT NULL")
        cols.append(f"time_utc TEXT GENERATED ALWAYS AS ({_TIME_UTC}) VIRTUAL")
        cols += [f"{_ident(f)} REAL" for f in fields]
        key = ", ".join([_ident(k) for k in tag_keys] + ["time"])
        db.execute(f"CREATE TABLE {_ident(table)} ({', '.join(cols)}, PRIMARY KEY ({key})) WITHOUT ROWID")

    def _prepare_table(self, db, measurement: str, tag_keys: list[str], fields: list[str]) -> list[str]:
        """Create or widen the table; returns its tag keys (a superset of ``tag_keys``)."""
        known = self._tag_keys(db, measurement)
        clash = [f for f in fields if f.lower() in {k.lower() for k in tag_keys + (known or [])}]
        if clash:
            raise ValueError(f"{measurement}: result fields {clash} have the same name as tag keys")
        if known is None:
            self._create(db, measurement, tag_keys, fields)
            db.execute("INSERT INTO isentrope_results VALUES (?, ?)", (measurement, json.dumps(tag_keys)))
            return tag_keys
        existing = self._columns(db, measurement)
        lowered = {c.lower() for c in existing}
        clash = [k for k in tag_keys if k not in known and k.lower() in lowered]
        if clash:
            raise ValueError(f"{measurement}: tag keys {clash} have the same name as result fields")
        new_keys = [k for k in tag_keys if k not in known]
        if new_keys:  # the key widens: rebuild the table once
            keys = sorted(known + new_keys)
            old_fields = [c for c in existing if c not in known and c not in ("time", "time_utc")]
            tmp = f"isentrope_rebuild_{measurement}"
            self._create(db, tmp, keys, old_fields)
            cols = ", ".join(_ident(c) for c in known + ["time"] + old_fields)
            db.execute(f"INSERT INTO {_ident(tmp)} ({cols}) SELECT {cols} FROM {_ident(measurement)}")
            db.execute(f"DROP TABLE {_ident(measurement)}")
            db.execute(f"ALTER TABLE {_ident(tmp)} RENAME TO {_ident(measurement)}")
            db.execute(
                "UPDATE isentrope_results SET tag_keys = ? WHERE measurement = ?",
                (json.dumps(keys), measurement),
            )
            known, existing = keys, self._columns(db, measurement)
            lowered = {c.lower() for c in existing}
        for f in fields:
            if f.lower() not in lowered:
                db.execute(f"ALTER TABLE {_ident(measurement)} ADD COLUMN {_ident(f)} REAL")
                lowered.add(f.lower())
        return known

    def write_results(self, measurement: str, frame: pd.DataFrame, tags: Mapping[str, str]) -> int:
        self._check_measurement(measurement)
        tags = common.check_tags(tags)
        idx = common.utc_index(frame, f"{measurement} results")
        fields = common.result_columns(frame)
        for f in fields:
            check_name(f, "result field")
        common.check_fields_vs_tags(fields, tags, measurement)
        if not fields or len(frame) == 0:
            return 0
        values = common.results_matrix(frame, fields)
        ms = common.epoch_ns(idx) // _NS_PER_MS

        def go(db):
            db.execute("BEGIN IMMEDIATE")
            keys = self._prepare_table(db, measurement, list(tags), fields)
            key_values = [tags.get(k, "") for k in keys]
            cols = [_ident(k) for k in keys] + ["time"] + [_ident(f) for f in fields]
            update = ", ".join(f"{_ident(f)} = COALESCE(excluded.{_ident(f)}, {_ident(f)})" for f in fields)
            sql = (
                f"INSERT INTO {_ident(measurement)} ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))}) "
                f"ON CONFLICT ({', '.join([_ident(k) for k in keys] + ['time'])}) DO UPDATE SET {update}"
            )
            obj = values.astype(object)
            obj[np.isnan(values)] = None
            prefix = tuple(key_values)
            db.executemany(
                sql, (prefix + (t,) + tuple(row) for t, row in zip(ms.tolist(), obj.tolist(), strict=True))
            )
            db.execute("COMMIT")
            return int(np.count_nonzero(~np.isnan(values)))

        return self._run("write_results", go)

    def _result_where(self, measurement: str, start, end, tags: Mapping[str, str]) -> tuple[dict, str, tuple]:
        """Checked ``tags``, and the WHERE clause with its parameters for a result query: those
        tags, and stored times (whole ms) in ``[start, end)``."""
        self._check_measurement(measurement)
        tags = common.check_tags(tags)
        start, end = common.window(start, end)
        lo = -(-start.value // _NS_PER_MS)
        hi = -(-end.value // _NS_PER_MS)
        where = " AND ".join([f"{_ident(k)} = ?" for k in tags] + ["time >= ?", "time < ?"])
        return tags, where, (*tags.values(), lo, hi)

    def read_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> pd.DataFrame:
        tags, where, params = self._result_where(measurement, start, end, tags)

        def go(db):
            keys = self._tag_keys(db, measurement)
            if keys is None:
                return None, []
            missing = [k for k in tags if k not in keys]
            if missing:
                return None, []
            fields = [
                c for c in self._columns(db, measurement) if c not in keys and c not in ("time", "time_utc")
            ]
            sql = (
                f"SELECT time, {', '.join(_ident(f) for f in fields) or 'NULL'} FROM {_ident(measurement)} "
                f"WHERE {where} ORDER BY time"
            )
            return db.execute(sql, params).fetchall(), fields

        rows, fields = self._run("read_results", go)
        if not rows:
            return common.results_frame(
                {f: np.array([], dtype=float) for f in fields}, np.array([], dtype=np.int64)
            )
        times = np.array([r[0] for r in rows], dtype=np.int64) * _NS_PER_MS
        data = np.array([r[1:] for r in rows], dtype=np.float64).reshape(len(rows), -1)
        return common.results_frame({f: data[:, i] for i, f in enumerate(fields)}, times)

    def delete_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> None:
        tags, where, params = self._result_where(measurement, start, end, tags)

        def go(db):
            keys = self._tag_keys(db, measurement)
            if keys is None or any(k not in keys for k in tags):
                return  # no such table or tag key: no such rows
            db.execute(f"DELETE FROM {_ident(measurement)} WHERE {where}", params)

        self._run("delete_results", go)

    # --- worker state --------------------------------------------------------------------
    def get_checkpoint(self, name: str) -> pd.Timestamp | None:
        check_name(name, "checkpoint name")
        row = self._run(
            "get_checkpoint",
            lambda db: db.execute(
                "SELECT time_ns FROM isentrope_checkpoint WHERE name = ?", (name,)
            ).fetchone(),
        )
        return None if row is None else pd.Timestamp(row[0], unit="ns", tz="UTC")

    def set_checkpoint(self, name: str, time) -> None:
        check_name(name, "checkpoint name")
        t = common.utc(time, "checkpoint time")
        self._run(
            "set_checkpoint",
            lambda db: db.execute(
                "INSERT OR REPLACE INTO isentrope_checkpoint VALUES (?, ?, ?, ?)",
                (name, t.value, t.strftime("%Y-%m-%dT%H:%M:%S.%fZ"), _now_utc()),
            ),
        )

    def load_state(self, name: str) -> dict:
        check_name(name, "state name")
        row = self._run(
            "load_state",
            lambda db: db.execute("SELECT state FROM isentrope_state WHERE name = ?", (name,)).fetchone(),
        )
        return {} if row is None else json.loads(row[0])

    def save_state(self, name: str, state: Mapping) -> None:
        check_name(name, "state name")
        if not isinstance(state, Mapping):
            raise ValueError(f"state {name!r} must be a mapping, found {type(state).__name__}")
        text = json.dumps(dict(state), allow_nan=False, sort_keys=True)
        self._run(
            "save_state",
            lambda db: db.execute(
                "INSERT OR REPLACE INTO isentrope_state VALUES (?, ?, ?)", (name, text, _now_utc())
            ),
        )

    # --- one worker per unit ---------------------------------------------------------------
    def lock_path(self, unit: str) -> Path:
        """The lock file of ``unit`` beside the database."""
        return Path(f"{self.path}.{quote(unit, safe='')}.lock")

    def acquire_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        check_name(unit, "unit name")
        with self._lock:
            held = self._leases.get(unit)
            if held is not None:
                if held[1] == holder.id:
                    return
                raise UnitBusyError(unit, f"sqlite store {self.path}", None, until="in this process")
            if self.path == ":memory:":  # private to this store object: nobody else can see it
                self._leases[unit] = (-1, holder.id)
                return
            path = self.lock_path(unit)
            try:
                fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o640)
            except OSError as exc:
                raise FatalStoreError(f"sqlite store {self.path}: lock file {path}: {exc.strerror}") from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                text = os.pread(fd, 4096, 0).decode("utf-8", "replace")
                os.close(fd)
                if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise FatalStoreError(
                        f"sqlite store {self.path}: lock file {path}: {exc.strerror}"
                    ) from None
                try:
                    other = LeaseHolder.from_dict(json.loads(text))
                except (ValueError, KeyError, TypeError):
                    other = None
                raise UnitBusyError(
                    unit,
                    f"sqlite store {self.path}",
                    other,
                    until=f"lock file {path}, released when that process ends",
                ) from None
            os.ftruncate(fd, 0)
            os.pwrite(fd, json.dumps(holder.as_dict()).encode("utf-8"), 0)
            self._leases[unit] = (fd, holder.id)

    def renew_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        with self._lock:
            held = self._leases.get(unit)
            if held is None or held[1] != holder.id:
                raise UnitBusyError(unit, f"sqlite store {self.path}", None, lost=True)

    def release_lease(self, unit: str, holder: LeaseHolder) -> None:
        with self._lock:
            held = self._leases.get(unit)
            if held is None or held[1] != holder.id:
                return
            del self._leases[unit]
            if held[0] >= 0:
                os.close(held[0])  # closing the only descriptor releases the flock

    def close(self) -> None:
        with self._lock:
            for fd, _ in self._leases.values():
                if fd >= 0:
                    os.close(fd)
            self._leases.clear()
            if not getattr(self, "_closed", True):
                self._closed = True
                self._db.close()
