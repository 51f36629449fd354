"""Configuration: every problem at once with file, key and line; deploy/example.toml loads and
documents every option with its real default; secrets never show; a bad file exits 2 before any
connection is made."""

from __future__ import annotations

import dataclasses
import datetime as dt
import re
import socket
import textwrap
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from isentrope.daemon import cli
from isentrope.daemon import config as cfgmod
from isentrope.daemon.config import (
    ConfigError,
    Secret,
    load_config,
    parse_config,
)
from isentrope.daemon.roles import REQUIRED_ROLES
from isentrope.daemon.timeutil import parse_duration

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "deploy" / "example.toml"

ROLE_UNITS = {
    "throttle_p": "MPa(a)",
    "throttle_t": "degC",
    "cold_reheat_p": "MPa(a)",
    "cold_reheat_t": "degC",
    "hot_reheat_p": "MPa(a)",
    "hot_reheat_t": "degC",
    "crossover_p": "kPa(a)",
    "crossover_t": "degC",
    "condenser_p": "kPa(a)",
    "gross_output": "MW",
}


def minimal(extra: str = "", store: str | None = None, roles: dict | None = None) -> str:
    """A small valid file (SQLite store, the required roles) with ``extra`` appended."""
    roles = ROLE_UNITS if roles is None else roles
    parts = [
        '[unit]\nname = "Test unit"\nrating_mw = 500.0\n',
        store if store is not None else '[store]\nkind = "sqlite"\npath = "t.sqlite"\n',
    ]
    for role, unit in roles.items():
        parts.append(f'[roles.{role}]\ntag = "T-{role}"\nunit = "{unit}"\n')
    parts.append(textwrap.dedent(extra))
    return "\n".join(parts)


def problems(text: str, source: str = "unit.toml", **kw) -> list[str]:
    with pytest.raises(ConfigError) as info:
        parse_config(text, source=source, **kw)
    return info.value.problems


def line_of(text: str, needle: str) -> int:
    for n, line in enumerate(text.splitlines(), start=1):
        if needle in line:
            return n
    raise AssertionError(needle)


# --- the example file ---------------------------------------------------------------------
def test_example_loads_as_a_complete_config():
    c = load_config(EXAMPLE)
    assert c.unit.name == "Brackwater Moss 3"
    assert c.unit.rating_mw == 520.0
    assert c.store.kind == "sqlite"
    assert c.store.path == EXAMPLE.parent / "brackwater3.sqlite"  # relative to the file
    assert set(REQUIRED_ROLES) <= set(c.roles)
    assert c.roles["throttle_p"].unit == "bar(g)"
    assert c.roles["throttle_p"].range == (0.0, 250.0)
    assert c.screening.barometric_kpa == 99.6
    assert c.steady.window == dt.timedelta(minutes=30)
    assert c.sections.exhaust_loss_curve[0] == (60.0, 45.0)
    assert c.baseline.start.isoformat() == "2026-01-12T00:00:00+00:00"
    assert c.economics.enabled and c.economics.planned_outage == dt.date(2027, 4, 12)
    assert c.economics.overhaul["hp"].recoverable_points == 3.0
    assert c.schedule.chunk == dt.timedelta(days=1)
    assert [m.role for m in c.mappings][:2] == ["throttle_p", "throttle_t"]


def _documented_keys(text: str) -> set[str]:
    """Keys written as ``key =`` in the file, active or commented out."""
    return set(re.findall(r"^\s*#?\s*([a-z_0-9]+)\s*=", text, flags=re.MULTILINE))


