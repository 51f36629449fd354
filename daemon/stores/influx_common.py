"""What the two InfluxDB stores share: line protocol building, error classes, worker state."""

from __future__ import annotations

import re
import threading
import time
from collections.abc import Iterator, Mapping, Sequence

import numpy as np
import pandas as pd

from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common, escape
from isentrope.daemon.stores.base import FatalStoreError, TemporaryStoreError

#: Measurement holding checkpoints and saved state: tags ``kind`` ("checkpoint" or "state")
#: and ``name``; one string field ``value`` (ISO time or JSON). Each save is a new point at the
#: time of saving; reads take the last one.
STATE_MEASUREMENT = "isentrope_worker"

#: 1.x refuses string fields longer than this (64 KiB) [bytes].
MAX_STRING_FIELD = 64 * 1024

_TEMPORARY_STATUS = {408, 429, 500, 502, 503, 504}
#: Bodies of a 5xx that mean the target does not exist, which no retry fixes.
_FATAL_BODY = ("database not found", "no database", "bucket not found", "retention policy not found")
#: Bodies that mean a field holds values of two types. InfluxDB keeps one type per field of a
#: measurement in each shard (a block of time: 7 days for a retention policy or bucket kept
#: longer than 6 months, 1 day down to 2 days, 1 hour below: the documented defaults, from
#: memory; 7 days measured for "autogen"), so a float written where that shard already holds the
#: field as a string is refused (1.6.7 and 1.8.10, v1 and v2 API: 400 "partial write: field type
#: conflict: input field "F" on measurement "M" is type float, already exists as type string
#: dropped=N"; the other points of the batch are written), and a Flux read that puts both types
#: in one column fails (1.8.10: 500 "schema collision detected: column "_value" is both of type
#: float and string"). Measured on those servers (tests/daemon/stores/test_type_conflicts.py);
#: no retry changes either answer.
_TYPE_CONFLICT_BODY = ("field type conflict", "schema collision")
_WRITE_CONFLICT = re.compile(
    r'input field \\?"(?P<field>.*?)\\?" on measurement \\?"(?P<measurement>.*?)\\?" is type (?P<given>\w+), '
    r"already exists as type (?P<held>\w+)"
)
_READ_CONFLICT = re.compile(r"both of type (?P<a>\w+) and (?P<b>\w+)")


#: Characters of a server answer shown in an error message (the whole answer is classified).
_SHOWN_BODY = 300


def classify_http(status: int, body: str, what: str) -> Exception:
    """TemporaryStoreError for 408/429/5xx, FatalStoreError for the rest (401, 403, 404, 400...).

    A 5xx that names a missing target, and a field type conflict or a Flux schema collision
    (whatever the status), are fatal: no retry changes them. The whole answer is classified;
    only its first ``_SHOWN_BODY`` characters go into the message.
    """
    full = (body or "").strip().replace("\n", " ")
    shown = full if len(full) <= _SHOWN_BODY else full[:_SHOWN_BODY] + "..."
    lower = full.lower()
    if any(s in lower for s in _TYPE_CONFLICT_BODY):
        return FatalStoreError(f"{what}: HTTP {status}: {type_conflict_text(full)} (server: {shown})")
    msg = f"{what}: HTTP {status}: {shown}"
    if status in _TEMPORARY_STATUS or status >= 500:
        if any(s in lower for s in _FATAL_BODY):
            return FatalStoreError(msg)
        return TemporaryStoreError(msg)
    return FatalStoreError(msg)


