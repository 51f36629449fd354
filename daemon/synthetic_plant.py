"""The fictional plant around the synthetic unit: its identity and its instrumentation.

**Greywater Bend Station, Unit 2** (invented; see ``isentrope.daemon.synthetic`` for the
process and the generator): ``SCENARIO`` (names, rating), ``TAG_MAP`` (plant tags, plant
units, instrument ranges, uncertainties), the conversions between internal and plant units,
the ``[roles]`` and whole-configuration TOML text, and what an exception-reporting historian
would keep of the readings (``EXCEPTION_DEADBANDS``, ``exception_report``). None of its names,
tags or numbers belong to a real plant. ``isentrope.daemon.synthetic`` re-exports every name.
"""

from __future__ import annotations

import json
from collections.abc import Mapping

import numpy as np
import pandas as pd

from isentrope.daemon.roles import ROLES, RoleMapping

# --- the scenario (invented) ---------------------------------------------------------------
SCENARIO = {
    "plant": "Greywater Bend Station",
    "unit": "Unit 2",
    "description": (
        "fictional 530 MW subcritical drum unit, single reheat, HP + IP + two double-flow LP "
        "turbines, 60 Hz, 3600 rpm, throttle and hot reheat 538 degC"
    ),
    "rating_mw": 530.0,
    "online_mw": 30.0,
    "grid_hz": 60.0,
}

# --- the plant's tag mapping (tag names invented) -------------------------------------------
#: Role -> [roles.<role>] table of a TOML configuration: plant tag, plant unit, instrument
#: range in the plant unit, and the instrument's standard uncertainty (pressure: percent of
#: reading; temperature: K; power, flow: percent; valve position: percent points).
TAG_MAP: dict[str, dict] = {
    "throttle_p": {"tag": "GB2-MST-P01", "unit": "bar(g)", "range": [-1.0, 200.0], "uncertainty": 0.1},
    "throttle_t": {"tag": "GB2-MST-T01", "unit": "degC", "range": [0.0, 650.0], "uncertainty": 0.5},
    "cold_reheat_p": {"tag": "GB2-CRH-P01", "unit": "bar(g)", "range": [-1.0, 60.0], "uncertainty": 0.1},
    "cold_reheat_t": {"tag": "GB2-CRH-T01", "unit": "degC", "range": [0.0, 500.0], "uncertainty": 0.5},
    "hot_reheat_p": {"tag": "GB2-HRH-P01", "unit": "bar(g)", "range": [-1.0, 60.0], "uncertainty": 0.1},
    "hot_reheat_t": {"tag": "GB2-HRH-T01", "unit": "degC", "range": [0.0, 650.0], "uncertainty": 0.5},
    "crossover_p": {"tag": "GB2-XOV-P01", "unit": "kPa(a)", "range": [0.0, 1600.0], "uncertainty": 0.1},
    "crossover_t": {"tag": "GB2-XOV-T01", "unit": "degC", "range": [0.0, 500.0], "uncertainty": 0.5},
    "lp_extraction_p": {"tag": "GB2-LPX-P05", "unit": "kPa(a)", "range": [0.0, 400.0], "uncertainty": 0.1},
    "lp_extraction_t": {"tag": "GB2-LPX-T05", "unit": "degC", "range": [0.0, 400.0], "uncertainty": 0.5},
    "condenser_p": {"tag": "GB2-CND-P01", "unit": "inHgA", "range": [0.0, 31.0], "uncertainty": 0.5},
    "gross_output": {"tag": "GB2-GEN-MW01", "unit": "MW", "range": [-10.0, 600.0], "uncertainty": 0.2},
    "main_steam_flow": {"tag": "GB2-MST-F01", "unit": "t/h", "range": [-50.0, 2000.0], "uncertainty": 1.0},
    "first_stage_p": {"tag": "GB2-FST-P01", "unit": "bar(g)", "range": [-1.0, 160.0], "uncertainty": 0.1},
    "valve_position": {"tag": "GB2-HPV-Z01", "unit": "%", "range": [-5.0, 105.0], "uncertainty": 0.5},
    "barometric_p": {"tag": "GB2-AMB-P01", "unit": "kPa(a)", "range": [85.0, 110.0], "uncertainty": 0.05},
}

#: Plain description of each tag, for the demo's tag list.
TAG_DESCRIPTIONS = {role: ROLES[role][2] for role in TAG_MAP}