def test_example_documents_every_option():
    text = EXAMPLE.read_text()
    keys = _documented_keys(text)
    tables = [
        cfgmod.UnitConfig,
        cfgmod.ScreeningConfig,
        cfgmod.SteadyConfig,
        cfgmod.SectionsConfig,
        cfgmod.BaselineConfig,
        cfgmod.AlarmsConfig,
        cfgmod.EconomicsConfig,
        cfgmod.ScheduleConfig,
        cfgmod.SensitivityConfig,
        cfgmod.OverhaulCase,
        cfgmod.ReadConfig,
        cfgmod.ReadRule,
    ]
    wanted = {f.name for t in tables for f in dataclasses.fields(t)} - {"sensitivity", "overhaul"}
    wanted -= {"quantity", "roles"}  # the [read.quantity.<q>] and [read.roles.<role>] tables
    wanted |= set().union(*(cfgmod.store_keys(kind) for kind in cfgmod.STORE_KINDS))
    wanted |= set(cfgmod.ROLE_KEYS)
    role_keys_doc = text[text.index("Keys of each [roles.<role>] table") :]
    for k in cfgmod.ROLE_KEYS:  # documented in the comment block, as "#   key  ..."
        assert re.search(rf"^#\s+{k}\s", role_keys_doc, flags=re.MULTILINE), k
    missing = sorted(wanted - set(cfgmod.ROLE_KEYS) - keys)
    assert not missing, f"options not documented in example.toml: {missing}"


def test_example_defaults_match_the_code():
    """Each ``key = value  # default: X`` with X a TOML value: X is what the code uses when the
    key is left out."""
    defaults = parse_config(minimal(), source="m.toml", base_dir=Path("/tmp"))
    table = None
    checked = 0
    for line in EXAMPLE.read_text().splitlines():
        m = re.match(r"^\[([a-z_.]+)\]", line)
        if m:
            table = m.group(1)
            continue
        m = re.match(r"^([a-z_0-9]+)\s*=.*#\s*default:\s*(.+?)(?:;.*)?$", line)
        if not m or table not in (
            "screening",
            "steady",
            "sections",
            "baseline",
            "alarms",
            "economics",
            "schedule",
            "read",
        ):
            continue
        key, literal = m.group(1), m.group(2).strip()
        try:
            expected_raw = tomllib.loads(f"x = {literal}")["x"]
        except tomllib.TOMLDecodeError:
            continue  # "none", "10 % of rating_mw", ...
        got = getattr(getattr(defaults, table), key)
        if isinstance(got, dt.timedelta):
            expected = parse_duration(expected_raw)
        elif isinstance(got, tuple):
            expected = tuple(expected_raw)
        else:
            expected = expected_raw
        assert got == expected, f"[{table}] {key}: example says default {literal}, code uses {got!r}"
        checked += 1
    assert checked >= 35  # most options carry a literal default


# --- every problem at once, with file, key and line ------------------------------------------
def test_unknown_key_suggests_and_names_the_line():
    text = minimal('[steady]\nwindw = "30m"\n')
    assert problems(text) == [
        f"unit.toml:{line_of(text, 'windw')}: steady.windw: unknown key; did you mean 'window'?"
    ]


def test_all_problems_reported_together():
    text = minimal("""
        [steady]
        min_length = "2x"
        method = "ptc7"

        [alarms]
        deviation_warning = -2.0
        deviation_alarm = -1.0
        persistance = 3

        [schedule]
        retries = "four"
        """)
    got = problems(text)
    assert got == [
        f"unit.toml:{line_of(text, 'method')}: steady.method: expected one of 'ptc6', 'r_statistic', found 'ptc7'; did you mean 'ptc6'?",
        f'unit.toml:{line_of(text, "min_length")}: steady.min_length: expected a duration such as "30s", "15m", "15min", "2h", "1d", "1w" or "1h30m", found \'2x\'',
        f"unit.toml:{line_of(text, 'persistance')}: alarms.persistance: unknown key; did you mean 'persistence'?",
        f"unit.toml:{line_of(text, 'deviation_alarm')}: alarms.deviation_alarm: must be at or below deviation_warning (-2), found -1",
        f"unit.toml:{line_of(text, 'retries')}: schedule.retries: expected an integer, found a string ('four')",
    ]


def test_unknown_table_and_role():
    text = minimal('[roles.throtle_t]\ntag = "X"\nunit = "degC"\n\n[schedul]\ninterval = "5m"\n')
    got = problems(text)
    assert f"unit.toml:{line_of(text, '[schedul]')}: schedul: unknown key; did you mean 'schedule'?" in got
    assert (
        f"unit.toml:{line_of(text, '[roles.throtle_t]')}: roles.throtle_t: unknown role; did you mean 'throttle_t'?"
        in got
    )


