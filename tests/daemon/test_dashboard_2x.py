"""Every query of deploy/dashboard.json, run on InfluxDB 2.9.1 against what a demo-like run wrote.

The dashboard's data source is InfluxQL; on a 2.x server a dashboard reads it through the v1
endpoint (``/query?db=<bucket>``) with a token. Here a short synthetic history of the demo's
fictional unit is loaded into a raw bucket (loader token), the worker runs on it through the
influx2 store with its least-privilege token (read raw; read and write results, a bucket of
their own), the analysis writes its rows back, and each panel query is sent with a token that
may only read the results bucket, as a dashboard's would be. Each query must return its series
with values for every column it selects. The history is invented (isentrope.daemon.synthetic).
"""

from __future__ import annotations

import json
import re
import urllib.parse
from pathlib import Path

import pandas as pd
import pytest

from isentrope.daemon.analysis import run_analysis
from isentrope.daemon.commands.demo import DEMO_CHUNK, DEMO_START, demo_config_toml
from isentrope.daemon.config import load_config
from isentrope.daemon.stores import open_store
from isentrope.daemon.worker import Worker

DASHBOARD = Path(__file__).resolve().parents[2] / "deploy" / "dashboard.json"
#: Days of synthetic history: enough for a baseline, the injected IP step and the operating
#: hours a degradation rate needs (as the demo test, tests/daemon/test_demo_report.py).
DAYS = 35


def _targets(dash: dict):
    """(panel title, target) of every query target of the dashboard."""
    for panel in dash["panels"]:
        for target in panel.get("targets", []):
            yield panel["title"], target


@pytest.fixture(scope="module")
def demo_on_2x(influxdb_2x, tmp_path_factory):
    from isentrope.daemon import synthetic

    server = influxdb_2x
    w = server.worker_buckets("dash")
    start = pd.Timestamp(DEMO_START, tz="UTC")
    end = start + pd.Timedelta(days=DAYS)
    text = demo_config_toml("unused.sqlite", start, DAYS)
    store_block = (
        f'[store]\nkind = "influx2"\nurl = "{server.url}"\norg = "{server.ORG}"\n'
        f'bucket = "{w.raw}"\nresults_bucket = "{w.results}"\ntoken_file = "worker.token"\n'
    )
    text = re.sub(r"\[store\]\nkind = \"sqlite\"\npath = \"[^\"]*\"\n", store_block, text)
    assert store_block in text
    folder = tmp_path_factory.mktemp("dash2x")
    (folder / "worker.token").write_text(w.token + "\n")
    (folder / "unit.toml").write_text(text)
    config = load_config(folder / "unit.toml")

    frame, _ = synthetic.generate(start=start, days=DAYS)
    loader = open_store("influx2", url=server.url, org=server.ORG, bucket=w.raw, token=w.loader)
    try:
        loader.write_raw(config.mappings, synthetic.to_plant_units(frame))
    finally:
        loader.close()
    store = config.store.open()
    try:
        worker = Worker.from_config(
            config,
            store,
            checkpoint_name="dash",
            start_default=start,
            lookback="0s",
            settle="0s",
            chunk=DEMO_CHUNK,
        )
        report = worker.run_cycle(until=end)
        assert report.ok, report.error
        run_analysis(store, config, end)
    finally:
        store.close()
    dash_token = server.new_token("dashboard", read=(w.results_id,))
    return server, w.results, dash_token, config.unit.name, start


def _influxql(server, bucket: str, token: str, q: str) -> dict:
    status, raw = server.request(
        "POST",
        "/query?" + urllib.parse.urlencode({"db": bucket, "epoch": "ms"}),
        urllib.parse.urlencode({"q": q}).encode(),
        token,
        {"Content-Type": "application/x-www-form-urlencoded"},
    )
    assert status == 200, f"{q}: HTTP {status}: {raw[:300]!r}"
    body = json.loads(raw)
    for result in body.get("results", []):
        assert "error" not in result, f"{q}: {result['error']}"
    return body


def _fill(q: str, unit: str, start: pd.Timestamp) -> str:
    """The query as a dashboard sends it: the unit chosen, the time range from the start of the
    history to now (the heartbeat rows carry the wall-clock time of the run), both ends
    included as in a dashboard's time filter."""
    now = pd.Timestamp.now(tz="UTC") + pd.Timedelta("1h")
    window = f"time >= {start.value // 1_000_000}ms AND time <= {now.value // 1_000_000}ms"
    return q.replace("$unit", re.escape(unit)).replace("$timeFilter", window)


@pytest.mark.influx
def test_unit_variable_lists_the_unit(demo_on_2x):
    server, bucket, token, unit, start = demo_on_2x
    dash = json.loads(DASHBOARD.read_text())
    (variable,) = [v for v in dash["templating"]["list"] if v["name"] == "unit"]
    body = _influxql(server, bucket, token, variable["query"])
    values = [row[1] for s in body["results"][0].get("series", []) for row in s["values"]]
    assert values == [unit]


@pytest.mark.influx
def test_every_panel_query_returns_its_series(demo_on_2x):
    server, bucket, token, unit, start = demo_on_2x
    dash = json.loads(DASHBOARD.read_text())
    targets = list(_targets(dash))
    assert len(targets) >= 20
    empty = []
    for title, target in targets:
        q = _fill(target["query"], unit, start)
        series = _influxql(server, bucket, token, q)["results"][0].get("series", [])
        if not series:
            empty.append(f"{title} [{target['refId']}]: no series for {q}")
            continue
        for s in series:
            for i, column in enumerate(s["columns"][1:], start=1):
                if all(row[i] is None for row in s["values"]):
                    empty.append(f"{title} [{target['refId']}]: column {column!r} has no value ({q})")
    assert not empty, "\n".join(empty)


@pytest.mark.influx
def test_the_dashboard_token_cannot_write(demo_on_2x):
    server, bucket, token, unit, start = demo_on_2x
    status, _ = server.request(
        "POST", "/write?" + urllib.parse.urlencode({"db": bucket}), b"probe value=1 0", token
    )
    assert status in (401, 403)
