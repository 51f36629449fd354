"""Fleet backfill on Dask: partitions by (unit, period) give what a plain sequential backfill
gives, and a re-run skips the partitions already done.

Data: the synthetic unit of isentrope.daemon.synthetic (fictional), 4 days at 5-minute
resolution, with a transmitter outage of 3 h placed across a partition boundary so that a data
quality alarm is raised in one partition and cleared in the next. The comparison is against
this project's own sequential worker (the reference for the orchestration, not for the
physics, which the calc tests check against IAPWS tables and the iapws package).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon import fleet, synthetic
from isentrope.daemon.config import load_config
from isentrope.daemon.stores import open_store
from isentrope.daemon.worker import Worker

START = pd.Timestamp("2025-03-01", tz="UTC")
DAYS = 3
END = START + pd.Timedelta(days=DAYS)
BASE_END = START + pd.Timedelta(days=2)
MEASUREMENTS = ["section_samples", "steady_windows", "deviation", "alarm_events"]


def _config(folder, name):
    text = (
        synthetic.config_toml(store_path=f"{name}.sqlite")
        + f"""
[baseline]
start = "{START:%Y-%m-%dT%H:%M:%SZ}"
end = "{BASE_END:%Y-%m-%dT%H:%M:%SZ}"

[steady]
# shorter windows than the defaults, so that two days give enough for a baseline fit
max_length = "20m"
min_length = "10m"
window = "20m"
"""
    )
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def raw():
    frame, _ = synthetic.generate(start=START, days=DAYS, freq="5min", seed=3)
    plant = synthetic.to_plant_units(frame)
    # a throttle temperature transmitter out from 22:30 on day 1 to 01:30 on day 2 (the baseline end)
    out = (plant.index >= START + pd.Timedelta(days=1, hours=22, minutes=30)) & (
        plant.index < START + pd.Timedelta(days=2, hours=1, minutes=30)
    )
    plant.loc[out, "throttle_t"] = np.nan
    return plant


def _load(path, plant):
    config = load_config(path)
    store = open_store(config.store.kind, **config.store.open_options())
    store.write_raw(config.mappings, plant)
    return config, store


def _sequential_backfill(config, store):
    """Runs one worker, day by day from START to END, as the backfill command does; the worker."""
    worker = Worker.from_config(
        config,
        store,
        checkpoint_name="backfill/seq",
        start_default=START,
        lookback="0s",
        settle="0s",
        chunk="1d",
    )
    assert worker.run_cycle(until=END).ok
    return worker


def _tables(store, unit):
    out = {}
    for m in MEASUREMENTS:
        parts = []
        tag_sets = [{"unit": unit}] if m in ("section_samples", "steady_windows") else None
        if tag_sets is None:
            keys = {
                "deviation": [("section", s) for s in ("hp", "ip", "lp_dry", "lp")],
                "alarm_events": [("section", s) for s in ["hp", "ip", "lp_dry", "lp", "throttle_t"]],
            }[m]
            tag_sets = [{"unit": unit, k: v} for k, v in keys]
        for tags in tag_sets:
            f = store.read_results(m, START - pd.Timedelta(days=1), END + pd.Timedelta(days=1), tags)
            if len(f):
                parts.append(f.assign(**{k: v for k, v in tags.items() if k != "unit"}))
        out[m] = pd.concat(parts).sort_index(kind="mergesort") if parts else pd.DataFrame()
    return out


def test_fleet_on_two_processes_equals_a_sequential_backfill(tmp_path, raw):
    distributed = pytest.importorskip("dask.distributed")
    seq_path, fleet_path = _config(tmp_path, "sequential"), _config(tmp_path, "fleet")
    config, seq_store = _load(seq_path, raw)
    _, fleet_store = _load(fleet_path, raw)
    fleet_store.close()
    try:
        worker = _sequential_backfill(config, seq_store)

        parts = fleet.plan_partitions(str(fleet_path), config, START, END, period="1D")
        assert [(p.start, p.end, p.phase) for p in parts] == [
            (START + pd.Timedelta(days=k), START + pd.Timedelta(days=k + 1), 1 if k < 2 else 2)
            for k in range(DAYS)
        ]

        with (
            distributed.LocalCluster(
                n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None, host="127.0.0.1"
            ) as cluster,
            distributed.Client(cluster) as client,
        ):
            first = fleet.run_fleet(client, [str(fleet_path)], START, END, period="1D", chunk="1d")
            again = fleet.run_fleet(client, [str(fleet_path)], START, END, period="1D", chunk="1d")
            refit = fleet.run_fleet(
                client, [str(fleet_path)], START, END, period="1D", chunk="1d", refit=True
            )
        assert first.partitions == DAYS and first.skipped == 0
        assert first.baselines[config.unit.name]  # a model was fitted between the phases
        assert again.skipped == DAYS and again.rows_read == 0  # re-run: every partition done
        assert refit.skipped == 2  # a refit recomputes the partitions after the baseline end only

        fleet_store = open_store("sqlite", path=str(tmp_path / "fleet.sqlite"))
        try:
            got, want = _tables(fleet_store, config.unit.name), _tables(seq_store, config.unit.name)
            assert seq_store.load_state(worker.baseline_state_name) == fleet_store.load_state(
                worker.baseline_state_name
            )
        finally:
            fleet_store.close()
    finally:
        seq_store.close()
    for m in MEASUREMENTS:
        assert len(want[m]), f"the sequential backfill wrote no {m}; the comparison would be empty"
        pd.testing.assert_frame_equal(got[m], want[m], check_exact=True, obj=m)
    ev = want["alarm_events"]
    dq = ev[ev["section"] == "throttle_t"]
    # raised before the baseline end after 30 min bad, cleared after it: across partitions and phases
    assert list(dq["raised"]) == [1.0, 0.0]
    assert dq.index[0] < BASE_END <= dq.index[1]


def test_partitions_are_calendar_months_cut_at_the_baseline_end(tmp_path):
    config = load_config(_config(tmp_path, "plan"))  # baseline 2025-03-01 .. 2025-03-03
    parts = fleet.plan_partitions("plan.toml", config, "2025-02-10T00:00Z", "2025-05-01T00:00Z")
    assert [(p.start, p.end, p.phase) for p in parts] == [
        (pd.Timestamp("2025-02-10", tz="UTC"), pd.Timestamp("2025-03-01", tz="UTC"), 1),
        (pd.Timestamp("2025-03-01", tz="UTC"), BASE_END, 1),
        (BASE_END, pd.Timestamp("2025-04-01", tz="UTC"), 2),
        (pd.Timestamp("2025-04-01", tz="UTC"), pd.Timestamp("2025-05-01", tz="UTC"), 2),
    ]
    assert len({p.name for p in parts}) == len(parts)
    # a fixed length cuts on its multiples from the epoch, whatever the start
    a = fleet.plan_partitions("plan.toml", config, "2025-03-10T05:00Z", "2025-04-10T00:00Z", period="7D")
    b = fleet.plan_partitions("plan.toml", config, "2025-03-12T00:00Z", "2025-04-10T00:00Z", period="7D")
    assert {p.end for p in b} <= {p.end for p in a}
    assert all(
        (p.end - pd.Timestamp("1970-01-01", tz="UTC")) % pd.Timedelta(days=7) == pd.Timedelta(0)
        for p in a[:-1]
    )
    with pytest.raises(ValueError, match="must be after"):
        fleet.plan_partitions("plan.toml", config, "2025-03-10T00:00Z", "2025-03-01T00:00Z")
    with pytest.raises(ValueError, match="time zone"):
        fleet.plan_partitions("plan.toml", config, "2025-03-10", "2025-04-01T00:00Z")


def test_a_row_outage_across_a_partition_boundary_raises_no_data_as_a_sequential_run_does(tmp_path, raw):
    # No row at all from 19:00 on day 1 to 12:00 on day 2 (17 h, across the day boundary of
    # the daily partitions), with a no_data limit (6 h) longer than the before-margin: the
    # partition of day 2 sees no row before noon, so the absence it started in has to come
    # from the alarm state the day-1 partition left. The partition tasks are called in order
    # here (what the Dask graph runs); the orchestration on two processes is tested above.
    outage = (raw.index >= START + pd.Timedelta(hours=19)) & (
        raw.index < START + pd.Timedelta(days=1, hours=12)
    )
    plant = raw.loc[~outage]

    def config_at(name):
        path = _config(tmp_path, name)
        text = path.read_text(encoding="utf-8")
        text = text[: text.index("[baseline]")] + text[text.index("[steady]") :]  # no model needed
        path.write_text(text + '\n[alarms]\nno_data_limit = "6h"\n', encoding="utf-8")
        return path

    seq_path, fleet_path = config_at("sequential_gap"), config_at("fleet_gap")
    config, seq_store = _load(seq_path, plant)
    _, fleet_store = _load(fleet_path, plant)
    fleet_store.close()
    assert config.alarms.no_data_limit == pd.Timedelta("6h")
    assert Worker.from_config(config, seq_store).pipeline.margins[0] < pd.Timedelta("6h")
    tags = {"unit": config.unit.name, "section": "historian", "rule": "no_data"}
    try:
        _sequential_backfill(config, seq_store)
        want = seq_store.read_results("alarm_events", START, END, tags)
    finally:
        seq_store.close()
    state = None
    for part in fleet.plan_partitions(str(fleet_path), config, START, END, period="1D"):
        state = fleet.alarm_partition(part, state, fleet.compute_partition(part, "1d"))
    fleet_store = open_store("sqlite", path=str(tmp_path / "fleet_gap.sqlite"))
    try:
        got = fleet_store.read_results("alarm_events", START, END, tags)
    finally:
        fleet_store.close()
    last = plant.index[plant.index < START + pd.Timedelta(hours=19)][-1]
    # (the synthetic history has its own 7.2 h data gap on day 3: a second alarm)
    assert list(want.index[:2]) == [
        last + pd.Timedelta("5min") + pd.Timedelta("6h"),
        START + pd.Timedelta(days=1, hours=12),
    ]
    assert list(want["raised"]) == [1.0, 0.0] * (len(want) // 2)
    pd.testing.assert_frame_equal(got, want, check_exact=True)
