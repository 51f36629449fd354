"""One worker per unit and store, end to end (issue 13 item 4): a backfill runs in a child
process; a second backfill and a `run --once` of the same unit on the same SQLite store are
refused with exit code 6 and a line naming the holder, and the store ends with exactly the
results and alarm events of one backfill. Data: the synthetic unit of
isentrope.daemon.synthetic (fictional) with its faults, which raise data-quality alarms.
"""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import worker_support as ws

from isentrope.daemon.cli import main as cli_main
from isentrope.daemon.errors import EXIT_BUSY
from isentrope.daemon.stores.sqlite import SqliteStore

UNIT = "Greywater Bend 2"
START, END = ws.START, ws.START + pd.Timedelta("3D")
PERIOD = ["--start", START.isoformat(), "--end", END.isoformat(), "--no-progress"]


def _unit(tmp_path: Path, name: str, raw: pd.DataFrame) -> tuple[Path, SqliteStore]:
    db = tmp_path / f"{name}.sqlite"
    cfg = ws.write_config(tmp_path / f"{name}.toml", ws.store_toml("sqlite", path=str(db)))
    store = SqliteStore(db)
    store.write_raw(ws.mappings(), raw)
    return cfg, store


def _events(store):
    return store.read_results("alarm_events", START, END, {"unit": UNIT})


def test_a_second_backfill_and_a_run_are_refused_while_a_backfill_holds_the_unit(tmp_path, capsys):
    raw = ws.plant_history(3.0, faults=True, freq="2min")
    ref_cfg, ref = _unit(tmp_path, "reference", raw)
    assert cli_main(["backfill", "-c", str(ref_cfg), *PERIOD]) == 0
    want = _events(ref)
    assert len(want) >= 4  # the faults raise and clear data-quality alarms

    cfg, store = _unit(tmp_path, "shared", raw)
    lock = store.lock_path(UNIT)
    first = subprocess.Popen(
        [sys.executable, "-m", "isentrope.daemon.cli", "backfill", "-c", str(cfg), *PERIOD],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONWARNINGS": "error"},
    )
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and first.poll() is None:  # until the child holds it
            try:
                if json.loads(lock.read_text() or "{}").get("pid") == first.pid:
                    break
            except (OSError, ValueError):
                pass
            time.sleep(0.02)
        assert first.poll() is None, "the first backfill ended before the test could try a second"
        capsys.readouterr()
        assert cli_main(["backfill", "-c", str(cfg), *PERIOD]) == EXIT_BUSY
        assert cli_main(["run", "-c", str(cfg), "--once"]) == EXIT_BUSY
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 2, err  # one line each
        for line in err:
            assert line.startswith("isentrope: refused: unit 'Greywater Bend 2'"), line
            assert f"pid {first.pid}" in line and "`backfill`" in line and str(lock) in line
        assert first.poll() is None, "the refusals came after the first backfill had ended"
        _, first_err = first.communicate(timeout=300)
    finally:
        if first.poll() is None:
            first.kill()
            first.communicate()
    assert first.returncode == 0, first_err

    got = _events(store)
    pd.testing.assert_frame_equal(got, want)
    with sqlite3.connect(tmp_path / "shared.sqlite") as db:  # no duplicate, asked with plain SQL
        n = db.execute('SELECT COUNT(*) FROM "alarm_events"').fetchone()[0]
        assert n == len(want)
    # released at the end: the next backfill of the unit runs
    assert cli_main(["backfill", "-c", str(cfg), *PERIOD]) == 0
    pd.testing.assert_frame_equal(_events(store), want)


def test_a_worker_whose_lease_was_taken_over_stops_and_exits_6(tmp_path):
    # The scheduled worker's lease is taken by another holder (as after this process was frozen
    # for longer than its lease): the renewal finds it, the worker stops, `run` exits 6.
    import pytest

    from isentrope.daemon.commands.run import _serve
    from isentrope.daemon.config import load_config
    from isentrope.daemon.lease import UnitLease
    from isentrope.daemon.pipeline import Pipeline
    from isentrope.daemon.stores.base import UnitBusyError
    from isentrope.daemon.worker import Worker

    config = load_config(ws.write_config(tmp_path / "u.toml", ws.store_toml("sqlite", path="x.sqlite")))
    store = ws.MemoryStore(ws.plant_history(1.0, freq="5min"))
    worker = Worker.from_config(config, store, pipeline=Pipeline(config), sleep=lambda s: None)
    lease = UnitLease(store, UNIT, "run", pd.Timedelta("0.3s"))
    with lease:
        store.leases[UNIT] = "another/holder/1"  # taken over behind this worker's back
        t0 = time.monotonic()
        with pytest.raises(UnitBusyError, match="taken over"):
            _serve(worker, config, lease)
        assert time.monotonic() - t0 < 30
    assert lease.lost is not None and store.leases[UNIT] == "another/holder/1"  # not released


def test_the_lease_is_released_at_the_end_and_on_an_error(tmp_path):
    from isentrope.daemon.lease import UnitLease

    path = tmp_path / "u.sqlite"
    a, b = SqliteStore(path), SqliteStore(path)
    try:
        with UnitLease(a, UNIT, "backfill", pd.Timedelta("3m")):
            pass
        try:
            with UnitLease(a, UNIT, "backfill", pd.Timedelta("3m")):
                raise RuntimeError("a failing backfill")
        except RuntimeError:
            pass
        with UnitLease(b, UNIT, "run", pd.Timedelta("3m")) as held:
            assert held.lost is None
    finally:
        a.close()
        b.close()
