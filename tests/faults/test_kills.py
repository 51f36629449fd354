"""SIGKILL, again and again: ``isentrope backfill`` and ``isentrope run`` killed at least five
times each in the middle of their work, on SQLite and on InfluxDB 1.6.7 (InfluxQL store), then
left to finish; every result series must equal, bit for bit, that of an uninterrupted run on a
copy of the same raw data (the reference of "the right answer" is the uninterrupted run).

A kill lands a random moment (seeded) after the checkpoint has moved, so in the middle of the
next chunk's reads, computation or writes. Each loop is bounded: five kills, 90 s.

Data: a short synthetic history of the fictional Greywater Bend Unit 2
(isentrope.daemon.synthetic), five-minute samples.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time

import pandas as pd
import pytest
import worker_support as ws

from isentrope.daemon.cli import main as cli_main
from isentrope.daemon.commands.backfill import checkpoint_name

from .fault_stores import store_place

UNIT = "Greywater Bend 2"
TAGS = {"unit": UNIT}
KILLS = 5
LOOP_SECONDS = 90
STORES = ["sqlite", "influx1-1.6"]


def cli(*args: str, env: dict | None = None) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "isentrope.daemon.cli", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, **(env or {})},
    )


def unit_store(request, kind, tmp_path, name, raw, *, schedule="", replace=()):
    """A fresh store of ``kind`` holding ``raw``, its open store and a configuration for it."""
    place = store_place(request, kind, tmp_path, name)
    cfg = ws.write_config(tmp_path / f"{name}.toml", place.toml, schedule=schedule)
    text = cfg.read_text()
    for old, new in replace:
        text = text.replace(old, new)
    cfg.write_text(text)
    store = place.open()
    store.write_raw(ws.mappings(), raw)
    return place, cfg, store


def results(store, start, end) -> dict[str, pd.DataFrame]:
    return {m: store.read_results(m, start, end, TAGS) for m in ws.RESULT_MEASUREMENTS}


def compare_exactly(ref: dict, got: dict) -> tuple[bool, bool, str]:
    """(identical, data lost, what differs): every series bit for bit; lost when a row of the
    reference is missing."""
    same, lost, why = True, False, []
    for m, a in ref.items():
        b = got[m]
        a = a.sort_index().sort_index(axis=1)
        b = b.sort_index().sort_index(axis=1)
        if a.empty and b.empty:
            continue
        missing = a.index.difference(b.index)
        if len(missing):
            lost = True
            why.append(f"{m}: {len(missing)} of {len(a)} rows missing")
        try:
            pd.testing.assert_frame_equal(a, b, check_exact=True, check_freq=False)
        except AssertionError as exc:
            same = False
            why.append(f"{m}: {str(exc).splitlines()[0:3]}")
    return same and not lost, lost, "; ".join(why)


def kill_loop(args, store, checkpoint: str, *, env=None, rng: random.Random, first_after=None) -> list:
    """Start ``isentrope *args`` KILLS times, each time SIGKILL it a random moment after its
    checkpoint has moved (the first time: after it has passed ``first_after``); returns the
    checkpoints seen at the kills. Bounded by LOOP_SECONDS."""
    deadline = time.monotonic() + LOOP_SECONDS
    seen = []
    before = store.get_checkpoint(checkpoint) if first_after is None else first_after
    while len(seen) < KILLS and time.monotonic() < deadline:
        proc = cli(*args, env=env)
        try:
            while proc.poll() is None and time.monotonic() < deadline:
                now = store.get_checkpoint(checkpoint)
                if now is not None and (before is None or now > before):
                    time.sleep(rng.uniform(0.0, 0.1))  # into the next chunk (one takes 0.1-0.5 s)
                    break
                time.sleep(0.02)
            assert proc.poll() is None, f"finished before the kill: {proc.communicate()[1][-2000:]}"
            os.kill(proc.pid, signal.SIGKILL)
        finally:
            proc.kill()
            _, err = proc.communicate(timeout=30)
        assert proc.returncode == -signal.SIGKILL, err[-2000:]
        before = store.get_checkpoint(checkpoint)
        seen.append(before)
    return seen


@pytest.mark.influx
@pytest.mark.parametrize("kind", STORES)
def test_backfill_killed_five_times_ends_with_the_uninterrupted_results(
    request, kind, tmp_path, fault_report
):
    raw = ws.plant_history(1.0, freq="5min")
    start = ws.START + pd.Timedelta("5h")
    end = start + pd.Timedelta("14h")
    args = ["--start", start.isoformat(), "--end", end.isoformat(), "--chunk", "1h", "--no-progress"]
    ref_place, ref_cfg, ref = unit_store(request, kind, tmp_path, "reference", raw)
    place, cfg, store = unit_store(request, kind, tmp_path, "victim", raw)
    env = {**ref_place.environ, **place.environ}
    for k, v in env.items():
        os.environ.setdefault(k, v)
    assert cli_main(["backfill", "-c", str(ref_cfg), *args]) == 0

    name = checkpoint_name(UNIT, start, end)
    kills = kill_loop(["backfill", "-c", str(cfg), *args], store, name, env=env, rng=random.Random(13))
    assert len(kills) == KILLS and kills[-1] is not None and kills[-1] < end, kills
    again = cli("backfill", "-c", str(cfg), *args, env=env)
    _, err = again.communicate(timeout=180)
    assert again.returncode == 0, err[-2000:]
    assert "resuming backfill" in err
    assert store.get_checkpoint(name) == end

    same, lost, why = compare_exactly(results(ref, start, end), results(store, start, end))
    fault_report.record(
        "SIGKILL loop", f"backfill on {kind}: {KILLS} kills", as_expected=same, lost_data=lost, detail=why
    )
    assert same, why
    got = results(store, start, end)
    assert len(got["section_samples"]) == ((raw.index >= start) & (raw.index < end)).sum()
    assert len(got["steady_windows"]) >= 2
    if kind == "sqlite":  # no duplicates, asked of the file with plain SQL, not through our store
        with sqlite3.connect(place.options["path"]) as db:
            for table in ("section_samples", "steady_windows"):
                dup = db.execute(
                    f'SELECT unit, time, COUNT(*) FROM "{table}" GROUP BY unit, time HAVING COUNT(*) > 1'
                ).fetchall()
                assert dup == [], table
                assert db.execute(f'SELECT COUNT(*) FROM "{table}"').fetchone()[0] == len(got[table])
    ref.close()
    store.close()


@pytest.mark.influx
@pytest.mark.parametrize("kind", STORES)
def test_run_killed_five_times_ends_with_the_uninterrupted_results(request, kind, tmp_path, fault_report):
    """``run`` catches up from its checkpoint (as after a stop of some hours); killed five times
    in the catch-up, restarted, it ends with what one uninterrupted ``run --once`` writes."""
    # the data end well before now - settle - the pipeline's after-margin, so that every result
    # of them is final in both runs, whenever each ran
    data_end = pd.Timestamp.now(tz="UTC").floor("5min") - pd.Timedelta("6h")
    idx = pd.date_range(data_end - pd.Timedelta("20h"), data_end, freq="5min", inclusive="left", name="time")
    raw = ws.plant_history(1.0, freq="5min").iloc[: len(idx)].set_axis(idx, axis=0)
    seeded = idx[0] + pd.Timedelta("5h")  # the checkpoint the worker had before its stop
    replace = [('interval = "5m"', 'interval = "1s"'), ('chunk = "6h"', 'chunk = "1h"')]
    schedule = 'analysis_interval = "0s"'
    ref_place, ref_cfg, ref = unit_store(
        request, kind, tmp_path, "reference", raw, schedule=schedule, replace=replace
    )
    place, cfg, store = unit_store(request, kind, tmp_path, "victim", raw, schedule=schedule, replace=replace)
    name = f"run/{UNIT}"
    ref.set_checkpoint(name, seeded)
    store.set_checkpoint(name, seeded)
    env = {**ref_place.environ, **place.environ}
    for k, v in env.items():
        os.environ.setdefault(k, v)
    assert cli_main(["run", "-c", str(ref_cfg), "--once"]) == 0

    kills = kill_loop(
        ["run", "-c", str(cfg)], store, name, env=env, rng=random.Random(17), first_after=seeded
    )
    assert len(kills) == KILLS and kills[-1] < data_end, kills
    again = cli("run", "-c", str(cfg), "--once", env=env)
    _, err = again.communicate(timeout=180)
    assert again.returncode == 0, err[-2000:]
    assert store.get_checkpoint(name) >= data_end

    first = seeded - pd.Timedelta("30m")  # the look-back before the seeded checkpoint
    same, lost, why = compare_exactly(results(ref, first, data_end), results(store, first, data_end))
    fault_report.record(
        "SIGKILL loop", f"run on {kind}: {KILLS} kills", as_expected=same, lost_data=lost, detail=why
    )
    assert same, why
    assert len(results(store, first, data_end)["steady_windows"]) >= 2
    ref.close()
    store.close()
