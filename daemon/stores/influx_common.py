"""What the two InfluxDB stores share: line protocol building, error classes, worker state."""

from __future__ import annotations

import datetime as dt
import json
import re
import threading
import time
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import requests

from isentrope.daemon.redact import redact
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common, escape
from isentrope.daemon.stores.base import (
    DEFAULT_TIMEOUT_S,
    AuthorizationError,
    CertificateError,
    FatalStoreError,
    LeaseHolder,
    TemporaryStoreError,
    UnitBusyError,
)
from isentrope.daemon.stores.options import Option, http_url, pem_file

#: Measurement holding checkpoints and saved state: tags ``kind`` ("checkpoint" or "state")
#: and ``name``; one string field ``value`` (ISO time or JSON). Each save is a new point at the
#: time of saving; reads take the last one.
STATE_MEASUREMENT = "isentrope_worker"

#: Write targets of ``LineProtocolWriter``: raw samples, and everything the worker writes
#: (results, checkpoints, state).
RAW, RESULTS = "raw", "results"

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
    (whatever the status), are fatal: no retry changes them. A write's type conflict is a
    ``FieldTypeConflictError``. The whole answer is classified; only its first
    ``_SHOWN_BODY`` characters go into the message.
    """
    full = redact((body or "").strip().replace("\n", " "))  # a proxy may echo the credentials
    shown = full if len(full) <= _SHOWN_BODY else full[:_SHOWN_BODY] + "..."
    lower = full.lower()
    if any(s in lower for s in _TYPE_CONFLICT_BODY):
        m = _WRITE_CONFLICT.search(full)
        if m:
            return FieldTypeConflictError(
                what,
                status,
                shown,
                m["field"],
                m["measurement"],
                m["held"],
                m["given"],
                partial="partial write" in lower,
                dropped=_dropped(full),
            )
        return FatalStoreError(f"{what}: HTTP {status}: {type_conflict_text(full)} (server: {shown})")
    msg = f"{what}: HTTP {status}: {shown}"
    if status in (401, 403):
        return AuthorizationError(msg)
    if status in _TEMPORARY_STATUS or status >= 500:
        if any(s in lower for s in _FATAL_BODY):
            return FatalStoreError(msg)
        return TemporaryStoreError(msg)
    return FatalStoreError(msg)


def check_client_arguments(url: str, batch_size: int) -> None:
    """What both InfluxDB stores' constructors refuse: a URL that is not http(s), a batch under 1."""
    if not url.startswith(("http://", "https://")):
        raise ValueError(f"url {url!r} must start with http:// or https://")
    if batch_size < 1:
        raise ValueError(f"batch_size must be at least 1, found {batch_size}")


def tls_verify(verify_ssl: bool, ca_bundle: str = "") -> bool | str:
    """What both InfluxDB stores check the server's TLS certificate against: False (no check),
    the PEM file ``ca_bundle``, or else the CA bundle that requests ships (certifi's). Never the
    environment (REQUESTS_CA_BUNDLE, CURL_CA_BUNDLE, SSL_CERT_FILE, SSL_CERT_DIR): the v1 store
    (requests) would read the first two and the v2 store (urllib3, OpenSSL's defaults) the last
    two, so the same setting would trust different CAs on the two stores."""
    if not verify_ssl:
        return False
    if ca_bundle:
        if not Path(ca_bundle).is_file():
            raise ValueError(f"ca_bundle {str(ca_bundle)!r} is not a file (a PEM file of CA certificates)")
        return str(ca_bundle)
    return requests.certs.where()


#: Lines per write request, the default of ``[store] batch_size``: InfluxDB's guidance on
#: writing names 5,000 lines as the best batch size (InfluxDB documentation, "Optimize
#: writes"; from memory).
DEFAULT_BATCH_SIZE = 5000