def test_missing_required_roles_and_tables():
    roles = {k: v for k, v in ROLE_UNITS.items() if k not in ("condenser_p", "gross_output")}
    text = minimal(roles=roles)
    assert problems(text) == [
        f"unit.toml:{line_of(text, '[roles.')}: roles: required roles not mapped: condenser_p, gross_output"
    ]
    assert problems('[unit]\nname = "x"\nrating_mw = 1.0\n') == [
        "unit.toml: store: missing table [store]",
        "unit.toml: roles: missing table [roles]",
        "unit.toml: roles: required roles not mapped: " + ", ".join(REQUIRED_ROLES),
    ]


def test_unit_of_wrong_quantity_ambiguous_and_aliases():
    roles = dict(ROLE_UNITS, throttle_t="psia", crossover_p="bar", hot_reheat_p="mpaa")
    text = minimal(roles=roles)
    got = problems(text)
    assert (
        got[0]
        == f"unit.toml:{line_of(text, 'psia')}: roles.throttle_t.unit: 'psia' is a unit of pressure, but throttle_t is a temperature"
    )
    bar_line = line_of(text, 'unit = "bar"')
    assert got[1].startswith(
        f"unit.toml:{bar_line}: roles.crossover_p.unit: unit 'bar' does not say "
        "whether the pressure is absolute or gauge"
    )
    assert len(got) == 2
    ok = parse_config(minimal(roles=dict(ROLE_UNITS, hot_reheat_p="mpaa")))
    assert ok.roles["hot_reheat_p"].unit == "MPa(a)"  # stored under the canonical name


def test_gauge_pressure_needs_a_barometric_pressure():
    text = minimal(roles=dict(ROLE_UNITS, throttle_p="psig"))
    assert problems(text) == [
        "unit.toml: screening.barometric_kpa: gauge pressures are mapped (throttle_p): "
        "map the barometric_p role or set screening.barometric_kpa"
    ]
    parse_config(text + "\n[screening]\nbarometric_kpa = 100.2\n")
    parse_config(minimal(roles=dict(ROLE_UNITS, throttle_p="psig", barometric_p="kPa(a)")))
    got = problems(minimal(roles=dict(ROLE_UNITS, barometric_p="kPa(g)")))
    assert got == [
        f"unit.toml:{line_of(minimal(roles=dict(ROLE_UNITS, barometric_p='kPa(g)')), 'kPa(g)')}: "
        "roles.barometric_p.unit: the barometric pressure must be absolute, found the gauge unit 'kPa(g)'"
    ]


def test_not_toml_names_the_line():
    text = minimal("[steady]\nwindow = 30m\n")
    got = problems(text)
    assert len(got) == 1 and got[0].startswith(f"unit.toml:{line_of(text, 'window = 30m')}: not valid TOML: ")


def test_line_scan_is_not_fooled_by_multiline_arrays():
    text = minimal("""
        [sections]
        annulus_area_m2 = 30.0
        lp_exhaust_flow_fraction = 0.6
        exhaust_loss_curve = [
          [100.0, 30.0],
          [90.0, 40.0],
        ]
        eta_lp_desing = 0.88
        """)
    assert (
        problems(text)
        == [
            f"unit.toml:{line_of(text, 'exhaust_loss_curve')}: sections.exhaust_loss_curve: velocities must rise strictly, found [100.0, 90.0]",
            f"unit.toml:{line_of(text, 'eta_lp_desing')}: sections.eta_lp_desing: unknown key; did you mean 'eta_lp_design'?",
        ][::-1]
    )


def test_cross_checks():
    got = problems(
        minimal("""
        [sections]
        lp_mode = "energy_balance"

        [baseline]
        start = "2026-02-01"
        end = "2026-01-01"

        [steady]
        min_length = "2h"
        max_length = "1h"

        [economics]
        fuel_price_per_gj = 3.0
        currency = "euro"
        """)
    )
    text = "\n".join(got)
    assert 'sections.lp_mode: "energy_balance" needs the main_steam_flow role mapped' in text
    assert 'sections.reheat_flow_fraction: lp_mode "energy_balance" needs reheat_flow_fraction' in text
    assert (
        "baseline.end: must be after start (2026-02-01T00:00:00+00:00), found 2026-01-01T00:00:00+00:00"
        in text
    )
    assert "steady.min_length: must not exceed max_length (1h), found 2h" in text
    assert (
        "economics.heat_rate_kj_per_kwh: fuel_price_per_gj is given: heat_rate_kj_per_kwh is needed too"
        in text
    )
    assert "economics.currency: expected a three-letter ISO 4217 code such as \"EUR\", found 'euro'" in text


