"""Exception-reported historian data give the same trends, steps and alarms as the regular export.

From a regular synthetic history (isentrope.daemon.synthetic, the fictional unit: 100 days at
5 minutes with its HP loss, the IP step at the trip, three shutdowns, a stuck transmitter, a
gap of absent rows and a spike burst) the test makes the exception-reported version itself
(``synthetic.exception_report``: a value kept only when it moved beyond the tag's deadband,
or after an hour; about 30 % of the samples), loads it with ``isentrope import-csv`` as a
long CSV export at irregular times, and runs ``backfill`` and the analysis on both stores.
The exception run reads on a 5-minute grid, holding each value up to 90 minutes, with the
deadbands configured (``[read]``).

Tolerances (project choice, no source; the injected changes are 0.5 point per 1000 h and a
1-point step): rate within 0.05 point per 1000 operating hours, step size within 0.15 point
and dated within one day; every alarm of one run in the other, same section, rule and kind,
within one day (a gap is seen up to one maximum hold age later on held data). 100 days, not
more: by then the HP loss nears the deviation warning (-1 point), and a run that ends with the
loss at the threshold may raise it in one run and not in the other, which says nothing about
the reading of exception data.
"""

from __future__ import annotations

import csv

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon import cli, synthetic
from isentrope.daemon.analysis import run_analysis
from isentrope.daemon.commands.demo import demo_config_toml
from isentrope.daemon.config import load_config
from isentrope.daemon.stores import open_store

START = pd.Timestamp("2025-01-01", tz="UTC")
DAYS = 100
DAY = pd.Timedelta(days=1)
RATE_TOL = 0.05  # [points per 1000 h]
STEP_TOL = 0.15  # [points]

READ = '\n[read]\ninterval = "5m"\nfill = "hold"\nmax_age = "1h30m"\n' + "".join(
    f"\n[read.roles.{role}]\ndeadband = {band}\n" for role, band in synthetic.EXCEPTION_DEADBANDS.items()
)
FAST = '\n[schedule]\nchunk = "10d"\n'  # fewer, longer chunks: the same results, sooner


def _iso(t):
    return pd.Timestamp(t).strftime("%Y-%m-%dT%H:%MZ")


def _run(folder, name, extra, load, store_table=None):
    path = folder / f"{name}.toml"
    text = demo_config_toml(f"{name}.sqlite", START, DAYS)
    if store_table is not None:
        sqlite_table = f'[store]\nkind = "sqlite"\npath = "{name}.sqlite"'
        assert sqlite_table in text
        text = text.replace(sqlite_table, store_table)
    path.write_text(text + FAST + extra, encoding="utf-8")
    config = load_config(path)
    load(config, path)
    rc = cli.main(
        [
            "backfill",
            "-c",
            str(path),
            "--start",
            _iso(START),
            "--end",
            _iso(START + DAYS * DAY),
            "--no-progress",
        ]
    )
    assert rc == 0
    store = config.store.open()
    try:
        analysis = run_analysis(store, config, write=False)
        events = []
        for section, rule in sorted(set(_series(config))):
            ev = store.read_results(
                "alarm_events",
                START,
                START + DAYS * DAY,
                {"unit": config.unit.name, "section": section, "rule": rule},
            )
            if len(ev):
                events += [
                    (t, section, rule, "raised" if r > 0.5 else "cleared") for t, r in ev["raised"].items()
                ]
    finally:
        store.close()
    return analysis, sorted(events)


def _series(config):
    from isentrope.daemon.analysis import alarm_series

    return alarm_series(config)


def _history():
    frame, truth = synthetic.generate(start=START, days=DAYS, seed=5, faults=True, freq="5min")
    plant = synthetic.to_plant_units(frame)
    return plant, truth, synthetic.exception_report(plant, synthetic.EXCEPTION_DEADBANDS, "1h")


def _import_export(folder, kept):
    """The historian's compressed export (long time,tag,value rows at irregular times) loaded
    with ``isentrope import-csv``."""

    def load(config, path):
        tag = {m.role: m.tag for m in synthetic.role_mappings()}
        rows = sorted((t, tag[role], v) for role, s in kept.items() for t, v in s.items())
        export = folder / "export.csv"
        with export.open("w", newline="", encoding="utf-8") as f:
            w = csv.writer(f)
            w.writerow(["time", "tag", "value"])
            w.writerows((t.strftime("%Y-%m-%dT%H:%M:%SZ"), name, repr(v)) for t, name, v in rows)
        assert cli.main(["import-csv", "-c", str(path), str(export)]) == 0

    return load


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("exception")
    plant, truth, kept = _history()

    def load_regular(config, path):
        store = open_store("sqlite", path=folder / "regular.sqlite")
        store.write_raw(synthetic.role_mappings(), plant)
        store.close()

    regular = _run(folder, "regular", "", load_regular)
    exceptional = _run(folder, "exception", READ, _import_export(folder, kept))
    return plant, kept, truth, regular, exceptional


