"""Names shared by calc/ and daemon/: the measurement roles and the section figures.

One table each. ``calc.sections`` and ``calc.quality`` take the roles they read from here,
``daemon.roles`` adds how a role is found in a store, and ``daemon.series`` builds the result
series from the figure table. No imports beyond the standard library, so that any module may
use it.
"""

from __future__ import annotations

#: Role name -> (quantity, required, description). Quantity selects the unit table in
#: isentrope.calc.units ("pressure", "temperature", "flow", "power", "percent").
ROLES: dict[str, tuple[str, bool, str]] = {
    "throttle_p": ("pressure", True, "throttle (turbine inlet, upstream of the stop valves) pressure"),
    "throttle_t": ("temperature", True, "throttle temperature"),
    "cold_reheat_p": ("pressure", True, "HP exhaust (cold reheat) pressure"),
    "cold_reheat_t": ("temperature", True, "HP exhaust (cold reheat) temperature"),
    "hot_reheat_p": ("pressure", True, "hot reheat pressure, upstream of the intercept valves"),
    "hot_reheat_t": ("temperature", True, "hot reheat temperature"),
    "crossover_p": ("pressure", True, "IP exhaust (crossover, LP inlet) pressure"),
    "crossover_t": ("temperature", True, "IP exhaust (crossover, LP inlet) temperature"),
    "lp_extraction_p": ("pressure", False, "LP extraction pressure (a point still superheated)"),
    "lp_extraction_t": ("temperature", False, "LP extraction temperature"),
    "condenser_p": ("pressure", True, "condenser (LP exhaust) pressure"),
    "gross_output": ("power", True, "generator gross output"),
    "main_steam_flow": ("flow", False, "main steam flow"),
    "first_stage_p": ("pressure", False, "HP first-stage (control stage) pressure"),
    "valve_position": ("percent", False, "HP control valve position"),
    "barometric_p": ("pressure", False, "barometric pressure, for gauge transmitters"),
}

REQUIRED_ROLES = tuple(name for name, (_, required, _) in ROLES.items() if required)
OPTIONAL_ROLES = tuple(name for name, (_, required, _) in ROLES.items() if not required)

#: The sections whose efficiency is trended against a baseline: HP, IP, the LP dry stage group
#: (crossover -> LP extraction) and the whole LP (energy balance only).
TRENDED_SECTIONS = ("hp", "ip", "lp_dry", "lp")

#: Roles ``calc.sections`` reads (the others serve screening, the load or unit conversion).
SECTION_ROLES = (
    "throttle_p",
    "throttle_t",
    "cold_reheat_p",
    "cold_reheat_t",
    "hot_reheat_p",
    "hot_reheat_t",
    "crossover_p",
    "crossover_t",
    "lp_extraction_p",
    "lp_extraction_t",
    "condenser_p",
    "gross_output",
    "main_steam_flow",
)

#: Figure columns of ``calc.sections.SectionResults.to_frame()``: (name, unit, meaning); the
#: result series ``section_samples`` and ``steady_windows`` carry them (daemon/series.py).
FIGURE_FIELDS: tuple[tuple[str, str, str], ...] = (
    # name, unit, description
    ("hp_efficiency", "-", "HP enthalpy-drop efficiency, throttle -> cold reheat"),
    ("hp_efficiency_u", "-", "standard uncertainty of hp_efficiency"),
    ("hp_enthalpy_drop", "kJ/kg", "HP actual enthalpy drop"),
    ("hp_isentropic_drop", "kJ/kg", "HP isentropic enthalpy drop"),
    ("hp_share", "-", "HP share of the expansion-line enthalpy drop (HP + IP + LP to ELEP)"),
    ("ip_efficiency", "-", "IP enthalpy-drop efficiency, hot reheat -> crossover"),
    ("ip_efficiency_u", "-", "standard uncertainty of ip_efficiency"),
    ("ip_enthalpy_drop", "kJ/kg", "IP actual enthalpy drop"),
    ("ip_isentropic_drop", "kJ/kg", "IP isentropic enthalpy drop"),
    ("ip_share", "-", "IP share of the expansion-line enthalpy drop"),
    ("lp_dry_efficiency", "-", "LP dry stage-group efficiency, crossover -> LP extraction"),
    ("lp_dry_efficiency_u", "-", "standard uncertainty of lp_dry_efficiency"),
    ("lp_dry_enthalpy_drop", "kJ/kg", "LP dry stage-group actual enthalpy drop"),
    ("lp_dry_isentropic_drop", "kJ/kg", "LP dry stage-group isentropic drop"),
    ("lp_efficiency", "-", "LP efficiency crossover -> ELEP, wetness losses included"),
    ("lp_efficiency_u", "-", "standard uncertainty of lp_efficiency"),
    ("lp_used_energy_efficiency", "-", "LP efficiency crossover -> UEEP"),
    ("lp_used_energy_efficiency_u", "-", "standard uncertainty of lp_used_energy_efficiency"),
    ("lp_enthalpy_drop", "kJ/kg", "LP enthalpy drop crossover -> ELEP"),
    ("lp_isentropic_drop", "kJ/kg", "LP isentropic drop crossover -> condenser pressure"),
    ("lp_share", "-", "LP share of the expansion-line enthalpy drop"),
    ("lp_saturation_p", "MPa", "pressure where the LP expansion line crosses saturation"),
    ("lp_elep", "kJ/kg", "expansion-line end point enthalpy"),
    ("lp_elep_u", "kJ/kg", "standard uncertainty of lp_elep"),
    ("lp_ueep", "kJ/kg", "used-energy end point enthalpy"),
    ("lp_ueep_u", "kJ/kg", "standard uncertainty of lp_ueep"),
    ("lp_x", "-", "vapour fraction at the ELEP (1 where dry)"),
    ("lp_moisture", "-", "exhaust moisture at the ELEP, fraction"),
    ("lp_moisture_u", "-", "standard uncertainty of lp_moisture"),
    ("lp_exhaust_loss", "kJ/kg", "wetness-corrected exhaust loss, UEEP - ELEP"),
    ("lp_annulus_velocity", "m/s", "last-stage annulus velocity"),
    (
        "lp_estimate",
        "-",
        "1 where the LP efficiency, ELEP, UEEP and moisture rest on an assumed LP efficiency "
        "(expansion), 0 where they come from the energy balance",
    ),
    ("reason", "-", "packed reason codes, 4 bits per group (decode_reason)"),
)
