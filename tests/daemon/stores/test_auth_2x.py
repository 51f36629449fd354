"""Tokens on InfluxDB 2.9.1: what the worker's least-privilege token may do, and what a token
lacking a right gets: an ``AuthorizationError`` (fatal, never retried) naming the store key and
the access it lacks, never the token itself; the command line exits with 2, the configuration
error code that the systemd unit does not restart on."""

from __future__ import annotations

import pandas as pd
import pytest

from isentrope.daemon import cli
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import AuthorizationError, FatalStoreError, open_store

pytestmark = pytest.mark.influx

T0 = pd.Timestamp("2026-05-01T00:00:00Z")
MAPS = [RoleMapping(role="throttle_p", tag="MS_P", unit="MPa", tags={"unit": "U7"})]
FRAME = pd.DataFrame({"throttle_p": [16.5, 16.6]}, index=pd.DatetimeIndex([T0, T0 + pd.Timedelta("1min")]))
RESULTS = pd.DataFrame({"hp_efficiency": [0.86]}, index=pd.DatetimeIndex([T0]))


@pytest.fixture(scope="module")
def buckets(influxdb_2x):
    return influxdb_2x.worker_buckets("auth")


def _store(server, w, token, **o):
    options = dict(
        url=server.url, org=server.ORG, bucket=w.raw, results_bucket=w.results, timeout=5, retries=0
    )
    return open_store("influx2", token=token, **{**options, **o})


def _refused(exc_info, token, *words):
    text = str(exc_info.value)
    assert token not in text, "the token must never be shown"
    for word in words:
        assert word in text, f"{word!r} not in {text!r}"
    assert isinstance(exc_info.value, AuthorizationError) and isinstance(exc_info.value, FatalStoreError)


def test_the_worker_token_does_its_job_and_no_more(influxdb_2x, buckets):
    w = buckets
    loader = _store(influxdb_2x, w, w.loader)
    loader.write_raw(MAPS, FRAME)
    store = _store(influxdb_2x, w, w.token)
    assert store.read_raw(MAPS, T0, T0 + pd.Timedelta("1h"))["throttle_p"].tolist() == [16.5, 16.6]
    store.write_results("sections", RESULTS, {"unit": "U7"})
    assert store.read_results("sections", T0, T0 + pd.Timedelta("1h"), {"unit": "U7"}).shape == (1, 1)
    store.set_checkpoint("U7", T0)
    assert store.get_checkpoint("U7") == T0
    # the results are in their own bucket, not in the raw one
    raw_side = _store(influxdb_2x, w, w.loader, results_bucket=w.raw)
    assert raw_side.read_results("sections", T0, T0 + pd.Timedelta("1h"), {"unit": "U7"}).empty
    with pytest.raises(AuthorizationError) as err:  # the worker may not write raw samples
        store.write_raw(MAPS, FRAME)
    _refused(err, w.token, "HTTP 403", "write access", repr(w.raw), "[store] bucket")
    assert not store.pending and len(err.value.unwritten) == 2
    for s in (loader, store, raw_side):
        s.close()


def test_a_token_without_write_on_results_is_refused_naming_results_bucket(influxdb_2x, buckets):
    w = buckets
    reader = influxdb_2x.new_token("read only", read=(w.raw_id, w.results_id))
    store = _store(influxdb_2x, w, reader)
    with pytest.raises(AuthorizationError) as err:
        store.write_results("sections", RESULTS, {"unit": "U7"})
    _refused(err, reader, "HTTP 403", "write access", repr(w.results), "[store] results_bucket")
    with pytest.raises(AuthorizationError) as err:
        store.set_checkpoint("U7", T0)
    _refused(err, reader, "[store] results_bucket")
    store.close()


def test_a_token_without_read_on_raw_is_refused_naming_bucket(influxdb_2x, buckets):
    w = buckets
    results_only = influxdb_2x.new_token("results only", read=(w.results_id,), write=(w.results_id,))
    store = _store(influxdb_2x, w, results_only)
    with pytest.raises(FatalStoreError) as err:
        store.read_raw(MAPS, T0, T0 + pd.Timedelta("1h"))
    _refused(err, results_only, "read access", repr(w.raw), "[store] bucket")
    store.close()


def test_a_wrong_token_is_401_and_not_shown(influxdb_2x, buckets):
    w = buckets
    wrong = "not-a-token-0123456789abcdef"
    store = _store(influxdb_2x, w, wrong)
    with pytest.raises(AuthorizationError) as err:
        store.read_raw(MAPS, T0, T0 + pd.Timedelta("1h"))
    _refused(err, wrong, "HTTP 401", "[store] token")
    with pytest.raises(AuthorizationError) as err:
        store.write_results("sections", RESULTS, {"unit": "U7"})
    _refused(err, wrong, "HTTP 401")
    store.close()
    v1 = open_store("influx1", url=influxdb_2x.url, database=w.results, token=wrong, timeout=5)
    with pytest.raises(AuthorizationError) as err:
        v1.get_checkpoint("U7")
    _refused(err, wrong, "HTTP 401", "[store] token")
    v1.close()


def test_worker_stops_at_once_and_the_command_exits_2(influxdb_2x, buckets, tmp_path, capsys, monkeypatch):
    """No retry for a refused token: one attempt, exit code 2 (configuration error)."""
    from isentrope.daemon import synthetic

    w = buckets
    reader = influxdb_2x.new_token("cannot write results", read=(w.raw_id, w.results_id))
    text = synthetic.config_toml()
    store_block = (
        f'[store]\nkind = "influx2"\nurl = "{influxdb_2x.url}"\norg = "{influxdb_2x.ORG}"\n'
        f'bucket = "{w.raw}"\nresults_bucket = "{w.results}"\ntoken = "${{ISEN_AUTH_TOKEN}}"\n'
    )
    text = text.replace('[store]\nkind = "sqlite"\npath = "greywater2.sqlite"\n', store_block)
    assert store_block in text
    text += '\n[schedule]\nretries = 3\nbackoff = "30s"\n'
    cfg = tmp_path / "unit.toml"
    cfg.write_text(text)
    monkeypatch.setenv("ISEN_AUTH_TOKEN", reader)
    rc = cli.main(["run", "--once", "-c", str(cfg)])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert "configuration error" in err and "[store] results_bucket" in err and reader not in err
