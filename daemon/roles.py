"""The roles a configuration maps plant tags onto, and how one role is found in a store.

A *role* is a measurement position in the cycle (throttle pressure, cold reheat temperature,
...). Calculations only ever see roles, in internal units; plant tag names, measurement names,
field names and plant units stay at the store boundary.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

# the role table lives in calc (calc.sections and calc.quality read it); re-exported here
from isentrope.calc.names import OPTIONAL_ROLES, REQUIRED_ROLES, ROLES

__all__ = ["OPTIONAL_ROLES", "REQUIRED_ROLES", "ROLES", "RoleMapping"]


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
