"""A field that holds strings where numbers belong, against the real servers.

InfluxDB keeps one type per field of a measurement in each shard (a block of time: 7 days for the
test servers' default retention policy, shards starting on Mondays 00:00 UTC), so a historian or
an import can leave a field as text in one shard and numbers in another. What the servers answer
was measured here on influxd 1.6.7 (v1 API) and 1.8.10 (v1 and v2 API):

* writing a float where the shard holds the field as a string: 400 "partial write: field type
  conflict: input field "F" on measurement "M" is type float, already exists as type string
  dropped=N" (the other points of the batch are written);
* InfluxQL (v1 API): ``"F"::field`` reads the numbers of every shard and leaves the strings out;
* Flux (v2 API on 1.8.10): a ``group()`` that puts a text field and a numeric one in one
  ``_value`` column fails with 500 "schema collision detected" (retried forever before this
  file), and the reader stops reading the field at the first shard whose type differs from the
  first one's, so numbers after a shard of text are not returned.

What the stores must do (the project rule "bad input gets a clear error or a flagged sample, and
nothing already stored is lost"): no retry for any of these (``FatalStoreError``, naming field
and measurement and how to clear it), Influx1Store reads the text as missing samples, and
Influx2Store refuses a read that would silently miss numbers. Values are invented test data.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import requests

from isentrope.calc.quality import Reason, screen
from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores import FatalStoreError, TemporaryStoreError, escape, open_store
from isentrope.daemon.stores.influx_common import FieldTypeConflictError, classify_http, keep_unwritten

#: A Monday: the first point of shard A (2026-03-02 to 03-09 UTC).
T_A = pd.Timestamp("2026-03-02T00:00:00Z")
#: In shard B (2026-03-30 to 04-06 UTC), four weeks later: one read chunk (31 days) spans both.
T_B = pd.Timestamp("2026-03-30T06:00:00Z")
END = T_B + pd.Timedelta("1h")
MIN = pd.Timedelta("1min")

P = RoleMapping(role="throttle_p", tag="P", unit="MPa(a)", measurement="plant", tags={"unit": "U7"})
T = RoleMapping(role="throttle_t", tag="T", unit="degC", measurement="plant", tags={"unit": "U7"})


def line_protocol(server, db: str, *lines: str) -> requests.Response:
    """Write as a historian would, straight to /write (what the stores must then cope with)."""
    return requests.post(
        server.url + "/write",
        params={"db": db, "precision": "ns"},
        data="\n".join(lines).encode(),
        timeout=30,
    )


def write_text_then_numbers(server, db: str) -> None:
    """P as a string at T_A (shard A), as floats in shard B; T always a float."""
    for text in (
        f'plant,unit=U7 P="BAD",T=538.0 {T_A.value}',
        f"plant,unit=U7 T=538.1 {(T_A + MIN).value}",
        f"plant,unit=U7 P=16.6,T=538.2 {T_B.value}",
        f"plant,unit=U7 P=16.7,T=538.3 {(T_B + MIN).value}",
    ):
        assert line_protocol(server, db, text).status_code == 204, text


def influx2(server, db: str):
    return open_store(
        "influx2", url=server.url, org="-", bucket=server.bucket(db), token="", timeout=10, retries=0
    )


def influx1(server, db: str):
    return open_store("influx1", url=server.url, database=db, retention_policy="autogen", timeout=10)


def assert_names_field_and_cure(err: Exception, field: str, measurement: str) -> None:
    text = str(err)
    assert repr(field) in text and repr(measurement) in text, text
    assert "string" in text and "delete" in text.lower(), text


# --- classification without a server (the bodies measured on the servers, see above) -----------

WRITE_CONFLICT = (
    '{"error":"partial write: field type conflict: input field \\"P\\" on measurement \\"plant\\" '
    'is type float, already exists as type string dropped=1"}'
)
SCHEMA_COLLISION = (
    '{"error":"schema collision detected: column \\"_value\\" is both of type float and string"}'
)


@pytest.mark.parametrize(
    "status, body", [(400, WRITE_CONFLICT), (500, SCHEMA_COLLISION), (400, '{"error":"field type conflict"}')]
)
def test_type_conflicts_are_fatal_whatever_the_status(status, body):
    err = classify_http(status, body, "write_raw")
    assert isinstance(err, FatalStoreError) and f"HTTP {status}" in str(err)
    assert "no retry" in str(err)


def test_a_write_conflict_names_field_measurement_and_types():
    err = classify_http(400, WRITE_CONFLICT, "write_raw")
    assert "field 'P' of measurement 'plant' already holds string values" in str(err)
    assert 'SELECT "P"::string FROM "plant"' in str(err)  # where to find the points to delete


def statements(err: Exception) -> list[str]:
    """The statements a message suggests, in the order given (written between backticks)."""
    return re.findall(r"`([^`]+)`", str(err))


def test_a_write_conflict_names_the_batch_and_a_delete_that_its_export_covers():
    # The cure measured below on the servers: the block must hold no point of the measurement
    # (any series), so the delete has no tag condition on purpose, and the export before it
    # selects exactly what it deletes. Before, the message gave a bare "DELETE FROM ... WHERE
    # time >= ... AND time < ..." and no export of the other series.
    err = classify_http(400, WRITE_CONFLICT, "write_raw")
    assert isinstance(err, FieldTypeConflictError)
    lines = [
        f"plant,unit=U7 P=16.4,T=538.9 {(T_A + 2 * MIN).value}",
        f"plant,unit=U7 T=538.0 {(T_A + 3 * MIN).value}",
        f"plant,unit=U8 P=15.0 {(T_A + 4 * MIN).value}",
        f"other,unit=U7 P=1.0 {T_A.value}",
        f"plant,unit=U7 P=16.5 {(T_A + 5 * MIN).value}",
    ]

    class Store:
        batch_size, pending = 4, []

    keep_unwritten(Store, err, lines)
    text = str(err)
    # the failed batch is its first batch_size lines; only those of "plant" with field P
    assert "plant,unit=U7: 1 point 2026-03-02T00:02:00Z; plant,unit=U8: 1 point 2026-03-02T00:04:00Z." in text
    assert "1 point dropped whole" in text and "in any series" in text
    window = "WHERE time >= '<start_time>' AND time < '<end_time>'"
    assert statements(err) == [
        "SHOW SHARDS",
        f'SELECT "P"::string FROM "plant" {window} GROUP BY *',
        f'SELECT * FROM "plant" {window} GROUP BY *',
        f'DELETE FROM "plant" {window}',
        "DROP SHARD <id>",
        f"SELECT * FROM /.*/ {window} GROUP BY *",
        "influx delete --bucket <bucket> --start <start_time> --stop <end_time> --predicate '_measurement=\"plant\"'",
    ]
    assert "on influxd 1.8 `DELETE" in text and "on influxd 1.6 that leaves the type" in text
    assert "POST /api/v2/delete (from memory)" in text and "1.8 has no /api/v2/delete" in text
    assert err.unwritten == lines and Store.pending == []


def test_names_in_the_suggested_statements_are_quoted():
    # a measurement name with a space, as a plant configuration may have (escape.influxql_identifier)
    err = classify_http(400, WRITE_CONFLICT.replace("plant", "plant hall"), "write_raw")
    assert 'SELECT "P"::string FROM "plant hall" WHERE' in str(err)
    assert 'DELETE FROM "plant hall" WHERE' in str(err)
    assert "--predicate '_measurement=\"plant hall\"'" in str(err)


def test_a_conflict_named_late_in_a_long_answer_is_still_recognised():
    # The answer is classified whole and only cut for display: a conflict named after the
    # 300th character was a plain 400 before, without field, measurement or cure. The padding
    # stands for a long answer (e.g. several points named); the wording is the servers' above.
    body = (
        '{"error":"partial write: '
        + "unable to parse 'x': bad timestamp; " * 12
        + 'field type conflict: input field \\"P\\" on measurement \\"plant\\" is type float, '
        'already exists as type string dropped=1"}'
    )
    assert body.index("field type conflict") > 300
    err = classify_http(400, body, "write_raw")
    assert isinstance(err, FatalStoreError) and "no retry" in str(err)
    assert "field 'P' of measurement 'plant' already holds string values" in str(err)
    shown = str(err).split("(server: ", 1)[1]
    assert len(shown) <= 300 + len("...)") and shown.endswith("...)")
    # a 500 that names a missing target late in its answer stays fatal as well
    late = '{"error":"' + "x" * 400 + ' database not found: db"}'
    assert isinstance(classify_http(500, late, "read_raw"), FatalStoreError)


def test_other_5xx_stay_temporary():
    assert isinstance(classify_http(500, '{"error":"timeout"}', "read_raw"), TemporaryStoreError)


# --- Influx2Store (v2 API, Flux, influxd 1.8.10) ------------------------------------------------


def flux_values(server, db: str, measurement: str, start: pd.Timestamp, stop: pd.Timestamp) -> list[str]:
    """The raw answer of a plain Flux read of field P, one CSV value per point (no pivot)."""
    flux = (
        f'from(bucket: "{server.bucket(db)}") |> range(start: {start.isoformat().replace("+00:00", "Z")}, '
        f"stop: {stop.isoformat().replace('+00:00', 'Z')}) "
        f'|> filter(fn: (r) => r._measurement == "{measurement}" and r._field == "P")'
    )
    answer = requests.post(
        server.url + "/api/v2/query", json={"query": flux, "dialect": {"annotations": []}}, timeout=60
    )
    assert answer.status_code == 200, answer.text
    rows = [r.split(",") for r in answer.text.replace("\r\n", "\n").split("\n") if r.startswith(",_result")]
    return [r[6] for r in rows]  # ,result,table,_start,_stop,_time,_value,...


@pytest.mark.influx
def test_flux_reader_of_1_8_stops_a_field_at_the_first_shard_of_another_type(influxdb_v2):
    """The server behaviour the Influx2Store decision rests on (InfluxQL on the same server, as
    Influx1Store reads it, returns every number)."""
    db = influxdb_v2.new_database("typeflux")
    write_text_then_numbers(influxdb_v2, db)
    assert flux_values(influxdb_v2, db, "plant", T_A, END) == ["BAD"]  # 16.6, 16.7 of shard B missing
    assert flux_values(influxdb_v2, db, "plant", T_B, END) == ["16.6", "16.7"]
    # another series of the measurement: its numbers in shard B are missed as well
    assert line_protocol(influxdb_v2, db, f"plant,unit=U8 P=15.0 {T_B.value}").status_code == 204
    assert flux_values(influxdb_v2, db, "plant", T_A, END) == ["BAD"]
    # numbers first, text in the next shard, numbers again: neither the text nor what follows
    t_c = T_B + pd.Timedelta(days=28)
    for text in (
        f"later,unit=U7 P=1.0 {T_A.value}",
        f'later,unit=U7 P="BAD" {T_B.value}',
        f"later,unit=U7 P=1.2 {t_c.value}",
    ):
        assert line_protocol(influxdb_v2, db, text).status_code == 204, text
    assert flux_values(influxdb_v2, db, "later", T_A, t_c + MIN) == ["1"]
    values = influxdb_v2.query('SELECT "P"::field FROM "plant"', db)["results"][0]["series"][0]["values"]
    assert sorted(v for _, v in values) == [15.0, 16.6, 16.7]
    values = influxdb_v2.query('SELECT "P"::field FROM "later"', db)["results"][0]["series"][0]["values"]
    assert [v for _, v in values] == [1.0, 1.2]


@pytest.mark.influx
@pytest.mark.parametrize("roles", [[P, T], [P]], ids=["text-field-beside-numbers", "text-field-alone"])
def test_influx2_read_raw_over_a_field_with_text_is_fatal_and_names_it(influxdb_v2, roles):
    # Before: 500 "schema collision" -> TemporaryStoreError, retried forever (beside numbers),
    # or the text read as NaN and 16.6, 16.7 silently missing (alone).
    db = influxdb_v2.new_database("type2raw")
    write_text_then_numbers(influxdb_v2, db)
    store = influx2(influxdb_v2, db)
    with pytest.raises(FatalStoreError) as caught:
        store.read_raw(roles, T_A, END)
    assert_names_field_and_cure(caught.value, "P", "plant")
    assert T_A.isoformat() in str(caught.value) and "'BAD'" in str(caught.value)  # the first such point
    assert 'kind = "influx1"' in str(caught.value)
    # a window with numbers only still reads
    got = store.read_raw(roles, T_B, END)
    assert got["throttle_p"].tolist() == [16.6, 16.7]  # written above
    store.close()


@pytest.mark.influx
def test_influx2_read_results_over_a_field_with_text_is_fatal_and_names_it(influxdb_v2):
    # Before: 500 "schema collision" -> TemporaryStoreError, retried forever.
    db = influxdb_v2.new_database("type2res")
    assert (
        line_protocol(
            influxdb_v2,
            db,
            f'sections,unit=U7 hp_efficiency="n/a",ip_efficiency=0.91 {T_A.value}',
            f"sections,unit=U7 hp_efficiency=0.85,ip_efficiency=0.9 {T_B.value}",
        ).status_code
        == 204
    )
    store = influx2(influxdb_v2, db)
    with pytest.raises(FatalStoreError) as caught:
        store.read_results("sections", T_A, END, {"unit": "U7"})
    assert_names_field_and_cure(caught.value, "hp_efficiency", "sections")
    store.close()


@pytest.mark.influx
def test_influx2_text_at_the_window_end_belongs_to_the_next_window(influxdb_v2):
    # influxd 1.8.10's storage reader returns a point at the stop time itself; the store keeps
    # [start, end) only. Before, the text check ran first and refused [T_A + 1 min, T_A + 2 min)
    # for the text point at T_A + 2 min, outside it. All points lie in shard A.
    db = influxdb_v2.new_database("type2edge")
    t1, t2 = T_A + MIN, T_A + 2 * MIN
    assert (
        line_protocol(
            influxdb_v2, db, f"plant,unit=U7 T=538.1 {t1.value}", f'plant,unit=U7 P="BAD2",T=538.2 {t2.value}'
        ).status_code
        == 204
    )
    assert (
        line_protocol(
            influxdb_v2,
            db,
            f"sections,unit=U7 ip_efficiency=0.9 {t1.value}",
            f'sections,unit=U7 hp_efficiency="n/a",ip_efficiency=0.91 {t2.value}',
        ).status_code
        == 204
    )
    store = influx2(influxdb_v2, db)
    got = store.read_raw([P, T], t1, t2)
    assert got.index.tolist() == [t1] and got["throttle_t"].tolist() == [538.1]
    assert np.isnan(got["throttle_p"]).all()
    assert store.read_results("sections", t1, t2, {"unit": "U7"})["ip_efficiency"].tolist() == [0.9]
    # the window that holds it is refused, naming that point
    with pytest.raises(FatalStoreError) as caught:
        store.read_raw([P, T], t1, t2 + MIN)
    assert t2.isoformat() in str(caught.value) and "'BAD2'" in str(caught.value)
    with pytest.raises(FatalStoreError) as caught:
        store.read_results("sections", t1, t2 + MIN, {"unit": "U7"})
    assert "'n/a'" in str(caught.value)  # text that pandas reads as no value unless told not to
    store.close()


@pytest.mark.influx
def test_influx2_reads_an_integer_field_beside_float_ones(influxdb_v2):
    # Before: group() put long and double values in one column: 500 "schema collision", retried.
    db = influxdb_v2.new_database("type2int")
    assert (
        line_protocol(
            influxdb_v2,
            db,
            f"plant,unit=U7 P=17i,T=538.0 {T_A.value}",
            f"plant,unit=U7 P=16i,T=538.5 {(T_A + MIN).value}",
        ).status_code
        == 204
    )
    got = influx2(influxdb_v2, db).read_raw([P, T], T_A, END)
    assert got["throttle_p"].tolist() == [17.0, 16.0] and got["throttle_t"].tolist() == [538.0, 538.5]


def block_of(server, db: str, t: pd.Timestamp) -> tuple[int, str, str]:
    """(id, start_time, end_time) of the shard of ``db`` holding ``t``, from SHOW SHARDS."""
    for series in server.query("SHOW SHARDS")["results"][0]["series"]:
        for row in series.get("values", []):  # a database without shards has none
            shard = dict(zip(series["columns"], row, strict=True))
            if shard["database"] == db and pd.Timestamp(shard["start_time"]) <= t < pd.Timestamp(
                shard["end_time"]
            ):
                return shard["id"], shard["start_time"], shard["end_time"]
    raise AssertionError(f"no shard of {db} holds {t}")


def filled(statement: str, block: tuple[int, str, str]) -> str:
    shard_id, start, end = block
    return statement.replace("<start_time>", start).replace("<end_time>", end).replace("<id>", str(shard_id))


def export_back(server, db: str, answer: dict) -> int:
    """Write an exported ``SELECT * ... GROUP BY *`` answer back as line protocol, numbers only
    (the text left out, as the message says); returns the number of points written."""
    lines = []
    for series in answer["results"][0].get("series", []):
        for row in series["values"]:
            point = dict(zip(series["columns"], row, strict=True))
            t = point.pop("time")
            fields = ",".join(
                f"{escape.lp_field_key(k)}={escape.lp_float(v)}"
                for k, v in sorted(point.items())
                if isinstance(v, (int, float)) and not isinstance(v, bool) and k not in series["tags"]
            )
            if fields:
                lines.append(f"{escape.lp_series_key(series['name'], series['tags'])} {fields} {t}")
    if lines:
        assert line_protocol(server, db, *lines).status_code == 204
    return len(lines)


def every_value(server, db: str) -> set:
    """(measurement, tags, time, field, value) of every value stored in ``db``."""
    answer = server.query("SELECT * FROM /.*/ GROUP BY *", db)["results"][0].get("series", [])
    return {
        (s["name"], tuple(sorted(s["tags"].items())), row[0], field, value)
        for s in answer
        for row in s["values"]
        for field, value in zip(s["columns"][1:], row[1:], strict=True)
        if value is not None
    }


@pytest.mark.influx
@pytest.mark.parametrize("version", ["1.6", "1.8"])
def test_deleting_only_the_text_points_does_not_clear_the_type(version, request):
    """What the messages rest on: a block keeps the field's type while any point of the
    measurement is left in it, so a delete by tag and time of the text points alone (what a
    message naming the series would suggest) does not cure, and on 1.8.10 Flux then misses the
    numbers of the later block without an error. 1.8.10 forgets the type once the block holds
    no point of the measurement; 1.6.7 only when the shard is dropped."""
    server = request.getfixturevalue("influxdb_v1" if version == "1.6" else "influxdb_v2")
    db = server.new_database("typedel")
    write_text_then_numbers(server, db)
    float_p = f"plant,unit=U7 P=16.4 {(T_A + 2 * MIN).value}"
    server.query(f'DELETE FROM "plant" WHERE "unit" = \'U7\' AND time = {T_A.value}', db)
    assert server.query('SELECT "P"::string FROM "plant"', db)["results"][0].get("series") is None  # gone
    assert line_protocol(server, db, float_p).status_code == 400  # T_A + 1 min keeps the type
    if version == "1.8":
        got = influx2(server, db).read_raw([P, T], T_A, END)  # no error now, and no 16.6, 16.7
        assert got["throttle_t"].tolist() == [538.1, 538.2, 538.3] and np.isnan(got["throttle_p"]).all()
    shard_id, start, end = block_of(server, db, T_A)
    server.query(f"DELETE FROM \"plant\" WHERE time >= '{start}' AND time < '{end}'", db)
    if version == "1.8":
        assert line_protocol(server, db, float_p).status_code == 204
    else:
        assert line_protocol(server, db, float_p).status_code == 400  # 1.6.7 keeps it even now
        server.query(f"DROP SHARD {shard_id}")
        assert line_protocol(server, db, float_p).status_code == 204


@pytest.mark.influx
@pytest.mark.parametrize("kind", ["influx2-1.8", "influx1-1.6", "influx1-1.8"])
def test_following_the_write_message_clears_the_conflict_and_loses_nothing(kind, request):
    # Before, the message's "DELETE FROM ... WHERE time >= ... AND time < ..." also deleted
    # unit U8's points of the block, with no word of exporting them.
    server = request.getfixturevalue("influxdb_v1" if kind.endswith("1.6") else "influxdb_v2")
    db = server.new_database("typecure")
    write_text_then_numbers(server, db)
    assert (
        line_protocol(
            server,
            db,
            f"plant,unit=U8 T=500.0 {(T_A + 5 * MIN).value}",
            f"sections,unit=U8 hp_efficiency=0.84 {(T_A + 5 * MIN).value}",
        ).status_code
        == 204
    )
    before = every_value(server, db)
    store = influx2(server, db) if kind.startswith("influx2") else influx1(server, db)
    frame = pd.DataFrame(
        {"throttle_p": [16.4], "throttle_t": [538.9]}, index=pd.DatetimeIndex([T_A + 2 * MIN])
    )
    with pytest.raises(FatalStoreError) as caught:
        store.write_raw([P, T], frame)
    assert "plant,unit=U7: 1 point 2026-03-02T00:02:00Z." in str(caught.value)
    show, listing, export, delete, drop, export_all, _ = statements(caught.value)
    block = block_of(server, db, T_A + 2 * MIN)
    assert show == "SHOW SHARDS"
    found = server.query(filled(listing, block), db)["results"][0]["series"]
    assert [(s["tags"], s["values"]) for s in found] == [({"unit": "U7"}, [[T_A.value, "BAD"]])]
    if kind.endswith("1.8"):
        exported = server.query(filled(export, block), db)
        server.query(filled(delete, block), db)
    else:  # 1.6.7: the DELETE leaves the type; the shard goes, with every measurement in it
        exported = server.query(filled(export_all, block), db)
        server.query(filled(drop, block))
    assert export_back(server, db, exported) == 3 + (0 if kind.endswith("1.8") else 1)
    store.write_raw([P, T], frame)  # these points again
    u7 = (("unit", "U7"),)
    written = {
        ("plant", u7, (T_A + 2 * MIN).value, "P", 16.4),
        ("plant", u7, (T_A + 2 * MIN).value, "T", 538.9),
    }
    assert (
        every_value(server, db) == before - {("plant", u7, T_A.value, "P", "BAD")} | written
    )  # only the text lost
    store.close()


@pytest.mark.influx
def test_following_the_read_message_clears_the_read(influxdb_v2):
    db = influxdb_v2.new_database("type2cure")
    write_text_then_numbers(influxdb_v2, db)
    assert line_protocol(influxdb_v2, db, f"plant,unit=U8 T=500.0 {(T_A + 5 * MIN).value}").status_code == 204
    store = influx2(influxdb_v2, db)
    with pytest.raises(FatalStoreError) as caught:
        store.read_raw([P, T], T_A, END)
    listing, show, _, export, delete, *_ = statements(caught.value)
    # the points named, with the series' tags and the read's window
    assert listing == (
        'SELECT "P"::string FROM "plant" WHERE "unit" = \'U7\' AND time >= \'2026-03-02T00:00:00Z\' '
        "AND time < '2026-03-30T07:00:00Z'"
    )
    assert influxdb_v2.query(listing, db)["results"][0]["series"][0]["values"] == [[T_A.value, "BAD"]]
    assert "on influxd 1.8 (measured on 1.8.10) the Flux reader" in str(caught.value)
    block = block_of(influxdb_v2, db, T_A)
    exported = influxdb_v2.query(filled(export, block), db)
    influxdb_v2.query(filled(delete, block), db)
    assert export_back(influxdb_v2, db, exported) == 3  # U7 at T_A and T_A + 1 min, U8
    got = store.read_raw([P, T], T_A, END)
    assert got["throttle_t"].tolist() == [538.0, 538.1, 538.2, 538.3]  # nothing but the text lost
    assert np.isnan(got["throttle_p"].iloc[:2]).all() and got["throttle_p"].iloc[2:].tolist() == [16.6, 16.7]
    u8 = RoleMapping(role="throttle_t", tag="T", unit="degC", measurement="plant", tags={"unit": "U8"})
    assert store.read_raw([u8], T_A, END)["throttle_t"].tolist() == [500.0]
    # and shard A takes numbers for P again
    store.write_raw([P], pd.DataFrame({"throttle_p": [16.5]}, index=pd.DatetimeIndex([T_A], name="time")))
    assert store.read_raw([P], T_A, T_A + MIN)["throttle_p"].tolist() == [16.5]
    store.close()


# --- Influx1Store (v1 API, InfluxQL): the text reads as missing samples, the numbers are kept ---


@pytest.fixture(params=["1.6", "1.8"])
def v1_server(request):
    return request.getfixturevalue("influxdb_v1" if request.param == "1.6" else "influxdb_v2")


@pytest.mark.influx
def test_influx1_reads_text_as_missing_samples_that_screening_flags(v1_server):
    db = v1_server.new_database("type1raw")
    write_text_then_numbers(v1_server, db)
    store = influx1(v1_server, db)
    raw = store.read_raw([P, T], T_A, END)
    assert raw.index.tolist() == [T_A, T_A + MIN, T_B, T_B + MIN]
    assert np.isnan(raw["throttle_p"].iloc[:2]).all()
    assert raw["throttle_p"].iloc[2:].tolist() == [16.6, 16.7]  # the numbers of shard B, all of them
    assert raw["throttle_t"].tolist() == [538.0, 538.1, 538.2, 538.3]
    flags = screen(store.read([P, T], T_A, END), flatline=None, spike=None).flags
    assert flags.loc[T_A, "throttle_p"] & int(Reason.MISSING)
    assert not flags.loc[T_B, "throttle_p"] & int(Reason.MISSING)
    results = store.read_results("plant", T_A, END, {"unit": "U7"})
    assert results["P"].iloc[2:].tolist() == [16.6, 16.7] and np.isnan(results["P"].iloc[0])
    store.close()


# --- writes: both stores, every server ----------------------------------------------------------


@pytest.mark.influx
@pytest.mark.parametrize("kind", ["influx2-1.8", "influx1-1.6", "influx1-1.8"])
def test_a_float_written_where_the_shard_holds_text_is_fatal_and_not_kept(kind, request):
    server = request.getfixturevalue("influxdb_v1" if kind.endswith("1.6") else "influxdb_v2")
    db = server.new_database("typewrite")
    write_text_then_numbers(server, db)
    store = influx2(server, db) if kind.startswith("influx2") else influx1(server, db)
    frame = pd.DataFrame(
        {"throttle_p": [16.4], "throttle_t": [538.9]}, index=pd.DatetimeIndex([T_A + 2 * MIN])
    )
    with pytest.raises(FatalStoreError) as caught:
        store.write_raw([P, T], frame)
    assert_names_field_and_cure(caught.value, "P", "plant")
    assert "no retry" in str(caught.value)
    assert store.pending == [] and len(caught.value.unwritten) == 1  # not sent again by the next write

    # a batch of two points, one refused: the server writes the other (a partial write)
    results = pd.DataFrame(
        {"hp_efficiency": [0.8, np.nan], "ip_efficiency": [np.nan, 0.9]},
        index=pd.DatetimeIndex([T_A + MIN, T_A + 2 * MIN]),
    )
    assert line_protocol(server, db, f'sections,unit=U7 hp_efficiency="n/a" {T_A.value}').status_code == 204
    with pytest.raises(FatalStoreError) as caught:
        store.write_results("sections", results, {"unit": "U7"})
    assert_names_field_and_cure(caught.value, "hp_efficiency", "sections")
    assert "the other points of the batch" in str(caught.value) and store.pending == []
    kept = server.query('SELECT "ip_efficiency" FROM "sections"', db)["results"][0]["series"][0]["values"]
    assert kept == [[(T_A + 2 * MIN).value, 0.9]]
    store.close()


# --- the worker: a fatal read ends the cycle at once, without retries ---------------------------


def unit_with_text_before_its_history(server, tmp_path, database: str, days: float):
    """A unit of ``worker_support`` on a new database of the InfluxDB 2 API ``server`` (token
    from ``ISENTROPE_TEST_TOKEN``): its throttle pressure field holds 'I/O BAD' an hour before
    ``ws.START`` (the week before the history: another shard), then ``days`` of history.
    Returns ``(ws, config path, config, open store, throttle pressure mapping)``."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/daemon: worker_support
    import worker_support as ws

    from isentrope.daemon.config import load_config

    db = server.new_database(database)
    table = ws.influx18_store_toml(server, db)
    path = ws.write_config(tmp_path / "unit.toml", table)
    config = load_config(path, environ={"ISENTROPE_TEST_TOKEN": "u:p"})
    store = open_store(config.store.kind, **config.store.open_options())
    m = next(m for m in config.mappings if m.role == "throttle_p")
    bad = ws.START - pd.Timedelta("1h")
    lp = (
        f"{escape.lp_series_key(m.measurement, m.tags)} "
        f"{escape.lp_field_key(m.field_name)}={escape.lp_string_value('I/O BAD')} {bad.value}"
    )
    assert line_protocol(server, db, lp).status_code == 204
    store.write_raw(config.mappings, ws.plant_history(days, freq="5min"))
    return ws, path, config, store, m


