"""Hostile names on every store: what the configuration accepts is written and read back
exactly; what a store cannot hold is refused when the configuration is loaded, naming the key.

Names are generated (hypothesis) from backslashes, both quotes, commas, spaces, equals signs,
``#``, Flux and InfluxQL punctuation, non-ASCII letters and symbols, and newlines, for a role's
measurement, field and tag (key and value) and for the unit name (the ``unit`` tag of every
result and part of the checkpoint names). Each example loads a configuration holding them;
if it loads, raw samples through the role's mapping, results of a measurement and field of
those names, and a checkpoint are written and read back through the store, against the real
servers. One database (bucket, SQLite file) per test; each example's series carry their own
``run`` tag, so an earlier example's points can never be read as this one's.
"""

from __future__ import annotations

import dataclasses
import itertools
import json

import numpy as np
import pandas as pd
import pytest
import worker_support as ws
from hypothesis import HealthCheck, assume, example, given, settings
from hypothesis import strategies as st

from isentrope.daemon.config import parse_config
from isentrope.daemon.errors import ConfigError
from isentrope.daemon.stores import escape

from .fault_stores import KINDS, store_place

pytestmark = pytest.mark.faults

ALPHABET = list("aZ0-_./\\\"',= #${}|>()*") + ["é", "µ", "°", "Ω", "中", "🙂"]
_hostile = st.text(alphabet=ALPHABET, min_size=1, max_size=8)
names = st.one_of(
    _hostile,
    _hostile,
    _hostile,
    st.text(st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=6),
    st.text(alphabet=ALPHABET + ["\n", "\t", "\r"], min_size=1, max_size=6),  # refused: control characters
)
#: Tag keys the stores keep for themselves (``time``; Flux's ``_...`` columns, ``result``,
#: ``table``) or that the test uses (``unit``, ``run``); SQLite columns are case-insensitive.
RESERVED_KEYS = {"time", "time_utc", "result", "table", "unit", "run"}

T0 = pd.Timestamp("2026-05-04T06:00:00Z")


def toml_string(s: str) -> str:
    """A TOML basic string holding ``s`` (JSON's escapes are TOML's, except DEL)."""
    return json.dumps(s, ensure_ascii=False).replace("\x7f", "\\u007f")


def refusals(
    kind: str, unit: str, measurement: str, field: str, key: str, value: str
) -> list[tuple[str, str]]:
    """(configuration key, name) of each name a store of ``kind`` cannot hold (by ``escape``)."""
    p = "roles.throttle_p."
    checks = [
        ("unit.name", unit, escape.check_name),
        (p + "measurement", measurement, escape.check_name),
        (p + "field", field, escape.check_name),
        (p + "tags", key, escape.check_name),
        (p + "tags", value, escape.check_name),
    ]
    if kind != "sqlite":
        checks += [
            ("unit.name", unit, escape.lp_tag_value),
            (p + "measurement", measurement, escape.lp_measurement),
            (p + "field", field, escape.lp_field_key),
            (p + "tags", key, escape.lp_tag_key),
            (p + "tags", value, escape.lp_tag_value),
        ]
    if kind.startswith("influx2"):
        checks.append((p + "tags", key, escape.flux_tag_key))
    out = [] if unit.strip() else [("unit.name", unit)]  # a blank unit name is refused as empty
    for where, name, check in checks:
        try:
            check(name)
        except ValueError:
            out.append((where, name))
    return out


