"""InfluxDB through its v2 HTTP API (influxdb-client): Flux reads, line protocol writes.

Tested against InfluxDB 2.9.1 (organisation, buckets, a token with read access to the raw
bucket and read/write access to the results bucket) and against influxd 1.8.10 with
``flux-enabled = true`` (org ignored, bucket ``"database/retention_policy"``, token
``"user:password"`` or empty when auth is off).

Buckets: raw samples are read from (and ``write_raw`` writes to) ``bucket``; results,
checkpoints and state go to ``results_bucket`` (``bucket`` when not given).

Authorisation: a 401 or 403 raises ``AuthorizationError`` (a ``FatalStoreError``, never retried)
naming the bucket, its configuration key and the access the call needed.

Reads: one Flux query per group of roles sharing a measurement and tag filters::

    from(bucket: "<bucket>")
      |> range(start: <start>, stop: <end>)                 // half-open [start, end)
      |> filter(fn: (r) => r._measurement == "<m>" and (r._field == "<f1>" or ...) and r["<tag>"] == "<v>")
      |> keep(columns: ["_time", "_field", "_value"])
      |> pivot(rowKey: ["_time"], columnKey: ["_field"], valueColumn: "_value")

every name quoted by ``escape.flux_string``. The response is fetched with ``query_raw`` as CSV
with only the ``#datatype`` annotation and parsed with pandas (``pandas.read_csv``), which is
several times faster than the client's record-by-record parser on a unit-year (see
tests/bench/bench_stores.py). The window is split into ``read_chunk`` pieces.

Fields that hold text: a read whose answer has a field of type string (or boolean) raises
``FatalStoreError`` naming the measurement, field, window and first such point. Reading those
points as missing samples would not be safe here: measured on influxd 1.8.10, its Flux reader
takes a field's type from the first shard (block of time) of the range and stops reading that
field, for every series of the measurement, at the first shard where the type differs, so the
numbers stored after it would be missed without notice. (``Influx1Store`` reads the numbers
and leaves the text out; that is the way to read such a database through 1.8.) A type change
from numbers to text later in the range returns no text at all, so it cannot be seen from here.
There is no ``group()`` before the pivot: it put every field in one ``_value`` column, and a text
field next to numeric ones made the whole read fail with "schema collision" (500).

Writes: the client's synchronous write API, ``batch_size`` lines per request, with the client's
retry (``WritesRetry``: 429/503 and connection errors, short exponential backoff). A batch that
still fails raises ``TemporaryStoreError``/``FatalStoreError`` with its lines (and the rest) on
``err.unwritten``; after a temporary failure they also stay in ``pending`` and go first in the
next write call.

Deletes (``delete_results``): ``/api/v2/delete`` with the predicate
``_measurement="<m>" AND <tag>="<value>"`` from ``start`` to ``end`` less 1 ns (the endpoint's
stop is taken as inclusive, so the window stays half-open either way). influxd 1.8 (OSS,
measured on 1.8.10) has no such endpoint and answers 404: the store then sends the same delete
as InfluxQL (``DELETE FROM ... WHERE ... AND time >= .. AND time < ..``) to the v1 ``/query``
endpoint that 1.8 serves, on the database of ``bucket`` ("db/rp"), and remembers to do so. A
server with neither raises ``FatalStoreError`` saying so. The v2 path was not tried on a 2.x
server here.

Token: ``token`` itself, or the name of an environment variable (``token_env``) or a file
(``token_file``) holding it; it never appears in ``repr`` or an error message.
"""

from __future__ import annotations

import io
import logging
import os
import re
from collections.abc import Mapping, Sequence
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd
import requests
import urllib3
from influxdb_client import InfluxDBClient, WritePrecision
from influxdb_client.client.exceptions import InfluxDBError
from influxdb_client.client.write.retry import WritesRetry
from influxdb_client.client.write_api import SYNCHRONOUS
from influxdb_client.domain.dialect import Dialect
from influxdb_client.rest import ApiException

