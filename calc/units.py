"""Plant units to internal units, table-driven.

Readings arrive in whatever unit the plant historian stores (psig, inHgA, degF, klb/h, ...).
They are converted once, at the store boundary, to IAPWS-IF97's own units: pressure in MPa
*absolute*, temperature in K, mass flow in kg/s, power in MW; valve position stays in percent.

Every unit is one row of ``_TABLE``: its quantity, a scale and an offset to the internal unit,
and whether it is a gauge pressure (measured against the atmosphere, so the barometric pressure
has to be added). The factors come from NIST Special Publication 811 (2008 edition, Appendix B,
"Conversion factors"); where that appendix rounds an exactly defined factor (psi, lb), the exact
definition is used and the rounded NIST figure is what the tests check against.

References
----------
.. [1] A. Thompson, B. N. Taylor, "Guide for the Use of the International System of Units (SI)",
   NIST Special Publication 811, 2008 edition, Appendix B.8 and B.9.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pandas as pd

__all__ = [
    "UnitWarning",
    "Unit",
    "KNOWN_UNITS",
    "UNITS",
    "INTERNAL_UNIT",
    "STANDARD_ATMOSPHERE_KPA",
    "canonical_unit",
    "quantity",
    "convert",
    "to_internal",
]


class UnitWarning(UserWarning):
    """A conversion had to assume something (a default barometric pressure)."""


# --- conversion factors -----------------------------------------------------------------------
#: Standard atmosphere [kPa]. NIST SP 811 (2008) B.8: 1 atm = 1.013 25 E+05 Pa (exact).
STANDARD_ATMOSPHERE_KPA = 101.325
#: Pound (avoirdupois) [kg]: exactly 0.453 592 37 kg (international yard and pound, 1959);
#: NIST SP 811 (2008) B.8 lists 4.535 924 E-01.
_LB_KG = 0.45359237
#: Standard acceleration of free fall [m/s2], exact (CGPM 1901); defines the pound-force.
_G_N = 9.80665
#: Inch [m], exact.
_IN_M = 0.0254
#: Pound-force per square inch [Pa] = lb * g_n / in^2 = 6894.757293... Pa;
#: NIST SP 811 (2008) B.8 lists 6.894 757 E+03.
_PSI_PA = _LB_KG * _G_N / _IN_M**2
#: Inch of mercury at 32 degF [Pa]. NIST SP 811 (2008) B.8: 3.386 38 E+03.
_INHG_32F_PA = 3386.38
#: Millimetre of mercury, conventional [Pa]. NIST SP 811 (2008) B.8: 1.333 224 E+02.
_MMHG_PA = 133.3224
#: Bar [Pa], exact. NIST SP 811 (2008) B.8: 1.0 E+05.
_BAR_PA = 1.0e5
#: Degree Fahrenheit: T/K = (t/degF + 459.67) / 1.8. NIST SP 811 (2008) B.9.
_RANKINE_OFFSET = 459.67
#: Degree Celsius: T/K = t/degC + 273.15 (exact, by definition).
_CELSIUS_OFFSET = 273.15
#: Metric ton [kg], exact. NIST SP 811 (2008) B.8: 1.0 E+03.
_TONNE_KG = 1000.0
_HOUR_S = 3600.0

#: Barometric pressures accepted as a configured constant [kPa]: sea level is 101.325 kPa and
#: about 62 kPa is reached at 4000 m elevation (common practice, no source). Anything outside is
#: almost surely a unit mistake (14.7 psi, 1.013 bar, 0.1013 MPa).
BAROMETRIC_KPA_RANGE = (50.0, 110.0)

#: Internal unit of each quantity (IAPWS-IF97's units; percent for valve position).
INTERNAL_UNIT = MappingProxyType(
    {"pressure": "MPa(a)", "temperature": "K", "flow": "kg/s", "power": "MW", "percent": "%"}
)


@dataclass(frozen=True)
class Unit:
    """One plant unit: internal = value * scale + offset (+ barometric pressure if gauge).

    Attributes
    ----------
    name : str
        Canonical name, as listed in ``KNOWN_UNITS``.
    quantity : str
        "pressure", "temperature", "flow", "power" or "percent".
    scale : float
        Factor to the internal unit [internal unit per plant unit].
    offset : float
        Added after scaling [internal unit].
    gauge : bool
        True for a gauge pressure: the barometric pressure is added to reach absolute.
    """

    name: str
    quantity: str
    scale: float
    offset: float = 0.0
    gauge: bool = False

    def to_internal(self, values, barometric_mpa=0.0):
        """Values in this unit -> internal unit (``barometric_mpa`` [MPa] used only if gauge)."""
        out = np.asarray(values, dtype=float) * self.scale + self.offset
        if self.gauge:
            out = out + barometric_mpa
        return out

    def from_internal(self, values, barometric_mpa=0.0):
        """Internal unit -> values in this unit (``barometric_mpa`` [MPa] used only if gauge)."""
        out = np.asarray(values, dtype=float)
        if self.gauge:
            out = out - barometric_mpa
        return (out - self.offset) / self.scale


_MPA_PER_PA = 1.0e-6
_TABLE: tuple[Unit, ...] = (
    # pressure -> MPa absolute
    Unit("MPa(a)", "pressure", 1.0),
    Unit("MPa(g)", "pressure", 1.0, gauge=True),
    Unit("kPa(a)", "pressure", 1.0e-3),
    Unit("kPa(g)", "pressure", 1.0e-3, gauge=True),
    Unit("bar(a)", "pressure", _BAR_PA * _MPA_PER_PA),
    Unit("bar(g)", "pressure", _BAR_PA * _MPA_PER_PA, gauge=True),
    Unit("mbar(a)", "pressure", 1.0e-4),  # 100 Pa; condenser pressures
    Unit("mbar(g)", "pressure", 1.0e-4, gauge=True),
    Unit("psia", "pressure", _PSI_PA * _MPA_PER_PA),
    Unit("psig", "pressure", _PSI_PA * _MPA_PER_PA, gauge=True),
    Unit("inHgA", "pressure", _INHG_32F_PA * _MPA_PER_PA),
    Unit("mmHgA", "pressure", _MMHG_PA * _MPA_PER_PA),
    # temperature -> K
    Unit("K", "temperature", 1.0),
    Unit("degC", "temperature", 1.0, _CELSIUS_OFFSET),
    Unit("degF", "temperature", 1.0 / 1.8, _RANKINE_OFFSET / 1.8),
    # mass flow -> kg/s
    Unit("kg/s", "flow", 1.0),
    Unit("kg/h", "flow", 1.0 / _HOUR_S),
    Unit("t/h", "flow", _TONNE_KG / _HOUR_S),
    Unit("lb/h", "flow", _LB_KG / _HOUR_S),
    Unit("klb/h", "flow", 1000.0 * _LB_KG / _HOUR_S),
    # power -> MW
    Unit("MW", "power", 1.0),
    Unit("kW", "power", 1.0e-3),
    # valve position
    Unit("%", "percent", 1.0),
)

#: Canonical unit name -> Unit.
UNITS: Mapping[str, Unit] = MappingProxyType({u.name: u for u in _TABLE})
#: Canonical unit names, in table order.
KNOWN_UNITS: tuple[str, ...] = tuple(UNITS)

#: Other spellings accepted in configuration (compared case-insensitively).
_ALIASES = {
    "bara": "bar(a)",
    "barg": "bar(g)",
    "kpaa": "kPa(a)",
    "kpag": "kPa(g)",
    "mpaa": "MPa(a)",
    "mpag": "MPa(g)",
    "mbara": "mbar(a)",
    "mbarg": "mbar(g)",
    "psi(a)": "psia",
    "psi(g)": "psig",
    "inhg(a)": "inHgA",
    "mmhg(a)": "mmHgA",
    "°c": "degC",
    "°f": "degF",
    "lb/hr": "lb/h",
    "klb/hr": "klb/h",
    "percent": "%",
}
_LOOKUP = {name.lower(): name for name in KNOWN_UNITS} | _ALIASES
#: Spellings refused because they do not say absolute or gauge.
_AMBIGUOUS = {"psi", "bar", "mbar", "kpa", "mpa", "inhg", "mmhg", "atm"}
#: What to write instead of an ambiguous spelling.
_SAY_INSTEAD = {
    "psi": "psia or psig",
    "inhg": "inHgA (absolute; vacuum gauges are not supported)",
    "mmhg": "mmHgA (absolute; vacuum gauges are not supported)",
    "atm": "kPa(a) (1 atm = 101.325 kPa)",
}


def canonical_unit(unit: str) -> str:
    """The canonical name of a unit spelling (case-insensitive; "bara" -> "bar(a)").

    Parameters
    ----------
    unit : str
        A unit as written in configuration [-].

    Returns
    -------
    str
        One of ``KNOWN_UNITS``.

    Raises
    ------
    ValueError
        For an unknown unit (the message lists the known ones), or a pressure unit that does
        not say whether it is absolute or gauge.
    """
    if not isinstance(unit, str):
        raise ValueError(f"unit must be a string, found {unit!r}; known units: {', '.join(KNOWN_UNITS)}")
    key = unit.strip().lower()
    if key in _LOOKUP:
        return _LOOKUP[key]
    if key in _AMBIGUOUS:
        if key in _SAY_INSTEAD:
            instead = _SAY_INSTEAD[key]
        else:
            instead = f"{_LOOKUP[key + '(a)']} or {_LOOKUP[key + '(g)']}"
        raise ValueError(
            f"unit {unit!r} does not say whether the pressure is absolute or gauge; "
            f"write {instead}; known units: {', '.join(KNOWN_UNITS)}"
        )
    raise ValueError(f"unknown unit {unit!r}; known units: {', '.join(KNOWN_UNITS)}")


def quantity(unit: str) -> str:
    """The quantity a unit measures: "pressure", "temperature", "flow", "power" or "percent"."""
    return UNITS[canonical_unit(unit)].quantity


def _barometric_constant_mpa(barometric_kpa: float | None, what: str) -> float:
    """Checked barometric constant [MPa]; the standard atmosphere with a UnitWarning if None."""
    if barometric_kpa is None:
        warnings.warn(
            f"no barometric pressure given for {what}; assuming the standard atmosphere "
            f"{STANDARD_ATMOSPHERE_KPA} kPa (configure the barometric pressure or map a barometric tag)",
            UnitWarning,
            stacklevel=3,
        )
        return STANDARD_ATMOSPHERE_KPA * 1e-3
    try:
        value = float(barometric_kpa)
    except (TypeError, ValueError):
        raise ValueError(f"barometric_kpa must be a number in kPa, found {barometric_kpa!r}") from None
    low, high = BAROMETRIC_KPA_RANGE
    if not low <= value <= high:
        raise ValueError(
            f"barometric_kpa = {value!r} kPa is outside the plausible range {low}-{high} kPa "
            f"(is it in another unit? 1 atm = 101.325 kPa = 14.696 psi = 1.01325 bar)"
        )
    return value * 1e-3


def _like_input(values, result: np.ndarray):
    """Return ``result`` shaped like ``values``: scalar, Series (same index) or ndarray."""
    if isinstance(values, pd.Series):
        return pd.Series(result, index=values.index, name=values.name)
    if np.ndim(values) == 0:
        return float(result)
    return result


def convert(values, from_unit: str, to_unit: str, barometric_kpa: float | None = None):
    """Convert values between two units of the same quantity.

    Parameters
    ----------
    values : float, array_like or pandas.Series
        Readings in ``from_unit`` [from_unit].
    from_unit, to_unit : str
        Units from ``KNOWN_UNITS`` (or an accepted spelling) [-].
    barometric_kpa : float, optional
        Barometric pressure for a conversion between a gauge and an absolute unit [kPa]. When
        it is needed and not given, 101.325 kPa is assumed with a ``UnitWarning``.

    Returns
    -------
    float, ndarray or Series
        The values in ``to_unit``, the same type as ``values`` [to_unit].

    Raises
    ------
    ValueError
        Unknown unit, or units of different quantities.

    Examples
    --------
    >>> round(convert(1.0, "psia", "kPa(a)"), 6)
    6.894757
    >>> round(convert(212.0, "degF", "degC"), 9)
    100.0
    """
    src = UNITS[canonical_unit(from_unit)]
    dst = UNITS[canonical_unit(to_unit)]
    if src.quantity != dst.quantity:
        raise ValueError(
            f"cannot convert {src.name} ({src.quantity}) to {dst.name} ({dst.quantity}): different quantities"
        )
    baro = 0.0
    if src.gauge != dst.gauge:
        baro = _barometric_constant_mpa(barometric_kpa, f"{src.name} -> {dst.name}")
    elif barometric_kpa is not None:
        _barometric_constant_mpa(barometric_kpa, "")  # still validate what was given
    raw = values.to_numpy(dtype=float) if isinstance(values, pd.Series) else values
    result = dst.from_internal(src.to_internal(raw, baro), baro)
    return _like_input(values, result)


def to_internal(
    frame: pd.DataFrame,
    unit_of: Mapping[str, str],
    barometric_kpa: float | None = None,
    *,
    quantity_of: Mapping[str, str] | None = None,
    barometric_column: str = "barometric_p",
) -> pd.DataFrame:
    """Convert a frame of plant readings to internal units.

    Parameters
    ----------
    frame : pandas.DataFrame
        One column per role in plant units, any index (a UTC DatetimeIndex in the pipeline).
        Values that are not numbers become NaN (and are flagged as missing by screening).
    unit_of : mapping of str to str
        Column (role) -> plant unit, e.g. ``{"throttle_p": "psig", "throttle_t": "degF"}``.
        The quantity is inferred from the unit. Entries for columns absent from ``frame``
        are ignored; a column of ``frame`` without an entry is an error.
    barometric_kpa : float, optional
        Barometric pressure for gauge readings when the frame has no ``barometric_column``,
        and for its missing samples [kPa]. When it is needed and not given, the standard
        atmosphere (101.325 kPa) is assumed with a ``UnitWarning``.
    quantity_of : mapping of str to str, optional
        Column -> expected quantity ("pressure", "temperature", ...), e.g. from the role table.
        A unit of another quantity is an error (a temperature tag declared in psig).
    barometric_column : str, optional
        Name of the barometric pressure column; its own unit (absolute) is taken from
        ``unit_of``.

    Returns
    -------
    pandas.DataFrame
        A new frame, same index and column order, float columns: pressures in MPa absolute,
        temperatures in K, flows in kg/s, power in MW, valve position in percent. ``frame``
        itself is not modified.

    Raises
    ------
    ValueError
        Unknown unit (the message lists the known ones); a column without a unit; a unit of
        the wrong quantity; a gauge barometric unit; an implausible ``barometric_kpa``.

    Warns
    -----
    UnitWarning
        When gauge readings are converted with the assumed standard atmosphere.
    """
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"frame must be a pandas DataFrame, found {type(frame).__name__}")
    missing_units = [c for c in frame.columns if c not in unit_of]
    if missing_units:
        raise ValueError(
            f"no unit declared for column(s) {', '.join(map(str, missing_units))}; "
            f"declare one of: {', '.join(KNOWN_UNITS)}"
        )
    units = {c: UNITS[canonical_unit(unit_of[c])] for c in frame.columns}
    if quantity_of is not None:
        wrong = [
            f"{c} is {quantity_of[c]} but its unit {units[c].name} is {units[c].quantity}"
            for c in frame.columns
            if c in quantity_of and quantity_of[c] != units[c].quantity
        ]
        if wrong:
            raise ValueError("unit of the wrong quantity: " + "; ".join(wrong))

    numeric = {c: pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=float) for c in frame.columns}
    gauge_cols = [c for c in frame.columns if units[c].gauge]

    baro = 0.0
    if gauge_cols:
        if barometric_column in frame.columns:
            bunit = units[barometric_column]
            if bunit.quantity != "pressure" or bunit.gauge:
                raise ValueError(f"{barometric_column} must be an absolute pressure unit, found {bunit.name}")
            baro = bunit.to_internal(numeric[barometric_column])
            holes = ~np.isfinite(baro)
            if holes.any():
                fill = _barometric_constant_mpa(
                    barometric_kpa,
                    f"{int(holes.sum())} sample(s) of {', '.join(gauge_cols)} where {barometric_column} is missing",
                )
                baro = np.where(holes, fill, baro)
        else:
            baro = _barometric_constant_mpa(barometric_kpa, f"gauge column(s) {', '.join(gauge_cols)}")
    elif barometric_kpa is not None:
        _barometric_constant_mpa(barometric_kpa, "")  # validate what was given

    out = {c: units[c].to_internal(numeric[c], baro) for c in frame.columns}
    return pd.DataFrame(out, index=frame.index, columns=frame.columns)