#: The ``[store]`` options of both InfluxDB kinds (their connection), read first.
CONNECTION_OPTIONS = (
    Option("url", check=http_url),
    Option("verify_ssl", "bool", default=True),
    Option("ca_bundle", default=None, path=True, check=pem_file),
    Option("timeout", "duration", default=dt.timedelta(seconds=DEFAULT_TIMEOUT_S), low=0, low_open=True),
    Option("batch_size", "int", default=DEFAULT_BATCH_SIZE, low=1),
)

#: ``Store.NAME_CHECKS`` of both InfluxDB kinds: line protocol writes every name, InfluxQL and
#: Flux read the unit name back as a string.
NAME_CHECKS = {
    "unit": (escape.lp_tag_value, escape.influxql_string, escape.flux_string),
    "measurement": (escape.lp_measurement,),
    "field": (escape.lp_field_key,),
    "tag_key": (escape.lp_tag_key,),
    "tag_value": (escape.lp_tag_value,),
}


def check_connection(values: Mapping, given: set[str], problem) -> None:
    """``check_options`` of ``CONNECTION_OPTIONS``: a CA bundle with ``verify_ssl = false``."""
    if values["ca_bundle"] is not None and not values["verify_ssl"]:
        problem("ca_bundle", "verify_ssl = false checks no certificate: give one of the two")


_VERIFY_FAILED = re.compile(r"certificate verify failed:?\s*(.*?)\s*(?:\(_ssl\.c|['\"]|$)", re.IGNORECASE)


def certificate_detail(exc: BaseException) -> str | None:
    """Why the server's certificate was refused ("self-signed certificate", ...), when ``exc``
    (or an exception it wraps: requests and urllib3 nest them) is a verification failure."""
    seen: list[BaseException] = []
    todo: list = [exc]
    while todo and len(seen) < 12:
        e = todo.pop()
        if not isinstance(e, BaseException) or any(e is s for s in seen):
            continue
        seen.append(e)
        m = _VERIFY_FAILED.search(str(e))
        if m:
            return m.group(1).rstrip(". ")
        todo += [e.__cause__, e.__context__, getattr(e, "reason", None), *e.args]
    return None


def certificate_failure(exc: BaseException, where: str) -> CertificateError | None:
    """A ``CertificateError`` for a certificate verification failure, else None."""
    detail = certificate_detail(exc)
    if detail is None:
        return None
    return CertificateError(
        f"{where}: certificate verify failed{': ' + detail if detail else ''}. The server's TLS "
        "certificate is not trusted: give [store] ca_bundle (the PEM file of the CA that signed it) "
        "or correct [store] url; verify_ssl = false switches the check off (not advised)"
    )


def authorization_error(
    status: int, body: str, what: str, credentials: str, needs: str
) -> AuthorizationError:
    """The error of a 401 or 403 answer: a configuration error (nothing a retry changes) that names
    the configuration keys of the credentials and what they lack, and never shows a secret. Also
    for a 404 "bucket not found" of InfluxDB 2.x to a token: it answers so both for a bucket that
    does not exist and for one the token may not read (measured on 2.9.1).

    ``credentials``: where the credentials are configured ("[store] token or token_file");
    ``needs``: what the call needs ("read access to bucket 'plant' ([store] bucket)"). The
    server's answer is shown redacted (``isentrope.daemon.redact``: it may repeat the headers).
    """
    shown = redact((body or "").strip().replace("\n", " "))[:_SHOWN_BODY]
    if status == 401:
        lacks = (
            f"the server did not accept the credentials of {credentials} (wrong, expired, revoked or "
            f"not given); the call needs {needs}"
        )
    elif status == 404:
        lacks = (
            f"{needs} failed: the bucket does not exist, or the credentials of {credentials} may not "
            "see it (the server gives the same answer for both)"
        )
    else:
        lacks = f"the credentials of {credentials} are valid but lack {needs}"
    return AuthorizationError(
        f"{what}: HTTP {status}: {lacks}. This is a configuration error: not retried; fix the "
        f"credentials or their permissions and start again (server: {shown})"
    )