@pytest.mark.influx
def test_the_worker_stops_at_once_on_text_in_a_raw_field(influxdb_v2, tmp_path):
    from isentrope.daemon.worker import Worker

    ws, _, config, store, m = unit_with_text_before_its_history(influxdb_v2, tmp_path, "typeworker", 0.5)
    sleeps = []
    worker = Worker.from_config(
        config,
        store,
        start_default=ws.START + pd.Timedelta("3h"),
        clock=ws.FakeClock(ws.START + pd.Timedelta("10h")),
        sleep=sleeps.append,
    )
    with pytest.raises(FatalStoreError) as caught:
        worker.run_cycle()
    assert_names_field_and_cure(caught.value, m.field_name, m.measurement)
    assert sleeps == []  # no retry, no backoff
    assert worker.last_report.error.startswith("store error:")
    store.close()


def test_every_test_here_that_starts_a_server_is_marked_influx():
    """`-m "not influx"` must leave out every test that needs a server (the v1_server fixture
    above asks for one too); a missing mark ran one without a server and failed."""
    import inspect

    # "request": the test picks its server with request.getfixturevalue
    servers = {"influxdb_v1", "influxdb_v2", "v1_server", "request"}
    needing = [
        name
        for name, fn in globals().items()
        if name.startswith("test_") and callable(fn) and servers & set(inspect.signature(fn).parameters)
    ]
    assert "test_influx1_reads_text_as_missing_samples_that_screening_flags" in needing
    unmarked = [
        name
        for name in needing
        if "influx" not in {m.name for m in getattr(globals()[name], "pytestmark", [])}
    ]
    assert unmarked == []


