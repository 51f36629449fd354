"""Shared fixtures.

Real InfluxDB servers
---------------------
``influxdb_v1``: Debian's influxd 1.6.7 (v1 HTTP API: /query InfluxQL, /write).
``influxdb_v2``: influxd 1.8.10 built from the Go module with ``flux-enabled = true``; it serves
the v2 HTTP API (/api/v2/write, Flux on /api/v2/query) as well as the v1 API. For 1.8 the v2
"org" is ignored, a bucket is ``"database/retention_policy"`` and the token is
``"user:password"`` (empty when auth is off, as here).

Each is session-scoped: started once on free 127.0.0.1 ports (HTTP and the meta/RPC
bind-address) in a temporary directory with a generated configuration, waited for on /ping,
and killed at the end of the session. The yielded ``InfluxServer`` has ``url``, ``binary``,
``version``, ``port`` and helpers: ``stop()``, ``start()`` (same ports and data, for fault
tests), ``query(q, db=None)``, ``new_database(prefix)`` and ``bucket(db)``.

``influxdb_2x``: InfluxDB 2.9.1 (``Influx2xServer``): organisation, buckets, token
authorisation, /api/v2/write, Flux on /api/v2/query, /api/v2/delete, and the v1 endpoints
/query and /write. Started on a free 127.0.0.1 port in a temporary directory with usage
reporting off, waited for on /health, set up through ``POST /api/v2/setup`` (user, org, first
bucket, operator token). ``new_bucket(prefix)`` creates a bucket and ``new_token(read=...,
write=...)`` a token with exactly those bucket permissions; ``worker_buckets(prefix)`` gives a
raw bucket, a results bucket and the worker's least-privilege token (read on raw; read and
write on results), plus a loader token that may write raw samples.

Binaries come from ``ISENTROPE_INFLUXD_V1`` (default /usr/bin/influxd),
``ISENTROPE_INFLUXD_18`` (default /var/cache/isentrope/influxd-1.8.10/influxd) and
``ISENTROPE_INFLUXD_2X`` (default /var/cache/isentrope/influxd-2.9.1/influxd). When one is
missing the tests that need it skip with a message saying how to get it, unless
``ISENTROPE_REQUIRE_INFLUX`` is set (CI sets it), in which case they fail.
"""

from __future__ import annotations

import base64
import itertools
import json
import os
import shutil
import signal
import socket
import subprocess
import tempfile
import time
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path
from types import SimpleNamespace

import pytest

INFLUXD_V1 = os.environ.get("ISENTROPE_INFLUXD_V1", "/usr/bin/influxd")
INFLUXD_18 = os.environ.get("ISENTROPE_INFLUXD_18", "/var/cache/isentrope/influxd-1.8.10/influxd")
INFLUXD_2X = os.environ.get("ISENTROPE_INFLUXD_2X", "/var/cache/isentrope/influxd-2.9.1/influxd")
INFLUX_CLI = os.environ.get("ISENTROPE_INFLUX_CLI", "/usr/bin/influx")

HOW_TO_GET = {
    "v1": "install Debian's server: `apt-get install influxdb influxdb-client` "
    "(or set ISENTROPE_INFLUXD_V1 to an influxd 1.x binary)",
    "v2": "build it: `bash deploy/servers/influxd-1.8.10.sh` "
    "(or set ISENTROPE_INFLUXD_18 to an influxd 1.8.x binary)",
    "2x": "build it: `bash deploy/servers/influxd-2.9.1.sh` (11 minutes or more cold; needs go and cargo) "
    "(or set ISENTROPE_INFLUXD_2X to an influxd 2.x binary)",
}


def _require_influx() -> bool:
    return os.environ.get("ISENTROPE_REQUIRE_INFLUX", "") not in ("", "0", "false", "no")


def missing_server(what: str, reason: str):
    """Skip (developer machine) or fail (CI, ISENTROPE_REQUIRE_INFLUX set) for a missing server."""
    msg = f"{reason}; {HOW_TO_GET.get(what, what)}"
    if _require_influx():
        pytest.fail(f"ISENTROPE_REQUIRE_INFLUX is set but {msg}", pytrace=False)
    pytest.skip(msg)


