"""Faults the worker must survive, against real stores: raw data with strings, NaN, out-of-range
values, duplicate times and gaps, a clean stop on SIGTERM, an unreachable store, a bad
configuration. Kills, server outages and the rest of the fault suite are in tests/faults.

Data: a short synthetic history of the fictional Greywater Bend Unit 2
(isentrope.daemon.synthetic), five-minute samples to keep the tests quick.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import worker_support as ws

from isentrope.daemon.cli import main as cli_main
from isentrope.daemon.config import load_config
from isentrope.daemon.stores.sqlite import SqliteStore
from isentrope.daemon.worker import STATUS_MEASUREMENT, Worker

UNIT = "Greywater Bend 2"
TAGS = {"unit": UNIT}
FIRST = ws.START + pd.Timedelta("5h")


def sqlite_unit(tmp_path: Path, name: str, raw: pd.DataFrame, schedule: str = "") -> tuple[Path, SqliteStore]:
    db = tmp_path / f"{name}.sqlite"
    cfg = ws.write_config(tmp_path / f"{name}.toml", ws.store_toml("sqlite", path=str(db)), schedule=schedule)
    store = SqliteStore(db)
    store.write_raw(ws.mappings(), raw)
    return cfg, store


THREE_DAYS = pd.Timedelta(days=3)


def all_results(store, start=ws.START, end=ws.START + THREE_DAYS):
    return {m: store.read_results(m, start, end, TAGS) for m in ws.RESULT_MEASUREMENTS}


def assert_same_store_results(a, b):
    ra, rb = all_results(a), all_results(b)
    for m in ws.RESULT_MEASUREMENTS:
        if len(ra[m]) or len(rb[m]):
            ws.assert_same_results(ra[m], rb[m])
    return ra


def cli(*args: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONWARNINGS": "error"}
    return subprocess.Popen(
        [sys.executable, "-m", "isentrope.daemon.cli", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )


# --- bad raw data -----------------------------------------------------------------------------


def test_strings_nan_out_of_range_duplicates_and_gaps_are_flagged_and_nothing_stored_is_lost(tmp_path):
    raw = ws.plant_history(1.0, freq="5min")
    cfg, store = sqlite_unit(tmp_path, "bad", raw)
    config = load_config(cfg)
    clock = ws.FakeClock(ws.START + pd.Timedelta("10h"))
    worker = Worker.from_config(config, store, start_default=FIRST, clock=clock, sleep=lambda s: None)
    assert worker.run_cycle().ok
    # final by now, and before the look-back of the next cycle (checkpoint 07:13 - 30 min)
    before = all_results(store, FIRST, ws.START + pd.Timedelta("6h"))
    assert len(before["section_samples"]) > 0

    # then the historian delivers rubbish for the next hours (after the first cycle's end)
    t0 = ws.START + pd.Timedelta("10h30min")
    tags = {m.role: m.tag for m in ws.mappings()}
    bad = raw.loc[t0 + pd.Timedelta("5min") : t0 + pd.Timedelta("3h")].copy()
    bad.loc[t0 + pd.Timedelta("15min"), "cold_reheat_p"] = 5000.0  # outside its 0..60 bar(g) range
    bad.loc[t0 + pd.Timedelta("20min"), "gross_output"] = -500.0
    store.write_raw(ws.mappings(), bad.loc[[t0 + pd.Timedelta("25min")]].assign(hot_reheat_t=1.0))
    store.write_raw(ws.mappings(), bad)  # the duplicate: the later write wins
    ms = {dt: int((t0 + pd.Timedelta(dt)).value // 1_000_000) for dt in ("0min", "10min")}
    with sqlite3.connect(tmp_path / "bad.sqlite") as db:
        # a string, as a careless import leaves it, and an empty (NULL) value
        db.execute(
            "UPDATE samples SET value = 'BAD' WHERE tag = ? AND time = ?", (tags["throttle_p"], ms["0min"])
        )
        db.execute(
            "UPDATE samples SET value = NULL WHERE tag = ? AND time = ?", (tags["throttle_t"], ms["10min"])
        )
    gap = (raw.index > t0 + pd.Timedelta("1h")) & (raw.index < t0 + pd.Timedelta("2h"))
    with sqlite3.connect(tmp_path / "bad.sqlite") as db:  # a gap: an hour of samples never arrived
        db.executemany(
            "DELETE FROM samples WHERE time = ?", [(int(t.value // 1_000_000),) for t in raw.index[gap]]
        )
    raw_before = store.read_raw(ws.mappings(), ws.START, ws.START + pd.Timedelta(days=1))

    clock.now = ws.START + pd.Timedelta("17h")
    report = worker.run_cycle()
    assert report.ok and report.rows_flagged >= 4
    samples = store.read_results("section_samples", t0, t0 + pd.Timedelta("3h"), TAGS)
    for dt in ("0min", "10min", "15min", "20min"):
        t = t0 + pd.Timedelta(dt)
        assert samples.loc[t, "quality_flags"] != 0 and samples.loc[t, "ok"] == 0.0, dt
    assert not samples.index.isin(raw.index[gap]).any()  # nothing invented in the gap
    assert samples.loc[t0 + pd.Timedelta("25min"), "ip_efficiency"] > 0.5  # the later hot reheat value won

    after = all_results(store, FIRST, ws.START + pd.Timedelta("6h"))
    for m in ws.RESULT_MEASUREMENTS:
        if len(before[m]):
            ws.assert_same_results(before[m], after[m], rtol=0.0)  # earlier results untouched
    pd.testing.assert_frame_equal(
        store.read_raw(ws.mappings(), ws.START, ws.START + pd.Timedelta(days=1)), raw_before
    )  # the worker never changes raw data
    status = store.read_results(
        STATUS_MEASUREMENT,
        ws.START,
        ws.START + pd.Timedelta(days=1),
        {**TAGS, "worker": worker.checkpoint_name},
    )
    assert status["rows_flagged"].max() >= 4


# --- the daemon: APScheduler, heartbeat, SIGTERM ----------------------------------------------


@pytest.mark.slow
def test_run_serves_cycles_and_stops_cleanly_on_sigterm(tmp_path):
    now = pd.Timestamp.now(tz="UTC").floor("5min")
    idx = pd.date_range(now - pd.Timedelta("6h"), now, freq="5min", name="time")
    raw = ws.plant_history(1.0, freq="5min").iloc[: len(idx)].set_axis(idx, axis=0)
    cfg, store = sqlite_unit(tmp_path, "live", raw, schedule="")
    text = cfg.read_text().replace('interval = "5m"', 'interval = "1s"')
    cfg.write_text(text)
    proc = cli("run", "-c", str(cfg))
    deadline = time.monotonic() + 90
    rows = pd.DataFrame()
    while time.monotonic() < deadline and proc.poll() is None:
        rows = store.read_results(
            STATUS_MEASUREMENT, now - pd.Timedelta("1h"), now + pd.Timedelta("1h"), TAGS
        )
        if len(rows) >= 2:
            break
        time.sleep(0.2)
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 0, err
    assert len(rows) >= 2  # one heartbeat per cycle: the interval job ran more than once
    assert "worker stopped on signal 15" in err
    assert store.get_checkpoint(f"run/{UNIT}") is not None


def test_run_once_exits_3_when_the_store_stays_unreachable(tmp_path):
    port = ws.free_port()
    text = ws.store_toml(
        "influx1",
        url=f"http://127.0.0.1:{port}",
        database="nowhere",
        username="u",
        password="${ISENTROPE_TEST_PASSWORD}",
        timeout="1s",
    )
    cfg = ws.write_config(tmp_path / "down.toml", text, schedule="")
    cfg.write_text(cfg.read_text().replace("retries = 2", "retries = 0"))
    env = {**os.environ, "ISENTROPE_TEST_PASSWORD": "x"}
    proc = subprocess.run(
        [sys.executable, "-m", "isentrope.daemon.cli", "run", "-c", str(cfg), "--once"],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert proc.returncode == 3, proc.stderr
    assert "Traceback" not in proc.stderr


@pytest.mark.parametrize(
    "command", [["run", "--once"], ["backfill", "--start", "2025-03-03", "--end", "2025-03-04"]]
)
def test_a_bad_configuration_exits_2_before_any_connection(tmp_path, capsys, command):
    import socket

    with socket.socket() as listener:  # a port that would notice a connection attempt
        listener.bind(("127.0.0.1", 0))
        listener.listen(1)
        listener.settimeout(0.2)
        port = listener.getsockname()[1]
        text = ws.store_toml(
            "influx1",
            url=f"http://127.0.0.1:{port}",
            database="unit2",
            username="u",
            password="${ISENTROPE_TEST_PASSWORD}",
        )
        cfg = ws.write_config(tmp_path / "bad.toml", text)
        cfg.write_text(cfg.read_text().replace('lookback = "30m"', 'look_back = "30m"'))
        code = cli_main([command[0], "-c", str(cfg), *command[1:]])
        with pytest.raises(socket.timeout):
            listener.accept()  # nobody knocked
    err = capsys.readouterr().err
    assert code == 2
    assert "configuration error" in err and "look_back" in err and "lookback" in err