# --- isentrope check: a refused role is that role's verdict, the others are still judged --------


def test_check_reads_role_by_role_when_the_store_refuses_one():
    from isentrope.daemon.commands import check

    class Store:  # refuses every read that includes throttle_p, as Influx2Store does for text
        def __init__(self, message=None):
            self.message, self.calls = message, []

        def read_raw(self, mappings, start, end):
            self.calls.append([m.role for m in mappings])
            if self.message or any(m.role == "throttle_p" for m in mappings):
                raise FatalStoreError(self.message or "field 'P' holds string values")
            index = pd.DatetimeIndex([T_A], name="time")
            return pd.DataFrame({m.role: [1.0] for m in mappings}, index=index)

    store = Store()
    raw, errors = check.read_roles(store, [P, T], T_A, END)
    assert errors == {"throttle_p": "field 'P' holds string values"}
    assert raw["throttle_t"].tolist() == [1.0] and "throttle_p" not in raw
    assert store.calls == [["throttle_p", "throttle_t"], ["throttle_p"], ["throttle_t"]]
    # the same refusal for every role is the store's problem: raised, as before
    with pytest.raises(FatalStoreError, match="401"):
        check.read_roles(Store("HTTP 401: unauthorized"), [P, T], T_A, END)


@pytest.mark.influx
def test_check_shows_a_text_field_as_its_roles_verdict(influxdb_v2, tmp_path, capsys, monkeypatch):
    # Before: "error: read_raw ...", exit 1, and no table at all.
    from isentrope.daemon import cli

    ws, path, config, store, m = unit_with_text_before_its_history(influxdb_v2, tmp_path, "typecheck", 0.25)
    store.close()
    monkeypatch.setenv("ISENTROPE_TEST_TOKEN", "u:p")  # for the command's own reading of the config
    end = ws.START + pd.Timedelta("6h")
    rc = cli.main(["check", "-c", str(path), "--end", end.isoformat(), "--since", "8h"])
    captured = capsys.readouterr()
    assert rc == 1 and "error:" not in captured.err, captured.err
    tags = {mm.role: mm.tag for mm in config.mappings}
    rows = {
        line.split()[0]: line
        for line in captured.out.splitlines()
        if len(line.split()) > 1 and tags.get(line.split()[0]) == line.split()[1]
    }
    assert set(rows) == {mm.role for mm in config.mappings}  # the whole table
    assert rows["throttle_p"].endswith("PROBLEM: the store refused to read it (error below)")
    assert " 0 " in rows["throttle_p"]
    assert not any("refused" in line for role, line in rows.items() if role != "throttle_p")
    assert rows["throttle_t"].split()[3] == "72"  # 6 h at 5 min: still read and judged
    detail = next(
        line for line in captured.out.splitlines() if line.startswith(f"throttle_p ({m.tag}): store error:")
    )
    assert "holds string values" in detail and "'I/O BAD'" in detail and 'kind = "influx1"' in detail