def free_port() -> int:
    """A TCP port free on 127.0.0.1 right now (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def influxd_version(binary: str) -> str:
    out = subprocess.run([binary, "version"], capture_output=True, text=True, timeout=30).stdout
    # "InfluxDB v1.6.7~rc0 (git: ...)"
    for word in out.split():
        if word.startswith("v") and word[1:2].isdigit():
            return word[1:]
    return "unknown"


class _ServerProcess:
    """What both server classes share: the process (``_proc``), its log (``log_path``)."""

    _proc: subprocess.Popen | None = None
    log_path: Path
    url: str
    ping_path: str
    ping_status: int

    @property
    def running(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    def stop(self, timeout: float = 30.0) -> None:
        """Stop the server (SIGTERM, then SIGKILL); data stays for ``start()``."""
        if self._proc is None:
            return
        if self._proc.poll() is None:
            self._proc.send_signal(signal.SIGTERM)
            try:
                self._proc.wait(timeout)
            except subprocess.TimeoutExpired:
                self._proc.kill()
                self._proc.wait(timeout)
        self._proc = None

    def kill(self) -> None:
        if self._proc is not None and self._proc.poll() is None:
            self._proc.kill()
            self._proc.wait(30)
        self._proc = None

    def log_tail(self, lines: int = 30) -> str:
        try:
            return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-lines:])
        except OSError:
            return "(no log)"

    def ping(self, timeout: float = 1.0) -> bool:
        try:
            with urllib.request.urlopen(self.url + self.ping_path, timeout=timeout) as resp:
                return resp.status == self.ping_status
        except (urllib.error.URLError, OSError):
            return False

    def _launch(self, argv: list[str], timeout: float, what: str) -> None:
        """Start ``argv`` with its output in the log and wait until ``ping()`` answers (``what``:
        the endpoint, for the message); RuntimeError with the log's tail otherwise."""
        with open(self.log_path, "ab") as log:
            self._proc = subprocess.Popen(
                argv, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, start_new_session=True
            )
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self._proc.poll() is not None:
                raise RuntimeError(f"influxd exited with {self._proc.returncode}:\n{self.log_tail()}")
            if self.ping():
                return
            time.sleep(0.05)
        self.kill()
        raise RuntimeError(
            f"influxd did not answer {what} on {self.url} within {timeout} s:\n{self.log_tail()}"
        )


class InfluxServer(_ServerProcess):
    """One influxd process on loopback ports, in its own temporary directory."""

    def __init__(self, binary: str, root: Path, *, flux: bool, auth: bool = False):
        self.binary = binary
        self.version = influxd_version(binary)
        self.root = Path(root)
        self.flux = flux
        self.auth = auth
        self.port = free_port()
        self.rpc_port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.log_path = self.root / "influxd.log"
        self.config_path = self.root / "influxdb.conf"
        self._proc: subprocess.Popen | None = None
        self._names = itertools.count(1)
        self._write_config()

    def _write_config(self) -> None:
        r = self.root
        flux_line = "  flux-enabled = true\n" if self.flux else ""
        self.config_path.write_text(
            f"""reporting-disabled = true
bind-address = "127.0.0.1:{self.rpc_port}"
[meta]
  dir = "{r / "meta"}"
  logging-enabled = false
[data]
  dir = "{r / "data"}"
  wal-dir = "{r / "wal"}"
  query-log-enabled = false
  index-version = "inmem"
[monitor]
  store-enabled = false
[continuous_queries]
  enabled = false
[retention]
  enabled = false
[http]
  enabled = true
  bind-address = "127.0.0.1:{self.port}"
  auth-enabled = {str(self.auth).lower()}
  log-enabled = false
  max-body-size = 0
{flux_line}[logging]
  level = "warn"
"""
        )

    # --- process -------------------------------------------------------------------------
    #: the endpoint that answers when the server is up, and its status
    ping_path, ping_status = "/ping", 204

    def start(self, timeout: float = 120.0) -> InfluxServer:
        """Start (or restart after ``stop()``) on the same ports and data; wait for /ping."""
        if self.running:
            return self
        self._launch([self.binary, "run", "-config", str(self.config_path)], timeout, "/ping")
        return self

    # --- helpers -------------------------------------------------------------------------
    def query(self, q: str, db: str | None = None, auth: tuple[str, str] | None = None) -> dict:
        """Run InfluxQL through POST /query; returns the decoded JSON (raises on HTTP errors)."""
        params = {"q": q, "epoch": "ns"}
        if db:
            params["db"] = db
        req = urllib.request.Request(self.url + "/query", data=urllib.parse.urlencode(params).encode())
        if auth:
            req.add_header(
                "Authorization", "Basic " + base64.b64encode(f"{auth[0]}:{auth[1]}".encode()).decode()
            )
        with urllib.request.urlopen(req, timeout=30) as resp:
            body = json.loads(resp.read())
        for result in body.get("results", []):
            if "error" in result:
                raise RuntimeError(f"InfluxQL error for {q!r}: {result['error']}")
        return body

    def new_database(self, prefix: str = "t") -> str:
        """Create a fresh database with a unique name; returns the name."""
        name = f"{prefix}_{os.getpid()}_{next(self._names)}"
        self.query(f'CREATE DATABASE "{name}"')
        return name

    @staticmethod
    def bucket(db: str, rp: str = "autogen") -> str:
        """The v2 bucket name influxd 1.8 maps onto ``db`` and retention policy ``rp``."""
        return f"{db}/{rp}"

    def __repr__(self) -> str:
        return f"InfluxServer({self.version} at {self.url}, running={self.running})"


