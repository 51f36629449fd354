"""Fuzz cases: import-csv files with malformed rows, bytes that are not UTF-8, times out of
range or unreadable, values that are not numbers and duplicate times; configurations mutated
key by key.

CSV: each case (seeded) takes a good long-layout file and damages some of its lines. The test
keeps its own account of what each line should give: a rejected line is listed by number and
keeps the value stored before; a value that is not a number is left out and the stored value
stays; of duplicate times the later row wins; everything else is written. The store must hold
exactly that afterwards.

Configuration: every leaf of a complete configuration is mutated in ways that cannot be right
(a string where a number belongs, a number where a name belongs, a one-sided range, a
negative or absurd duration, an unknown unit, a misspelt key, a required key removed); each
mutation must exit 2 before any I/O, naming the key.
"""

from __future__ import annotations

import json
import random
import re
import tomllib

import pandas as pd
import pytest
import worker_support as ws
from test_cli_tools import write_config

from isentrope.daemon import cli
from isentrope.daemon.config import load_config

T0 = pd.Timestamp("2026-03-01T00:00:00Z")
ROWS = 40
OLD = 16.5


def rejected_lines(out: str, name: str) -> set[int]:
    m = re.search(rf"rejected lines of {re.escape(name)}: ([0-9, -]+)", out)
    if not m:
        return set()
    got = set()
    for part in m.group(1).split(","):
        a, _, b = part.strip().partition("-")
        got |= set(range(int(a), int(b or a) + 1))
    return got


MUTATIONS = [
    "extra field",
    "open quote",
    "not UTF-8",
    "far time",
    "unreadable time",
    "not a number",
    "duplicate",
]