def test_ranges_and_types():
    got = problems(
        minimal("""
        [sections]
        eta_lp_design = 1.2
        [alarms]
        persistence = 0
        moisture_limit_percent = true
        [roles.valve_position]
        tag = "V"
        unit = "%"
        range = [100, 0]
        """)
    )
    assert any("sections.eta_lp_design: expected a value >= 0.5 and <= 1.0, found 1.2" in p for p in got)
    assert any("alarms.persistence: expected a value >= 1, found 0" in p for p in got)
    assert any("alarms.moisture_limit_percent: expected a number, found a boolean (true)" in p for p in got)
    assert any(
        "roles.valve_position.range: expected [low, high] with low < high, found [100, 0]" in p for p in got
    )


@pytest.mark.parametrize("degree, ok", [(0, False), (1, True), (2, True), (3, False)])
def test_the_baseline_degree_is_what_the_fit_accepts(degree, ok):
    # calc.baseline.fit_baseline fits a straight line or a quadratic in load fraction: the
    # configuration accepts exactly those, so a valid file never fails at fitting time
    from isentrope.calc import baseline

    text = minimal(f"""
        [baseline]
        degree = {degree}
        """)
    if ok:
        assert parse_config(text).baseline.degree == degree
    else:
        assert any("baseline.degree: expected a value >= 1 and <= 2" in p for p in problems(text))
    rng = np.random.default_rng(1)
    load = rng.uniform(300, 500, 40)
    w = pd.DataFrame({"gross_output": load, "eta": 0.85 + 0.0001 * load + rng.normal(0, 1e-3, 40)})
    if ok:
        baseline.fit_baseline(w, "hp", efficiency_col="eta", rating_mw=500.0, degree=degree)
    else:
        with pytest.raises(ValueError, match="degree must be 1 or 2"):
            baseline.fit_baseline(w, "hp", efficiency_col="eta", rating_mw=500.0, degree=degree)


# --- secrets ------------------------------------------------------------------------------
INFLUX2 = '[store]\nkind = "influx2"\nurl = "http://127.0.0.1:8086"\norg = "o"\nbucket = "b"\n'


def test_secret_from_environment_is_never_shown():
    c = parse_config(
        minimal(store=INFLUX2 + 'token = "${ISEN_TEST_TOKEN}"\n'), environ={"ISEN_TEST_TOKEN": "s3cr3t-value"}
    )
    assert c.store.token.reveal() == "s3cr3t-value"
    assert c.store.open_options()["token"] == "s3cr3t-value"
    for shown in (repr(c), str(c), repr(c.store), f"{c.store.token}"):
        assert "s3cr3t-value" not in shown
    assert "env:ISEN_TEST_TOKEN" in repr(c.store.token)


def test_secret_from_file(tmp_path):
    (tmp_path / "tok").write_text("file-token\n")
    c = parse_config(minimal(store=INFLUX2 + 'token_file = "tok"\n'), base_dir=tmp_path, environ={})
    assert c.store.token == Secret("file-token")
    assert "file-token" not in repr(c)


def test_secret_problems():
    text = minimal(store=INFLUX2 + 'token = "plain-token"\n')
    assert problems(text, environ={}) == [
        f'unit.toml:{line_of(text, "plain-token")}: store.token: write secrets as "${{ENV_NAME}}" or use '
        "'token_file'; a secret written in the file is refused"
    ]
    got = problems(minimal(store=INFLUX2 + 'token = "${NOT_SET_ANYWHERE}"\n'), environ={})
    assert got[0].endswith("store.token: environment variable NOT_SET_ANYWHERE is not set")
    text = minimal(store=INFLUX2)
    assert problems(text, environ={}) == [
        f"unit.toml:{line_of(text, '[store]')}: store.token: missing required key 'token' (or 'token_file')"
    ]
    got = problems(
        minimal(
            store='[store]\nkind = "influx1"\nurl = "http://127.0.0.1:8086"\n'
            'database = "d"\nusername = "u"\ntoken = "${T}"\n'
        ),
        environ={"T": "x"},
    )
    assert got[0].endswith("store.token: give either 'token' or 'username'/'password', not both")