def _dropped(body: str) -> int | None:
    m = re.search(r"dropped=(\d+)", body)
    return int(m.group(1)) if m else None


def _time_text(t: pd.Timestamp) -> str:
    """RFC 3339 UTC with a Z, nanoseconds only where there are any: how InfluxQL takes a time."""
    t = pd.Timestamp(t).tz_convert("UTC")
    frac = f".{t.value % 1_000_000_000:09d}".rstrip("0").rstrip(".")
    return t.strftime("%Y-%m-%dT%H:%M:%S") + frac + "Z"


def influxql_time(t: pd.Timestamp) -> str:
    """An InfluxQL time literal for a message: ``'2026-03-02T00:00:00Z'``."""
    return escape.influxql_string(_time_text(t))


def clear_type_text(measurement: str | None, field: str | None, held: str, at: str) -> str:
    """How to clear a field's type from the shards (blocks of time) holding ``at``, losing nothing.

    Measured on the test servers (tests/daemon/stores/test_type_conflicts.py): a block keeps a
    field's type while it holds any point of the measurement, in any series, so deleting the
    text points alone (or one series) does not clear it, and on influxd 1.8.10 Flux then
    misses the numbers after that block without an error. influxd 1.8.10 forgets the type once
    every point of the measurement in the block is deleted; 1.6.7 keeps it even then, and only
    DROP SHARD (every measurement of the block) clears it. 1.8.10 has no /api/v2/delete (404).
    The InfluxDB 2.x command is from memory.
    """
    m = _identifier(measurement) if measurement else '"<measurement>"'
    f = _identifier(field) if field else '"<field>"'
    window = "time >= '<start_time>' AND time < '<end_time>'"
    name = m if not measurement else _quoted(escape.lp_string_value, measurement)
    return (
        f"A block keeps a field's type while it holds any point of the measurement, in any series, so "
        f"deleting only the text points (or one series) does not clear it. To clear it and lose nothing: "
        f"`SHOW SHARDS` gives the block [start_time, end_time) holding {at}; "
        f"`SELECT {f}::{held} FROM {m} WHERE {window} GROUP BY *` lists its {held} points and their series; "
        f"export every point of the measurement in the block, all series and fields "
        f"(`SELECT * FROM {m} WHERE {window} GROUP BY *`), then delete exactly those: on influxd 1.8 "
        f"`DELETE FROM {m} WHERE {window}` (InfluxQL through /query; 1.8 has no /api/v2/delete); on "
        f"influxd 1.6 that leaves the type, and only `DROP SHARD <id>` clears it (it removes every "
        f"measurement of the block: export `SELECT * FROM /.*/ WHERE {window} GROUP BY *` first); on "
        f"InfluxDB 2.x `influx delete --bucket <bucket> --start <start_time> --stop <end_time> "
        f"--predicate '_measurement={name}'` or POST /api/v2/delete (from memory). Then write the export "
        f"back with numbers, or nothing, where the text was"
    )


def type_conflict_text(body: str) -> str:
    """What a type-conflict answer means and how to clear it, naming field and measurement when
    the server does (``FieldTypeConflictError`` for a write the server refused)."""
    m = _WRITE_CONFLICT.search(body)
    if m:
        return FieldTypeConflictError(
            "",
            0,
            body,
            m["field"],
            m["measurement"],
            m["held"],
            m["given"],
            partial="partial write" in body.lower(),
        ).explanation()
    m = _READ_CONFLICT.search(body)
    types = f"{m['a']} and {m['b']}" if m else "two types of"
    return (
        f"the values read here are {types} values: a field holds text where numbers belong, or one field has "
        "two types in different shards (blocks of time); no retry changes that. SHOW FIELD KEYS FROM "
        '"<measurement>" lists each field\'s types. '
        + clear_type_text(None, None, "<type>", "the points of the wrong type")
    )


