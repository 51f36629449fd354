"""The store contract (isentrope.daemon.stores.base), run against every implementation.

Cases: SQLite (always); Influx2Store on InfluxDB 2.9.1 and on influxd 1.8.10 (v2 API, Flux);
Influx1Store on Debian's influxd 1.6.7, on 1.8.10 and on the v1 endpoints of 2.9.1 (v1 API,
InfluxQL). The real-server cases are marked ``influx`` and need the session servers of
tests/conftest.py. Each test gets a fresh database (fresh buckets on 2.9.1).

On 2.9.1 authorisation is on. The Influx2Store under test keeps raw samples and results in two
buckets and holds the worker's least-privilege token (read on the raw bucket; read and write on
the results bucket), so raw samples are put in through ``case.loader``: the same store class
with a token that may write the raw bucket, as a plant's collector would hold. The Influx1Store
case there has one bucket (the v1 API names one database) and a token to read and write it.
Values are invented test data; the expectations are the contract itself.
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest

from isentrope.calc.names import REQUIRED_ROLES
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import (
    FatalStoreError,
    LeaseHolder,
    TemporaryStoreError,
    UnitBusyError,
    open_store,
)

CASES = [
    "sqlite",
    pytest.param("influx2-2.9", marks=pytest.mark.influx),
    pytest.param("influx2-1.8", marks=pytest.mark.influx),
    pytest.param("influx1-2.9", marks=pytest.mark.influx),
    pytest.param("influx1-1.6", marks=pytest.mark.influx),
    pytest.param("influx1-1.8", marks=pytest.mark.influx),
]

T0 = pd.Timestamp("2026-03-01T00:00:00Z")


class Case:
    """A store under test, plus how to make another one on the same server/database, and
    ``loader``: the store that writes raw samples (``store`` itself unless its token may not)."""

    def __init__(self, name, make, server=None, make_loader=None):
        self.name = name
        self.make = make  # (**overrides) -> Store
        self.server = server
        self.store = make()
        self.loader = make_loader() if make_loader else self.store

    def other(self, **overrides):
        return self.make(**overrides)

    def close(self):
        self.store.close()
        if self.loader is not self.store:
            self.loader.close()


@pytest.fixture(params=CASES)
def case(request, tmp_path):
    name = request.param
    if name == "sqlite":
        path = tmp_path / "unit.sqlite"
        c = Case(name, lambda **o: open_store("sqlite", path=o.get("path", path)))
    elif name == "influx2-2.9":
        server = request.getfixturevalue("influxdb_2x")
        w = server.worker_buckets("contract")

        def make(token=w.token, **o):
            bucket = o.get("bucket", w.raw)
            return open_store(
                "influx2",
                url=o.get("url", server.url),
                org=server.ORG,
                bucket=bucket,
                results_bucket=o.get("results_bucket", w.results if "bucket" not in o else bucket),
                token=token,
                timeout=5,
                retries=1,
            )

        c = Case(name, make, server, make_loader=lambda: make(token=w.loader))
    elif name == "influx1-2.9":
        server = request.getfixturevalue("influxdb_2x")
        bucket, bucket_id = server.new_bucket("contract_v1")
        token = server.new_token("contract v1", read=(bucket_id,), write=(bucket_id,))

        def make(**o):
            return open_store(
                "influx1",
                url=o.get("url", server.url),
                database=o.get("database", bucket),
                retention_policy=o.get("retention_policy", "autogen"),
                token=token,
                timeout=5,
            )

        c = Case(name, make, server)
    elif name.startswith("influx2"):
        server = request.getfixturevalue("influxdb_v2")
        db = server.new_database("contract")

        def make(**o):
            return open_store(
                "influx2",
                url=o.get("url", server.url),
                org="-",
                bucket=o.get("bucket", server.bucket(db)),
                token="",
                timeout=5,
                retries=1,
            )

        c = Case(name, make, server)
    else:
        server = request.getfixturevalue("influxdb_v1" if name.endswith("1.6") else "influxdb_v2")
        db = server.new_database("contract")

        def make(**o):
            return open_store(
                "influx1",
                url=o.get("url", server.url),
                database=o.get("database", db),
                retention_policy=o.get("retention_policy", "autogen"),
                timeout=5,
            )

        c = Case(name, make, server)
    yield c
    c.close()


def mappings():
    return [
        RoleMapping(role="throttle_p", tag="U7.MS.P", unit="MPa", measurement="plant", tags={"unit": "U7"}),
        RoleMapping(role="throttle_t", tag="U7.MS.T", unit="degC", measurement="plant", tags={"unit": "U7"}),
        RoleMapping(
            role="condenser_p",
            tag="U7.COND.P",
            unit="kPa",
            measurement="condenser",
            field="pabs",
            tags={"unit": "U7", "side": "A"},
        ),
    ]


def raw_frame(n=10, start=T0, seed=1):
    rng = np.random.default_rng(seed)
    idx = pd.date_range(start, periods=n, freq="60s", name="time")
    frame = pd.DataFrame(
        {
            "throttle_p": 16.5 + rng.normal(0, 0.01, n),
            "throttle_t": 538.0 + rng.normal(0, 0.5, n),
            "condenser_p": 5.0 + rng.normal(0, 0.05, n),
        },
        index=idx,
    )
    return frame


def expected(frame):
    """What read_raw must give back: float, UTC ns index named time, all-NaN rows absent."""
    out = frame.astype("float64").dropna(how="all")
    out.index = pd.DatetimeIndex(out.index).tz_convert("UTC").as_unit("ns").rename("time")
    return out


def assert_same(got, want):
    pd.testing.assert_frame_equal(got, want, check_freq=False, rtol=0, atol=0)


# --- raw samples -----------------------------------------------------------------------------
def test_raw_round_trip_with_nan(case):
    frame = raw_frame()
    frame.iloc[2, 0] = np.nan  # one missing sample
    frame.iloc[5, :] = np.nan  # a timestamp with nothing at all
    assert case.loader.write_raw(mappings(), frame) == int(frame.notna().sum().sum())
    got = case.store.read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
    assert list(got.columns) == ["throttle_p", "throttle_t", "condenser_p"]
    assert got.index.name == "time" and str(got.index.tz) == "UTC"
    assert np.isnan(got["throttle_p"].iloc[2])
    assert_same(got, expected(frame))


def test_raw_empty_window_and_unmapped_role(case):
    case.loader.write_raw(mappings(), raw_frame())
    got = case.store.read_raw(mappings(), T0 - pd.Timedelta("2h"), T0 - pd.Timedelta("1h"))
    assert got.empty and list(got.columns) == ["throttle_p", "throttle_t", "condenser_p"]
    nothing = [RoleMapping(role="gross_output", tag="U7.GEN.MW", unit="MW", tags={"unit": "U7"})]
    got = case.store.read_raw(mappings() + nothing, T0, T0 + pd.Timedelta("1h"))
    assert got["gross_output"].isna().all() and len(got) == 10


def test_raw_window_is_half_open(case):
    case.loader.write_raw(mappings(), raw_frame(n=10))
    start, end = T0 + pd.Timedelta("2min"), T0 + pd.Timedelta("5min")
    got = case.store.read_raw(mappings(), start, end)
    assert list(got.index) == [start, start + pd.Timedelta("1min"), start + pd.Timedelta("2min")]


def test_raw_duplicates_last_wins(case):
    frame = raw_frame(n=6)
    case.loader.write_raw(mappings(), frame)
    again = frame.iloc[2:4] + 1.0  # rewrite two timestamps with new values
    case.loader.write_raw(mappings(), again)
    dup = frame.iloc[[4, 4]].copy()  # the same timestamp twice in one write: the last row wins
    dup.iloc[1] = [20.0, 540.0, 6.0]
    case.loader.write_raw(mappings(), dup)
    want = frame.copy()
    want.iloc[2:4] = again.to_numpy()
    want.iloc[4] = [20.0, 540.0, 6.0]
    got = case.store.read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
    assert_same(got, expected(want))


def test_times_are_utc(case):
    frame = raw_frame(n=4)
    local = frame.copy()
    local.index = frame.index.tz_convert("America/Chicago")
    case.loader.write_raw(mappings(), local)
    got = case.store.read_raw(mappings(), "2026-02-28T18:00:00-06:00", T0 + pd.Timedelta("1h"))
    assert_same(got, expected(frame))
    with pytest.raises(ValueError, match="time zone"):
        case.store.read_raw(mappings(), pd.Timestamp("2026-03-01"), T0 + pd.Timedelta("1h"))
    naive = frame.tz_localize(None)
    with pytest.raises(ValueError, match="time zone"):
        case.loader.write_raw(mappings(), naive)


def test_unmapped_column_is_an_error(case):
    frame = raw_frame(n=2).rename(columns={"throttle_p": "nonsense"})
    with pytest.raises(ValueError, match="not mapped roles"):
        case.loader.write_raw(mappings(), frame)


# --- results ---------------------------------------------------------------------------------
def results_frame(n=8, seed=2):
    rng = np.random.default_rng(seed)
    idx = pd.date_range(T0, periods=n, freq="15min", tz="UTC")
    return pd.DataFrame(
        {
            "hp_efficiency": 0.86 + rng.normal(0, 0.002, n),
            "ip_efficiency": 0.90 + rng.normal(0, 0.002, n),
            "steady": np.arange(n) % 2 == 0,  # bools are stored as 0.0 / 1.0
            "samples": np.arange(n, dtype=np.int64),
            "note": ["x"] * n,  # not numeric: not written
        },
        index=idx,
    )


def expected_results(frame):
    out = frame.drop(columns=["note"]).astype("float64")
    out = out.reindex(columns=sorted(out.columns))
    out.index = out.index.as_unit("ns").rename("time")
    return out


def test_results_round_trip_and_idempotent(case):
    tags = {"unit": "U7"}
    frame = results_frame()
    end = T0 + pd.Timedelta("1D")
    assert case.store.write_results("sections", frame, tags) == 8 * 4
    first = case.store.read_results("sections", T0, end, tags)
    assert_same(first, expected_results(frame))
    case.store.write_results("sections", frame, tags)  # the same again: no duplicates
    assert_same(case.store.read_results("sections", T0, end, tags), first)
    changed = frame.iloc[3:5].copy()
    changed["hp_efficiency"] = [0.5, 0.6]
    case.store.write_results("sections", changed, tags)  # replaced, not added
    want = frame.copy()
    want.iloc[3:5, 0] = [0.5, 0.6]
    assert_same(case.store.read_results("sections", T0, end, tags), expected_results(want))


def test_results_nan_is_no_value_and_tags_separate_series(case):
    frame = results_frame(n=4)[["hp_efficiency", "ip_efficiency"]]
    case.store.write_results("sections", frame, {"unit": "U7"})
    other = frame * 0 + 0.7
    case.store.write_results("sections", other, {"unit": "U8"})
    holes = frame.copy()
    holes.iloc[1, 0] = np.nan  # NaN does not erase what was written before
    holes.iloc[2, 1] = 0.1
    case.store.write_results("sections", holes, {"unit": "U7"})
    want = frame.copy()
    want.iloc[2, 1] = 0.1
    got = case.store.read_results("sections", T0, T0 + pd.Timedelta("1D"), {"unit": "U7"})
    assert_same(got, expected_results(want.assign(note="x")))
    got8 = case.store.read_results("sections", T0, T0 + pd.Timedelta("1D"), {"unit": "U8"})
    assert (got8 == 0.7).all().all() and len(got8) == 4


def test_results_window_half_open_and_unknown_measurement(case):
    frame = results_frame(n=4)
    case.store.write_results("sections", frame, {"unit": "U7"})
    got = case.store.read_results("sections", frame.index[1], frame.index[3], {"unit": "U7"})
    assert list(got.index) == list(frame.index[1:3])
    empty = case.store.read_results("never_written", T0, T0 + pd.Timedelta("1D"), {"unit": "U7"})
    assert empty.empty


def test_delete_results_takes_the_window_and_the_tags_only(case, caplog):
    """delete_results removes [start, end) of the series whose tags include the given ones, and
    nothing else: not the other unit, not another measurement, not the rows either side; then
    a write into the emptied window reads as if it had been the only one."""
    frame = results_frame()[["hp_efficiency", "ip_efficiency"]]  # 8 rows, one an hour
    for unit in ("U7", "U8"):
        for rule in ("a", "b"):
            case.store.write_results("alarm_events", frame, {"unit": unit, "section": "hp", "rule": rule})
    case.store.write_results("sections", frame, {"unit": "U7"})
    day = T0 + pd.Timedelta("1D")
    lo, hi = frame.index[2], frame.index[5]
    with caplog.at_level("INFO", logger="isentrope.daemon.stores.influx2"):
        case.store.delete_results("alarm_events", lo, hi, {"unit": "U7", "section": "hp"})
    if case.name == "influx2-1.8":  # 1.8 has no /api/v2/delete: the v1 InfluxQL DELETE did it
        assert any("no /api/v2/delete (HTTP 404" in r.getMessage() for r in caplog.records)
    for rule in ("a", "b"):
        got = case.store.read_results("alarm_events", T0, day, {"unit": "U7", "section": "hp", "rule": rule})
        assert list(got.index) == list(frame.index[:2]) + list(frame.index[5:])  # end excluded
        other = case.store.read_results(
            "alarm_events", T0, day, {"unit": "U8", "section": "hp", "rule": rule}
        )
        assert len(other) == 8
    assert len(case.store.read_results("sections", T0, day, {"unit": "U7"})) == 8
    # only one rule's series
    case.store.delete_results("alarm_events", T0, day, {"unit": "U8", "rule": "b"})
    assert case.store.read_results(
        "alarm_events", T0, day, {"unit": "U8", "section": "hp", "rule": "b"}
    ).empty
    assert (
        len(case.store.read_results("alarm_events", T0, day, {"unit": "U8", "section": "hp", "rule": "a"}))
        == 8
    )
    # a later write into the emptied window: only its own rows (and fields) are there
    again = frame.iloc[3:4][["hp_efficiency"]] + 1.0
    case.store.write_results("alarm_events", again, {"unit": "U7", "section": "hp", "rule": "a"})
    got = case.store.read_results("alarm_events", lo, hi, {"unit": "U7", "section": "hp", "rule": "a"})
    assert list(got.index) == [frame.index[3]]
    assert got["hp_efficiency"].iloc[0] == frame["hp_efficiency"].iloc[3] + 1.0
    assert "ip_efficiency" not in got or np.isnan(got["ip_efficiency"].iloc[0])
    # nothing to delete is no error: an unknown measurement, an unknown tag key
    case.store.delete_results("never_written", T0, day, {"unit": "U7"})
    case.store.delete_results("sections", T0, day, {"no_such_key": "x"})
    assert len(case.store.read_results("sections", T0, day, {"unit": "U7"})) == 8


# --- worker state ----------------------------------------------------------------------------
def test_checkpoint_round_trip(case):
    assert case.store.get_checkpoint("U7-worker") is None
    t = pd.Timestamp("2026-03-01T12:34:56.789Z")
    case.store.set_checkpoint("U7-worker", t)
    assert case.store.get_checkpoint("U7-worker") == t
    earlier = t - pd.Timedelta("3h")  # a reprocess may move it back: the latest set wins
    case.store.set_checkpoint("U7-worker", earlier)
    assert case.store.get_checkpoint("U7-worker") == earlier
    assert case.store.get_checkpoint("U8-worker") is None
    reopened = case.other()
    assert reopened.get_checkpoint("U7-worker") == earlier
    reopened.close()
    with pytest.raises(ValueError, match="time zone"):
        case.store.set_checkpoint("U7-worker", pd.Timestamp("2026-03-01"))


def test_state_round_trip(case):
    assert case.store.load_state("alarms") == {}
    state = {
        "hp": {"state": "raised", "since": "2026-03-01T00:00:00Z", "count": 3},
        "text": 'say "hi", \\ ok',
    }
    case.store.save_state("alarms", state)
    assert case.store.load_state("alarms") == state
    case.store.save_state("alarms", {"hp": {"state": "clear"}})
    assert case.store.load_state("alarms") == {"hp": {"state": "clear"}}
    with pytest.raises(ValueError):
        case.store.save_state("alarms", {"bad": float("nan")})
    assert case.store.load_state("alarms") == {"hp": {"state": "clear"}}


# --- awkward names ---------------------------------------------------------------------------
AWKWARD = [
    "with space",
    "com,ma",
    "eq=ual",
    'dq"uote',
    "sq'uote",
    "back\\slash",
    'x") |> drop(columns: ["_value"]) //',
    "a' OR 1=1 --",
    'b" OR 1=1 --',
    "dollar${x}",
    "ünï-cödé",
]


def test_awkward_names_round_trip(case):
    maps = [
        RoleMapping(
            role=role,
            tag=f"tag {name}",
            unit="MPa",
            measurement=f"m {name}",
            field=f"f {name}",
            tags={f"k {name}": f"v {name}"},
        )
        for role, name in zip([*REQUIRED_ROLES, "main_steam_flow"], AWKWARD, strict=True)
    ]
    idx = pd.date_range(T0, periods=3, freq="1min", tz="UTC")
    frame = pd.DataFrame({m.role: np.arange(3) + 10.0 * i for i, m in enumerate(maps)}, index=idx)
    case.loader.write_raw(maps, frame)
    got = case.store.read_raw(maps, T0, T0 + pd.Timedelta("1h"))
    assert_same(got, expected(frame))

    name = AWKWARD[6]
    res = pd.DataFrame({f"eff {n}": [0.5 + i / 100] for i, n in enumerate(AWKWARD)}, index=idx[:1])
    case.store.write_results(f"results {name}", res, {f"unit {AWKWARD[7]}": f"U7 {AWKWARD[8]}"})
    back = case.store.read_results(
        f"results {name}", T0, T0 + pd.Timedelta("1h"), {f"unit {AWKWARD[7]}": f"U7 {AWKWARD[8]}"}
    )
    pd.testing.assert_frame_equal(
        back,
        res.reindex(columns=sorted(res.columns))
        .rename_axis("time")
        .set_axis(idx[:1].as_unit("ns").rename("time")),
        check_freq=False,
    )
    case.store.set_checkpoint(name, T0)
    assert case.store.get_checkpoint(name) == T0


def test_names_cannot_change_query_meaning(case):
    """A name that looks like query syntax selects nothing, never other data."""
    plain = [RoleMapping(role="throttle_p", tag="a", unit="MPa", field="a", tags={"unit": "U7"})]
    case.loader.write_raw(plain, raw_frame(n=3)[["throttle_p"]])
    for evil in [
        "a' OR 1=1 --",
        'a" OR 1=1 --',
        'a") |> filter(fn: (r) => true) //',
        "a' OR 'a'='a",
        'a" or r._field != "',
    ]:
        probe = [RoleMapping(role="throttle_p", tag=evil, unit="MPa", field=evil, tags={"unit": "U7"})]
        assert case.store.read_raw(probe, T0, T0 + pd.Timedelta("1h"))["throttle_p"].isna().all(), evil
        if case.name == "sqlite":
            continue  # SQLite finds samples by tag name only; tag filters are InfluxDB's
        probe = [RoleMapping(role="throttle_p", tag="a", unit="MPa", field="a", tags={"unit": evil})]
        assert case.store.read_raw(probe, T0, T0 + pd.Timedelta("1h"))["throttle_p"].isna().all(), evil
    assert case.store.read_raw(plain, T0, T0 + pd.Timedelta("1h"))["throttle_p"].notna().sum() == 3


def test_newlines_in_names_rejected(case):
    bad = [RoleMapping(role="throttle_p", tag="a\nb", unit="MPa", field="a\nb")]
    with pytest.raises(ValueError, match="newline"):
        case.loader.write_raw(bad, raw_frame(n=1)[["throttle_p"]])
    with pytest.raises(ValueError, match="newline"):
        case.store.write_results("sections", results_frame(n=1), {"unit": "U7\nx"})
    with pytest.raises(ValueError, match="newline"):
        case.store.set_checkpoint("a\nb", T0)


# --- errors ----------------------------------------------------------------------------------
def test_missing_database_is_fatal(case, tmp_path):
    if case.name == "sqlite":
        other = tmp_path / "no such dir" / "unit.sqlite"
        with pytest.raises(FatalStoreError):
            case.other(path=other)
        (tmp_path / "garbage.sqlite").write_bytes(b"this is not a database file" * 100)
        with pytest.raises(FatalStoreError):
            case.other(path=tmp_path / "garbage.sqlite")
        return
    if case.name.startswith("influx2"):
        wrong = case.other(bucket="no_such_db/autogen")
    else:
        wrong = case.other(database="no_such_db")
    with pytest.raises(FatalStoreError):
        wrong.read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
    with pytest.raises(FatalStoreError) as err:
        wrong.write_raw(mappings(), raw_frame(n=2))
    assert len(err.value.unwritten) == 4  # 2 times x 2 series, handed back to the caller
    assert not wrong.pending  # not retried: it would fail again and block later writes
    with pytest.raises(FatalStoreError):
        wrong.write_results("sections", results_frame(n=2), {"unit": "U7"})
    if case.name.startswith("influx1"):
        with pytest.raises(FatalStoreError):
            case.other(retention_policy="no_such_rp").read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
        with pytest.raises(FatalStoreError):  # the database's default policy: still found missing
            case.other(database="no_such_db", retention_policy="").read_raw(
                mappings(), T0, T0 + pd.Timedelta("1h")
            )
    wrong.close()


def test_stopped_server_is_temporary_and_nothing_is_lost(case):
    if case.name == "sqlite":
        pytest.skip("no server to stop")
    if case.name == "influx1-1.8":
        # the same 1.8.10 server as the influx2 case, which stops it for real; here a port with
        # nothing listening (connection refused) keeps the suite fast
        from conftest import free_port

        gone = case.other(url=f"http://127.0.0.1:{free_port()}")
        with pytest.raises(TemporaryStoreError):
            gone.read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
        with pytest.raises(TemporaryStoreError):
            gone.get_checkpoint("x")
        return
    frame = raw_frame(n=4)
    case.server.stop()
    try:
        with pytest.raises(TemporaryStoreError):
            case.store.read_raw(mappings(), T0, T0 + pd.Timedelta("1h"))
        with pytest.raises(TemporaryStoreError):
            case.loader.write_raw(mappings(), frame)
        assert case.loader.pending, "the failed batch must be kept"
        assert len(case.loader.pending) == 8  # 4 times x 2 series
        with pytest.raises(TemporaryStoreError):
            case.store.get_checkpoint("U7-worker")
    finally:
        case.server.start()
    if case.loader is case.store:
        # the next write sends the kept batch first, to where raw samples go, then the checkpoint
        case.store.set_checkpoint("U7-worker", T0)
        assert case.store.get_checkpoint("U7-worker") == T0
    else:
        case.loader.write_raw(mappings(), frame.iloc[:0])  # the loader's next write sends it
    assert not case.loader.pending
    assert_same(case.store.read_raw(mappings(), T0, T0 + pd.Timedelta("1h")), expected(frame))


def test_a_refused_write_leaves_the_store_usable(case):
    frame = results_frame(n=2)[["hp_efficiency"]]
    case.store.write_results("sections", frame, {"unit": "U7"})
    with pytest.raises(ValueError):  # a field named like the tag key
        case.store.write_results("sections", frame.rename(columns={"hp_efficiency": "time"}), {"unit": "U7"})
    with pytest.raises(ValueError):
        case.store.write_results("sections", frame, {"time": "U7"})
    with pytest.raises(ValueError, match="reserved"):
        case.store.write_results("sections", frame.rename(columns={"hp_efficiency": "table"}), {"unit": "U7"})
    with pytest.raises(ValueError, match="same name as tag keys"):
        case.store.write_results("sections", frame.rename(columns={"hp_efficiency": "unit"}), {"unit": "U7"})
    case.store.write_results("sections", frame + 0.01, {"unit": "U7"})
    got = case.store.read_results("sections", T0, T0 + pd.Timedelta("1D"), {"unit": "U7"})
    np.testing.assert_allclose(
        got["hp_efficiency"].to_numpy(), (frame["hp_efficiency"] + 0.01).to_numpy(), rtol=0, atol=0
    )


# --- one worker per unit and store ------------------------------------------------------------
def _holder(command, host, pid):
    return LeaseHolder(command, host, pid, pd.Timestamp("2026-03-01T08:00:00Z"))


LEASE = pd.Timedelta("3m")


def test_a_second_holder_is_refused_until_the_first_releases(case):
    a, b = _holder("backfill", "host-a", 101), _holder("run", "host-b", 202)
    case.store.acquire_lease("U7", a, LEASE)
    case.store.acquire_lease("U7", a, LEASE)  # the same holder again: it keeps it
    other = case.other()
    try:
        with pytest.raises(UnitBusyError) as refused:
            other.acquire_lease("U7", b, LEASE)
        text = str(refused.value)
        assert "'U7'" in text and "backfill" in text and "host-a" in text and "pid 101" in text
        assert "\n" not in text
        assert refused.value.holder == a
        other.acquire_lease("U8", b, LEASE)  # another unit on the same store is free
        case.store.renew_lease("U7", a, LEASE)  # the refused claim did not take it from a
        case.store.release_lease("U7", a)
        other.acquire_lease("U7", b, LEASE)
        with pytest.raises(UnitBusyError, match="host-b"):
            case.store.acquire_lease("U7", a, LEASE)
        other.release_lease("U7", b)
        other.release_lease("U8", b)
    finally:
        other.close()


def test_exactly_one_of_simultaneous_claims_wins(case):
    import threading

    stores = [case.other() for _ in range(3)]
    outcome: dict[int, str] = {}
    go = threading.Barrier(len(stores))

    def claim(i):
        go.wait()
        try:
            stores[i].acquire_lease("U7", _holder("backfill", f"host-{i}", 300 + i), LEASE)
            outcome[i] = "won"
        except UnitBusyError:
            outcome[i] = "refused"

    threads = [threading.Thread(target=claim, args=(i,)) for i in range(len(stores))]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    try:
        assert sorted(outcome.values()) == ["refused", "refused", "won"], outcome
    finally:
        for s in stores:
            s.close()


def test_a_crashed_holder_stops_holding(case, tmp_path):
    b = _holder("run", "host-b", 202)
    if case.name == "sqlite":
        # a holder process killed with SIGKILL: the operating system ends its lock
        import signal
        import subprocess
        import sys

        code = (
            "import sys, time, pandas as pd\n"
            "from isentrope.daemon.stores import LeaseHolder, open_store\n"
            "s = open_store('sqlite', path=sys.argv[1])\n"
            "s.acquire_lease('U7', LeaseHolder.this_process('backfill'), pd.Timedelta('3m'))\n"
            "print('held', flush=True)\n"
            "time.sleep(120)\n"
        )
        proc = subprocess.Popen(
            [sys.executable, "-c", code, str(tmp_path / "unit.sqlite")], stdout=subprocess.PIPE, text=True
        )
        try:
            assert proc.stdout.readline().strip() == "held"
            with pytest.raises(UnitBusyError, match=f"pid {proc.pid}"):
                case.store.acquire_lease("U7", b, LEASE)
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=30)
            proc.stdout.close()
        case.store.acquire_lease("U7", b, LEASE)
        return
    # InfluxDB: a holder that stops renewing loses the unit when its lease expires
    import time

    a = _holder("backfill", "host-a", 101)
    lease = pd.Timedelta("4s")
    case.store.acquire_lease("U7", a, lease)
    other = case.other()
    try:
        with pytest.raises(UnitBusyError, match="lease expires") as refused:
            other.acquire_lease("U7", b, LEASE)
        expires = refused.value.expires
        time.sleep(max(0.0, (expires - pd.Timestamp.now(tz="UTC")).total_seconds()) + 0.3)
        other.acquire_lease("U7", b, LEASE)  # the stale lease does not hold any more
        with pytest.raises(UnitBusyError, match="taken over") as lost:  # a wakes up: lost
            case.store.renew_lease("U7", a, lease)
        assert lost.value.lost and lost.value.holder == b
        with pytest.raises(UnitBusyError):
            case.store.acquire_lease("U7", a, lease)
    finally:
        other.close()


def test_a_renewed_lease_keeps_holding(case):
    import time

    a, b = _holder("backfill", "host-a", 101), _holder("run", "host-b", 202)
    lease = pd.Timedelta("3s")
    case.store.acquire_lease("U7", a, lease)
    deadline = time.monotonic() + 4.5
    while time.monotonic() < deadline:  # renewed every second, for longer than the lease
        time.sleep(1.0)
        case.store.renew_lease("U7", a, lease)
    other = case.other()
    try:
        with pytest.raises(UnitBusyError, match="host-a"):
            other.acquire_lease("U7", b, LEASE)
    finally:
        other.close()


def test_a_killed_holder_on_this_host_has_vanished():
    # the lease of a process of this host that no longer exists is not waited out
    import socket
    import subprocess
    import sys

    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    here = socket.gethostname()
    assert _holder("backfill", here, child.pid).vanished()
    assert not _holder("backfill", here, os.getpid()).vanished()
    assert not _holder("backfill", "host-a", child.pid).vanished()
