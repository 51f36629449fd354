"""The InfluxDB server goes away while the worker writes: stopped (SIGTERM), frozen (SIGSTOP,
so that requests hang until the store's timeout) or killed (SIGKILL), a few seconds each,
then back on the same port with the same data. The worker retries with backoff and ends with
the results of an uninterrupted run, bit for bit; a failure beyond the retries ends the
command with exit 3, and the same command resumes.

Servers: the session's influxd 1.6.7 (``backfill`` processes on the InfluxQL store) and 1.8.10
(in-process worker cycles on the Flux store), on 127.0.0.1. Data: a short synthetic history of
the fictional Greywater Bend Unit 2 (isentrope.daemon.synthetic), five-minute samples.
"""

from __future__ import annotations

import os
import random
import signal
import time

import pandas as pd
import pytest
import worker_support as ws

from isentrope.daemon.cli import main as cli_main
from isentrope.daemon.commands.backfill import checkpoint_name
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import Pipeline
from isentrope.daemon.worker import STATUS_MEASUREMENT, Worker

from .test_kills import UNIT, cli, compare_exactly, results, unit_store

TAGS = {"unit": UNIT}
FIRST = ws.START + pd.Timedelta("5h")
#: how long each fault lasts [s]; the store's timeout is 2 s, the retries' backoff 0.5 s to 2 s
OUTAGE_S = 3.0
RETRIES = 'retries = 12\nbackoff = "0.5s"\nbackoff_max = "2s"'


def _stop(server):
    server.stop()
    time.sleep(OUTAGE_S)
    server.start()


def _freeze(server):
    pid = server._proc.pid
    os.kill(pid, signal.SIGSTOP)
    try:
        time.sleep(OUTAGE_S)
    finally:
        os.kill(pid, signal.SIGCONT)


def _kill(server):
    server.kill()
    time.sleep(OUTAGE_S)
    server.start()


FAULTS = {"stopped": _stop, "frozen": _freeze, "killed": _kill}


@pytest.mark.influx
@pytest.mark.slow
def test_backfill_through_a_stopped_frozen_and_killed_server_ends_with_the_uninterrupted_results(
    request, tmp_path, fault_report
):
    kind = "influx1-1.6"
    server = request.getfixturevalue("influxdb_v1")
    raw = ws.plant_history(1.0, freq="5min")
    start, end = FIRST, FIRST + pd.Timedelta("8h")
    args = ["--start", start.isoformat(), "--end", end.isoformat(), "--chunk", "1h", "--no-progress"]
    replace = [
        ('timeout = "30s"', 'timeout = "2s"'),
        ('retries = 2\nbackoff = "1s"\nbackoff_max = "2s"', RETRIES),
    ]
    _, ref_cfg, ref = unit_store(request, kind, tmp_path, "reference", raw, replace=replace)
    assert RETRIES in ref_cfg.read_text()
    assert cli_main(["backfill", "-c", str(ref_cfg), *args]) == 0
    expected = results(ref, start, end)
    rng = random.Random(23)
    try:
        for what, fault in FAULTS.items():
            _, cfg, store = unit_store(request, kind, tmp_path, f"outage_{what}", raw, replace=replace)
            name = checkpoint_name(UNIT, start, end)
            proc = cli("--debug", "backfill", "-c", str(cfg), *args)  # --debug: the retries are logged
            deadline = time.monotonic() + 60
            while proc.poll() is None and time.monotonic() < deadline and store.get_checkpoint(name) is None:
                time.sleep(0.02)
            time.sleep(rng.uniform(0.0, 0.3))  # into the next chunk's reads or writes
            faulted = proc.poll() is None
            fault(server)
            _, err = proc.communicate(timeout=180)
            runs = 1
            if proc.returncode == 3:  # beyond the retries: the same command resumes
                again = cli("backfill", "-c", str(cfg), *args)
                _, err2 = again.communicate(timeout=180)
                err, runs = err + err2, 2
                assert again.returncode == 0, err[-3000:]
            assert proc.returncode in (0, 3), err[-3000:]
            retried = err.count("; retry ")
            same, lost, why = compare_exactly(expected, results(store, start, end))
            fault_report.record(
                "server outage",
                f"backfill, {kind} {what} {OUTAGE_S:.0f} s mid-write ({runs} run(s), {retried} retries)",
                as_expected=same and faulted and retried > 0,
                lost_data=lost,
                detail=why or ("" if faulted else "the backfill ended before the fault"),
            )
            assert faulted, "the backfill ended before the fault"
            assert retried > 0, err[-3000:]  # the fault was felt, and retried
            assert same, (what, why)
            assert store.get_checkpoint(name) == end
            store.close()
    finally:
        if not server.running:
            server.start()
    ref.close()