class FieldTypeConflictError(FatalStoreError):
    """A write refused because the field holds another type in the shard of its points.

    ``refused``: (series key, first time, last time, count) of the batch's lines that carry the
    field, filled in by ``keep_unwritten`` when the store knows the batch; the message then
    names them and the times to look up.
    """

    def __init__(
        self,
        what: str,
        status: int,
        shown: str,
        field: str,
        measurement: str,
        held: str,
        given: str,
        partial: bool = False,
        dropped: int | None = None,
    ):
        self.what, self.status, self.shown = what, status, shown
        self.field, self.measurement, self.held, self.given = field, measurement, held, given
        self.partial, self.dropped = partial, dropped
        self.refused: list[tuple[str, pd.Timestamp, pd.Timestamp, int]] = []
        super().__init__(self._message())

    def explanation(self) -> str:
        n = self.dropped
        dropped = f"{n} point{'s' if n != 1 else ''} dropped" if n is not None else "dropped"
        written = "; the server wrote the other points of the batch" if self.partial else ""
        text = (
            f"field {self.field!r} of measurement {self.measurement!r} already holds {self.held} values in the "
            f"shard (block of time) these {self.given} points belong to, so the server refused them ({dropped} "
            f"whole, other fields included{written}); no retry changes that."
        )
        if self.refused:
            parts = [
                f"{key}: {n} point{'s' if n != 1 else ''} "
                + _time_text(first)
                + (f" to {_time_text(last)}" if last != first else "")
                for key, first, last, n in self.refused
            ]
            text += f" The batch's points with that field: {'; '.join(parts)}."
            at = "each of those times"
        else:
            at = "the times of these points"
        return (
            f"{text} {clear_type_text(self.measurement, self.field, self.held, at)}, and these points again"
        )

    def _message(self) -> str:
        return f"{self.what}: HTTP {self.status}: {self.explanation()} (server: {self.shown})"

    def note_batch(self, lines: Sequence[str]) -> None:
        """Name the series and times of the batch's lines that carry the field (the refused ones
        are among them: the server says how many, not which)."""
        try:
            prefix = escape.lp_measurement(self.measurement)
            key = escape.lp_field_key(self.field) + "="
        except ValueError:
            return
        found: dict[str, list[int]] = {}
        for line in lines:
            series, _, rest = _split_unescaped_space(line)
            if series.split(",", 1)[0] != prefix and not series.startswith(prefix + ","):
                continue
            fields, _, stamp = rest.rpartition(" ")
            if not (fields.startswith(key) or ("," + key) in fields) or not stamp.isdigit():
                continue
            found.setdefault(series, []).append(int(stamp))
        self.refused = [
            (series, pd.Timestamp(min(t), tz="UTC"), pd.Timestamp(max(t), tz="UTC"), len(t))
            for series, t in found.items()
        ]
        self.args = (redact(self._message()),)


def _split_unescaped_space(line: str) -> tuple[str, str, str]:
    """(series key, " ", rest) at the first space not escaped by a backslash."""
    m = re.search(r"(?<!\\) ", line)
    if not m:
        return line, "", ""
    return line[: m.start()], " ", line[m.end() :]


def _quoted(quote, name: str) -> str:
    """``quote(name)`` (an ``escape`` helper), or the name in plain double quotes where the helper
    refuses it: messages quote names taken from a server answer too, and must not raise."""
    try:
        return quote(name)
    except ValueError:
        return '"' + name.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _identifier(name: str) -> str:
    return _quoted(escape.influxql_identifier, name)


def keep_unwritten(store, err: Exception, lines: list[str]) -> None:
    """After a failed batch: the lines not written (that batch and the rest) go on ``err.unwritten``.

    A temporary failure also keeps them in ``store.pending``, sent first by the next write, so
    nothing is lost while the server is away. A fatal one does not (the same lines would fail
    again and block every later write); the caller gets them on the exception. A type conflict
    names the series and times of the failed batch (its first ``store.batch_size`` lines).
    """
    err.unwritten = list(lines)
    store.pending = list(lines) if isinstance(err, TemporaryStoreError) else []
    if isinstance(err, FieldTypeConflictError):
        err.note_batch(lines[: getattr(store, "batch_size", len(lines))])


