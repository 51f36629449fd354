"""TLS on both InfluxDB stores, against a local HTTPS server with a self-signed certificate made
here (``local_http``): a refused certificate is a configuration error (``CertificateError``,
"certificate verify failed", exit 2, never retried as an outage), and ``verify_ssl`` and
``ca_bundle`` mean the same on both stores whatever the environment holds."""

from __future__ import annotations

import pandas as pd
import pytest
from local_http import ROLES, LocalServer, self_signed

from isentrope.daemon import cli
from isentrope.daemon.errors import ConfigError
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import open_store
from isentrope.daemon.stores.base import CertificateError

T0 = pd.Timestamp("2026-05-04T00:00:00Z")
MAPS = [RoleMapping(role="throttle_p", tag="MS_P", unit="MPa", tags={"unit": "U7"})]
KINDS = {
    "influx1": {"database": "units", "token": "t0ken-for-tls"},
    "influx2": {"org": "plant", "bucket": "units", "token": "t0ken-for-tls"},
}
#: Where requests (the v1 store) and OpenSSL (under urllib3, the v2 store) look for CAs.
CA_ENV = ("REQUESTS_CA_BUNDLE", "CURL_CA_BUNDLE", "SSL_CERT_FILE")


@pytest.fixture(scope="module")
def certs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tls")
    return {"server": self_signed(folder, "server"), "other": self_signed(folder, "other")}


@pytest.fixture
def https(certs):
    with LocalServer("influx", tls=certs["server"]) as server:
        yield server


def _use(store) -> None:
    """A read, a write and a state read: each one request or more."""
    store.read_raw(MAPS, T0, T0 + pd.Timedelta("1h"))
    store.write_raw(MAPS, pd.DataFrame({"throttle_p": [16.5]}, index=pd.DatetimeIndex([T0])))
    assert store.get_checkpoint("U7") is None


@pytest.mark.parametrize("env", [None, "server"], ids=["plain-env", "env-trusts-server"])
@pytest.mark.parametrize("kind", list(KINDS))
def test_a_refused_certificate_is_a_configuration_error_not_retried(https, certs, monkeypatch, kind, env):
    if env is not None:  # the environment trusts the server: the stores must not care
        for name in CA_ENV:
            monkeypatch.setenv(name, str(certs[env][0]))
    store = open_store(kind, url=https.url, timeout=5, **KINDS[kind])
    try:
        for call in (
            lambda: store.read_raw(MAPS, T0, T0 + pd.Timedelta("1h")),
            lambda: store.write_raw(MAPS, pd.DataFrame({"throttle_p": [1.0]}, index=pd.DatetimeIndex([T0]))),
            lambda: store.get_checkpoint("U7"),
        ):
            before = https.connections
            with pytest.raises(CertificateError, match="certificate verify failed: self-signed certificate"):
                call()
            assert https.connections - before == 1  # one handshake: no retry
        assert store.pending == []
        assert not https.server.requests  # no request got through
    finally:
        store.close()


@pytest.mark.parametrize("kind", list(KINDS))
def test_ca_bundle_is_trusted_and_the_environment_is_not_read(https, certs, monkeypatch, kind):
    for name in CA_ENV:  # an environment that trusts another CA only
        monkeypatch.setenv(name, str(certs["other"][0]))
    store = open_store(kind, url=https.url, ca_bundle=str(certs["server"][0]), **KINDS[kind])
    try:
        _use(store)
    finally:
        store.close()
    assert https.server.requests
    other = open_store(kind, url=https.url, ca_bundle=str(certs["other"][0]), **KINDS[kind])
    with pytest.raises(CertificateError, match="certificate verify failed"):
        other.get_checkpoint("U7")
    other.close()


@pytest.mark.filterwarnings("ignore::urllib3.exceptions.InsecureRequestWarning")
@pytest.mark.parametrize("kind", list(KINDS))
def test_verify_ssl_false_checks_nothing_on_both(https, kind):
    store = open_store(kind, url=https.url, verify_ssl=False, **KINDS[kind])
    try:
        _use(store)
    finally:
        store.close()


def _config(tmp_path, url: str, kind: str, extra: str = "") -> str:
    body = 'database = "units"\n' if kind == "influx1" else 'org = "plant"\nbucket = "units"\n'
    parts = [
        '[unit]\nname = "U7"\nrating_mw = 500.0\n',
        f'[store]\nkind = "{kind}"\nurl = "{url}"\ntoken = "${{ISEN_TLS_TOKEN}}"\n{body}{extra}',
        '[schedule]\nretries = 3\nbackoff = "1s"\n',
    ]
    parts += [f'[roles.{role}]\ntag = "{tag}"\nunit = "{unit}"\n' for role, (tag, unit) in ROLES.items()]
    path = tmp_path / f"{kind}.toml"
    path.write_text("\n".join(parts))
    return str(path)


@pytest.mark.parametrize("kind", list(KINDS))
def test_command_line_exits_2_on_a_refused_certificate(tmp_path, https, monkeypatch, capsys, kind):
    monkeypatch.setenv("ISEN_TLS_TOKEN", "t0ken-for-tls")
    path = _config(tmp_path, https.url, kind)
    for argv in (
        ["check", "-c", path, "--end", "2026-05-04T12:00Z"],
        ["run", "-c", path, "--once"],
        ["backfill", "-c", path, "--start", "2026-05-03", "--end", "2026-05-04", "--no-progress"],
    ):
        assert cli.main(argv) == 2, argv
        err = capsys.readouterr().err
        assert err.startswith("isentrope: configuration error: ") and "certificate verify failed" in err, err
    assert https.connections <= 6  # one refused handshake per command (check may try twice), no retries


def test_ca_bundle_is_checked_when_the_configuration_loads(tmp_path, certs, monkeypatch):
    from isentrope.daemon.config import load_config

    monkeypatch.setenv("ISEN_TLS_TOKEN", "t")
    good = load_config(
        _config(tmp_path, "https://127.0.0.1:9", "influx2", f'ca_bundle = "{certs["server"][0]}"\n')
    )
    assert good.store.open_options()["ca_bundle"] == str(certs["server"][0])
    (tmp_path / "notes.txt").write_text("not a certificate\n")
    for extra, expected in (
        ('ca_bundle = "missing.pem"\n', "store.ca_bundle: cannot read"),
        (
            'ca_bundle = "notes.txt"\n',
            "store.ca_bundle: " + str(tmp_path / "notes.txt") + " is not a PEM file",
        ),
        (f'ca_bundle = "{certs["server"][0]}"\nverify_ssl = false\n', "store.ca_bundle: verify_ssl = false"),
    ):
        with pytest.raises(ConfigError, match=expected.replace(".", r"\.")):
            load_config(_config(tmp_path, "https://127.0.0.1:9", "influx1", extra))
