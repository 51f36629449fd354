"""Credentials: accepted when right, FatalStoreError when wrong, never shown in repr or errors."""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import INFLUXD_V1, start_influxd

from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import FatalStoreError, open_store

T0 = pd.Timestamp("2026-05-01T00:00:00Z")
MAPS = [RoleMapping(role="throttle_p", tag="MS_P", unit="MPa", tags={"unit": "U7"})]


@pytest.fixture(scope="module")
def auth_server(tmp_path_factory):
    """Debian's influxd 1.6.7 with auth on and one admin user (a few tenths of a second to start)."""
    server = start_influxd("v1", INFLUXD_V1, tmp_path_factory.mktemp("auth"), flux=False, auth=True)
    try:
        server.query("CREATE USER \"plant admin\" WITH PASSWORD 's3cret pass' WITH ALL PRIVILEGES")
        server.query('CREATE DATABASE "units"', auth=("plant admin", "s3cret pass"))
        yield server
    finally:
        server.kill()


@pytest.mark.influx
def test_right_credentials_work_and_wrong_ones_are_fatal(auth_server):
    good = open_store(
        "influx1", url=auth_server.url, database="units", username="plant admin", password="s3cret pass"
    )
    frame = pd.DataFrame({"throttle_p": [16.5]}, index=pd.DatetimeIndex([T0]))
    good.write_raw(MAPS, frame)
    assert good.read_raw(MAPS, T0, T0 + pd.Timedelta("1min"))["throttle_p"].tolist() == [16.5]
    assert "s3cret" not in repr(good)
    bad = open_store(
        "influx1", url=auth_server.url, database="units", username="plant admin", password="wrong horse"
    )
    with pytest.raises(FatalStoreError) as err:
        bad.read_raw(MAPS, T0, T0 + pd.Timedelta("1min"))
    assert "401" in str(err.value) and "wrong horse" not in str(err.value)
    with pytest.raises(FatalStoreError, match="401"):
        bad.write_raw(MAPS, frame)
    nobody = open_store("influx1", url=auth_server.url, database="units")
    with pytest.raises(FatalStoreError, match="401"):
        nobody.get_checkpoint("U7")


def test_influx2_token_sources_never_shown(tmp_path, monkeypatch):
    monkeypatch.setenv("ISENTROPE_TEST_TOKEN", "tok-from-env")
    store = open_store(
        "influx2", url="http://127.0.0.1:9", org="o", bucket="b", token_env="ISENTROPE_TEST_TOKEN"
    )
    assert "tok-from-env" not in repr(store)
    store.close()
    f = tmp_path / "token"
    f.write_text("tok-from-file\n")
    store = open_store("influx2", url="http://127.0.0.1:9", org="o", bucket="b", token_file=str(f))
    assert "tok-from-file" not in repr(store)
    store.close()
    with pytest.raises(ValueError, match="not set"):
        open_store(
            "influx2", url="http://127.0.0.1:9", org="o", bucket="b", token_env="ISENTROPE_NO_SUCH_VAR"
        )
    with pytest.raises(ValueError, match="cannot be read"):
        open_store(
            "influx2", url="http://127.0.0.1:9", org="o", bucket="b", token_file=str(tmp_path / "none")
        )
    with pytest.raises(ValueError, match="unknown store kind"):
        open_store("mongo")
