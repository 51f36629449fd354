"""The roles a configuration maps plant tags onto, and how one role is found in a store.

A *role* is a measurement position in the cycle (throttle pressure, cold reheat temperature,
...). Calculations only ever see roles, in internal units; plant tag names, measurement names,
field names and plant units stay at the store boundary.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

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


@dataclass(frozen=True)
class RoleMapping:
    """Where one role's raw samples live in a store, and in which plant unit.

    Attributes
    ----------
    role : str
        One of ``ROLES``.
    tag : str
        Plant tag name. The SQLite store looks samples up by it; the InfluxDB stores use it
        as the default field name when ``field`` is empty.
    unit : str
        Plant unit of the raw samples, one of the unit names in ``isentrope.calc.units``.
    measurement : str
        InfluxDB measurement holding the samples (ignored by SQLite).
    field : str
        InfluxDB field holding the value; empty means ``tag``.
    tags : dict
        InfluxDB tag filters (key -> value) that select this role's series.
    range : tuple of float or None
        Instrument range (low, high) in the plant unit; samples outside are flagged.
    """

    role: str
    tag: str
    unit: str
    measurement: str = "plant"
    field: str = ""
    tags: dict[str, str] = dataclasses.field(default_factory=dict)
    range: tuple[float, float] | None = None

    @property
    def field_name(self) -> str:
        return self.field or self.tag

    def __hash__(self) -> int:  # dict field: hash on the identifying parts
        return hash((self.role, self.tag, self.measurement, self.field, tuple(sorted(self.tags.items()))))