from isentrope.daemon.redact import remember
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common, escape
from isentrope.daemon.stores.base import DEFAULT_TIMEOUT_S, FatalStoreError, Store, TemporaryStoreError
from isentrope.daemon.stores.influx_common import (
    CONNECTION_OPTIONS,
    DEFAULT_BATCH_SIZE,
    NAME_CHECKS,
    RAW,
    RESULTS,
    STATE_MEASUREMENT,
    LeaseOnState,
    LineProtocolWriter,
    authorization_error,
    certificate_detail,
    certificate_failure,
    check_client_arguments,
    check_connection,
    classify_http,
    clear_type_text,
    delete_statement,
    influxql_time,
    time_windows,
    tls_verify,
)
from isentrope.daemon.stores.options import Option

logger = logging.getLogger(__name__)

_DIALECT = Dialect(
    header=True, delimiter=",", annotations=["datatype"], comment_prefix="#", date_time_format="RFC3339Nano"
)

#: Flux column types that are numbers; a field column of another type holds text (or bools).
_NUMERIC_TYPES = ("double", "long", "unsignedLong")


class _Retry(WritesRetry):
    """The client's retry, which gives up at once when the server's certificate is refused: a
    configuration problem, which no retry fixes."""

    def increment(self, method=None, url=None, response=None, error=None, _pool=None, _stacktrace=None):
        if error is not None and certificate_detail(error) is not None:
            raise urllib3.exceptions.MaxRetryError(_pool, url, error)
        return super().increment(method, url, response, error, _pool, _stacktrace)


def _predicate_string(value: str) -> str:
    """A double-quoted string of the v2 delete predicate."""
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _predicate_key(key: str) -> str:
    """A tag key of the v2 delete predicate: bare when it is a plain word, else quoted."""
    return key if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", key) else _predicate_string(key)


def flux_time(t: pd.Timestamp) -> str:
    """RFC 3339 UTC time literal with nanoseconds, as Flux takes it."""
    t = t.tz_convert("UTC")
    return t.strftime("%Y-%m-%dT%H:%M:%S") + f".{t.value % 1_000_000_000:09d}Z"