def test_results_bucket_defaults_to_bucket_and_is_checked():
    env = {"T": "x"}
    c = parse_config(minimal(store=INFLUX2 + 'token = "${T}"\n'), environ=env)
    assert c.store.results_bucket == "" and "results_bucket" not in c.store.open_options()
    c = parse_config(minimal(store=INFLUX2 + 'results_bucket = "b_perf"\ntoken = "${T}"\n'), environ=env)
    assert c.store.open_options()["results_bucket"] == "b_perf"
    assert c.store.open_options()["bucket"] == "b"
    text = minimal(store=INFLUX2 + 'results_bucket = ""\ntoken = "${T}"\n')
    assert problems(text, environ=env) == [
        f"unit.toml:{line_of(text, 'results_bucket')}: store.results_bucket: results_bucket is empty; "
        "give a non-empty name"
    ]
    got = problems(minimal(store=INFLUX2 + 'results_bucket = "a\\tb"\ntoken = "${T}"\n'), environ=env)
    assert got[0].endswith("names may not contain newlines, tabs or other control characters")
    got = problems(minimal(store=INFLUX2 + 'result_bucket = "p"\ntoken = "${T}"\n'), environ=env)
    assert "did you mean 'results_bucket'" in got[0]


def test_each_store_option_is_a_keyword_of_its_store_class():
    # the configuration reads a kind from its class's OPTIONS alone and gives the values to the
    # constructor under the option's name (StoreConfig.open_options)
    import inspect

    from isentrope.daemon.stores import store_class

    for kind in cfgmod.STORE_KINDS:
        cls = store_class(kind)
        names = [o.name for o in cls.OPTIONS]
        assert names and len(set(names)) == len(names), kind
        assert set(names) <= set(inspect.signature(cls.__init__).parameters), kind
        assert "kind" not in names and cfgmod.store_keys(kind) >= {"kind", *names}
        # a default the configuration fills in is the constructor's own (durations in seconds)
        params = inspect.signature(cls.__init__).parameters
        for o in cls.OPTIONS:
            if o.required or o.default in (None, ""):
                continue  # required, or left out so that the constructor's default applies
            default = o.default.total_seconds() if isinstance(o.default, dt.timedelta) else o.default
            assert params[o.name].default == default, (kind, o.name)


def test_store_open_options_as_the_constructors_take_them(tmp_path):
    env = {"T": "tok", "P": "pw"}
    c = parse_config(minimal(store=INFLUX2 + 'token = "${T}"\ntimeout = "1m"\n'), environ=env)
    assert c.store.timeout == dt.timedelta(minutes=1) and c.store.token == Secret("tok")
    assert c.store.open_options() == {
        "url": "http://127.0.0.1:8086",
        "org": "o",
        "bucket": "b",
        "token": "tok",
        "verify_ssl": True,
        "timeout": 60.0,
        "batch_size": 5000,
    }
    store = '[store]\nkind = "influx1"\nurl = "http://h:8086"\ndatabase = "d"\nusername = "u"\n'
    c = parse_config(minimal(store=store + 'password = "${P}"\n'), environ=env)
    assert c.store.open_options() == {
        "url": "http://h:8086",
        "database": "d",
        "username": "u",
        "password": "pw",
        "verify_ssl": True,
        "timeout": 10.0,
        "batch_size": 5000,
    }
    c = parse_config(minimal(), base_dir=tmp_path)
    assert c.store.open_options() == {"path": str(tmp_path / "t.sqlite")}
    with pytest.raises(AttributeError, match="no option 'url'"):
        _ = c.store.url


def test_store_kind_and_url():
    got = problems(minimal(store='[store]\nkind = "influx3"\n'))
    assert got[0].endswith(
        "store.kind: expected one of 'sqlite', 'influx2', 'influx1', found 'influx3'; did you mean 'influx2'?"
    )
    got = problems(
        minimal(store=INFLUX2.replace("http://127.0.0.1:8086", "127.0.0.1:8086") + 'token = "${T}"\n'),
        environ={"T": "x"},
    )
    assert got[0].endswith("store.url: expected an http:// or https:// URL, found '127.0.0.1:8086'")
    got = problems(minimal(store='[store]\nkind = "sqlite"\npath = "x.sqlite"\nbucket = "b"\n'))
    assert got[0].endswith("store.bucket: unknown key; known keys: kind, path")


