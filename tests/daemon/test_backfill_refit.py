"""`isentrope backfill --refit`: a changed [baseline] is not taken up silently, and the refit
fits the models on the configured period and processes the whole period again. Data: the
synthetic unit of isentrope.daemon.synthetic (fictional), 3 days at 5-minute resolution."""

from __future__ import annotations

import logging

import pandas as pd

from isentrope.daemon import cli, synthetic
from isentrope.daemon.config import load_config
from isentrope.daemon.stores import open_store

START = pd.Timestamp("2025-03-01", tz="UTC")
END = START + pd.Timedelta(days=3)


def _config(folder, base_start, base_end):
    text = (
        synthetic.config_toml(store_path="unit.sqlite")
        + f"""
[baseline]
start = "{base_start:%Y-%m-%dT%H:%M:%SZ}"
end = "{base_end:%Y-%m-%dT%H:%M:%SZ}"

[steady]
max_length = "20m"
min_length = "10m"
window = "20m"
"""
    )
    path = folder / "unit.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _backfill(path, *extra):
    return cli.main(
        [
            "backfill",
            "-c",
            str(path),
            "--start",
            START.strftime("%Y-%m-%dT%H:%MZ"),
            "--end",
            END.strftime("%Y-%m-%dT%H:%MZ"),
            "--no-progress",
            *extra,
        ]
    )


def _saved_reference(path):
    config = load_config(path)
    store = open_store(config.store.kind, **config.store.open_options())
    try:
        state = store.load_state(f"baseline/{config.unit.name}")
        dev = store.read_results("deviation", START, END, {"unit": config.unit.name, "section": "hp"})
        return (state.get("reference_start"), state.get("reference_end")), dev
    finally:
        store.close()


def test_a_changed_baseline_is_reported_and_refit_takes_it_up(tmp_path, caplog):
    frame, _ = synthetic.generate(start=START, days=3, freq="5min", seed=3)
    first = (START, START + pd.Timedelta(days=1))
    path = _config(tmp_path, *first)
    config = load_config(path)
    store = open_store(config.store.kind, **config.store.open_options())
    store.write_raw(config.mappings, synthetic.to_plant_units(frame))
    store.close()
    assert _backfill(path) == 0
    ref, dev_first = _saved_reference(path)
    assert ref == (first[0].isoformat(), first[1].isoformat()) and len(dev_first)

    # after an overhaul the engineer moves [baseline]; a plain re-run resumes (nothing to do)
    # and says that the saved models were fitted on the old period
    second = (START + pd.Timedelta(days=1), START + pd.Timedelta(days=2))
    _config(tmp_path, *second)
    with caplog.at_level(logging.WARNING, logger="isentrope.worker"):
        assert _backfill(path) == 0
        assert _backfill(path, "--chunk", "6h") == 0  # another chunking: another checkpoint
    said = [r.getMessage() for r in caplog.records if "saved models" in r.getMessage()]
    assert said and "--refit" in said[0] and second[0].isoformat() in said[0]
    assert _saved_reference(path)[0] == ref  # still the old models

    models_before = _models(tmp_path)
    assert _backfill(path, "--refit") == 0
    ref2, _ = _saved_reference(path)
    assert ref2 == (second[0].isoformat(), second[1].isoformat())
    models_after = _models(tmp_path)
    new = set(models_after) - set(models_before)
    assert (
        len(new) == 1
    )  # one new model id (the refit owns its period: the old one's deviations in it are gone)
    first_new = models_after[new.pop()]
    assert first_new >= second[1]  # deviations of the new model after its reference period only


def _models(folder):
    """First deviation time of each baseline model id in the store (HP)."""
    import sqlite3

    con = sqlite3.connect(folder / "unit.sqlite")
    try:
        rows = con.execute(
            "SELECT model, MIN(time) FROM deviation WHERE section = 'hp' GROUP BY model"
        ).fetchall()
    finally:
        con.close()
    return {m: pd.Timestamp(t, unit="ms", tz="UTC") for m, t in rows}


def test_no_reference_windows_is_said_not_silent(tmp_path, caplog):
    # The backfill starts after the reference period, whose windows were never processed:
    # no model can be fitted; the worker says so and how to get one.
    frame, _ = synthetic.generate(start=START, days=3, freq="5min", seed=3)
    path = _config(tmp_path, START - pd.Timedelta(days=2), START - pd.Timedelta(days=1))
    config = load_config(path)
    store = open_store(config.store.kind, **config.store.open_options())
    store.write_raw(config.mappings, synthetic.to_plant_units(frame))
    store.close()
    with caplog.at_level(logging.WARNING, logger="isentrope.worker"):
        assert _backfill(path) == 0
    said = [r.getMessage() for r in caplog.records if "no steady windows are stored" in r.getMessage()]
    assert len(said) == 1 and "--refit" in said[0]
    assert not len(_saved_reference(path)[1])
    # it names the reference period to process first
    assert (START - pd.Timedelta(days=2)).isoformat() in said[0] and (
        START - pd.Timedelta(days=1)
    ).isoformat() in said[0]


def test_a_backfill_over_a_period_without_samples_says_so(tmp_path, caplog):
    path = _config(tmp_path, START - pd.Timedelta(days=2), START - pd.Timedelta(days=1))
    with caplog.at_level(logging.WARNING, logger="isentrope.backfill"):
        assert _backfill(path) == 0
    said = [r.getMessage() for r in caplog.records if "no sample of any mapped tag" in r.getMessage()]
    assert len(said) == 1 and "isentrope check" in said[0]