# Internal -> plant conversion for the units used in TAG_MAP. Factors: 1 bar = 0.1 MPa and
# 1 inHg (32 degF) = 3.38638 kPa (NIST SP 811, appendix B); 1 t/h = 1/3.6 kg/s.
INHG_KPA = 3.38638
_PLANT_UNITS = ("bar(g)", "kPa(a)", "inHgA", "degC", "MW", "t/h", "%")


def internal_to_plant(values, unit: str, barometric_mpa=None):
    """Convert internal-unit values (MPa abs, K, MW, kg/s, %) to the plant ``unit``.

    Parameters
    ----------
    values : array_like
        Values in internal units [MPa abs, K, MW, kg/s or %].
    unit : str
        Plant unit, one of ``bar(g)``, ``kPa(a)``, ``inHgA``, ``degC``, ``MW``, ``t/h``, ``%``.
    barometric_mpa : array_like, optional
        Barometric pressure for gauge units [MPa]; default 0.101325 MPa.
    """
    v = np.asarray(values, dtype=float)
    baro = 0.101325 if barometric_mpa is None else np.asarray(barometric_mpa, dtype=float)
    if unit == "bar(g)":
        return (v - baro) * 10.0
    if unit == "kPa(a)":
        return v * 1000.0
    if unit == "inHgA":
        return v * 1000.0 / INHG_KPA
    if unit == "degC":
        return v - 273.15
    if unit == "t/h":
        return v * 3.6
    if unit in ("MW", "%"):
        return v.copy()
    raise ValueError(f"unit {unit!r} is not one of the synthetic plant's units {_PLANT_UNITS}")


def plant_to_internal(values, unit: str, barometric_mpa=None):
    """Inverse of ``internal_to_plant`` (same parameters, plant unit in, internal unit out)."""
    v = np.asarray(values, dtype=float)
    baro = 0.101325 if barometric_mpa is None else np.asarray(barometric_mpa, dtype=float)
    if unit == "bar(g)":
        return v / 10.0 + baro
    if unit == "kPa(a)":
        return v / 1000.0
    if unit == "inHgA":
        return v * INHG_KPA / 1000.0
    if unit == "degC":
        return v + 273.15
    if unit == "t/h":
        return v / 3.6
    if unit in ("MW", "%"):
        return v.copy()
    raise ValueError(f"unit {unit!r} is not one of the synthetic plant's units {_PLANT_UNITS}")


def to_plant_units(frame: pd.DataFrame, tag_map: Mapping[str, Mapping] = TAG_MAP) -> pd.DataFrame:
    """The role frame from ``generate`` converted to the plant units of ``tag_map``.

    Columns stay role names (what ``Store.write_raw`` takes with ``role_mappings``). Gauge
    pressures are referred to the frame's own ``barometric_p`` column when it has one.

    Parameters
    ----------
    frame : DataFrame
        Role columns in internal units [MPa abs, K, MW, kg/s, %].
    tag_map : mapping
        Role -> table with at least ``unit``; roles missing from it are left out.
    """
    baro = frame["barometric_p"].to_numpy() if "barometric_p" in frame else None
    out = {}
    for role in frame.columns:
        if role not in tag_map:
            continue
        out[role] = internal_to_plant(frame[role].to_numpy(), tag_map[role]["unit"], baro)
    return pd.DataFrame(out, index=frame.index)


def role_mappings(tag_map: Mapping[str, Mapping] = TAG_MAP, measurement: str = "plant") -> list[RoleMapping]:
    """``RoleMapping`` objects for ``tag_map`` (for ``Store.write_raw`` / ``Store.read``)."""
    return [
        RoleMapping(
            role=role,
            tag=entry["tag"],
            unit=entry["unit"],
            measurement=measurement,
            range=tuple(entry["range"]) if entry.get("range") is not None else None,
        )
        for role, entry in tag_map.items()
    ]


def tag_map_toml(tag_map: Mapping[str, Mapping] = TAG_MAP) -> str:
    """``tag_map`` as ``[roles.<role>]`` tables of TOML text (values are plain strings/numbers)."""
    lines = []
    for role, entry in tag_map.items():
        lines.append(f"[roles.{role}]")
        lines.append(f"# {TAG_DESCRIPTIONS.get(role, ROLES.get(role, ('', '', ''))[2])}")
        for key, value in entry.items():
            if isinstance(value, str):
                lines.append(f"{key} = {json.dumps(value)}")
            elif isinstance(value, (list, tuple)):
                lines.append(f"{key} = [{', '.join(repr(float(x)) for x in value)}]")
            else:
                lines.append(f"{key} = {value!r}")
        lines.append("")
    return "\n".join(lines)