def test_unreadable_file(tmp_path):
    with pytest.raises(ConfigError, match=r"nothere\.toml: cannot read the configuration"):
        load_config(tmp_path / "nothere.toml")


# --- through the command line: exit 2, the exact message, and no connection ----------------
def test_bad_file_exits_2_before_any_connection(tmp_path, capsys):
    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen(8)
    listener.setblocking(False)
    port = listener.getsockname()[1]
    try:
        text = minimal(
            '[steady]\nwindw = "30m"\n',
            store=INFLUX2.replace("8086", str(port)) + 'token = "${ISEN_TEST_TOKEN_2}"\n',
        )
        path = tmp_path / "bad.toml"
        path.write_text(text)
        rc = cli.main(["check", "-c", str(path)])
        err = capsys.readouterr().err
        assert rc == 2
        assert err == (
            "isentrope: configuration error: 2 configuration problems:\n"
            f"  {path}:{line_of(text, 'token')}: store.token: environment variable ISEN_TEST_TOKEN_2 is not set\n"
            f"  {path}:{line_of(text, 'windw')}: steady.windw: unknown key; did you mean 'window'?\n"
        )
        with pytest.raises(BlockingIOError):  # nobody connected to the store's port
            listener.accept()
    finally:
        listener.close()


def test_single_problem_message(tmp_path, capsys):
    path = tmp_path / "one.toml"
    text = minimal("[alarms]\nhysteresis = -1.0\n")
    path.write_text(text)
    assert cli.main(["check", "-c", str(path)]) == 2
    assert capsys.readouterr().err == (
        f"isentrope: configuration error: {path}:{line_of(text, 'hysteresis')}: alarms.hysteresis: "
        "expected a value >= 0, found -1.0\n"
    )


TABLE_KEYS = {
    "screening": ["flatline", "spike_window", "spike_threshold"],
    "steady": ["window", "min_length", "max_gap", "temperature_k"],
    "alarms": ["persistence", "hysteresis", "cusum_k"],
    "schedule": ["interval", "settle", "lookback", "retries"],
}


@settings(max_examples=40, deadline=None)
@given(
    st.lists(
        st.tuples(st.sampled_from(sorted(TABLE_KEYS)), st.integers(0, 3), st.integers(0, 4)),
        min_size=1,
        max_size=4,
        unique_by=lambda t: t[0],
    )
)
def test_reported_lines_point_at_the_misspelt_key(picks):
    """Whatever tables hold misspelt keys, and wherever, each message names the right line."""
    extra, expected = [], {}
    for table, which, blank_lines in picks:
        good = TABLE_KEYS[table][which % len(TABLE_KEYS[table])]
        typo = good[:-1] + "q" + good[-1]  # one letter inserted: close enough to suggest
        extra.append(f"[{table}]" + "\n" * (blank_lines + 1) + f"{typo} = 1\n")
        expected[f"{table}.{typo}"] = good
    text = minimal("\n".join(extra))
    got = problems(text)
    assert len(got) == len(expected)
    for message in got:
        where, key, rest = message.split(": ", 2)
        line = next(n for n, t in enumerate(text.splitlines(), 1) if t.startswith(key.split(".")[1] + " = 1"))
        assert where == f"unit.toml:{line}"
        assert rest == f"unknown key; did you mean '{expected[key]}'?"


# --- [screening] flatline_tolerance and [sections] lp_dry_efficiency_source ----------------
LP_EXTRACTION = {"lp_extraction_p": "kPa(a)", "lp_extraction_t": "degC"}