def type_conflict_text(body: str) -> str:
    """What a type-conflict answer means and how to clear it, naming field and measurement when
    the server does. The cure was measured on 1.8.10: a shard forgets a field's type once it
    holds no point of that measurement any more, and then takes the other type."""
    m = _WRITE_CONFLICT.search(body)
    if m:
        field, measurement, held, given = m["field"], m["measurement"], m["held"], m["given"]
        written = " (the server wrote the other points of the batch)" if "partial write" in body.lower() else ""
        listing = f"SELECT {quote_for_message(field)}::{held} FROM {quote_for_message(measurement)}"
        return (f"field {field!r} of measurement {measurement!r} already holds {held} values in the shard (block "
                f"of time) these {given} points belong to, so the server refused them{written}; no retry changes "
                f"that. Find those times with {listing}, delete those points (InfluxQL DELETE FROM ... WHERE "
                "time >= ... AND time < ... removes whole points: export their other fields first), then write again")
    m = _READ_CONFLICT.search(body)
    types = f"{m['a']} and {m['b']}" if m else "two types of"
    return (f"the values read here are {types} values: a field holds text where numbers belong, or one field has "
            "two types in different shards (blocks of time); no retry changes that. SHOW FIELD KEYS FROM "
            "<measurement> lists each field's types; delete or rewrite the points of the wrong type (InfluxQL DELETE "
            "FROM ... WHERE time >= ... AND time < ... removes whole points: export their other fields first)")


def quote_for_message(name: str) -> str:
    """An InfluxQL identifier for a message (names taken from a server answer; never raises)."""
    return '"' + name.replace("\\", "\\\\").replace('"', '\\"') + '"'


def keep_unwritten(store, err: Exception, lines: list[str]) -> None:
    """After a failed batch: the lines not written (that batch and the rest) go on ``err.unwritten``.

    A temporary failure also keeps them in ``store.pending``, sent first by the next write, so
    nothing is lost while the server is away. A fatal one does not (the same lines would fail
    again and block every later write); the caller gets them on the exception.
    """
    err.unwritten = list(lines)
    store.pending = list(lines) if isinstance(err, TemporaryStoreError) else []


class LineProtocolWriter:
    """What both InfluxDB stores share on the write side: raw samples and results as line protocol, sent
    in batches of ``batch_size`` under one lock, with unwritten lines kept (``keep_unwritten``).

    A store using it sets ``batch_size``, ``pending`` (list) and ``_write_lock`` and implements
    ``_send_batch(text, what)``, raising ``TemporaryStoreError`` or ``FatalStoreError``.

    ``write_behind``: the server parses and stores the lines in its own process, so the
    worker sends a chunk's results from a second thread while it computes the next one
    (``prepare_results`` formats the lines first, in the worker's own thread). Reads and writes
    go through thread-safe HTTP connection pools (urllib3; requests' adapter for the v1 API).
    """

    write_behind = True

    def write_raw(self, mappings, frame) -> int:
        lines, samples = raw_lines(mappings, frame)
        self._write(lines, "write_raw")
        return samples

    def write_results(self, measurement, frame, tags) -> int:
        return self.write_prepared(self.prepare_results(measurement, frame, tags))

    def prepare_results(self, measurement, frame, tags):
        """The line protocol of ``write_results`` (checks included), built in the calling
        thread: formatting is Python work, and done in the write-behind thread it would
        compete with the next chunk's computation for the interpreter."""
        escape.check_name(measurement, "measurement")
        lines, n = result_lines(measurement, frame, tags)
        return measurement, lines, n

    def write_prepared(self, prepared) -> int:
        measurement, lines, n = prepared
        self._write(lines, f"write_results {measurement}")
        return n

    def _write(self, lines: list[str], what: str) -> None:
        with self._write_lock:  # the worker may write from scheduler threads
            todo = self.pending + list(lines)
            self.pending = []
            for i in range(0, len(todo), self.batch_size):
                try:
                    self._send_batch("\n".join(todo[i : i + self.batch_size]), what)
                except (TemporaryStoreError, FatalStoreError) as err:
                    keep_unwritten(self, err, todo[i:])
                    raise

    def _send_batch(self, text: str, what: str) -> None:  # pragma: no cover - abstract
        raise NotImplementedError


def _format_column(values: np.ndarray) -> list[str | None]:
    """repr() of each finite value (shortest exact form), None for NaN."""
    return [repr(v) if v == v else None for v in values.tolist()]