# --- the InfluxDB server stopped part-way through a run of cycles ----------------------------


@pytest.mark.influx
@pytest.mark.slow
def test_influx_server_stopped_and_restarted_the_worker_keeps_going_and_catches_up(
    influxdb_v2, tmp_path, fault_report
):
    from isentrope.daemon.stores import open_store

    raw = ws.plant_history(1.0, freq="5min")

    def unit(name: str):
        db = influxdb_v2.new_database(name)
        store_table = ws.influx18_store_toml(influxdb_v2, db)
        path = ws.write_config(tmp_path / f"{name}.toml", store_table)
        config = load_config(path, environ={"ISENTROPE_TEST_TOKEN": "isentrope:unused"})
        store = open_store(config.store.kind, **config.store.open_options())
        store.write_raw(config.mappings, raw)
        return config, store

    times = [ws.START + pd.Timedelta("10h") + k * pd.Timedelta("2h") for k in range(3)]

    def worker(config, store, clock):
        return Worker.from_config(
            config,
            store,
            pipeline=pipeline,
            start_default=FIRST,
            clock=clock,
            sleep=lambda s: None,
            rng=random.Random(5),
        )

    cfg_a, a = unit("steady")
    pipeline = Pipeline(cfg_a)
    clock_a = ws.FakeClock(times[0])
    wa = worker(cfg_a, a, clock_a)
    for t in times:
        clock_a.now = t
        assert wa.run_cycle().ok

    cfg_b, b = unit("outage")
    clock_b = ws.FakeClock(times[0])
    wb = worker(cfg_b, b, clock_b)
    reports = []
    try:
        for k, t in enumerate(times):
            clock_b.now = t
            if k == 1:
                influxdb_v2.stop()  # the database goes away for a cycle
            if k == 2:
                influxdb_v2.start()
            reports.append(wb.run_cycle())  # never raises for a temporary outage
    finally:
        if not influxdb_v2.running:
            influxdb_v2.start()
    assert [r.ok for r in reports] == [True, False, True]
    assert "store unreachable" in reports[1].error
    assert reports[2].chunks_done >= 2  # caught up from the checkpoint in chunks
    assert a.get_checkpoint(wa.checkpoint_name) == b.get_checkpoint(wb.checkpoint_name)
    end = ws.START + pd.Timedelta(days=3)
    same, lost, why = compare_exactly(results(a, ws.START, end), results(b, ws.START, end))
    fault_report.record(
        "server outage",
        "run cycles, influx2-1.8 stopped for a cycle",
        as_expected=same,
        lost_data=lost,
        detail=why,
    )
    assert same, why
    got = results(b, ws.START, end)
    assert len(got["section_samples"]) > 50 and len(got["steady_windows"]) >= 2
    status = b.read_results(
        STATUS_MEASUREMENT, times[0], times[-1] + pd.Timedelta("1h"), {**TAGS, "worker": wb.checkpoint_name}
    )
    # heartbeats of the cycles the server was up for (the store may deliver the one of the
    # outage later, from its kept batch: then it says the cycle failed)
    assert {times[0], times[2]} <= set(status.index)
    assert status.loc[times[2], "ok"] == 1.0 and status.loc[times[2], "lag_s"] > 0
    if times[1] in status.index:
        assert status.loc[times[1], "ok"] == 0.0
    a.close()
    b.close()