def config_toml(store_path: str = "greywater2.sqlite", tag_map: Mapping[str, Mapping] = TAG_MAP) -> str:
    """A complete configuration of the synthetic unit (``[unit]``, SQLite ``[store]``, roles).

    Every option not written here takes its documented default (deploy/example.toml).
    """
    head = [
        "# Greywater Bend Station, Unit 2: a fictional unit (isentrope.daemon.synthetic).",
        "# Demonstration data only. isentrope gives advisory performance information, not a",
        "# protective function; the turbine maker's limits, local codes and licensed",
        "# engineering practice take precedence.",
        "",
        "[unit]",
        f"name = {json.dumps(SCENARIO['plant'].replace(' Station', '') + ' ' + SCENARIO['unit'].split()[-1])}",
        f"plant = {json.dumps(SCENARIO['plant'])}",
        f"rating_mw = {SCENARIO['rating_mw']!r}",
        f"online_mw = {SCENARIO['online_mw']!r}",
        "",
        "[store]",
        'kind = "sqlite"',
        f"path = {json.dumps(store_path)}",
        "",
    ]
    return "\n".join(head) + "\n" + tag_map_toml(tag_map)


#: Exception deadbands of the synthetic tags in their plant units (TAG_MAP), for
#: ``exception_report``: two to three noise standard deviations of each reading (``NOISE`` in
#: isentrope.daemon.synthetic), which keeps about 30 % of the samples with a one-hour heartbeat (invented for the
#: demo; a real historian's deadbands come from its tag configuration). Each stays below the
#: steadiness limit of its role in [steady] (PTC 6 Table 3-1: 34.5 kPa throttle pressure, 4 K,
#: 0.14 kPa exhaust pressure, 1 % of rating), as isentrope.daemon.config requires.
EXCEPTION_DEADBANDS: dict[str, float] = {
    "throttle_p": 0.3,  # bar (30 kPa)
    "throttle_t": 1.2,  # degC
    "cold_reheat_p": 0.1,
    "cold_reheat_t": 1.2,
    "hot_reheat_p": 0.1,
    "hot_reheat_t": 1.2,
    "crossover_p": 2.0,  # kPa
    "crossover_t": 1.2,
    "lp_extraction_p": 0.6,
    "lp_extraction_t": 1.2,
    "condenser_p": 0.02,  # inHg (0.068 kPa)
    "gross_output": 2.0,  # MW
    "main_steam_flow": 20.0,  # t/h
    "first_stage_p": 0.2,
    "valve_position": 0.3,  # %
    "barometric_p": 0.04,  # kPa
}


def exception_report(
    frame: pd.DataFrame, deadbands: Mapping[str, float], heartbeat: str | pd.Timedelta = "1h"
) -> dict[str, pd.Series]:
    """What an exception-reporting historian keeps of a regular history.

    Per column: the first sample is stored; after it a sample is stored when it differs from
    the last stored value by more than the column's deadband, or when ``heartbeat`` has passed
    since the last stored sample (the historian's maximum time between values). NaN samples
    and absent rows store nothing.

    Parameters
    ----------
    frame : pandas.DataFrame
        Regular readings, UTC index, one column per role [any unit].
    deadbands : mapping of str to float
        Column -> deadband, in the unit of the column; columns not named keep every sample.
    heartbeat : str or Timedelta
        Longest time between two stored samples of a live column [duration].

    Returns
    -------
    dict of str to pandas.Series
        Column -> the stored samples (a subset of the column's finite samples).
    """
    beat = pd.Timedelta(heartbeat).value
    out = {}
    for col in frame.columns:
        s = frame[col].dropna()
        band = deadbands.get(col)
        if band is None or not len(s):
            out[col] = s
            continue
        t = pd.DatetimeIndex(s.index).as_unit("ns").asi8
        v = s.to_numpy(dtype=float)
        keep = np.zeros(len(v), dtype=bool)
        last_v, last_t = v[0], t[0]
        keep[0] = True
        # a loop: each decision depends on the last stored sample (about 0.1 s per 100,000)
        for i in range(1, len(v)):
            if abs(v[i] - last_v) > band or t[i] - last_t >= beat:
                keep[i] = True
                last_v, last_t = v[i], t[i]
        out[col] = s[keep]
    return out
