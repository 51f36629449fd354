"""What the stores write is read back by something we did not write.

InfluxDB: Debian's ``influx`` command line client (InfluxQL, CSV output) and plain HTTP
(Flux on /api/v2/query). SQLite: the documented schema through plain SQL, as a dashboard
would query it. Values are invented test data.
"""

from __future__ import annotations

import csv
import io
import json
import sqlite3
import subprocess
import urllib.request

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import open_store

T0 = pd.Timestamp("2026-04-01T06:00:00Z")


def results(n=5):
    idx = pd.date_range(T0, periods=n, freq="15min", tz="UTC")
    return pd.DataFrame(
        {
            "hp_efficiency": 0.8612 + np.arange(n) / 1000,
            'hp efficiency, "corrected"': 0.85 + np.arange(n) / 1000,
        },
        index=idx,
    )


def run_cli(cli, server, db, q):
    out = subprocess.run(
        [
            cli,
            "-host",
            "127.0.0.1",
            "-port",
            str(server.port),
            "-database",
            db,
            "-execute",
            q,
            "-format",
            "csv",
            "-precision",
            "rfc3339",
        ],
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
        stdin=subprocess.DEVNULL,
    ).stdout
    return list(csv.DictReader(io.StringIO(out)))


@pytest.mark.influx
@pytest.mark.parametrize("which", ["influx1-1.6", "influx2-1.8"])
def test_results_read_by_the_influx_cli(request, influx_cli, which):
    server = request.getfixturevalue("influxdb_v1" if which == "influx1-1.6" else "influxdb_v2")
    db = server.new_database("readback")
    if which == "influx1-1.6":
        store = open_store("influx1", url=server.url, database=db)
    else:
        store = open_store("influx2", url=server.url, org="-", bucket=server.bucket(db))
    frame = results()
    with store:
        store.write_results("sections", frame, {"unit": "U7 north"})
        store.write_results("sections", frame, {"unit": "U7 north"})  # idempotent
        maps = [
            RoleMapping(role="throttle_p", tag="MS_P", unit="MPa", measurement="plant", tags={"unit": "U7"})
        ]
        store.write_raw(maps, pd.DataFrame({"throttle_p": [16.51, 16.49]}, index=frame.index[:2]))
        store.set_checkpoint("U7", T0)
    rows = run_cli(influx_cli, server, db, 'SELECT * FROM "sections" WHERE "unit" = \'U7 north\'')
    assert len(rows) == 5
    assert [r["time"] for r in rows] == [t.strftime("%Y-%m-%dT%H:%M:%SZ") for t in frame.index]
    np.testing.assert_array_equal(
        [float(r["hp_efficiency"]) for r in rows], frame["hp_efficiency"].to_numpy()
    )
    np.testing.assert_array_equal(
        [float(r['hp efficiency, "corrected"']) for r in rows], frame['hp efficiency, "corrected"'].to_numpy()
    )
    assert {r["unit"] for r in rows} == {"U7 north"}
    raw = run_cli(influx_cli, server, db, 'SELECT "MS_P" FROM "plant"')
    assert [float(r["MS_P"]) for r in raw] == [16.51, 16.49]
    state = run_cli(
        influx_cli, server, db, 'SELECT last("value") FROM "isentrope_worker" WHERE "name" = \'U7\''
    )
    assert pd.Timestamp(state[0]["last"]) == T0


@pytest.mark.influx
def test_results_read_by_plain_http_flux(influxdb_v2):
    server = influxdb_v2
    db = server.new_database("readback")
    frame = results(3)
    with open_store("influx1", url=server.url, database=db) as store:
        store.write_results("sections", frame, {"unit": "U7"})
    flux = (
        f'from(bucket: "{db}/autogen") |> range(start: 2026-01-01T00:00:00Z) '
        '|> filter(fn: (r) => r._measurement == "sections" and r._field == "hp_efficiency")'
        ' |> keep(columns: ["_time", "_value"])'
    )
    req = urllib.request.Request(
        server.url + "/api/v2/query",
        data=json.dumps({"query": flux, "dialect": {"annotations": []}}).encode(),
        headers={"Content-Type": "application/json", "Accept": "application/csv"},
    )
    with urllib.request.urlopen(req, timeout=30) as resp:
        rows = list(csv.DictReader(io.StringIO(resp.read().decode())))
    assert [float(r["_value"]) for r in rows] == frame["hp_efficiency"].tolist()
    assert [pd.Timestamp(r["_time"]) for r in rows] == list(frame.index)


def test_sqlite_results_read_with_plain_sql(tmp_path):
    path = tmp_path / "unit.sqlite"
    frame = results(4)
    with open_store("sqlite", path=path) as store:
        store.write_results("sections", frame, {"unit": "U7"})
        store.write_results("sections", frame.iloc[:2] * 0 + 0.5, {"unit": "U7"})
        store.write_results("sections", frame, {"unit": "U8", "train": "A"})  # a new tag key widens the key
        maps = [RoleMapping(role="throttle_p", tag="MS_P", unit="MPa")]
        store.write_raw(maps, pd.DataFrame({"throttle_p": [16.51, np.nan, 16.49]}, index=frame.index[:3]))
        store.set_checkpoint("U7", T0)
        store.save_state("alarms", {"hp": "clear"})
    db = sqlite3.connect(path)
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    rows = db.execute(
        'SELECT time_utc, hp_efficiency, "hp efficiency, ""corrected""" FROM sections '
        "WHERE unit = 'U7' ORDER BY time"
    ).fetchall()
    assert [r[0] for r in rows] == [t.strftime("%Y-%m-%dT%H:%M:%S.000Z") for t in frame.index]
    assert [r[1] for r in rows] == [0.5, 0.5] + frame["hp_efficiency"].tolist()[2:]
    assert db.execute("SELECT count(*) FROM sections").fetchone()[0] == 8
    assert db.execute("SELECT count(*) FROM sections WHERE unit = 'U8' AND train = 'A'").fetchone()[0] == 4
    pk = [r[1] for r in db.execute("PRAGMA table_info(sections)") if r[5]]
    assert sorted(pk) == ["time", "train", "unit"]
    assert db.execute("SELECT tag, time, value FROM samples ORDER BY time").fetchall() == [
        ("MS_P", T0.value // 1_000_000, 16.51),
        ("MS_P", (T0 + pd.Timedelta("30min")).value // 1_000_000, 16.49),
    ]
    assert db.execute("SELECT time_ns FROM isentrope_checkpoint WHERE name = 'U7'").fetchone()[0] == T0.value
    assert json.loads(db.execute("SELECT state FROM isentrope_state").fetchone()[0]) == {"hp": "clear"}
