"""Small HTTP(S) servers on 127.0.0.1 for the store tests: a hostile server that echoes the
request's credentials in its error answers, and a minimal InfluxDB look-alike over TLS with a
self-signed certificate made in the test (the ``cryptography`` package)."""

from __future__ import annotations

import base64
import datetime as dt
import http.server
import ipaddress
import json
import ssl
import threading
import urllib.parse
from pathlib import Path

#: The required roles of the test units that talk to these servers: tag and plant unit (invented
#: demo names).
ROLES = {
    "throttle_p": ("U7-MS-P", "MPa(a)"),
    "throttle_t": ("U7-MS-T", "degC"),
    "cold_reheat_p": ("U7-CRH-P", "MPa(a)"),
    "cold_reheat_t": ("U7-CRH-T", "degC"),
    "hot_reheat_p": ("U7-HRH-P", "MPa(a)"),
    "hot_reheat_t": ("U7-HRH-T", "degC"),
    "crossover_p": ("U7-XO-P", "kPa(a)"),
    "crossover_t": ("U7-XO-T", "degC"),
    "condenser_p": ("U7-CND-P", "kPa(a)"),
    "gross_output": ("U7-GEN-MW", "MW"),
}


class _Server(http.server.ThreadingHTTPServer):
    daemon_threads = True

    def __init__(self, handler, status: int = 401):
        super().__init__(("127.0.0.1", 0), handler)
        self.status = status
        self.connections = 0
        self.requests: list[str] = []

    def get_request(self):
        self.connections += 1  # counted before the TLS handshake, which may fail
        return super().get_request()


class _Base(http.server.BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"

    def log_message(self, *args):  # keep the test output clean
        pass

    def _body(self) -> bytes:
        n = int(self.headers.get("Content-Length") or 0)
        return self.rfile.read(n) if n else b""

    def _send(self, status: int, body: bytes, ctype: str = "application/json") -> None:
        self.send_response(status)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def do_GET(self):
        self._answer()

    def do_POST(self):
        self._answer()


class _Echo(_Base):
    """Answers every request with ``server.status`` and a body that repeats the request line
    and every header three ways (raw lines, a JSON object, a Python repr), plus the decoded
    basic-auth pair, as a misconfigured proxy or debugging server might."""

    def _answer(self):
        self._body()
        self.server.requests.append(self.path)
        headers = {k: v for k, v in self.headers.items()}
        decoded = ""
        auth = headers.get("Authorization", "")
        if auth.lower().startswith("basic "):
            decoded = base64.b64decode(auth.split(None, 1)[1]).decode("utf-8", "replace")
        text = (
            f"request {self.command} {self.path}\n"
            + "".join(f"{k}: {v}\n" for k, v in headers.items())
            + json.dumps({"headers": headers})
            + f"\n{headers!r}\ncredentials {decoded}\n"
        )
        body = json.dumps(
            {"code": "unauthorized" if self.server.status == 401 else "internal error", "message": text}
        )
        self._send(self.server.status, body.encode())


class _Influx(_Base):
    """Just enough of both InfluxDB APIs for a store to read no data and write: /write and
    /api/v2/write take anything, SHOW RETENTION POLICIES names "autogen", other queries on
    /query and /api/v2/query answer with nothing."""

    def _answer(self):
        asked = urllib.parse.unquote_plus(self.path + "&" + self._body().decode("utf-8", "replace"))
        self.server.requests.append(self.path)
        if self.path.startswith(("/write", "/api/v2/write")):
            self._send(204, b"")
        elif self.path.startswith("/query") and "SHOW RETENTION POLICIES" in asked.upper():
            # the database exists with its default retention policy (as influxd 1.x answers)
            series = {
                "name": "",
                "columns": ["name", "duration", "default"],
                "values": [["autogen", "0s", True]],
            }
            self._send(200, json.dumps({"results": [{"statement_id": 0, "series": [series]}]}).encode())
        elif self.path.startswith("/query") and "csv" not in (self.headers.get("Accept") or ""):
            self._send(200, b'{"results":[{"statement_id":0}]}')
        else:
            self._send(200, b"", "text/csv")


class LocalServer:
    """Start with ``with LocalServer("echo", status=500) as srv:``; ``srv.url``."""

    def __init__(self, kind: str = "echo", status: int = 401, tls: tuple[Path, Path] | None = None):
        self.server = _Server(_Echo if kind == "echo" else _Influx, status)
        scheme = "http"
        if tls is not None:
            ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
            ctx.load_cert_chain(str(tls[0]), str(tls[1]))
            self.server.socket = ctx.wrap_socket(self.server.socket, server_side=True)
            scheme = "https"
        self.url = f"{scheme}://127.0.0.1:{self.server.server_address[1]}"
        self._thread = threading.Thread(target=self.server.serve_forever, kwargs={"poll_interval": 0.05})

    @property
    def connections(self) -> int:
        return self.server.connections

    def __enter__(self) -> LocalServer:
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self.server.shutdown()
        self.server.server_close()
        self._thread.join(timeout=10)


def self_signed(folder: Path, name: str = "server") -> tuple[Path, Path]:
    """A self-signed certificate for 127.0.0.1 valid for a day, and its key, as PEM files."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID

    key = ec.generate_private_key(ec.SECP256R1())
    subject = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, f"isentrope test {name}")])
    now = dt.datetime.now(dt.UTC)
    cert = (
        x509.CertificateBuilder()
        .subject_name(subject)
        .issuer_name(subject)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(hours=1))
        .not_valid_after(now + dt.timedelta(days=1))
        .add_extension(
            x509.SubjectAlternativeName([x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]), False
        )
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .sign(key, hashes.SHA256())
    )
    cert_path, key_path = folder / f"{name}-cert.pem", folder / f"{name}-key.pem"
    cert_path.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    key_path.write_bytes(
        key.private_bytes(
            serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()
        )
    )
    return cert_path, key_path