#: Longest lease a holder may take; lease points older than this plus an hour are not read.
LEASE_LONGEST = pd.Timedelta(days=1)

#: Seconds between writing a lease claim and reading the claims back. Two claims are settled by
#: their ``since`` times (earliest wins), which is safe when every claim written before a
#: reader's ``since`` is readable when that reader looks: the pause must exceed the time a write
#: takes to become readable and the clock difference between the hosts (NTP keeps it to
#: milliseconds). Project choice, no source.
LEASE_CONFIRM_DELAY = 1.0


class StateOnPoints:
    """Checkpoints and worker state on an InfluxDB store: points of ``STATE_MEASUREMENT``.

    A save is a new point (tags ``kind`` and ``name``, a string field ``value``) at a strictly
    increasing time (``StateClock``), so a load is the series' last point: checkpoints as ISO
    8601 text, states as JSON. Nothing is overwritten, so an interrupted save loses nothing.

    Subclasses give ``_last_state(kind, name)`` (the last value, None when there is none) and
    ``_write(lines, what)``, and a ``StateClock`` as ``self._clock`` (``init_writer`` sets it).
    """

    def _last_state(self, kind: str, name: str) -> str | None:  # pragma: no cover
        raise NotImplementedError

    def _save_state(self, kind: str, name: str, value: str) -> None:
        self._write([state_line(kind, name, value, self._clock.next())], f"save {kind} {name!r}")

    def get_checkpoint(self, name: str) -> pd.Timestamp | None:
        v = self._last_state("checkpoint", name)
        return None if v is None else common.utc(v, f"checkpoint {name!r}")

    def set_checkpoint(self, name: str, time) -> None:
        self._save_state("checkpoint", name, common.utc(time, "checkpoint time").isoformat())

    def load_state(self, name: str) -> dict:
        v = self._last_state("state", name)
        return {} if v is None else json.loads(v)

    def save_state(self, name: str, state: Mapping) -> None:
        if not isinstance(state, Mapping):
            raise ValueError(f"state {name!r} must be a mapping, found {type(state).__name__}")
        self._save_state("state", name, json.dumps(dict(state), allow_nan=False, sort_keys=True))