def start_influxd(what: str, binary: str, tmp_root: Path, *, flux: bool, auth: bool = False) -> InfluxServer:
    """Start a server for a fixture, or skip/fail with instructions when the binary is missing."""
    if not (os.path.isfile(binary) and os.access(binary, os.X_OK)):
        missing_server(what, f"no influxd binary at {binary}")
    server = InfluxServer(binary, tmp_root, flux=flux, auth=auth)
    if flux and not server.version.startswith("1.8"):
        missing_server(what, f"{binary} is influxd {server.version}, not 1.8.x (needed for the v2 API)")
    try:
        return server.start()
    except BaseException:
        server.kill()
        raise


@pytest.fixture(scope="session")
def _influx_tmp():
    root = Path(tempfile.mkdtemp(prefix="isentrope-influx-"))
    yield root
    shutil.rmtree(root, ignore_errors=True)


@pytest.fixture(scope="session")
def influxdb_v1(_influx_tmp):
    """Debian's influxd 1.6.7, v1 API only, auth off."""
    root = _influx_tmp / "v1"
    root.mkdir()
    server = start_influxd("v1", INFLUXD_V1, root, flux=False)
    yield server
    server.kill()


@pytest.fixture(scope="session")
def influxdb_v2(_influx_tmp):
    """influxd 1.8.10 with Flux: serves the v2 API (and the v1 API), auth off."""
    root = _influx_tmp / "v18"
    root.mkdir()
    server = start_influxd("v2", INFLUXD_18, root, flux=True)
    yield server
    server.kill()