def damaged_file(rng: random.Random) -> tuple[bytes, set[int], dict, list[str], int]:
    """(file bytes, the line numbers to be rejected, {time: value expected in the store},
    the mutations applied, the duplicates to be counted as replaced)."""
    times = [T0 + pd.Timedelta(minutes=i) for i in range(ROWS)]
    lines = [f"{t:%Y-%m-%dT%H:%M:%SZ},U7-MS-P,{17 + i / 100:.2f}".encode() for i, t in enumerate(times)]
    expected = {t: 17 + i / 100 for i, t in enumerate(times)}
    rejected: set[int] = set()
    applied = []
    for i in rng.sample(range(ROWS), rng.randint(1, 6)):
        kind = rng.choice(MUTATIONS)
        applied.append(f"line {i + 2}: {kind}")
        t = times[i]
        if kind == "extra field":
            lines[i] += b",extra"
        elif kind == "open quote":
            lines[i] = lines[i].replace(b",U7", b',"U7')
        elif kind == "not UTF-8":
            lines[i] = lines[i][:-2] + b"\xff" + lines[i][-2:]
        elif kind == "far time":
            lines[i] = b"2300" + lines[i][4:]
        elif kind == "unreadable time":
            lines[i] = b"yesterday noon" + lines[i][20:]
        elif kind == "not a number":
            lines[i] = lines[i].rsplit(b",", 1)[0] + b",n/a!"
            expected[t] = OLD
            continue
        else:  # a later row of the same time: it wins (whatever the first one's fate)
            lines.append(f"{t:%Y-%m-%dT%H:%M:%SZ},U7-MS-P,{20 + i / 100:.2f}".encode())
            continue
        rejected.add(i + 2)
        expected[t] = OLD
    replaced = 0
    for line in lines[ROWS:]:
        t = pd.Timestamp(line.split(b",")[0].decode())
        expected[t] = float(line.rsplit(b",", 1)[1])
        replaced += int((t - T0) // pd.Timedelta("1min")) + 2 not in rejected  # the first one was read
    data = b"time,tag,value\n" + b"\n".join(lines) + b"\n"
    return data, rejected, expected, applied, replaced


CASES = 14


@pytest.mark.parametrize("seed", range(CASES))
def test_damaged_csv_lines_are_rejected_by_line_and_nothing_stored_is_lost(
    tmp_path, capsys, fault_report, seed
):
    config = write_config(tmp_path)
    first = tmp_path / "first.csv"
    first.write_text(
        "time,tag,value\n"
        + "".join(f"{T0 + pd.Timedelta(minutes=i):%Y-%m-%dT%H:%M:%SZ},U7-MS-P,{OLD}\n" for i in range(ROWS))
    )
    assert cli.main(["import-csv", "-c", str(config), str(first)]) == 0
    data, rejected, expected, applied, replaced = damaged_file(random.Random(seed))
    path = tmp_path / "fuzz.csv"
    path.write_bytes(data)
    capsys.readouterr()
    rc = cli.main(["import-csv", "-c", str(config), str(path)])
    out = capsys.readouterr()
    text = out.out + out.err
    with load_config(config).store.open() as store:
        got = store.read_raw(list(load_config(config).mappings), T0, T0 + pd.Timedelta("1D"))["throttle_p"]
    want = pd.Series(expected).sort_index()
    stored_ok = got.index.equals(want.index) and (got.to_numpy() == want.to_numpy()).all()
    listed = rejected_lines(text, "fuzz.csv")
    lost = not got.index.equals(want.index) or bool((got.reindex(want.index).isna()).any())
    ok = rc == 0 and listed == rejected and stored_ok and "Traceback" not in text
    ok = ok and f"duplicate (time, tag) values replaced by the later one: {replaced}\n" in text
    fault_report.record(
        "CSV fuzz",
        f"case {seed}: {'; '.join(applied)}",
        as_expected=ok,
        lost_data=lost,
        detail=f"exit {rc}, listed {sorted(listed)}, expected {sorted(rejected)}",
    )
    assert ok, (applied, rc, sorted(listed), sorted(rejected), text[-2000:], (got - want).abs().max())


def test_a_csv_whose_header_is_not_utf8_writes_nothing(tmp_path, capsys, fault_report):
    config = write_config(tmp_path)
    path = tmp_path / "latin1.csv"
    path.write_bytes(b"time,tag,valu\xe9\n2026-03-01T00:00:00Z,U7-MS-P,16.6\n")
    rc = cli.main(["import-csv", "-c", str(config), str(path)])
    out = capsys.readouterr()
    ok = rc == 1 and "(nothing was written)" in out.out + out.err and "line 1" in out.out + out.err
    fault_report.record("CSV fuzz", "header not UTF-8", as_expected=ok, detail=(out.out + out.err)[-300:])
    assert ok, out


# --- configuration ------------------------------------------------------------------------


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{json.dumps(k)} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def toml_text(doc: dict) -> str:
    """TOML of a configuration (tables of leaves, roles.X tables)."""
    out = []

    def table(name, body):
        leaves = {k: v for k, v in body.items() if not (isinstance(v, dict) and k not in ("tags",))}
        out.append(f"[{name}]")
        out.extend(f"{json.dumps(k)} = {toml_value(v)}" for k, v in leaves.items())
        for k, v in body.items():
            if isinstance(v, dict) and k != "tags":
                table(f"{name}.{json.dumps(k)}", v)

    for name, body in doc.items():
        table(json.dumps(name), body)
    return "\n".join(out) + "\n"


DURATIONS = {"window", "min_length", "max_gap", "max_length", "interval", "settle", "lookback", "chunk"}
DURATIONS |= {"backoff", "backoff_max"}


def mutations(doc: dict):
    """(key path, description, mutated document) for every leaf of ``doc``."""

    def leaves(d, path=()):
        for k, v in d.items():
            if isinstance(v, dict) and k != "tags":
                yield from leaves(v, path + (k,))
            else:
                yield path + (k,), v

    def with_value(path, value=None, *, rename=None, drop=False):
        new = json.loads(json.dumps(doc))
        d = new
        for k in path[:-1]:
            d = d[k]
        if drop:
            del d[path[-1]]
        elif rename:
            d[rename] = d.pop(path[-1])
        else:
            d[path[-1]] = value
        return new

    for path, v in leaves(doc):
        key = ".".join(path)
        if path[-1] in DURATIONS:
            for bad in ("-5m", "10000w", "5 fortnights"):
                yield key, f"duration {bad!r}", with_value(path, bad)
        elif path[-1] == "unit" and path[0] == "roles":
            yield key, "unknown unit", with_value(path, "furlongs")
        elif path[-1] == "kind":
            yield key, "unknown kind", with_value(path, "papyrus")
        elif isinstance(v, str):
            yield key, "a number for a name", with_value(path, 42)
        elif isinstance(v, bool):
            yield key, "a string for a flag", with_value(path, "yes")
        elif isinstance(v, (int, float)):
            yield key, "a string for a number", with_value(path, "many")
            yield key, "a flag for a number", with_value(path, True)
        elif isinstance(v, list):
            yield key, "one-sided range", with_value(path, v[:1])
        else:
            continue
        if len(path) > 1:
            yield (
                ".".join(path[:-1] + (path[-1] + "x",)),
                "misspelt key",
                with_value(path, rename=path[-1] + "x"),
            )
    for path in (("unit", "name"), ("store", "kind"), ("roles", "throttle_p", "tag")):
        yield ".".join(path), "required key removed", with_value(path, drop=True)


def test_mutated_configurations_exit_2_naming_the_key(tmp_path, capsys, fault_report):
    base = ws.write_config(tmp_path / "base.toml", ws.store_toml("sqlite", path=str(tmp_path / "u.sqlite")))
    doc = tomllib.loads(base.read_text())
    assert load_config(base).unit.name == "Greywater Bend 2"  # the base loads
    (tmp_path / "again.toml").write_text(toml_text(doc))
    assert load_config(tmp_path / "again.toml").unit.name == "Greywater Bend 2"  # and so does its dump
    failures = []
    tried = 0
    for key, what, mutated in mutations(doc):
        path = tmp_path / "mutated.toml"
        path.write_text(toml_text(mutated))
        capsys.readouterr()
        rc = cli.main(["run", "-c", str(path), "--once"])
        err = capsys.readouterr().err
        # a misspelt required key may be reported as the missing one
        named = f": {key}: " in err or (what == "misspelt key" and f": {key[:-1]}: " in err)
        ok = rc == 2 and "configuration error" in err and named and "Traceback" not in err
        tried += 1
        fault_report.record(
            "config fuzz", f"{key}: {what}", as_expected=ok, detail=f"exit {rc}: {err[-200:]}"
        )
        if not ok:
            failures.append((key, what, rc, err[-300:]))
    assert not (tmp_path / "u.sqlite").exists()  # no mutation reached the store
    assert tried > 100 and not failures, failures