class LeaseOnState(StateOnPoints):
    """One worker per unit on an InfluxDB store: lease points in ``STATE_MEASUREMENT``.

    Each claim, renewal and release is a point of the series (kind "lease", name = unit) whose
    value is JSON: the holder (``LeaseHolder``), ``since`` (when it asked) and ``expires``.
    A holder's state is its last point. To take a unit a holder writes a claim, waits
    ``LEASE_CONFIRM_DELAY`` and reads every claim of the last ``LEASE_LONGEST``; of the
    unexpired ones, the earliest ``since`` (then the holder id) wins; a loser writes its claim
    as released and is refused with the winner's name. A renewal first reads: another holder
    in front (this one's lease ran out, e.g. the process was frozen) means the unit is lost.
    A crashed holder stops holding when its lease expires, or at once when it ran on this
    host and its process is gone (``LeaseHolder.vanished``). Hosts' clocks must agree to well
    under the lease and the confirmation pause.

    Subclasses give, besides what ``StateOnPoints`` needs, ``_lease_values(unit, after)``: the
    values of the unit's lease points after ``after``, in time order.
    """

    def _lease_values(self, unit: str, after: pd.Timestamp) -> list[str]:  # pragma: no cover
        raise NotImplementedError

    def _lease_write(self, unit: str, holder: LeaseHolder, since, expires) -> None:
        record = {**holder.as_dict(), "since": since.isoformat(), "expires": expires.isoformat()}
        self._save_state("lease", unit, json.dumps(record, sort_keys=True))

    def _lease_claims(
        self, unit: str, now: pd.Timestamp
    ) -> list[tuple[pd.Timestamp, str, LeaseHolder, pd.Timestamp]]:
        """Unexpired claims as (since, holder id, holder, expires), earliest first."""
        last: dict[str, dict] = {}
        for text in self._lease_values(unit, now - LEASE_LONGEST - pd.Timedelta(hours=1)):
            try:
                d = json.loads(text)
                holder = LeaseHolder.from_dict(d)
                last[holder.id] = {
                    "holder": holder,
                    "since": pd.Timestamp(d["since"]),
                    "expires": pd.Timestamp(d["expires"]),
                }
            except (ValueError, KeyError, TypeError):
                continue  # not a lease record of ours: ignored
        claims = [
            (c["since"], hid, c["holder"], c["expires"])
            for hid, c in last.items()
            if c["expires"] > now and not c["holder"].vanished()  # a killed holder on this host
        ]
        return sorted(claims, key=lambda c: (c[0], c[1]))

    def acquire_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        escape.check_name(unit, "unit name")
        lease = pd.Timedelta(lease)
        if not pd.Timedelta(0) < lease <= LEASE_LONGEST:
            raise ValueError(f"a lease must be longer than 0 s and at most {LEASE_LONGEST}, found {lease}")
        held = self.__dict__.setdefault("_held_leases", {})  # unit -> (since, expires)
        if unit in held:
            self.renew_lease(unit, holder, lease)
            return
        since = pd.Timestamp.now(tz="UTC")
        self._lease_write(unit, holder, since, since + lease)
        time.sleep(LEASE_CONFIRM_DELAY)
        claims = self._lease_claims(unit, pd.Timestamp.now(tz="UTC"))
        first = claims[0] if claims else None
        if first is not None and first[1] != holder.id:
            self._lease_write(unit, holder, since, since)  # withdrawn: expired at once
            raise UnitBusyError(unit, repr(self), first[2], first[3])
        held[unit] = (since, since + lease)

    def renew_lease(self, unit: str, holder: LeaseHolder, lease: pd.Timedelta) -> None:
        held = self.__dict__.setdefault("_held_leases", {})
        if unit not in held:
            raise UnitBusyError(unit, repr(self), None, lost=True)
        since, expires = held[unit]
        now = pd.Timestamp.now(tz="UTC")
        # A claim made so late that its holder read the claims after this lease had run out
        # has taken the unit; earlier claims saw this one and withdrew (or will).
        late = [
            c
            for c in self._lease_claims(unit, now)
            if c[1] != holder.id and c[0] + pd.Timedelta(seconds=LEASE_CONFIRM_DELAY) >= expires
        ]
        if late:
            held.pop(unit, None)
            raise UnitBusyError(unit, repr(self), late[0][2], late[0][3], lost=True)
        new_expiry = now + pd.Timedelta(lease)
        self._lease_write(unit, holder, since, new_expiry)
        held[unit] = (since, new_expiry)

    def release_lease(self, unit: str, holder: LeaseHolder) -> None:
        held = self.__dict__.setdefault("_held_leases", {})
        entry = held.pop(unit, None)
        if entry is not None:
            self._lease_write(unit, holder, entry[0], entry[0])


