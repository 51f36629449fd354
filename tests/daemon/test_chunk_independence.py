"""Results do not depend on how a period is cut: the same history backfilled in 2-hour chunks,
in 1-day chunks, and processed by the scheduled worker cycle after cycle (a look-back, and
chunks that end at the cycle's "now") gives bit-identical steady windows, the same baseline
model ids and so deviations under the same series keys. Data: the synthetic unit of
isentrope.daemon.synthetic (fictional) with its faults (outages, spikes, a gauge/absolute
mix-up, flatlines) and its AR(1) correlated noise, 4 days at 2-minute resolution."""

from __future__ import annotations

import random

import numpy as np
import pandas as pd
import pytest
import worker_support as ws

from isentrope.calc import sections
from isentrope.calc.baseline import BaselineModel
from isentrope.daemon import synthetic
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import DEVIATION_MEASUREMENT, WINDOWS_MEASUREMENT, Pipeline
from isentrope.daemon.stores import open_store
from isentrope.daemon.worker import Worker

START = ws.START
DAYS = 4
END = START + pd.Timedelta(days=DAYS)
BASELINE_END = START + pd.Timedelta(days=2)


@pytest.fixture(scope="module")
def config(tmp_path_factory):
    folder = tmp_path_factory.mktemp("chunks")
    extra = f"""
[baseline]
start = "{START:%Y-%m-%dT%H:%M:%SZ}"
end = "{BASELINE_END:%Y-%m-%dT%H:%M:%SZ}"
"""
    path = ws.write_config(folder / "unit.toml", ws.store_toml("sqlite", path="x.sqlite"), extra=extra)
    return load_config(path)


@pytest.fixture(scope="module")
def plant():
    frame, _ = synthetic.generate(start=START, days=DAYS, seed=23, faults=True, freq="2min")
    return synthetic.to_plant_units(frame)


def _store(folder, config, plant):
    store = open_store("sqlite", path=str(folder / "unit.sqlite"))
    store.write_raw(config.mappings, plant)
    return store


def _worker(config, store, clock, **kw):
    return Worker.from_config(
        config,
        store,
        pipeline=Pipeline(config),
        start_default=START,
        clock=clock,
        sleep=lambda s: None,
        rng=random.Random(5),
        **kw,
    )


def _results(store, config):
    tags = {"unit": config.unit.name}
    windows = store.read_results(WINDOWS_MEASUREMENT, START, END, tags).sort_index().sort_index(axis=1)
    state = store.load_state(f"baseline/{config.unit.name}")
    models = {
        sec: BaselineModel.from_json(text).model_id for sec, text in sorted(state.get("models", {}).items())
    }
    deviations = {
        (sec, mid): store.read_results(
            DEVIATION_MEASUREMENT, START, END, {**tags, "section": sec, "model": mid}
        )
        .sort_index()
        .sort_index(axis=1)
        for sec, mid in models.items()
    }
    return windows, models, deviations


def _backfill(tmp_path, config, plant, chunk):
    store = _store(tmp_path, config, plant)
    worker = _worker(
        config, store, lambda: END, chunk=chunk, lookback="0s", settle="0s", checkpoint_name="bf"
    )
    report = worker.run_cycle(until=END)
    assert report.ok and report.checkpoint >= END - pd.Timedelta(hours=6)
    return store


def _incremental(tmp_path, config, plant):
    clock = ws.FakeClock(START + pd.Timedelta(hours=5))
    store = _store(tmp_path, config, plant)
    worker = _worker(config, store, clock, chunk="1d", lookback="30m", settle="2m")
    for _ in range(40):  # bounded: 4 days in 5-hour steps, then the last hours
        report = worker.run_cycle()
        assert report.ok
        if clock() >= END:
            break
        clock.advance("5h")
    return store


def test_windows_and_model_ids_do_not_depend_on_the_chunks(tmp_path, config, plant):
    got = {}
    for name, make in (
        ("2h", lambda p: _backfill(p, config, plant, "2h")),
        ("1d", lambda p: _backfill(p, config, plant, "1d")),
        ("run", lambda p: _incremental(p, config, plant)),
    ):
        folder = tmp_path / name
        folder.mkdir()
        store = make(folder)
        try:
            got[name] = _results(store, config)
        finally:
            store.close()
    windows, models, deviations = got["1d"]
    assert len(windows) > 30 and models and all(len(d) for d in deviations.values())
    for name in ("2h", "run"):
        w, m, d = got[name]
        # the incremental run ends where the settle delay lets it; compare what both hold
        w = w.loc[w.index <= windows.index[-1]]
        ref = windows.loc[windows.index <= w.index[-1]]
        pd.testing.assert_frame_equal(w, ref, check_exact=True, obj=f"steady windows ({name} vs 1d)")
        assert m == models, name
        assert d.keys() == deviations.keys()
        for key, frame in d.items():
            common = frame.index.intersection(deviations[key].index)
            assert len(common) > 0.9 * len(deviations[key])
            pd.testing.assert_frame_equal(
                frame.loc[common],
                deviations[key].loc[common],
                check_exact=True,
                obj=f"deviation {key} {name}",
            )


def test_a_window_figure_does_not_depend_on_the_other_windows_evaluated_with_it(config):
    # The window figures of one chunk are evaluated in one batch (calc.sections.evaluate): a
    # row's result must be the same alone, in a batch of two, or among all the others.
    frame, _ = synthetic.generate(start=START, days=1, seed=29, freq="10min")
    roles = [r for r in Pipeline(config).roles if r in frame.columns]
    rows = frame[roles].dropna().iloc[::7].reset_index(drop=True)
    together = sections.evaluate(rows).to_frame()
    for i in range(0, len(rows), 5):
        alone = sections.evaluate(rows.iloc[[i]].reset_index(drop=True)).to_frame()
        pair = sections.evaluate(rows.iloc[[i, (i + 1) % len(rows)]].reset_index(drop=True)).to_frame()
        numbers = [c for c in together.columns if together[c].dtype.kind == "f"]
        assert len(numbers) > 20
        np.testing.assert_array_equal(
            alone.loc[0, numbers].to_numpy(float), together.loc[i, numbers].to_numpy(float)
        )
        np.testing.assert_array_equal(
            pair.loc[0, numbers].to_numpy(float), together.loc[i, numbers].to_numpy(float)
        )