class Influx2xServer(_ServerProcess):
    """One InfluxDB 2.x influxd on a loopback port, in its own temporary directory, set up with
    a user, an organisation and an operator token (all permissions; for the fixture only)."""

    ORG = "brackwater"
    USER = "fixture-admin"

    def __init__(self, binary: str, root: Path):
        self.binary = binary
        self.version = influxd_version(binary)
        self.root = Path(root)
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.log_path = self.root / "influxd.log"
        self.operator_token = "fixture-operator-" + base64.b32encode(os.urandom(15)).decode().lower()
        self.org_id = ""
        self._proc: subprocess.Popen | None = None
        self._names = itertools.count(1)

    # --- process -------------------------------------------------------------------------
    #: the endpoint that answers when the server is up, and its status
    ping_path, ping_status = "/health", 200

    def start(self, timeout: float = 120.0) -> Influx2xServer:
        """Start (or restart after ``stop()``) on the same port and data; wait for /health;
        set up user, org and operator token on the first start."""
        if self.running:
            return self
        r = self.root
        argv = [
            self.binary,
            "--bolt-path",
            str(r / "influxd.bolt"),
            "--engine-path",
            str(r / "engine"),
            "--sqlite-path",
            str(r / "influxd.sqlite"),
            "--http-bind-address",
            f"127.0.0.1:{self.port}",
            "--reporting-disabled",
            "--log-level",
            "warn",
        ]
        self._launch(argv, timeout, "/health")
        if not self.org_id:
            self._setup()
        return self

    def _setup(self) -> None:
        body = self.api(
            "POST",
            "/api/v2/setup",
            {
                "username": self.USER,
                "password": "fixture-password-" + os.urandom(6).hex(),
                "org": self.ORG,
                "bucket": "setup",
                "token": self.operator_token,
            },
            token=None,
        )
        self.org_id = body["org"]["id"]

    # --- API -----------------------------------------------------------------------------
    def request(
        self, method: str, path: str, data: bytes | None = None, token: str | None = "", headers=None
    ) -> tuple[int, bytes]:
        """One HTTP request; ``token=""`` means the operator token, None no token. Returns
        (status, body) for any status."""
        req = urllib.request.Request(self.url + path, data=data, method=method)
        token = self.operator_token if token == "" else token
        if token is not None:
            req.add_header("Authorization", f"Token {token}")
        for k, v in (headers or {}).items():
            req.add_header(k, v)
        try:
            with urllib.request.urlopen(req, timeout=30) as resp:
                return resp.status, resp.read()
        except urllib.error.HTTPError as exc:
            return exc.code, exc.read()

    def api(self, method: str, path: str, body: dict | None = None, token: str | None = "") -> dict:
        """JSON API call; raises RuntimeError on a status of 300 or more."""
        data = None if body is None else json.dumps(body).encode()
        status, raw = self.request(method, path, data, token, {"Content-Type": "application/json"})
        if status >= 300:
            raise RuntimeError(f"{method} {path}: HTTP {status}: {raw[:500]!r}")
        return json.loads(raw) if raw.strip() else {}

    def new_bucket(self, prefix: str = "b") -> tuple[str, str]:
        """A fresh bucket (kept forever); returns (name, id)."""
        name = f"{prefix}_{os.getpid()}_{next(self._names)}"
        body = self.api("POST", "/api/v2/buckets", {"orgID": self.org_id, "name": name, "retentionRules": []})
        return name, body["id"]

    def new_token(self, description: str, read: tuple[str, ...] = (), write: tuple[str, ...] = ()) -> str:
        """A token of this org allowed exactly to read the buckets of ids ``read`` and write
        those of ids ``write`` (what an operator would create for the worker)."""
        permissions = [
            {"action": action, "resource": {"type": "buckets", "id": bucket_id, "orgID": self.org_id}}
            for action, ids in (("read", read), ("write", write))
            for bucket_id in ids
        ]
        body = self.api(
            "POST",
            "/api/v2/authorizations",
            {"orgID": self.org_id, "description": description, "permissions": permissions},
        )
        return body["token"]

    def worker_buckets(self, prefix: str = "w") -> SimpleNamespace:
        """A raw bucket, a results bucket and tokens for them: ``token`` (the worker's least
        rights: read raw; read and write results) and ``loader`` (write raw, for tests that put
        raw samples in as a plant's collector would)."""
        raw, raw_id = self.new_bucket(prefix + "_raw")
        results, results_id = self.new_bucket(prefix + "_results")
        return SimpleNamespace(
            raw=raw,
            raw_id=raw_id,
            results=results,
            results_id=results_id,
            token=self.new_token(f"{prefix} worker", read=(raw_id, results_id), write=(results_id,)),
            loader=self.new_token(f"{prefix} loader", read=(raw_id,), write=(raw_id,)),
        )

    def flux(self, query: str, token: str | None = "") -> str:
        """Run Flux through /api/v2/query; returns the annotated CSV (raises on HTTP errors)."""
        status, raw = self.request(
            "POST",
            f"/api/v2/query?org={urllib.parse.quote(self.ORG)}",
            json.dumps({"query": query, "type": "flux"}).encode(),
            token,
            {"Content-Type": "application/json", "Accept": "application/csv"},
        )
        if status >= 300:
            raise RuntimeError(f"Flux query: HTTP {status}: {raw[:500]!r}")
        return raw.decode()

    def __repr__(self) -> str:
        return f"Influx2xServer({self.version} at {self.url}, running={self.running})"


@pytest.fixture(scope="session")
def influxdb_2x(_influx_tmp):
    """InfluxDB 2.9.1 with token authorisation, set up with an org and an operator token."""
    root = _influx_tmp / "v2x"
    root.mkdir()
    if not (os.path.isfile(INFLUXD_2X) and os.access(INFLUXD_2X, os.X_OK)):
        missing_server("2x", f"no influxd binary at {INFLUXD_2X}")
    server = Influx2xServer(INFLUXD_2X, root)
    if not server.version.startswith("2."):
        missing_server("2x", f"{INFLUXD_2X} is influxd {server.version}, not 2.x")
    try:
        server.start()
    except BaseException:
        server.kill()
        raise
    yield server
    server.kill()


@pytest.fixture(scope="session")
def influx_cli():
    """Path of Debian's ``influx`` command line client (an independent reader)."""
    if not (os.path.isfile(INFLUX_CLI) and os.access(INFLUX_CLI, os.X_OK)):
        missing_server("v1", f"no influx command line client at {INFLUX_CLI}")
    return INFLUX_CLI
