"""InfluxDB through its v1 HTTP API: InfluxQL on /query (CSV responses), line protocol on /write.

Works with InfluxDB 1.x (tested with 1.6.7 and 1.8.10) and with the v1-compatible endpoints of
later servers (give ``token``, and a database/retention policy mapped onto a bucket).

Reads: one InfluxQL statement per group of roles that share a measurement and tag filters,
``SELECT "<field>"::field AS "<role>" ... FROM "<rp>"."<measurement>" WHERE "<tag>"::tag =
'<value>' AND time >= <start> AND time < <end>``, every name quoted by
``isentrope.daemon.stores.escape``; the window is split into ``read_chunk`` pieces. A CSV
response hides "database not found", so the database is checked once (and again when a read
comes back empty) with a JSON ``SHOW RETENTION POLICIES``. A field that holds text in some
shards (InfluxDB keeps one type per field and shard) reads as missing samples there: ``::field``
returns the numbers of every shard and leaves the text out (measured on 1.6.7 and 1.8.10), and a
field that is text throughout comes back as strings, which become NaN.

Writes: line protocol in batches of ``batch_size`` lines, ``precision=ns``. A failed batch
raises ``TemporaryStoreError`` or ``FatalStoreError`` with the lines not yet written (that batch
and the rest) on ``err.unwritten``; after a temporary failure they are also kept in ``pending``
and written first by the next write call, so nothing is lost while the server is away (writing
them again is harmless: writes are idempotent).

Deletes: ``DELETE FROM "<measurement>" WHERE "<tag>" = '<value>' AND time >= <start> AND
time < <end>`` (``influx_common.delete_statement``). InfluxQL's DELETE takes no retention
policy: it deletes the points of every retention policy of the database.

Checkpoints and state are points of the measurement ``isentrope_worker`` (see
``influx_common.STATE_MEASUREMENT``).
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import requests

from isentrope.daemon.redact import remember, remember_basic
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import common, escape
from isentrope.daemon.stores.base import DEFAULT_TIMEOUT_S, FatalStoreError, Store, TemporaryStoreError
from isentrope.daemon.stores.influx_common import (
    CONNECTION_OPTIONS,
    DEFAULT_BATCH_SIZE,
    NAME_CHECKS,
    STATE_MEASUREMENT,
    LeaseOnState,
    LineProtocolWriter,
    authorization_error,
    certificate_failure,
    check_client_arguments,
    check_connection,
    classify_http,
    delete_statement,
    influxql_time,
    time_windows,
    tls_verify,
)
from isentrope.daemon.stores.options import Option


class Influx1Store(LeaseOnState, LineProtocolWriter, Store):
    """Store on an InfluxDB v1 HTTP API.

    Parameters
    ----------
    url : str
        Server URL, e.g. ``http://127.0.0.1:8086``.
    database : str
        Database holding raw samples and receiving results.
    retention_policy : str, optional
        Retention policy to read and write; empty means the database's default.
    username, password : str, optional
        Credentials (HTTP basic auth) when the server has auth enabled.
    token : str, optional
        Instead of username/password: sent as ``Authorization: Token <token>`` (v1-compatible
        endpoints of 2.x servers).
    timeout : float
        Seconds per HTTP request [s].
    batch_size : int
        Lines per write request.
    verify_ssl : bool
        Verify the server's TLS certificate (https URLs).
    ca_bundle : str, optional
        PEM file of the CA certificates to trust (default: certifi's; see
        ``influx_common.tls_verify``: the environment is never read).
    read_chunk : str or Timedelta
        Longest time span per read request.
    """

    kind = "influx1"
    OPTIONS = (
        *CONNECTION_OPTIONS,
        Option("database"),
        Option("token", default=None, secret=True),
        Option("password", default=None, secret=True),
        Option("username", default=""),
        Option("retention_policy", default=""),
    )
    NAME_CHECKS = NAME_CHECKS

    @classmethod
    def check_options(cls, values, given, problem):
        check_connection(values, given, problem)
        if "token" in given and ("password" in given or values["username"]):
            problem("token", "give either 'token' or 'username'/'password', not both")
        if "password" in given and not values["username"]:
            problem("username", "missing required key 'username' (a password is given)")

    def __init__(
        self,
        url: str,
        database: str,
        retention_policy: str = "",
        username: str = "",
        password: str = "",
        token: str = "",
        timeout: float = DEFAULT_TIMEOUT_S,
        batch_size: int = DEFAULT_BATCH_SIZE,
        verify_ssl: bool = True,
        read_chunk: str | pd.Timedelta = "31D",
        ca_bundle: str = "",
    ):
        check_client_arguments(url, batch_size)
        escape.check_name(database, "database")
        if retention_policy:
            escape.check_name(retention_policy, "retention policy")
        self.url = url.rstrip("/")
        self.database = database
        self.retention_policy = retention_policy
        self.init_writer(timeout, batch_size, read_chunk)
        self._db_checked = False
        remember(token)
        remember_basic(username, password)
        self._session = requests.Session()
        self._session.trust_env = False  # no CA bundle, proxy or .netrc from the environment
        self._session.verify = tls_verify(verify_ssl, ca_bundle)
        self._session.headers["User-Agent"] = "isentrope"
        if token:
            self._session.headers["Authorization"] = f"Token {token}"
            self._credentials = "[store] token (or token_file)"
        elif username:
            self._session.auth = (username, password)
            self._credentials = "[store] username and password (or password_file)"
        else:
            self._credentials = "[store] (none given: set token, or username and password)"

    def __repr__(self) -> str:  # never the password or token
        return f"Influx1Store(url={self.url!r}, database={self.database!r}, retention_policy={self.retention_policy!r})"

    # --- HTTP ----------------------------------------------------------------------------
    def _request(self, method: str, path: str, what: str, **kw) -> requests.Response:
        try:
            resp = self._session.request(method, self.url + path, timeout=self.timeout, **kw)
        except requests.exceptions.SSLError as exc:
            cert = certificate_failure(exc, f"{what}: {self.url}")
            if cert is not None:
                raise cert from None
            raise TemporaryStoreError(f"{what}: {self.url} unreachable: {type(exc).__name__}") from None
        except (requests.ConnectionError, requests.Timeout, requests.exceptions.ChunkedEncodingError) as exc:
            # ChunkedEncodingError: the server went away in the middle of its answer (killed or
            # restarted mid-read), an outage like a refused connection
            raise TemporaryStoreError(f"{what}: {self.url} unreachable: {type(exc).__name__}") from None
        except requests.RequestException as exc:
            raise FatalStoreError(f"{what}: {self.url}: {exc}") from None
        if resp.status_code >= 300:
            where = f"{what} ({self.url}, database {self.database!r})"
            if resp.status_code in (401, 403):
                access = "write" if path == "/write" else "read"
                raise authorization_error(
                    resp.status_code,
                    resp.text,
                    where,
                    self._credentials,
                    f"{access} access to database {self.database!r} ([store] database)",
                )
            raise classify_http(resp.status_code, resp.text, where)
        return resp

    def _from(self, measurement: str) -> str:
        m = escape.influxql_identifier(measurement, "measurement")
        if self.retention_policy:
            return f"{escape.influxql_identifier(self.retention_policy, 'retention policy')}.{m}"
        return m

    def _check_database(self) -> None:
        """FatalStoreError when the database (or retention policy) does not exist."""
        q = f"SHOW RETENTION POLICIES ON {escape.influxql_identifier(self.database, 'database')}"
        body = self._request("POST", "/query", "check database", data={"q": q}).json()
        result = body.get("results", [{}])[0]
        if "error" in result:
            raise _answer_error(f"database {self.database!r} on {self.url}: {result['error']}")
        names = [row[0] for s in result.get("series", []) for row in s.get("values", [])]
        if not names:
            # InfluxDB 2.x answers a database (bucket) that does not exist, or that the token
            # may not read, with no retention policy and no error (measured on 2.9.1)
            raise FatalStoreError(
                f"database {self.database!r} ([store] database) on {self.url} has no retention policy: it "
                "does not exist, or the credentials may not read it"
            )
        if self.retention_policy:
            if self.retention_policy not in names:
                raise FatalStoreError(
                    f"retention policy {self.retention_policy!r} not found in database {self.database!r}; found {names}"
                )
        self._db_checked = True

    def query_csv(self, q: str, what: str = "query") -> list[pd.DataFrame]:
        """Run InfluxQL; one DataFrame per statement result block (CSV columns name, tags, time, ...)."""
        params = {"db": self.database, "epoch": "ns"}
        if self.retention_policy:
            params["rp"] = self.retention_policy
        resp = self._request(
            "POST", "/query", what, params=params, data={"q": q}, headers={"Accept": "application/csv"}
        )
        text = resp.content.decode("utf-8")  # text/csv without a charset: requests would guess latin-1
        if text.startswith("error"):
            raise FatalStoreError(f"{what}: {text.strip()}")
        blocks = []
        for block in text.split("\n\n"):
            if block.strip():
                blocks.append(pd.read_csv(io.StringIO(block), dtype={"name": str, "tags": str}))
        return blocks

    # --- raw samples ---------------------------------------------------------------------
    def _where(self, tags: Mapping[str, str], start: pd.Timestamp, end: pd.Timestamp) -> str:
        conds = [
            f"{escape.influxql_identifier(k, 'tag key')}::tag = {escape.influxql_string(v)}"
            for k, v in tags.items()
        ]
        conds += [f"time >= {start.value}", f"time < {end.value}"]
        return " AND ".join(conds)

    def read_raw(self, mappings: Sequence[RoleMapping], start, end) -> pd.DataFrame:
        mappings = common.check_mappings(mappings)
        start, end = common.window(start, end)
        groups = common.series_groups(mappings)
        if not self._db_checked:
            self._check_database()
        parts: dict[str, list[pd.Series]] = {m.role: [] for m in mappings}
        got_any = False
        for lo, hi in time_windows(start, end, self.read_chunk):
            statements, order = [], []
            for g, ((measurement, tags), ms) in enumerate(groups.items()):
                # One column per distinct field (several roles may read the same field), aliased
                # s<statement>f<field> so that each CSV block names its statement.
                fields = list(dict.fromkeys(m.field_name for m in ms))
                select = ", ".join(
                    f'{escape.influxql_identifier(f, "field")}::field AS "s{g}f{i}"'
                    for i, f in enumerate(fields)
                )
                statements.append(
                    f"SELECT {select} FROM {self._from(measurement)} WHERE {self._where(dict(tags), lo, hi)}"
                )
                order.append((fields, ms))
            for block in self.query_csv("; ".join(statements), "read_raw"):
                if not len(block):
                    continue
                fcols = [c for c in block.columns[3:] if str(c).startswith("s")]
                if not fcols:
                    continue
                g = int(str(fcols[0])[1:].split("f")[0])
                fields, ms = order[g]
                got_any = True
                idx = pd.to_datetime(block["time"].to_numpy(dtype=np.int64), unit="ns", utc=True)
                for m in ms:
                    col = f"s{g}f{fields.index(m.field_name)}"
                    if col in block.columns:
                        parts[m.role].append(
                            pd.Series(pd.to_numeric(block[col], errors="coerce").to_numpy(), index=idx)
                        )
        if not got_any:
            self._check_database()  # an empty answer may be a dropped database
        series = {role: (pd.concat(ps) if ps else None) for role, ps in parts.items()}
        return common.role_frame(mappings, {k: v for k, v in series.items() if v is not None})

    def read_window_last(
        self, mappings: Sequence[RoleMapping], after, until, interval
    ) -> dict[str, pd.Series]:
        """The last stored number of each grid interval ``(t - interval, t]`` by InfluxQL:
        ``SELECT last("<field>"::field) ... WHERE time > <after> AND time <= <until> GROUP BY
        time(<interval>, 1ns) fill(none)``; the 1 ns offset makes the server's intervals
        ``(t - interval, t]`` (stamped ``t - interval + 1ns``) instead of ``[t, t + interval)``.
        ``fill(previous)`` is not used: it holds a value for ever (no maximum age) and only
        from inside the query's range, and it makes the server send every grid row; the hold
        is ``grid.hold_on_grid`` over these interval values (see ``Store.read_grid``).
        ``fill(linear)`` is not used either: it interpolates between interval values placed
        at the interval starts, not at the stored times, and across gaps of any length."""
        mappings = common.check_mappings(mappings)
        after, until = common.window(after, until)
        iv = pd.Timedelta(interval)
        groups = common.series_groups(mappings)
        if not self._db_checked:
            self._check_database()
        parts: dict[str, list[pd.Series]] = {m.role: [] for m in mappings}
        chunk = max(1, -(-self.read_chunk.value // iv.value)) * iv  # whole grid intervals
        every = f"{iv.value}ns"
        for lo, hi in time_windows(after, until, chunk):
            statements, order = [], []
            for g, ((measurement, tags), ms) in enumerate(groups.items()):
                fields = list(dict.fromkeys(m.field_name for m in ms))
                select = ", ".join(
                    f'last({escape.influxql_identifier(f, "field")}::field) AS "s{g}f{i}"'
                    for i, f in enumerate(fields)
                )
                conds = [
                    f"{escape.influxql_identifier(k, 'tag key')}::tag = {escape.influxql_string(v)}"
                    for k, v in dict(tags).items()
                ]
                conds += [f"time > {lo.value}", f"time <= {hi.value}"]
                statements.append(
                    f"SELECT {select} FROM {self._from(measurement)} WHERE {' AND '.join(conds)} "
                    f"GROUP BY time({every}, 1ns) fill(none)"
                )
                order.append((fields, ms))
            for block in self.query_csv("; ".join(statements), "read_window_last"):
                fcols = [c for c in block.columns[3:] if str(c).startswith("s")] if len(block) else []
                if not fcols:
                    continue
                g = int(str(fcols[0])[1:].split("f")[0])
                fields, ms = order[g]
                ends = block["time"].to_numpy(dtype=np.int64) - 1 + iv.value
                idx = pd.to_datetime(ends, unit="ns", utc=True)
                for m in ms:
                    col = f"s{g}f{fields.index(m.field_name)}"
                    if col in block.columns:
                        s = pd.Series(pd.to_numeric(block[col], errors="coerce").to_numpy(), index=idx)
                        parts[m.role].append(s.dropna())
        return {
            role: (pd.concat(ps).sort_index() if ps else pd.Series([], dtype=float))
            for role, ps in parts.items()
        }

    def _send_batch(self, text: str, what: str, target: str) -> None:
        """One batch of line protocol to /write (``LineProtocolWriter`` does the batching); one
        database for every ``target``."""
        params = {"db": self.database, "precision": "ns"}
        if self.retention_policy:
            params["rp"] = self.retention_policy
        self._request("POST", "/write", what, params=params, data=text.encode())

    # --- results -------------------------------------------------------------------------
    def read_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> pd.DataFrame:
        escape.check_name(measurement, "measurement")
        tags = common.check_tags(tags)
        start, end = common.window(start, end)
        if not self._db_checked:
            self._check_database()
        frames = []
        for lo, hi in time_windows(start, end, self.read_chunk):
            q = f"SELECT *::field FROM {self._from(measurement)} WHERE {self._where(tags, lo, hi)}"
            for b in self.query_csv(q, f"read_results {measurement}"):
                if len(b):
                    b = b.set_index(pd.to_datetime(b["time"].to_numpy(dtype=np.int64), unit="ns", utc=True))
                    frames.append(b.drop(columns=["name", "tags", "time"]))
        if not frames:
            return common.results_frame({}, np.array([], dtype=np.int64))
        return common.results_frame(pd.concat(frames))

    def execute(self, q: str, what: str) -> dict:
        """Run one InfluxQL statement that returns no rows (DELETE, DROP); FatalStoreError on
        the server's error."""
        params = {"db": self.database}
        if self.retention_policy:
            params["rp"] = self.retention_policy
        body = self._request("POST", "/query", what, params=params, data={"q": q}).json()
        result = (body.get("results") or [{}])[0]
        if "error" in result or "error" in body:
            raise _answer_error(
                f"{what} ({self.url}, database {self.database!r}): {result.get('error') or body['error']}"
            )
        return result

    def delete_results(self, measurement: str, start, end, tags: Mapping[str, str]) -> None:
        escape.check_name(measurement, "measurement")
        tags = common.check_tags(tags)
        start, end = common.window(start, end)
        if not self._db_checked:
            self._check_database()
        self.execute(delete_statement(measurement, start, end, tags), f"delete_results {measurement}")

    # --- worker state --------------------------------------------------------------------
    def _state_rows(self, where: str, select: str, what: str) -> list[list[str]]:
        """Rows (header first) of ``SELECT <select> FROM <state measurement> WHERE <where>``.

        Read as CSV with the csv module: the values are JSON, quoted by the server.
        """
        q = f"SELECT {select} FROM {self._from(STATE_MEASUREMENT)} WHERE {where}"
        params = {"db": self.database, "epoch": "ns", "q": q}
        if self.retention_policy:
            params["rp"] = self.retention_policy
        text = self._request(
            "POST", "/query", what, data=params, headers={"Accept": "application/csv"}
        ).content.decode("utf-8")
        return list(csv.reader(io.StringIO(text)))

    def _last_state(self, kind: str, name: str) -> str | None:
        escape.check_name(name, f"{kind} name")
        where = (
            f'"kind"::tag = {escape.influxql_string(kind)} AND "name"::tag = {escape.influxql_string(name)}'
        )
        rows = self._state_rows(where, 'last("value")', f"load {kind}")
        if len(rows) < 2:
            if not self._db_checked:
                self._check_database()
            return None
        header, row = rows[0], rows[1]
        return row[header.index("last")]

    def _lease_values(self, unit: str, after: pd.Timestamp) -> list[str]:
        where = (
            f'"kind"::tag = \'lease\' AND "name"::tag = {escape.influxql_string(unit)} '
            f"AND time > {influxql_time(after)}"
        )
        rows = self._state_rows(where, '"value"', f"read the leases of unit {unit!r}")
        if len(rows) < 2:
            return []
        header = rows[0]
        i_time, i_value = header.index("time"), header.index("value")
        body = sorted((r for r in rows[1:] if len(r) == len(header)), key=lambda r: int(r[i_time]))
        return [r[i_value] for r in body]

    def close(self) -> None:
        self._session.close()


#: Words of an InfluxQL error answer given while the server stops (measured on 1.6.7: "query
#: engine shutdown"): an outage, retried, not a configuration problem.
_STOPPING = ("shutdown", "shutting down")


def _answer_error(message: str) -> FatalStoreError | TemporaryStoreError:
    """The error for an error in the server's answer: temporary while the server stops."""
    if any(w in message.lower() for w in _STOPPING):
        return TemporaryStoreError(message)
    return FatalStoreError(message)