class LineProtocolWriter:
    """What both InfluxDB stores share on the write side: raw samples and results as line protocol, sent
    in batches of ``batch_size`` under one lock, with unwritten lines kept (``keep_unwritten``).

    A store using it calls ``init_writer`` (``batch_size``, ``pending``, the lock) and implements
    ``_send_batch(text, what, target)``, raising ``TemporaryStoreError`` or ``FatalStoreError``.
    ``target`` is ``RAW`` for raw samples and ``RESULTS`` for results, checkpoints and state: a
    store that keeps them apart (``Influx2Store`` with ``results_bucket``) sends each to its own
    place. Lines kept in ``pending`` are for one target (``pending_target``); a write to the
    other target sends them first.

    ``write_behind``: the server parses and stores the lines in its own process, so the
    worker sends a chunk's results from a second thread while it computes the next one
    (``prepare_results`` formats the lines first, in the worker's own thread). Reads and writes
    go through thread-safe HTTP connection pools (urllib3; requests' adapter for the v1 API).
    """

    write_behind = True
    pending_target = RESULTS

    def init_writer(self, timeout: float, batch_size: int, read_chunk) -> None:
        """Set what both stores keep for their requests and writes: ``timeout`` [s],
        ``batch_size``, ``read_chunk`` (a ``Timedelta``), no ``pending`` lines, the write lock
        and the clock of the state points."""
        self.timeout = float(timeout)
        self.batch_size = int(batch_size)
        self.read_chunk = pd.Timedelta(read_chunk)
        self.pending: list[str] = []
        self._write_lock = threading.Lock()
        self._clock = StateClock()

    def write_raw(self, mappings, frame) -> int:
        lines, samples = raw_lines(mappings, frame)
        self._write(lines, "write_raw", RAW)
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

    def _write(self, lines: list[str], what: str, target: str = RESULTS) -> None:
        with self._write_lock:  # the worker may write from scheduler threads
            if self.pending and self.pending_target != target:
                try:  # kept lines of the other target first, to their own place
                    self._send_all([], what, self.pending_target)
                except (TemporaryStoreError, FatalStoreError) as err:
                    err.unwritten = err.unwritten + list(lines)  # these were not sent either
                    raise
            self._send_all(lines, what, target)

    def _send_all(self, lines: list[str], what: str, target: str) -> None:
        """``pending`` (lines of ``target``), then ``lines``, in batches; on failure the rest is
        kept (``keep_unwritten``) for ``target``."""
        todo = self.pending + list(lines)
        self.pending = []
        for i in range(0, len(todo), self.batch_size):
            try:
                self._send_batch("\n".join(todo[i : i + self.batch_size]), what, target)
            except (TemporaryStoreError, FatalStoreError) as err:
                self.pending_target = target
                keep_unwritten(self, err, todo[i:])
                raise

    def _send_batch(self, text: str, what: str, target: str) -> None:  # pragma: no cover - abstract
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


def _lines(
    series_key: str, field_keys: Sequence[str], values: np.ndarray, times: np.ndarray
) -> tuple[list[str], int]:
    values = values.copy()
    values[~np.isfinite(values)] = np.nan
    cols = [
        [None if s is None else f"{k}={s}" for s in _format_column(values[:, j])]
        for j, k in enumerate(field_keys)
    ]
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
    return _lines(
        key,
        [escape.lp_field_key(f) for f in fields],
        common.results_matrix(frame, fields),
        common.epoch_ns(idx),
    )


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
        raise ValueError(
            f"{kind} {name!r} is {len(value.encode())} bytes; InfluxDB keeps string fields under 64 KiB"
        )
    key = escape.lp_series_key(STATE_MEASUREMENT, {"kind": kind, "name": name})
    return f"{key} value={escape.lp_string_value(value)} {t_ns}"


def delete_statement(
    measurement: str, start: pd.Timestamp, end: pd.Timestamp, tags: Mapping[str, str]
) -> str:
    """InfluxQL DELETE of the points of ``measurement`` in ``[start, end)`` whose tags include
    ``tags`` (every name quoted by ``escape``; times as integer nanoseconds)."""
    conds = [
        f"{escape.influxql_identifier(k, 'tag key')} = {escape.influxql_string(v)}" for k, v in tags.items()
    ]
    conds += [f"time >= {int(start.value)}", f"time < {int(end.value)}"]
    return f"DELETE FROM {escape.influxql_identifier(measurement, 'measurement')} WHERE {' AND '.join(conds)}"


def time_windows(
    start: pd.Timestamp, end: pd.Timestamp, chunk: pd.Timedelta
) -> Iterator[tuple[pd.Timestamp, pd.Timestamp]]:
    """Split [start, end) into pieces no longer than ``chunk`` (bounded memory per request)."""
    t = start
    while t < end:
        u = min(t + chunk, end)
        yield t, u
        t = u