def test_flatline_tolerance_bounds_and_default():
    from isentrope.calc import quality

    assert cfgmod.ScreeningConfig().flatline_tolerance == quality.DEFAULT_FLATLINE_RELATIVE
    assert (
        parse_config(minimal("[screening]\nflatline_tolerance = 1e-4\n")).screening.flatline_tolerance == 1e-4
    )
    assert parse_config(minimal("[screening]\nflatline_tolerance = 0\n")).screening.flatline_tolerance == 0.0
    assert (
        parse_config(minimal("[screening]\nflatline_tolerance = 1e-3\n")).screening.flatline_tolerance == 1e-3
    )
    # 0.01 was accepted before: 1 % of 811 K is 8.1 K, and steady running reads as stuck
    for bad, why in (
        ("0.01", "expected a value >= 0 and <= 0.001, found 0.01"),
        ("0.002", "expected a value >= 0 and <= 0.001, found 0.002"),
        ("0.05", "expected a value >= 0 and <= 0.001, found 0.05"),
        ("-1e-6", "expected a value >= 0 and <= 0.001, found -1e-06"),
        ('"1e-6"', "expected a number, found a string ('1e-6')"),
    ):
        text = minimal(f"[screening]\nflatline_tolerance = {bad}\n")
        where = f"unit.toml:{line_of(text, 'flatline_tolerance')}"
        assert problems(text) == [f"{where}: screening.flatline_tolerance: {why}"]


def test_flatline_tolerance_cap_leaves_steady_running_unflagged():
    """At the largest accepted flatline_tolerance the synthetic unit's steady running is not
    flagged FLATLINE: only the stuck transmitter the generator injected is, as at the default.
    Ten times the cap (the former maximum, 0.01) flags most samples (the generator's noise
    levels, isentrope.daemon.synthetic; the check itself is common practice, no source)."""
    from isentrope.calc import quality
    from isentrope.daemon import synthetic

    frame, truth = synthetic.generate(days=10)
    flat = int(quality.Reason.FLATLINE)

    def flatline_flags(relative):
        flags = quality.screen(frame, spike=None, flatline_relative=relative).flags
        return (flags.to_numpy() & flat) != 0

    at_default = flatline_flags(quality.DEFAULT_FLATLINE_RELATIVE)
    stuck = truth["flatline"]["role"]
    assert at_default.any(axis=0).tolist() == [c == stuck for c in frame.columns]
    at_cap = flatline_flags(cfgmod.FLATLINE_TOLERANCE_MAX)
    # the stuck stretch may grow by a sample at its edge; nothing else may be flagged
    assert at_cap.any(axis=0).tolist() == [c == stuck for c in frame.columns]
    assert at_cap.sum() - at_default.sum() <= 2
    assert flatline_flags(10 * cfgmod.FLATLINE_TOLERANCE_MAX).any(axis=1).mean() > 0.5


def test_lp_dry_efficiency_source_parses_with_its_default():
    assert parse_config(minimal()).sections.lp_dry_efficiency_source == "design"
    c = parse_config(
        minimal(
            '[sections]\nlp_dry_efficiency_source = "measured"\nlp_mode = "expansion"\n',
            roles=dict(ROLE_UNITS, **LP_EXTRACTION),
        )
    )
    assert c.sections.lp_dry_efficiency_source == "measured"
    # "auto" stays with the expansion when the flow fractions are not given
    c = parse_config(
        minimal(
            '[sections]\nlp_dry_efficiency_source = "measured"\n',
            roles=dict(ROLE_UNITS, main_steam_flow="kg/s", **LP_EXTRACTION),
        )
    )
    assert c.sections.lp_dry_efficiency_source == "measured"