@pytest.mark.slow
def test_the_compressed_export_keeps_a_third_and_imports_at_its_own_times(runs, tmp_path_factory):
    plant, kept, truth, _, _ = runs
    share = sum(len(s) for s in kept.values()) / plant.notna().sum().sum()
    assert 0.25 < share < 0.4, share
    folder = tmp_path_factory.getbasetemp() / "exception0"
    store = open_store("sqlite", path=folder / "exception.sqlite")
    try:
        got = store.read_raw(synthetic.role_mappings(), START, START + DAYS * DAY)
    finally:
        store.close()
    for role, s in kept.items():
        back = got[role].dropna()
        assert back.index.equals(pd.DatetimeIndex(s.index).as_unit("ns"))  # irregular times kept
        np.testing.assert_allclose(back.to_numpy(), s.to_numpy(), rtol=1e-12)


@pytest.mark.slow
def test_rates_steps_and_alarms_agree_with_the_regular_export(runs):
    _, _, truth, (a_reg, ev_reg), (a_exc, ev_exc) = runs
    assert set(a_reg.sections) == set(a_exc.sections) == {"hp", "ip", "lp_dry"}
    for sec in a_reg.sections:
        r, e = a_reg.sections[sec], a_exc.sections[sec]
        assert len(e.deviation) > 0.8 * len(r.deviation), sec  # steady windows found on held data
        assert abs(r.rate.slope_per_1000h - e.rate.slope_per_1000h) < RATE_TOL, sec
        assert len(r.steps) == len(e.steps), sec
        for s_r, s_e in zip(r.steps, e.steps, strict=True):
            assert abs(s_r.size - s_e.size) < STEP_TOL
            assert abs(pd.Timestamp(s_r.time) - pd.Timestamp(s_e.time)) <= DAY
    # the IP step of the trip is found in both (injected: truth["ip"])
    assert [round(s.size) for s in a_exc.sections["ip"].steps] == [-1]
    _same_events(a_reg.alarm_events, a_exc.alarm_events)
    # The HP loss of this history ends near the -1 pt warning level, where a window's deviation
    # on held data (within its scatter of the regular one) may cross the level once more: every
    # HP warning of the regular run is in the compressed run within a day; the rest agree fully.
    _same_events([e for e in ev_reg if e[1] != "hp"], [e for e in ev_exc if e[1] != "hp"])
    exc_hp = [e for e in ev_exc if e[1] == "hp"]
    for t, _, rule, kind in (e for e in ev_reg if e[1] == "hp"):
        assert any(r == rule and k == kind and abs(u - t) <= DAY for u, _, r, k in exc_hp), (t, rule, exc_hp)


@pytest.mark.slow
@pytest.mark.influx
@pytest.mark.parametrize("kind", ["influx2", "influx1"])
def test_the_same_exception_export_gives_the_same_results_on_an_influxdb_store(
    kind, runs, request, tmp_path, monkeypatch
):
    # The grid read is native on each store (Flux aggregateWindow; InfluxQL GROUP BY time()) and
    # must give the SQLite run's grid values, hence the same figures (to round-off of sums).
    server = request.getfixturevalue("influxdb_v2" if kind == "influx2" else "influxdb_v1")
    db = server.new_database("exc")
    if kind == "influx2":
        monkeypatch.setenv("ISENTROPE_TEST_TOKEN", "isentrope:unused")  # auth is off on the test server
        table = (
            f'[store]\nkind = "influx2"\nurl = "{server.url}"\norg = "-"\nbucket = "{server.bucket(db)}"\n'
            'token = "${ISENTROPE_TEST_TOKEN}"\ntimeout = "60s"'
        )
    else:
        table = f'[store]\nkind = "influx1"\nurl = "{server.url}"\ndatabase = "{db}"\ntimeout = "60s"'
    _, kept, _, _, (a_sql, ev_sql) = runs
    a_inf, ev_inf = _run(tmp_path, "exception", READ, _import_export(tmp_path, kept), store_table=table)
    for sec, o in a_sql.sections.items():
        p = a_inf.sections[sec]
        assert len(p.deviation) == len(o.deviation), sec
        np.testing.assert_allclose(p.deviation.to_numpy(), o.deviation.to_numpy(), rtol=0, atol=1e-9)
        assert p.rate.slope_per_1000h == pytest.approx(o.rate.slope_per_1000h, abs=1e-9)
        assert [(s.time, round(s.size, 9)) for s in p.steps] == [(s.time, round(s.size, 9)) for s in o.steps]
    assert ev_inf == ev_sql


def _same_events(one, other):
    """Same (section, rule, kind) sequence, each pair of times within a day."""
    if isinstance(one, pd.DataFrame):
        one = sorted(zip(one.index, one["section"], one["rule"], one["kind"], strict=True))
        other = sorted(zip(other.index, other["section"], other["rule"], other["kind"], strict=True))
    keys = lambda ev: sorted((s, r, k, t) for t, s, r, k in ev)  # noqa: E731
    a, b = keys(one), keys(other)
    assert [x[:3] for x in a] == [x[:3] for x in b], (a, b)
    for x, y in zip(a, b, strict=True):
        assert abs(x[3] - y[3]) <= DAY, (x, y)
