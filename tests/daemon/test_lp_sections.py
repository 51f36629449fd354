"""The LP, honestly: the dry stage group priced by its weight in the LP, the whole LP trended
only from the energy balance, and the expansion's LP figures marked as estimates.

Histories and windows are invented here (fictional unit); the physics behind the dry group's
weight is checked against a stage-by-stage IF97 integration in tests/calc/test_sections.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import economics
from isentrope.daemon import synthetic
from isentrope.daemon.analysis import analyse
from isentrope.daemon.commands.demo import demo_config_toml
from isentrope.daemon.config import load_config
from isentrope.daemon.pipeline import WORK_SHARE, Pipeline

START = pd.Timestamp("2025-02-01", tz="UTC")
DAYS = 60
#: Flow fractions of an energy balance (invented for the fictional unit).
ENERGY_BALANCE = """
reheat_flow_fraction = 0.89
crossover_flow_fraction = 0.78
mechanical_losses_mw = 2.5
"""


def _config(tmp_path, energy_balance: bool):
    text = demo_config_toml("unit.sqlite", START, DAYS)
    if energy_balance:
        text = text.replace("[sections]\n", "[sections]\n" + ENERGY_BALANCE, 1)
    path = tmp_path / "unit.toml"
    path.write_text(text, encoding="utf-8")
    return load_config(path)


def _windows(n=400, seed=2):
    rng = np.random.default_rng(seed)
    t = pd.date_range(START, periods=n, freq="3h", tz="UTC", name="time")
    load = rng.uniform(0.5, 1.0, n)
    return pd.DataFrame(
        {
            "gross_output": synthetic.RATING_MW * load,
            "hp_efficiency": synthetic.design_efficiency("hp", load) + rng.normal(0, 0.001, n),
            "lp_dry_efficiency": synthetic.design_efficiency("lp", load) + rng.normal(0, 0.001, n),
            "lp_dry_efficiency_u": 0.004,
            "lp_dry_isentropic_drop": 325.0,
            "lp_isentropic_drop": 925.0,
            "lp_extraction_t": 475.5,
            "condenser_p": 0.005,
            "lp_used_energy_efficiency": 0.83 - 0.02 * (1 - load) ** 2 + rng.normal(0, 0.004, n),
            "lp_used_energy_efficiency_u": 0.0197,  # measured on an energy-balance state, 1.97 pt
        },
        index=t,
    )


@pytest.mark.parametrize("energy_balance", [False, True])
def test_the_whole_lp_is_trended_only_from_the_energy_balance(tmp_path, energy_balance):
    pipe = Pipeline(_config(tmp_path, energy_balance))
    assert pipe.lp_energy_balance is energy_balance
    windows = _windows()
    models, problems = pipe.fit_baselines(windows)
    assert not problems
    assert ("lp" in models) is energy_balance  # from an assumed efficiency it would trend the assumption
    assert "lp_dry" in models and models["lp_dry"].efficiency_col == "lp_dry_efficiency"
    dev = pipe.deviation(windows[windows.index >= pipe.config.baseline.end], models)
    assert set(dev["section"]) == ({"hp", "lp_dry", "lp"} if energy_balance else {"hp", "lp_dry"})
    dry = dev[dev["section"] == "lp_dry"]
    # the dry group's weight in the LP: 325/925 of the drop, less the wet stages' recovery
    assert dry[WORK_SHARE].median() == pytest.approx(0.245, abs=0.005)
    if energy_balance:
        lp = dev[dev["section"] == "lp"]
        # a window's deviation carries the energy balance's own uncertainty, about 2 points
        assert (lp["deviation_u"] > 1.9).all()
    label = pipe.moisture_label()
    assert ("estimate" in label) is (not energy_balance), label


def test_the_dry_group_is_priced_by_its_weight_not_as_the_whole_lp(tmp_path):
    config = _config(tmp_path, energy_balance=True)
    times = pd.date_range(START, periods=DAYS * 6, freq="4h", tz="UTC", name="time")
    frame = pd.DataFrame({"deviation": -1.0, "deviation_u": 0.4, "extrapolated": False}, index=times)
    samples = pd.date_range(START, periods=DAYS * 24, freq="1h", tz="UTC")
    online = pd.Series(True, index=samples)
    output = pd.Series(450.0, index=samples)
    end = START + pd.Timedelta(days=DAYS)
    result = analyse(
        {"lp_dry": frame.assign(**{WORK_SHARE: 0.245}), "lp": frame}, online, output, config, end
    )
    dry, lp = result.sections["lp_dry"], result.sections["lp"]
    whole = config.economics.sensitivity["lp"]
    assert lp.heat_rate_per_point == whole.heat_rate_percent_per_point
    assert dry.heat_rate_per_point == pytest.approx(
        economics.stage_group_coefficient(whole.heat_rate_percent_per_point, 0.245)
    )
    assert "weight 0.24" in dry.pricing or "weight 0.25" in dry.pricing
    # the same -1 point costs the dry group about a quarter of what it costs the whole LP
    ratio = dry.losses["cumulative_fuel_cost"].iloc[-1] / lp.losses["cumulative_fuel_cost"].iloc[-1]
    assert ratio == pytest.approx(0.245, rel=1e-6)