class Influx2Store(LeaseOnState, LineProtocolWriter, Store):
    """Store on an InfluxDB v2 HTTP API.

    Parameters
    ----------
    url : str
        Server URL, e.g. ``https://influx.plant.example:8086``.
    org : str
        Organisation (ignored by 1.8 servers).
    bucket : str
        Bucket with the raw samples (``"db/rp"`` on 1.8); also the results' unless
        ``results_bucket`` is given.
    results_bucket : str, optional
        Bucket receiving results, checkpoints and state (empty: ``bucket``). A worker's token
        then needs read access to ``bucket`` and read and write access to ``results_bucket``.
    token : str, optional
        API token (``"user:password"`` on 1.8 with auth on).
    token_env, token_file : str, optional
        Read the token from this environment variable or file instead.
    verify_ssl : bool
        Verify the server's TLS certificate (https URLs).
    ca_bundle : str, optional
        PEM file of the CA certificates to trust (default: certifi's; see
        ``influx_common.tls_verify``: the environment is never read).
    timeout : float
        Seconds per HTTP request [s].
    batch_size : int
        Lines per write request.
    retries : int
        Client-level retries of one request (connection errors, 429, 503).
    read_chunk : str or Timedelta
        Longest time span per query.
    """

    kind = "influx2"
    OPTIONS = (
        *CONNECTION_OPTIONS,
        Option("org"),
        Option("bucket", check=partial(escape.check_name, what="bucket")),
        # given empty is a mistake (check_name refuses it); left out means 'bucket'
        Option("results_bucket", default="", check=partial(escape.check_name, what="results_bucket")),
        Option("token", secret=True),
    )
    NAME_CHECKS = {**NAME_CHECKS, "tag_key": (escape.lp_tag_key, escape.flux_tag_key)}

    @classmethod
    def check_options(cls, values, given, problem):
        check_connection(values, given, problem)

    def __init__(
        self,
        url: str,
        org: str,
        bucket: str,
        token: str = "",
        verify_ssl: bool = True,
        timeout: float = DEFAULT_TIMEOUT_S,
        batch_size: int = DEFAULT_BATCH_SIZE,
        token_env: str = "",
        token_file: str = "",
        retries: int = 2,
        read_chunk: str | pd.Timedelta = "31D",
        ca_bundle: str = "",
        results_bucket: str = "",
    ):
        check_client_arguments(url, batch_size)
        escape.check_name(bucket, "bucket")
        if results_bucket:
            escape.check_name(results_bucket, "results_bucket")
        if not token and token_env:
            if token_env not in os.environ:
                raise ValueError(f"token_env names the environment variable {token_env!r}, which is not set")
            token = os.environ[token_env]
        if not token and token_file:
            try:
                token = Path(token_file).read_text(encoding="utf-8").strip()
            except OSError as exc:
                raise ValueError(f"token_file {token_file!r} cannot be read: {exc.strerror}") from None
        self.url = url.rstrip("/")
        self.org = org
        self.bucket = bucket
        self.results_bucket = results_bucket or bucket
        self._token = token
        self.init_writer(timeout, batch_size, read_chunk)
        remember(token)
        verify = tls_verify(verify_ssl, ca_bundle)
        retry = _Retry(
            total=retries,
            retry_interval=0.2,
            max_retry_delay=2,
            max_retry_time=max(5.0, self.timeout),
            exponential_base=2,
        )
        self._client = InfluxDBClient(
            url=self.url,
            token=token or None,
            org=org or "-",
            timeout=int(self.timeout * 1000),
            verify_ssl=bool(verify),
            ssl_ca_cert=verify or None,
            retries=retry,
        )
        self._write_api = self._client.write_api(write_options=SYNCHRONOUS)
        self._delete_api = self._client.delete_api()
        self._token = token
        self._verify = verify  # False, or the CA file (tls_verify): for the v1 delete below
        self._v1_delete = False  # True once the server answered 404 on /api/v2/delete
        self._query_api = self._client.query_api()

    def __repr__(self) -> str:  # never the token
        results = f", results_bucket={self.results_bucket!r}" if self.results_bucket != self.bucket else ""
        return f"Influx2Store(url={self.url!r}, org={self.org!r}, bucket={self.bucket!r}{results})"

    def _bucket(self, target: str) -> str:
        return self.bucket if target == RAW else self.results_bucket

    def _bucket_key(self, target: str) -> str:
        """The configuration key naming the bucket of ``target``."""
        return (
            "[store] bucket"
            if target == RAW or self.results_bucket == self.bucket
            else "[store] results_bucket"
        )

    # --- errors --------------------------------------------------------------------------
    def _error(self, exc: Exception, what: str, target: str = RAW, access: str = "read") -> Exception:
        """The store error for an exception of the client while ``what`` needed ``access``
        ("read" or "write") to the bucket of ``target``."""
        bucket = self._bucket(target)
        where = f"{what} ({self.url}, bucket {bucket!r})"
        cert = certificate_failure(exc, where)
        if cert is not None:
            return cert
        status, body = None, ""
        if isinstance(exc, ApiException):
            status, body = exc.status, exc.body
            if isinstance(body, bytes):
                body = body.decode("utf-8", "replace")
            body = body or str(exc.reason)
        elif isinstance(exc, InfluxDBError):
            status = getattr(getattr(exc, "response", None), "status", None)
            body = getattr(exc, "message", "") or str(exc)
            if not status:
                return TemporaryStoreError(f"{where}: {type(exc).__name__}")
        lower = (body or "").lower()
        missing = status == 404 and "bucket" in lower and ("not found" in lower or "could not find" in lower)
        if status in (401, 403) or (missing and self._token):
            needs = f"{access} access to bucket {bucket!r} ({self._bucket_key(target)}) in org {self.org!r} ([store] org)"
            return authorization_error(status, body, where, "[store] token (or token_file)", needs)
        if status:
            return classify_http(status, body, where)
        if isinstance(exc, (urllib3.exceptions.HTTPError, OSError, TimeoutError)):
            return TemporaryStoreError(f"{where}: server unreachable: {type(exc).__name__}")
        return FatalStoreError(f"{where}: {type(exc).__name__}: {exc}")

    _CAUGHT = (ApiException, InfluxDBError, urllib3.exceptions.HTTPError, OSError, TimeoutError)

    # --- queries -------------------------------------------------------------------------
    def query_csv(self, flux: str, what: str = "query", target: str = RAW) -> list[pd.DataFrame]:
        """Run Flux; one DataFrame per CSV table block, its Flux column types (the ``#datatype``
        annotation) in ``block.attrs["datatype"]`` as {column: type}. ``target``: which bucket
        the query reads (``RAW`` or ``RESULTS``), for error messages."""
        try:
            resp = self._query_api.query_raw(flux, org=self.org or "-", dialect=_DIALECT)
            text = resp.data.decode("utf-8")
        except self._CAUGHT as exc:
            raise self._error(exc, what, target, "read") from None
        blocks = []
        for block in text.replace("\r\n", "\n").split("\n\n"):
            if not block.strip():
                continue
            types: list[str] = []
            if block.startswith("#datatype,"):
                first, _, block = block.partition("\n")
                types = first.split(",")  # names of types hold no comma; "#datatype" heads the empty column
            # only an empty cell is no value: text such as "n/a", "NA" or "null" stays text
            frame = pd.read_csv(io.StringIO(block), keep_default_na=False, na_values=[""])
            frame.attrs["datatype"] = dict(zip(frame.columns, types, strict=True))
            blocks.append(frame)
        return blocks

    def _refuse_text_fields(
        self,
        what: str,
        block: pd.DataFrame,
        inside: np.ndarray,
        fields: Sequence[str],
        measurement: str,
        tags: Mapping[str, str],
        lo: pd.Timestamp,
        hi: pd.Timestamp,
        target: str = RAW,
    ) -> None:
        """FatalStoreError when a field of ``block`` is not numeric in the server's answer and has
        a point in [lo, hi) (``inside``; see the module docstring: 1.8.10 would have left out the
        numbers stored after those points). Text only at ``hi`` is the next window's."""
        types = block.attrs.get("datatype", {})
        if not inside.any():
            return
        for field in fields:
            kind = types.get(field, "double")
            if kind in _NUMERIC_TYPES or field not in block.columns:
                continue
            present = block[field].notna().to_numpy()
            held = present & inside
            if present.any() and not held.any():
                continue  # its values lie at hi only
            if held.any():
                n = int(held.sum())
                first = str(block[field][held].iloc[0])
                first = first if len(first) <= 40 else first[:37] + "..."
                found = (
                    f"{n} point{'s' if n != 1 else ''}, the first at "
                    f"{self._block_times(block)[held][0].isoformat()} ({first!r})"
                )
            else:  # a text column without a value: empty strings, which the CSV shows as no value
                found = "empty strings (which points is not shown: the answer gives them as no value)"
            tag_text = f" ({', '.join(f'{k}={v!r}' for k, v in tags.items())})" if tags else ""
            where = " AND ".join(
                [
                    f"{escape.influxql_identifier(k, 'tag key')} = {escape.influxql_string(v)}"
                    for k, v in tags.items()
                ]
                + [f"time >= {influxql_time(lo)}", f"time < {influxql_time(hi)}"]
            )
            listing = (
                f"SELECT {escape.influxql_identifier(field, 'field')}::{kind} FROM "
                f"{escape.influxql_identifier(measurement, 'measurement')} WHERE {where}"
            )
            raise FatalStoreError(
                f"{what} ({self.url}, bucket {self._bucket(target)!r}): field {field!r} of measurement {measurement!r}"
                f"{tag_text} holds {kind} values, not numbers, in [{lo.isoformat()}, {hi.isoformat()}): "
                f"{found}. Nothing was read: on influxd 1.8 (measured on 1.8.10) the Flux reader stops reading a "
                "field where its type changes from one shard (block of time) to the next, for every series of the "
                "measurement, so numbers stored after those points would be missed without notice (InfluxDB 2.x "
                'was not tried). Read this database with kind = "influx1", which reads the numbers and leaves the '
                f"text out as missing samples, or clear the text: `{listing}` lists these points. "
                + clear_type_text(measurement, field, kind, "each of them")
            )

    def _filter(self, measurement: str, fields: Sequence[str] | None, tags: Mapping[str, str]) -> str:
        conds = [f"r._measurement == {escape.flux_string(measurement)}"]
        if fields:
            conds.append("(" + " or ".join(f"r._field == {escape.flux_string(f)}" for f in fields) + ")")
        conds += [f"r[{escape.flux_string(k)}] == {escape.flux_string(v)}" for k, v in tags.items()]
        return " and ".join(conds)

    def _pivot_query(
        self, measurement: str, fields, tags, lo: pd.Timestamp, hi: pd.Timestamp, target: str = RAW
    ) -> str:
        return (
            f"from(bucket: {escape.flux_string(self._bucket(target))})\n"
            f"  |> range(start: {flux_time(lo)}, stop: {flux_time(hi)})\n"
            f"  |> filter(fn: (r) => {self._filter(measurement, fields, tags)})\n"
            '  |> keep(columns: ["_time", "_field", "_value"])\n'
            '  |> pivot(rowKey: ["_time"], columnKey: ["_field"], valueColumn: "_value")'
        )

    @staticmethod
    def _block_times(block: pd.DataFrame) -> pd.DatetimeIndex:
        return pd.DatetimeIndex(pd.to_datetime(block["_time"], utc=True, format="ISO8601")).as_unit("ns")

    @classmethod
    def _inside(
        cls, block: pd.DataFrame, lo: pd.Timestamp, hi: pd.Timestamp
    ) -> tuple[pd.DatetimeIndex, np.ndarray]:
        """The times of ``block`` and which lie in [lo, hi): 1.8's storage reader includes stop
        itself, and a point at ``hi`` is the next window's (for the text check too)."""
        idx = cls._block_times(block)
        return idx, np.asarray((idx >= lo) & (idx < hi))

    # --- raw samples ---------------------------------------------------------------------
    def read_raw(self, mappings: Sequence[RoleMapping], start, end) -> pd.DataFrame:
        mappings = common.check_mappings(mappings)
        start, end = common.window(start, end)
        groups = common.series_groups(mappings)
        parts: dict[str, list[pd.Series]] = {m.role: [] for m in mappings}
        for lo, hi in time_windows(start, end, self.read_chunk):
            for (measurement, tags), ms in groups.items():
                fields = list(dict.fromkeys(m.field_name for m in ms))
                for block in self.query_csv(
                    self._pivot_query(measurement, fields, dict(tags), lo, hi), "read_raw"
                ):
                    if not len(block) or "_time" not in block.columns:
                        continue
                    idx, inside = self._inside(block, lo, hi)
                    self._refuse_text_fields(
                        "read_raw", block, inside, fields, measurement, dict(tags), lo, hi
                    )
                    block, idx = block[inside], idx[inside]
                    for m in ms:
                        if m.field_name in block.columns:
                            values = pd.to_numeric(block[m.field_name], errors="coerce").to_numpy(
                                dtype=np.float64
                            )
                            parts[m.role].append(pd.Series(values, index=idx))
        series = {role: pd.concat(ps) for role, ps in parts.items() if ps}
        return common.role_frame(mappings, series)

    def read_window_last(
        self, mappings: Sequence[RoleMapping], after, until, interval
    ) -> dict[str, pd.Series]:
        """The last stored number of each grid interval ``(t - interval, t]`` by Flux::

            range(start: <after> + 1ns, stop: <until> + 1ns) |> filter(...)
              |> timeShift(duration: -1ns)
              |> aggregateWindow(every: <interval>, fn: last, createEmpty: false)

        The shift by -1 ns turns Flux's windows ``[t - interval, t)`` (stamped with their stop
        ``t``) into ``(t - interval, t]`` of the stored times. No ``fill(usePrevious: true)``:
        it holds a value for ever (no maximum age) and makes the server send every grid row;
        the hold is ``grid.hold_on_grid`` over these interval values (``Store.read_grid``)."""
        mappings = common.check_mappings(mappings)
        after, until = common.window(after, until)
        iv = pd.Timedelta(interval)
        one = pd.Timedelta(1, unit="ns")
        groups = common.series_groups(mappings)
        parts: dict[str, list[pd.Series]] = {m.role: [] for m in mappings}
        chunk = max(1, -(-self.read_chunk.value // iv.value)) * iv  # whole grid intervals
        for lo, hi in time_windows(after, until, chunk):
            for (measurement, tags), ms in groups.items():
                fields = list(dict.fromkeys(m.field_name for m in ms))
                flux = (
                    f"from(bucket: {escape.flux_string(self.bucket)})\n"
                    f"  |> range(start: {flux_time(lo + one)}, stop: {flux_time(hi + one)})\n"
                    f"  |> filter(fn: (r) => {self._filter(measurement, fields, dict(tags))})\n"
                    '  |> keep(columns: ["_start", "_stop", "_time", "_field", "_value"])\n'
                    "  |> timeShift(duration: -1ns)\n"
                    f"  |> aggregateWindow(every: {iv.value}ns, fn: last, createEmpty: false)\n"
                    '  |> keep(columns: ["_time", "_field", "_value"])\n'
                    '  |> pivot(rowKey: ["_time"], columnKey: ["_field"], valueColumn: "_value")'
                )
                for block in self.query_csv(flux, "read_window_last"):
                    if not len(block) or "_time" not in block.columns:
                        continue
                    idx = self._block_times(block)
                    inside = np.ones(len(block), dtype=bool)
                    self._refuse_text_fields(
                        "read_window_last", block, inside, fields, measurement, dict(tags), lo, hi
                    )
                    for m in ms:
                        if m.field_name in block.columns:
                            values = pd.to_numeric(block[m.field_name], errors="coerce").to_numpy(
                                dtype=np.float64
                            )
                            parts[m.role].append(pd.Series(values, index=idx).dropna())
        return {
            role: (pd.concat(ps).sort_index() if ps else pd.Series([], dtype=float))
            for role, ps in parts.items()
        }

    def _send_batch(self, text: str, what: str, target: str) -> None:
        """One batch of line protocol through the client's write API to the bucket of
        ``target`` (``LineProtocolWriter`` does the batching)."""
        try:
            self._write_api.write(
                bucket=self._bucket(target),
                org=self.org or "-",
                record=text,
                write_precision=WritePrecision.NS,
            )
        except self._CAUGHT as exc:
            raise self._error(exc, what, target, "write") from None

    # --- results -------------------------------------------------------------------------
    def read_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> pd.DataFrame:
        escape.check_name(measurement, "measurement")
        tags = common.check_tags(tags)
        start, end = common.window(start, end)
        frames = []
        for lo, hi in time_windows(start, end, self.read_chunk):
            for block in self.query_csv(
                self._pivot_query(measurement, None, tags, lo, hi, RESULTS),
                f"read_results {measurement}",
                RESULTS,
            ):
                if len(block) and "_time" in block.columns:
                    drop = [
                        c
                        for c in block.columns
                        if c in ("_time", "result", "table") or str(c).startswith("Unnamed")
                    ]
                    fields = [c for c in block.columns if c not in drop]
                    idx, inside = self._inside(block, lo, hi)
                    self._refuse_text_fields(
                        f"read_results {measurement}",
                        block,
                        inside,
                        fields,
                        measurement,
                        tags,
                        lo,
                        hi,
                        RESULTS,
                    )
                    block, idx = block[inside], idx[inside]
                    frames.append(block.drop(columns=drop).set_axis(idx, axis=0))
        if not frames:
            return common.results_frame({}, np.array([], dtype=np.int64))
        return common.results_frame(pd.concat(frames))

    def delete_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> None:
        escape.check_name(measurement, "measurement")
        tags = common.check_tags(tags)
        start, end = common.window(start, end)
        if end <= start:
            return
        what = f"delete_results {measurement}"
        if not self._v1_delete:
            predicate = " AND ".join(
                [f"_measurement={_predicate_string(measurement)}"]
                + [f"{_predicate_key(k)}={_predicate_string(v)}" for k, v in tags.items()]
            )
            try:
                self._delete_api.delete(
                    start=flux_time(start),
                    stop=flux_time(end - pd.Timedelta(1, unit="ns")),
                    predicate=predicate,
                    bucket=self.results_bucket,
                    org=self.org or "-",
                )
                return
            except self._CAUGHT as exc:
                err = self._error(exc, what, RESULTS, "write")
                body = str(getattr(exc, "body", "") or "").lower()
                if getattr(exc, "status", None) != 404 or "bucket" in body:
                    raise err from None  # a 2.x server's 404 names the missing bucket
            self._v1_delete = True
            logger.info(
                "%s has no /api/v2/delete (HTTP 404, as influxd 1.8): deleting through the v1 /query "
                "endpoint with InfluxQL DELETE",
                self.url,
            )
        self._delete_v1(measurement, start, end, tags, what)

    def _delete_v1(self, measurement: str, start, end, tags: Mapping[str, str], what: str) -> None:
        """The delete as InfluxQL on the v1 /query endpoint (influxd 1.8 has no /api/v2/delete)."""
        db, _, rp = self.results_bucket.partition("/")
        headers = {"User-Agent": "isentrope"}
        if self._token:
            headers["Authorization"] = f"Token {self._token}"
        params = {"db": db}
        if rp:
            params["rp"] = rp
        try:
            resp = requests.post(
                self.url + "/query",
                params=params,
                data={"q": delete_statement(measurement, start, end, tags)},
                headers=headers,
                timeout=self.timeout,
                verify=self._verify,
            )
        except (requests.ConnectionError, requests.Timeout) as exc:
            cert = certificate_failure(exc, what)
            if cert is not None:
                raise cert from None
            raise TemporaryStoreError(f"{what}: {self.url} unreachable: {type(exc).__name__}") from None
        where = f"{what} ({self.url}, bucket {self.results_bucket!r})"
        if resp.status_code in (401, 403):
            needs = f"write access to bucket {self.results_bucket!r} ({self._bucket_key(RESULTS)})"
            raise authorization_error(
                resp.status_code, resp.text, where, "[store] token (or token_file)", needs
            )
        if resp.status_code == 404:
            raise FatalStoreError(
                f"{where}: the server has neither /api/v2/delete nor the v1 /query endpoint (HTTP 404); "
                "results of an earlier run cannot be deleted here: delete them on the server"
            )
        if resp.status_code >= 300:
            raise classify_http(resp.status_code, resp.text, where)
        body = resp.json()
        result = (body.get("results") or [{}])[0]
        if "error" in result or "error" in body:
            raise FatalStoreError(f"{where}: {result.get('error') or body['error']}")

    # --- worker state --------------------------------------------------------------------
    def _state_blocks(self, kind: str, name: str, start: str, tail: str, what: str) -> list[pd.DataFrame]:
        """The non-empty answer blocks (``_time``, ``_value``) of the state points ``kind``/``name``
        from ``start`` on, in one table, ending with the Flux step ``tail``."""
        flux = (
            f"from(bucket: {escape.flux_string(self.results_bucket)})\n"
            f"  |> range(start: {start})\n"
            f"  |> filter(fn: (r) => {self._filter(STATE_MEASUREMENT, ['value'], {'kind': kind, 'name': name})})\n"
            '  |> keep(columns: ["_time", "_value"])\n'
            "  |> group()\n"
            f"  |> {tail}"
        )
        return [b for b in self.query_csv(flux, what, RESULTS) if len(b)]

    def _last_state(self, kind: str, name: str) -> str | None:
        escape.check_name(name, f"{kind} name")
        blocks = self._state_blocks(kind, name, "1970-01-01T00:00:00Z", "last()", f"load {kind} {name!r}")
        if not blocks:
            return None
        return str(blocks[-1]["_value"].iloc[-1])

    def _lease_values(self, unit: str, after: pd.Timestamp) -> list[str]:
        what = f"read the leases of unit {unit!r}"
        blocks = self._state_blocks("lease", unit, flux_time(after), 'sort(columns: ["_time"])', what)
        if not blocks:
            return []
        frame = pd.concat(blocks).sort_values("_time", kind="stable")
        return [str(v) for v in frame["_value"]]

    def close(self) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None