def raw_lines(mappings: Sequence[RoleMapping], frame: pd.DataFrame) -> tuple[list[str], int]:
    """Line protocol for a wide role frame: one line per (series, time) with that series' fields.

    Roles that share a measurement and tag set share a line. NaN/inf samples are left out.
    Returns (lines, samples).
    """
    mappings = common.check_mappings(mappings)
    idx = common.utc_index(frame, "raw frame")
    frame = frame.set_axis(idx, axis=0)
    by_role = {m.role: m for m in mappings}
    columns = common.wide_to_role_columns(mappings, frame)
    groups: dict[str, list[tuple[str, str]]] = {}
    for role in columns:
        m = by_role[role]
        key = escape.lp_series_key(m.measurement, common.check_tags(m.tags))
        groups.setdefault(key, []).append((escape.lp_field_key(m.field_name), role))
    lines: list[str] = []
    samples = 0
    for key, fields in groups.items():
        sub = pd.DataFrame({role: frame[role] for _, role in fields}).apply(pd.to_numeric, errors="coerce")
        sub = sub.astype("float64")
        lines_added, n = _lines(key, [f for f, _ in fields], sub.to_numpy(), common.epoch_ns(idx))
        lines += lines_added
        samples += n
    return lines, samples


def _lines(series_key: str, field_keys: Sequence[str], values: np.ndarray, times: np.ndarray) -> tuple[list[str], int]:
    values = values.copy()
    values[~np.isfinite(values)] = np.nan
    cols = [[None if s is None else f"{k}={s}" for s in _format_column(values[:, j])] for j, k in enumerate(field_keys)]
    prefix = series_key + " "
    lines = []
    for i, t in enumerate(times.tolist()):
        parts = [c[i] for c in cols if c[i] is not None]
        if parts:
            lines.append(f"{prefix}{','.join(parts)} {t}")
    return lines, int(np.count_nonzero(~np.isnan(values)))


def result_lines(measurement: str, frame: pd.DataFrame, tags: Mapping[str, str]) -> tuple[list[str], int]:
    """Line protocol for ``write_results``: numeric/bool columns as float fields; NaN left out."""
    if measurement == STATE_MEASUREMENT:
        raise ValueError(f"measurement {measurement!r} is reserved for the worker's checkpoint and state")
    key = escape.lp_series_key(measurement, common.check_tags(tags))
    idx = common.utc_index(frame, f"{measurement} results")
    fields = common.result_columns(frame)
    common.check_fields_vs_tags(fields, tags, measurement)
    if not fields or len(frame) == 0:
        return [], 0
    return _lines(key, [escape.lp_field_key(f) for f in fields], common.results_matrix(frame, fields), common.epoch_ns(idx))


def batches(lines: Sequence[str], size: int) -> Iterator[Sequence[str]]:
    for i in range(0, len(lines), size):
        yield lines[i : i + size]


class StateClock:
    """Strictly increasing ns timestamps for state points (so the latest save is the last point)."""

    def __init__(self):
        self._last = 0
        self._lock = threading.Lock()

    def next(self) -> int:
        with self._lock:
            self._last = max(time.time_ns(), self._last + 1)
            return self._last


def state_line(kind: str, name: str, value: str, t_ns: int) -> str:
    escape.check_name(name, f"{kind} name")
    if len(value.encode()) > MAX_STRING_FIELD - 16:
        raise ValueError(f"{kind} {name!r} is {len(value.encode())} bytes; InfluxDB keeps string fields under 64 KiB")
    key = escape.lp_series_key(STATE_MEASUREMENT, {"kind": kind, "name": name})
    return f"{key} value={escape.lp_string_value(value)} {t_ns}"


def time_windows(start: pd.Timestamp, end: pd.Timestamp, chunk: pd.Timedelta) -> Iterator[tuple[pd.Timestamp, pd.Timestamp]]:
    """Split [start, end) into pieces no longer than ``chunk`` (bounded memory per request)."""
    t = start
    while t < end:
        u = min(t + chunk, end)
        yield t, u
        t = u
