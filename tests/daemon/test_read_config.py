"""The ``[read]`` table: grid, fills and deadbands per quantity and per role, validated with the
file, key and line of each problem; what the worker gets from it (``Config.read_grid``,
``Config.deadbands``). Unit factors: 1 bar = 0.1 MPa, 1 inHg = 3.38638 kPa (NIST SP 811,
appendix B), a temperature difference of 1 degC = 1 K and of 1 degF = 5/9 K."""

from __future__ import annotations

import textwrap

import pandas as pd
import pytest
from test_config import minimal, problems

from isentrope.daemon.config import parse_config
from isentrope.daemon.stores.grid import Fill

UNITS = {
    "throttle_p": "bar(g)",
    "throttle_t": "degF",
    "cold_reheat_p": "MPa(a)",
    "cold_reheat_t": "degC",
    "hot_reheat_p": "MPa(a)",
    "hot_reheat_t": "degC",
    "crossover_p": "kPa(a)",
    "crossover_t": "degC",
    "condenser_p": "inHgA",
    "gross_output": "MW",
}

GOOD = """
[read]
interval = "1m"
max_age = "1h30m"

[read.quantity.temperature]
deadband = 0.9

[read.quantity.pressure]
fill = "linear"
max_age = "2h"

[read.roles.condenser_p]
deadband = 0.02

[read.roles.gross_output]
max_age = "20m"
deadband = 1.5
"""


def parse(extra):
    text = minimal("[screening]\nbarometric_kpa = 100.0\n" + textwrap.dedent(extra), roles=UNITS)
    return parse_config(text, source="unit.toml")


def test_rows_as_stored_by_default():
    c = parse("")
    assert c.read_grid is None and c.deadbands == {}


def test_grid_fills_and_deadbands_role_over_quantity_over_read():
    c = parse(GOOD)
    grid = c.read_grid
    assert grid.interval == pd.Timedelta("1m")
    assert grid.fill_of("throttle_t") == Fill("hold", pd.Timedelta("90m"))  # [read]
    assert grid.fill_of("throttle_p") == Fill("linear", pd.Timedelta("2h"))  # quantity
    assert grid.fill_of("condenser_p") == Fill("linear", pd.Timedelta("2h"))  # quantity, own deadband
    assert grid.fill_of("gross_output") == Fill("hold", pd.Timedelta("20m"))  # role
    bands = c.deadbands
    assert bands["throttle_t"] == pytest.approx(0.9 * 5 / 9, rel=1e-12)  # degF difference -> K
    assert bands["cold_reheat_t"] == pytest.approx(0.9, rel=1e-12)  # degC difference -> K
    assert bands["condenser_p"] == pytest.approx(0.02 * 3.38638e-3, rel=1e-9)  # inHg -> MPa
    assert bands["gross_output"] == pytest.approx(1.5, rel=1e-12)
    assert "throttle_p" not in bands  # no deadband given: none


@pytest.mark.parametrize(
    "extra, key, words",
    [
        ('[read]\ninterval = "500ms"\n', "read.interval", "whole number of seconds"),
        ('[read]\ninterval = "1m"\nfill = "step"\n', "read.fill", "expected one of"),
        ('[read]\nintervall = "1m"\n', "read.intervall", "did you mean 'interval'"),
        ('[read]\ninterval = "2m"\nmax_age = "5m"\n', "read.max_age", "whole number of grid intervals"),
        (
            '[read]\ninterval = "1m"\n[read.roles.throttle_t]\nmax_age = "90s"\n',
            "read.roles.throttle_t.max_age",
            "for role throttle_t",
        ),
        ("[read.roles.throttle_tt]\ndeadband = 1.0\n", "read.roles.throttle_tt", "did you mean 'throttle_t'"),
        ("[read.quantity.pressur]\ndeadband = 1.0\n", "read.quantity.pressur", "did you mean 'pressure'"),
        (
            "[read.roles.throttle_t]\ndeadband = -1.0\n",
            "read.roles.throttle_t.deadband",
            "expected a value >= 0",
        ),
        (
            '[read]\ninterval = "1m"\nmax_age = "2h"\n',
            "screening.flatline",
            "longer than the max_age of every held role",
        ),
        (
            '[read]\ninterval = "1m"\n[read.roles.throttle_t]\ndeadband = 8.0\n',
            "read.roles.throttle_t.deadband",
            "not below its permissible fluctuation",
        ),
        (
            '[read]\ninterval = "1m"\n[read.quantity.power]\ndeadband = 6.0\n',
            "read.quantity.power.deadband",
            "not below its permissible fluctuation",
        ),
    ],
)
def test_problems_name_the_key(extra, key, words):
    text = minimal("[screening]\nbarometric_kpa = 100.0\n" + extra, roles=UNITS)
    found = problems(text)
    mine = [p for p in found if f": {key}: " in p]
    assert mine, found
    assert words in mine[0], mine[0]
    assert mine[0].startswith("unit.toml:")  # with the line where the file says it
