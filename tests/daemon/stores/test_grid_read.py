"""Grid reads (``Store.read_grid``, isentrope.daemon.stores.grid), run against every store.

The same cases as tests/daemon/stores/test_contract.py (its ``case`` fixture): SQLite, and the
real servers when present (InfluxQL on 1.6.7 and 1.8.10, Flux on 1.8.10). Stored points are
invented, at irregular times as an exception-reporting historian keeps them; the expected
grid values come from a point-by-point reading of the rules in the module docstring of
``grid`` (a loop over grid times, independent of the vectorised code), so every store must
give the same numbers.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import test_contract
from test_contract import T0, mappings

from isentrope.daemon.stores.grid import Fill, ReadGrid, grid_ns, hold_on_grid, window_last

case = test_contract.case  # the store fixture of the contract suite (every store kind)

S = pd.Timedelta(seconds=1)
M = pd.Timedelta(minutes=1)


def exception_points():
    """Per role: (time, value) pairs at irregular times, plant units (invented)."""
    p = [(-7 * M, 16.40), (-2 * M - 10 * S, 16.41), (0 * M, 16.50), (20 * S, 16.52), (50 * S, 16.55),
         (3 * M, 16.60), (3 * M + 1 * S, 16.61), (9 * M + 30 * S, 16.70), (25 * M, 16.20)]  # fmt: skip
    t = [(-4 * M, 530.0), (2 * M + 30 * S, 531.0), (6 * M, 534.0), (8 * M, 533.0),
         (22 * M, 520.0), (23 * M + 15 * S, 521.0), (31 * M, 522.0)]  # fmt: skip
    c = [(1 * M, 5.10), (1 * M + 59 * S, 5.12), (4 * M, 5.30), (12 * M, 5.25), (14 * M + 1 * S, 5.26)]
    return {"throttle_p": p, "throttle_t": t, "condenser_p": c}


def write_points(store, points):
    for role, pairs in points.items():
        m = [x for x in mappings() if x.role == role]
        idx = pd.DatetimeIndex([T0 + dt for dt, _ in pairs], name="time")
        store.write_raw(m, pd.DataFrame({role: [v for _, v in pairs]}, index=idx))


def brute_hold(pairs, t, max_age):
    """The last stored value at or before t, while t - s < max_age; else NaN."""
    before = [(T0 + dt, v) for dt, v in pairs if T0 + dt <= t]
    if not before:
        return np.nan
    s, v = before[-1]
    return v if t - s < max_age else np.nan


def brute_linear(pairs, t, max_age):
    pts = [(T0 + dt, v) for dt, v in pairs]
    for s, v in pts:
        if s == t:
            return v
    left = [(s, v) for s, v in pts if s < t]
    right = [(s, v) for s, v in pts if s > t]
    if not left or not right:
        return np.nan
    (s0, v0), (s1, v1) = left[-1], right[0]
    if s1 - s0 > max_age:
        return np.nan
    return v0 + (t - s0) / (s1 - s0) * (v1 - v0)


GRID = ReadGrid(
    pd.Timedelta("1m"),
    {
        "throttle_p": Fill("hold", pd.Timedelta("5m")),
        "throttle_t": Fill("linear", pd.Timedelta("10m")),
        "condenser_p": Fill("hold", pd.Timedelta("3m")),
    },
)


def expected_grid(points, start, end):
    times = GRID.times(start, end)
    rules = {"throttle_p": brute_hold, "throttle_t": brute_linear, "condenser_p": brute_hold}
    data = {
        role: [rules[role](points[role], t, GRID.fill_of(role).max_age) for t in times] for role in points
    }
    frame = pd.DataFrame(data, index=times)[["throttle_p", "throttle_t", "condenser_p"]]
    frame = frame.dropna(how="all").astype("float64")
    frame.index = frame.index.as_unit("ns")
    return frame


def test_grid_read_holds_up_to_max_age_and_interpolates_within_it(case):
    points = exception_points()
    write_points(case.loader, points)
    # the window starts after the first points: its first grid times take them (hold and linear)
    start, end = T0 + 30 * S, T0 + 40 * M
    got = case.store.read_grid(mappings(), start, end, GRID)
    want = expected_grid(points, start, end)
    assert list(got.columns) == ["throttle_p", "throttle_t", "condenser_p"]
    assert got.index.name == "time" and str(got.index.tz) == "UTC"
    pd.testing.assert_frame_equal(got, want, check_freq=False, rtol=1e-12, atol=0)
    # spot checks of the rules themselves (read off the points above)
    assert got.loc[T0 + 1 * M, "throttle_p"] == 16.55  # last value of (0, 1 min]
    assert got.loc[T0 + 3 * M, "throttle_p"] == 16.60  # a point exactly on the grid time
    assert got.loc[T0 + 7 * M, "throttle_p"] == 16.61  # held 3 min 59 s, under 5 min
    assert T0 + 9 * M not in got.index  # throttle_p 5 min 59 s old: stale (and the others)
    assert got.loc[T0 + 10 * M, "throttle_p"] == 16.70
    assert got.loc[T0 + 2 * M, "condenser_p"] == 5.12
    assert got.loc[T0 + 5 * M, "throttle_t"] == pytest.approx(531.0 + 2.5 / 3.5 * 3.0, rel=1e-12)
    assert got.loc[T0 + 7 * M, "throttle_t"] == pytest.approx(533.5, rel=1e-12)
    assert np.isnan(got.loc[T0 + 10 * M, "throttle_t"])  # 8 -> 22 min: a 14 min gap, over 10 min
    assert got.loc[T0 + 17 * M, "condenser_p"] == 5.26  # held 2 min 59 s, under 3 min
    assert T0 + 18 * M not in got.index and T0 + 19 * M not in got.index  # no role has a value
    # the same through read(): internal units, degC -> K
    units = {"throttle_p": "MPa(a)", "throttle_t": "degC", "condenser_p": "kPa(a)"}
    plant = [dataclasses.replace(m, unit=units[m.role]) for m in mappings()]
    internal = case.store.read(plant, start, end, grid=GRID)
    assert internal.loc[T0 + 7 * M, "throttle_t"] == pytest.approx(533.5 + 273.15, rel=1e-12)


def test_grid_read_does_not_depend_on_where_the_window_starts(case):
    points = exception_points()
    write_points(case.loader, points)
    whole = case.store.read_grid(mappings(), T0 - 10 * M, T0 + 40 * M, GRID)
    parts = [
        case.store.read_grid(mappings(), a, b, GRID)
        for a, b in [
            (T0 - 10 * M, T0 + 2 * M),
            (T0 + 2 * M, T0 + 7 * M + 30 * S),
            (T0 + 7 * M + 30 * S, T0 + 40 * M),
        ]
    ]
    pd.testing.assert_frame_equal(pd.concat(parts), whole, check_freq=False, rtol=0, atol=0)


def test_grid_read_of_regular_data_on_its_own_grid_is_the_stored_rows(case):
    rng = np.random.default_rng(3)
    idx = pd.date_range(T0, periods=30, freq="60s", name="time")
    frame = pd.DataFrame(
        {
            "throttle_p": 16.5 + rng.normal(0, 0.01, 30),
            "throttle_t": 538.0 + rng.normal(0, 0.5, 30),
            "condenser_p": 5.0 + rng.normal(0, 0.05, 30),
        },
        index=idx,
    )
    case.loader.write_raw(mappings(), frame)
    raw = case.store.read_raw(mappings(), T0, T0 + 30 * M)
    got = case.store.read_grid(mappings(), T0, T0 + 30 * M, GRID)
    pd.testing.assert_frame_equal(got, raw, check_freq=False, rtol=0, atol=0)


def test_hold_rule_on_window_values_equals_the_rule_on_stored_times():
    # grid.hold_on_grid over grid.window_last against the point-by-point rule, on random
    # irregular times (seeded; invented data)
    rng = np.random.default_rng(11)
    iv, age = pd.Timedelta("1m"), pd.Timedelta("4m")
    offsets = np.sort(rng.choice(np.arange(0, 3600), size=120, replace=False))
    pairs = [(pd.Timedelta(seconds=int(o)), float(k)) for k, o in enumerate(offsets)]
    times = grid_ns(T0 + 5 * M, T0 + 60 * M, iv)
    t_ns = np.array([(T0 + dt).value for dt, _ in pairs], dtype=np.int64)
    stamps, values = window_last(t_ns, np.array([v for _, v in pairs]), iv)
    got = hold_on_grid(stamps, values, times, age, iv)
    want = [brute_hold(pairs, pd.Timestamp(int(t), unit="ns", tz="UTC"), age) for t in times]
    np.testing.assert_array_equal(got, np.array(want))


def test_grid_rules_refuse_a_hold_age_off_the_grid():
    with pytest.raises(ValueError, match="whole number of grid intervals"):
        ReadGrid(pd.Timedelta("1m"), {"throttle_p": Fill("hold", pd.Timedelta("90s"))})
    with pytest.raises(ValueError, match="whole number of seconds"):
        ReadGrid(pd.Timedelta("500ms"))
    with pytest.raises(ValueError, match="fill method"):
        Fill("spline")