@pytest.mark.influx
@pytest.mark.parametrize("kind", KINDS)
def test_hostile_names_round_trip_or_are_refused_at_load(request, kind, tmp_path, fault_report):
    place = store_place(request, kind, tmp_path, "names")
    base = ws.write_config(tmp_path / "base.toml", place.toml).read_text()
    store = place.open()
    runs = itertools.count()
    tried = {"round trip": 0, "refused": 0}
    #: per result measurement, the field names and tag keys earlier examples gave it: a store
    #: refuses (ValueError) a field named as one of its tag keys, and the reverse
    used: dict[str, tuple[set, set]] = {}

    @settings(
        max_examples=25,
        deadline=None,
        suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
        database=None,
    )
    @given(unit=names, measurement=names, field=names, key=names, value=names)
    @example(unit='U2 \\"north\\"', measurement='plant \\"a\\"', field='P \\"x\\"', key='k\\"', value='v\\"')
    @example(unit="U2", measurement="a\\=b, c", field='MS P=1, "abs"', key="a b", value="x,y=z")
    @example(unit="U2\n", measurement="m", field="f", key="k", value="v")
    @example(unit="0", measurement="0", field="0", key="\\", value="\n")  # one problem per key
    @example(unit="0", measurement="0", field="0", key="$", value="0")  # Flux on 1.8 lost it
    @example(unit="0", measurement="0", field="0", key="🙂", value='$"')
    @example(unit="U2", measurement="m\\", field="f\\,g", key="k\\ ", value="v\\=")
    def check(unit, measurement, field, key, value):
        assume(key.casefold() not in RESERVED_KEYS and not key.startswith("_"))
        assume(
            field.casefold() not in {key.casefold(), "time", "time_utc", *RESERVED_KEYS} and field[0] != "_"
        )
        fields, keys = used.get(measurement.casefold(), (set(), set()))
        assume(field.casefold() not in keys and key.casefold() not in fields)
        assume(not measurement.startswith("isentrope_") and measurement != "samples")
        run = str(next(runs))
        text = base.replace('name = "Greywater Bend 2"', f"name = {toml_string(unit)}").replace(
            'tag = "GB2-MST-P01"',
            f'tag = "GB2-MST-P01"\nmeasurement = {toml_string(measurement)}\nfield = {toml_string(field)}\n'
            f"tags = {{ {toml_string(key)} = {toml_string(value)} }}",
            1,
        )
        refused = refusals(kind, unit, measurement, field, key, value)
        try:
            config = parse_config(text, source="names.toml", base_dir=tmp_path, environ=place.environ)
        except ConfigError as exc:
            ok = bool(refused) and all(f": {where}: " in str(exc) for where, _ in refused)
            fault_report.record("hostile names", f"{kind}: refused at load", as_expected=ok, detail=str(exc))
            tried["refused"] += 1
            assert ok, (refused, str(exc))
            # a newline is named as such when every refused name has one (the configuration
            # reports one problem per key)
            if all("\n" in name and name[0] != "#" for _, name in refused) and unit.strip():
                assert "newline" in str(exc)
            return
        assert not refused, (refused, "loaded")
        m = config.roles["throttle_p"]
        fields, keys = used.setdefault(measurement.casefold(), (set(), set()))
        fields.add(field.casefold())
        keys |= {key.casefold(), "unit", "run"}
        m = dataclasses.replace(m, tags={**m.tags, "run": run})
        assert (m.measurement, m.field_name, m.tags[key]) == (measurement, field, value)
        idx = pd.date_range(T0, periods=3, freq="1min")
        raw = pd.DataFrame({"throttle_p": [165.25, 165.5, 166.0 + int(run) / 8]}, index=idx)
        store.write_raw([m], raw)
        back = store.read_raw([m], T0, T0 + pd.Timedelta("1h"))
        res = pd.DataFrame({field: [0.8612, 0.85 + int(run) / 1024]}, index=idx[:2])
        tags = {"unit": config.unit.name, key: value, "run": run}
        store.write_results(measurement, res, tags)
        got = store.read_results(measurement, T0, T0 + pd.Timedelta("1h"), tags)
        checkpoint = f"{config.unit.name}/names {run}"
        store.set_checkpoint(checkpoint, idx[-1])
        same = (
            back["throttle_p"].to_numpy().tolist() == raw["throttle_p"].tolist()
            and list(got.columns) == [field]
            and got[field].to_numpy().tolist() == res[field].tolist()
            and got.index.equals(res.index)
            and store.get_checkpoint(checkpoint) == idx[-1]
        )
        fault_report.record(
            "hostile names",
            f"{kind}: round trip",
            as_expected=same,
            lost_data=not same,
            detail=f"{[unit, measurement, field, key, value]!r}: {back.to_dict('list')} {got.to_dict('list')}",
        )
        tried["round trip"] += 1
        assert same, (back, got)
        assert np.isfinite(back["throttle_p"]).all()

    try:
        check()
    finally:
        store.close()
    assert tried["round trip"] >= 5, tried