def test_lp_dry_efficiency_source_problems_name_file_line_and_key():
    text = minimal(
        '[sections]\nlp_dry_efficiency_source = "measurd"\n', roles=dict(ROLE_UNITS, **LP_EXTRACTION)
    )
    assert problems(text) == [
        f"unit.toml:{line_of(text, 'lp_dry_efficiency_source')}: sections.lp_dry_efficiency_source: "
        "expected one of 'design', 'measured', found 'measurd'; did you mean 'measured'?"
    ]
    # "measured" without the LP dry stage group mapped
    text = minimal('[sections]\nlp_dry_efficiency_source = "measured"\n')
    assert problems(text) == [
        f"unit.toml:{line_of(text, 'lp_dry_efficiency_source')}: sections.lp_dry_efficiency_source: "
        '"measured" needs the LP dry stage group: map the roles lp_extraction_p and lp_extraction_t '
        "(not mapped: lp_extraction_p, lp_extraction_t)"
    ]
    text = minimal(
        '[sections]\nlp_dry_efficiency_source = "measured"\n',
        roles=dict(ROLE_UNITS, lp_extraction_p="kPa(a)"),
    )
    assert problems(text) == [
        f"unit.toml:{line_of(text, '[roles.lp_extraction_p]')}: roles.lp_extraction_p: "
        "lp_extraction_p needs lp_extraction_t mapped too",
        f"unit.toml:{line_of(text, 'lp_dry_efficiency_source')}: sections.lp_dry_efficiency_source: "
        '"measured" needs the LP dry stage group: map the roles lp_extraction_p and lp_extraction_t '
        "(not mapped: lp_extraction_t)",
    ]
    # "measured" where the energy balance, not the expansion, gives the LP end point
    flows = "reheat_flow_fraction = 0.89\ncrossover_flow_fraction = 0.78\nlp_exhaust_flow_fraction = 0.66\n"
    roles = dict(ROLE_UNITS, main_steam_flow="kg/s", **LP_EXTRACTION)
    text = minimal(
        '[sections]\nlp_mode = "energy_balance"\nlp_dry_efficiency_source = "measured"\n' + flows, roles=roles
    )
    assert problems(text) == [
        f"unit.toml:{line_of(text, 'lp_dry_efficiency_source')}: sections.lp_dry_efficiency_source: "
        '"measured" is used only by the expansion, but lp_mode is "energy_balance": the LP end point comes '
        'from the energy balance; set lp_mode = "expansion" or leave the key out'
    ]
    text = minimal('[sections]\nlp_dry_efficiency_source = "measured"\n' + flows, roles=roles)
    got = problems(text)
    assert len(got) == 1 and got[0].startswith(
        f"unit.toml:{line_of(text, 'lp_dry_efficiency_source')}: sections.lp_dry_efficiency_source: "
        '"measured" is used only by the expansion, but lp_mode "auto" takes the energy balance here'
    )
    parse_config(
        minimal(
            '[sections]\nlp_mode = "expansion"\nlp_dry_efficiency_source = "measured"\n' + flows, roles=roles
        )
    )


def test_step_method_and_threshold_are_read_and_checked():
    cfg = parse_config(minimal('[alarms]\nstep_method = "cusum"\nstep_threshold = 5.0\n'), source="unit.toml")
    assert cfg.alarms.step_method == "cusum" and cfg.alarms.step_threshold == 5.0
    default = parse_config(minimal(), source="unit.toml").alarms
    assert default.step_method == "scan" and default.step_threshold == 4.25
    got = problems(minimal('[alarms]\nstep_method = "page"\nstep_threshold = 0\n'))
    assert any("alarms.step_method" in p and "'scan', 'cusum'" in p for p in got), got
    assert any("alarms.step_threshold" in p for p in got), got


def test_economics_section_tables_report_each_problem_at_its_key():
    # The per-section tables of [economics.sensitivity] and [economics.overhaul]: an unknown
    # section, an unknown key, a section without default coefficients given only one of them,
    # and an incomplete overhaul case (nothing recorded for it) each name their key and line.
    text = minimal(
        """
        [economics.sensitivity.hp]
        heat_rate_percent_per_point = 0.3
        [economics.sensitivity.lp_dry]
        heat_rate_percent_per_point = 0.1
        [economics.sensitivity.xp]
        output_percent_per_point = 0.2
        [economics.overhaul.ip]
        recoverable_points = 2.0
        [economics.overhaul.lp]
        recoverable_points = 1.0
        cost = 2.5e6
        colour = "red"
        """
    )
    found = problems(text)
    lines = text.splitlines()

    def line_of(header):
        return next(i for i, line in enumerate(lines, 1) if line.strip() == header)

    expected = [
        f"unit.toml:{line_of('[economics.sensitivity.xp]')}: economics.sensitivity.xp:",
        f"unit.toml:{line_of('[economics.sensitivity.lp_dry]')}: economics.sensitivity.lp_dry: no default",
        "economics.overhaul.ip.cost: missing required key",
        "economics.overhaul.lp.colour:",
    ]
    for start in expected:
        assert any(p.startswith(start) or start in p for p in found), (start, found)
    assert not any(p.split(": ")[1].startswith("economics.sensitivity.hp") for p in found), found
    assert len(found) == 4, found
