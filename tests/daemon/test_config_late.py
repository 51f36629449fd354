"""Problems that used to surface only at the first write or read are refused when the
configuration loads (exit 2, naming the key and its line): a unit name the store cannot
write, a look-back or settle delay far beyond any use, a duration that overflows, a SQLite
store in a directory that does not exist."""

from __future__ import annotations

import pytest
from test_config import minimal, problems

from isentrope.daemon import cli

INFLUX2 = (
    '[store]\nkind = "influx2"\nurl = "http://127.0.0.1:8086"\norg = "o"\nbucket = "b"\ntoken = "${T}"\n'
)
INFLUX1 = '[store]\nkind = "influx1"\nurl = "http://127.0.0.1:8086"\ndatabase = "d"\n'


def with_unit(name: str, store: str | None) -> str:
    return minimal(store=store).replace('name = "Test unit"', f"name = {name}")


@pytest.mark.parametrize("store", [INFLUX1, INFLUX2], ids=["influx1", "influx2"])
@pytest.mark.parametrize("name", ['"U7\\\\"', '"U7\\\\ west"', '"U7\\u0007"', '"U7\\n"'])
def test_a_unit_name_the_store_cannot_write_is_refused_at_load(store, name):
    found = problems(with_unit(name, store), environ={"T": "token-of-test"})
    assert len(found) == 1 and found[0].startswith("unit.toml:2: unit.name: the influx"), found
    assert "cannot write it" in found[0]


def test_a_unit_name_with_control_characters_is_refused_on_sqlite_too(tmp_path):
    found = problems(with_unit('"U7\\t"', None), base_dir=tmp_path)
    assert found == [
        "unit.toml:2: unit.name: the sqlite store cannot write it: the unit name 'U7\\t' holds a control "
        "character; names may not contain newlines, tabs or other control characters"
    ]


def test_unit_names_that_escape_cleanly_pass(tmp_path):
    from isentrope.daemon.config import parse_config

    for name in ('"Unit 7, west"', '"U7=a b"', "\"Brackwater Moss 'U3'\""):
        parse_config(with_unit(name, INFLUX2), environ={"T": "token-of-test"})
        parse_config(with_unit(name, None), base_dir=tmp_path)


@pytest.mark.parametrize(
    "key, value, expected",
    [
        (
            "lookback",
            "100w",
            "expected at most 31d (every cycle reads and computes this much again), found 700d",
        ),
        ("lookback", "10000w", "expected a duration of at most 3650d, found '10000w'"),
        ("settle", "30d", "expected at most 1d (results come this late; data arriving later is reprocessed"),
        ("lookback", "99999999999999999d", "expected a duration of at most 3650d"),
        ("chunk", "20000d", "expected a duration of at most 3650d"),
    ],
)
def test_schedule_durations_far_beyond_any_use_are_refused(tmp_path, key, value, expected):
    text = minimal(f'[schedule]\n{key} = "{value}"\n')
    found = problems(text, base_dir=tmp_path)
    line = text.splitlines().index(f'{key} = "{value}"') + 1
    assert len(found) == 1 and found[0].startswith(f"unit.toml:{line}: schedule.{key}: {expected}"), found


def test_a_missing_store_directory_is_named_by_its_key(tmp_path):
    text = minimal(store='[store]\nkind = "sqlite"\npath = "no/such/dir/u7.sqlite"\n')
    assert problems(text, base_dir=tmp_path) == [
        f"unit.toml:7: store.path: the directory {tmp_path / 'no/such/dir'} does not exist (create it first)"
    ]
    (tmp_path / "u7.sqlite").mkdir()
    text = minimal(store='[store]\nkind = "sqlite"\npath = "u7.sqlite"\n')
    assert problems(text, base_dir=tmp_path) == [
        f"unit.toml:7: store.path: {tmp_path / 'u7.sqlite'} is a directory; give the SQLite file in it"
    ]


def test_the_command_line_exits_2_before_any_connection(tmp_path, capsys):
    path = tmp_path / "u7.toml"
    path.write_text(minimal('[schedule]\nlookback = "10000w"\n', store=INFLUX1))
    assert cli.main(["run", "-c", str(path), "--once"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("isentrope: configuration error: ") and "schedule.lookback" in err
