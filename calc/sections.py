"""Section figures of a reheat steam turbine: HP, IP and LP efficiency, LP exhaust end point.

The enthalpy-drop method of ASME PTC 6: a section's efficiency is its actual enthalpy drop
divided by the isentropic drop from the same inlet state to the same outlet pressure,

    efficiency = (h_in - h_out) / (h_in - h(p_out, s_in)),

with the inlet taken upstream of the stop or intercept valves so that valve throttling counts
against the section. HP: throttle -> cold reheat. IP: hot reheat -> crossover. LP dry stage
group: crossover -> an LP extraction that is still superheated (when mapped).

The LP exhaust is wet, so its pressure and temperature do not fix its enthalpy. The
expansion-line end point (ELEP) follows from an LP efficiency and the Baumann wetness
correction (``lp_expansion``), or from an energy balance on the generator output
(``energy_balance_ueep``). The used-energy end point (UEEP) adds the exhaust loss, read from a
curve against last-stage annulus velocity (``ExhaustLossCurve``).

Uncertainties are first-order (ISO GUM, ASME PTC 19.1): sensitivity coefficients by central
finite differences of the same vectorised functions, combined root-sum-square
(``propagate_uncertainty``).

Everything here is pure: numpy/pandas in, the same type out, no I/O, no clock, no logging.
Internal units are IAPWS-IF97's: MPa (absolute), K, kJ/kg, kJ/(kg K), m3/kg, kg/s, MW.

References
----------
ASME PTC 6-2004, Steam Turbines (enthalpy-drop efficiency of a turbine section).
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997.
Spencer, R. C., Cotton, K. C. and Cannon, C. N. (1963), A method for predicting the
performance of steam turbine-generators 16,500 kW and larger, ASME paper 62-WA-209.
JCGM 100:2008 (ISO GUM), Evaluation of measurement data - Guide to the expression of
uncertainty in measurement, section 5 (law of propagation of uncertainty).
ASME PTC 19.1-2013, Test Uncertainty.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from isentrope.calc import steam
from isentrope.calc.names import FIGURE_FIELDS, ROLES, SECTION_ROLES

# --------------------------------------------------------------------------------------------
# Constants
# --------------------------------------------------------------------------------------------

#: Critical pressure of water [MPa]. IAPWS R7-97(2012), Eq. (2)-(3) text (pc = 22.064 MPa).
P_CRIT = 22.064
#: Critical temperature of water [K]. IAPWS R7-97(2012) (Tc = 647.096 K).
T_CRIT = 647.096

#: Highest temperature accepted at a section boundary [K]: the upper limit of IF97 regions 1-3
#: (R7-97(2012) section 4). Region 5 (to 2273.15 K) is for gas-turbine temperatures, far above
#: any steam turbine's, and costs a point-by-point fallback: treated as out of range here.
T_MAX = 1073.15

#: Default Baumann coefficient ``a`` [-]: wet-stage efficiency = dry efficiency
#: x (1 - a * mean wetness). Baumann rule, a about 1 (calc/REFERENCES.md, from memory).
BAUMANN_DEFAULT = 1.0
#: Largest Baumann coefficient accepted [-] (published values lie well below; common practice).
BAUMANN_MAX = 3.0

#: Default LP dry efficiency [-] used when no design value is configured: the middle of the
#: typical 85-90 % of large reheat units (calc/REFERENCES.md, from memory). Set the maker's value.
ETA_LP_DESIGN_DEFAULT = 0.88

#: Default half-width of the band around the LP efficiency the expansion assumes in which the
#: true one may lie [-]: +/- 2 points (project choice: the typical LP efficiencies of large
#: reheat units span 85-90 %, calc/REFERENCES.md, from memory). Taken as a rectangular
#: distribution, standard uncertainty band / sqrt(3) (JCGM 100:2008, 4.3.7).
ETA_LP_BAND_DEFAULT = 0.02

#: Exhaust-loss wetness correction, Spencer, Cotton & Cannon (1963), from memory:
#: total exhaust loss = curve loss x 0.87 x (1 - 0.01 Y) x (1 - 0.0065 Y), Y = moisture at the
#: ELEP in percent. Confirm against the turbine maker's data.
EXHAUST_LOSS_FACTOR = 0.87
EXHAUST_LOSS_WETNESS_1 = 0.01
EXHAUST_LOSS_WETNESS_2 = 0.0065

#: Default exhaust-loss curve, annulus velocity [m/s] -> loss [kJ/kg] (dry basis). Only the
#: *shape* of the Spencer-Cotton-Cannon curve (calc/REFERENCES.md, from memory): high at low
#: velocity (turn-up loss), lowest at about 23-35 kJ/kg near 150-180 m/s, rising steeply above
#: about 275 m/s towards choking. Not any maker's curve: give the maker's curve for real use.
DEFAULT_EXHAUST_LOSS_POINTS = (
    (60.0, 70.0),
    (90.0, 52.0),
    (120.0, 38.0),
    (150.0, 29.0),
    (170.0, 26.0),
    (190.0, 27.0),
    (215.0, 32.0),
    (245.0, 42.0),
    (275.0, 58.0),
    (305.0, 80.0),
    (335.0, 105.0),
    (365.0, 132.0),
    (400.0, 165.0),
)

#: Default standard instrument uncertainties (k = 1) per quantity, as (absolute, relative):
#: pressure 0.25 % of reading, temperature 1 K (the task's defaults, common practice);
#: flow 1 % of reading, power 0.25 % of reading (common practice, no source).
DEFAULT_UNCERTAINTY_BY_QUANTITY = {
    "pressure": (0.0, 0.0025),
    "temperature": (1.0, 0.0),
    "flow": (0.0, 0.01),
    "power": (0.0, 0.0025),
}

#: Quantity of each role this module reads (``calc.names``).
ROLE_QUANTITY = {role: ROLES[role][0] for role in SECTION_ROLES}

#: Smallest finite-difference step per quantity [internal unit] (keeps the central difference
#: above the solvers' round-off when a configured uncertainty is tiny; common practice).
_MIN_STEP_ABS = {"pressure": 0.0, "temperature": 1e-3, "flow": 1e-3, "power": 1e-3}
_MIN_STEP_REL = {"pressure": 1e-5, "temperature": 0.0, "flow": 1e-5, "power": 1e-5}

#: Saturation-crossing root finder (Illinois regula falsi on ln p): stop when the residual is
#: below this [kJ/kg], at most this many iterations (convergence is checked per point).
_CROSSING_TOL = 1e-7
_CROSSING_MAX_ITER = 60
#: ELEP from UEEP in the energy-balance mode (fixed-point iteration on the exhaust loss).
_ELEP_TOL = 1e-6
_ELEP_MAX_ITER = 30

# --------------------------------------------------------------------------------------------
# Reason codes (0 = figure valid). One code per figure group; evaluate() packs them into one
# integer, four bits per group (see decode_reason).
# --------------------------------------------------------------------------------------------
OK = 0
MISSING_INPUT = 1  #: an input is NaN or infinite
OUT_OF_RANGE = 2  #: outside the steam-property validity, or not positive
PRESSURE_NOT_FALLING = 3  #: outlet pressure at or above inlet pressure
INLET_NOT_SUPERHEATED = 4  #: inlet at or below saturation: p and T do not fix its state
OUTLET_NOT_SUPERHEATED = 5  #: measured outlet at or below saturation: p and T do not fix it
NO_ENTHALPY_DROP = 6  #: actual or isentropic enthalpy drop not positive
NO_CONVERGENCE = 7  #: an iteration did not converge
NO_DRY_EFFICIENCY = 8  #: the LP dry efficiency is missing or outside (0, 1]
NOT_MAPPED = 9  #: the roles this figure needs are not in the frame
NO_EXHAUST_DATA = 10  #: annulus area, exhaust flow fraction or main steam flow missing
VELOCITY_OUTSIDE_CURVE = 11  #: annulus velocity outside the exhaust-loss curve
ENERGY_BALANCE_IMPLAUSIBLE = 12  #: the balance gives an LP work <= 0 or an LP efficiency > 1
UPSTREAM_INVALID = 13  #: a figure this one is derived from is NaN

REASON_TEXT = {
    OK: "ok",
    MISSING_INPUT: "an input is missing (NaN) or infinite",
    OUT_OF_RANGE: "input outside the IF97 validity range or not positive",
    PRESSURE_NOT_FALLING: "outlet pressure not below inlet pressure",
    INLET_NOT_SUPERHEATED: "inlet at or below saturation (pressure and temperature do not fix it)",
    OUTLET_NOT_SUPERHEATED: "outlet at or below saturation (pressure and temperature do not fix it)",
    NO_ENTHALPY_DROP: "actual or isentropic enthalpy drop not positive",
    NO_CONVERGENCE: "iteration did not converge",
    NO_DRY_EFFICIENCY: "LP dry efficiency missing or outside (0, 1]",
    NOT_MAPPED: "roles not mapped",
    NO_EXHAUST_DATA: "annulus area, LP exhaust flow fraction or main steam flow missing",
    VELOCITY_OUTSIDE_CURVE: "annulus velocity outside the exhaust-loss curve",
    ENERGY_BALANCE_IMPLAUSIBLE: "energy balance gives LP work <= 0 or LP efficiency > 1",
    UPSTREAM_INVALID: "a figure it is derived from is invalid",
}

#: Figure groups of the packed ``reason`` column, in nibble order (bits 0-3, 4-7, ...).
REASON_GROUPS = ("hp", "ip", "lp_dry", "lp", "lp_ueep")


def decode_reason(reason):
    """Split a packed reason integer into one code per figure group.

    Parameters
    ----------
    reason : int
        Value of the ``reason`` column of ``SectionResults.to_frame()`` [-].

    Returns
    -------
    dict
        Group name (``REASON_GROUPS``) -> reason code (``OK``, ``MISSING_INPUT``, ...).
    """
    r = int(reason)
    return {g: (r >> (4 * i)) & 0xF for i, g in enumerate(REASON_GROUPS)}


def reason_names(reason):
    """Plain-language reasons packed in one ``reason`` integer, e.g. ``["hp: ..."]``.

    Parameters
    ----------
    reason : int
        Value of the ``reason`` column [-].

    Returns
    -------
    list of str
        One entry per group whose code is not ``OK``.
    """
    return [f"{g}: {REASON_TEXT.get(c, f'code {c}')}" for g, c in decode_reason(reason).items() if c]


def _pack_reason(codes: Mapping[str, np.ndarray]) -> np.ndarray:
    out = np.zeros_like(next(iter(codes.values())), dtype=np.int64)
    for i, g in enumerate(REASON_GROUPS):
        out |= (codes[g].astype(np.int64) & 0xF) << (4 * i)
    return out


# --------------------------------------------------------------------------------------------
# Input handling: scalar / ndarray / Series in, the same type out
# --------------------------------------------------------------------------------------------
class _Shape:
    """Remembers the type and shape of the inputs and restores it on the outputs."""

    def __init__(self, names, values):
        index = None
        arrays = []
        for name, v in zip(names, values, strict=True):
            if isinstance(v, pd.DataFrame):
                raise ValueError(f"{name}: expected a number, array or Series, found a DataFrame")
            if isinstance(v, pd.Series):
                if index is None:
                    index = v.index
                elif not v.index.equals(index):
                    raise ValueError(f"{name}: Series index differs from the first Series argument's index")
                v = v.to_numpy(dtype=float, na_value=np.nan)
            try:
                arrays.append(np.asarray(v, dtype=float))
            except (TypeError, ValueError) as exc:
                raise ValueError(f"{name}: expected numbers, found {type(v).__name__} {v!r:.60}") from exc
        try:
            b = np.broadcast_arrays(*arrays)
        except ValueError as exc:
            shapes = ", ".join(f"{n} {a.shape}" for n, a in zip(names, arrays, strict=True))
            raise ValueError(f"arguments do not broadcast to one shape: {shapes}") from exc
        self.shape = b[0].shape
        self.index = index
        if index is not None and len(self.shape) != 1:
            raise ValueError(f"Series arguments broadcast to shape {self.shape}; expected one dimension")
        self.scalar = self.shape == () and index is None
        # +/-inf is treated like a missing value (NaN, reason MISSING_INPUT).
        self.flat = [np.where(np.isinf(a), np.nan, a).astype(float).ravel() for a in b]

    def restore(self, a):
        a = np.asarray(a)
        if self.index is not None:
            return pd.Series(a.reshape(self.shape), index=self.index)
        if self.scalar:
            return a.reshape(()).item()
        return a.reshape(self.shape)


def _mark(reason, mask, code):
    """Set ``code`` where ``mask`` holds and no earlier reason is set (first reason wins)."""
    reason[(reason == OK) & mask] = code


def _call(func, mask, *args):
    """Evaluate a steam function on the points selected by ``mask`` only; NaN elsewhere."""
    out = np.full(mask.shape, np.nan)
    if mask.any():
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            out[mask] = np.asarray(func(*[a[mask] for a in args]), dtype=float)
    return out


def _superheated(p, t, mask, ts=None):
    """True where (p, t) is a vapour state fixed by p and T: above saturation, or above the
    critical temperature at supercritical pressure. NaN t_sat (below the triple point) is
    False. ``ts``: t_sat(p) where ``mask & (p < P_CRIT)`` when already computed [K]."""
    if ts is None:
        ts = _saturation_t(p, mask)
    with np.errstate(invalid="ignore"):
        return np.where(p < P_CRIT, t > ts, t > T_CRIT) & mask


def _saturation_t(p, mask):
    """t_sat(p) where ``mask`` holds and p is below the critical pressure; NaN elsewhere [K]."""
    return _call(steam.t_sat, mask & (p < P_CRIT), p)


# --------------------------------------------------------------------------------------------
# Superheated section: enthalpy-drop efficiency
# --------------------------------------------------------------------------------------------
@dataclass
class SectionExpansion:
    """One superheated section's expansion (scalar, ndarray or Series like the inputs).

    Attributes
    ----------
    h_in : float or array
        Inlet specific enthalpy [kJ/kg].
    s_in : float or array
        Inlet specific entropy [kJ/(kg K)].
    h_out : float or array
        Outlet specific enthalpy from the measured p and T [kJ/kg].
    h_out_isentropic : float or array
        Enthalpy at the outlet pressure and the inlet entropy [kJ/kg].
    enthalpy_drop : float or array
        h_in - h_out [kJ/kg].
    isentropic_drop : float or array
        h_in - h_out_isentropic [kJ/kg].
    efficiency : float or array
        enthalpy_drop / isentropic_drop [-]; NaN where ``reason`` is not OK.
    reason : int or array
        Reason code per point (``OK``, ``MISSING_INPUT``, ``PRESSURE_NOT_FALLING``, ...).
    """

    h_in: object
    s_in: object
    h_out: object
    h_out_isentropic: object
    enthalpy_drop: object
    isentropic_drop: object
    efficiency: object
    reason: object


def _section_core(p_in, t_in, p_out, t_out, end_state=False):
    """Flat float arrays in, dict of flat arrays out (see ``SectionExpansion``). With
    ``end_state`` also "t_out_isentropic" [K] and "v_out_isentropic" [m3/kg], the temperature
    and volume of the isentropic end point from the same solve that gives its enthalpy (for
    ``_section_uncertainty``; the other figures are the same bit for bit), and "slopes_in",
    "slopes_out": dicts of the partial derivatives of h and s at the inlet and outlet
    (``steam.hs_slopes_pt``, NaN where not OK or outside IF97 regions 1 and 2)."""
    n = p_in.size
    reason = np.zeros(n, dtype=np.int64)
    finite = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_out) & np.isfinite(t_out)
    _mark(reason, ~finite, MISSING_INPUT)
    with np.errstate(invalid="ignore"):
        _mark(reason, (p_in <= 0) | (p_out <= 0) | (t_in <= 0) | (t_out <= 0), OUT_OF_RANGE)
        _mark(reason, (t_in > T_MAX) | (t_out > T_MAX), OUT_OF_RANGE)
        _mark(reason, p_out >= p_in, PRESSURE_NOT_FALLING)
    ok = reason == OK
    _mark(reason, ok & ~_superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
    ok = reason == OK
    _mark(reason, ok & ~_superheated(p_out, t_out, ok), OUTLET_NOT_SUPERHEATED)
    ok = reason == OK
    if end_state:
        # with the partial derivatives for the uncertainty (same h and s, bit for bit)
        slopes_in = _call_slopes(ok, p_in, t_in)
        slopes_out = _call_slopes(ok, p_out, t_out)
        h_in, s_in, h_out = slopes_in["h"], slopes_in["s"], slopes_out["h"]
    else:
        h_in, s_in = _call_hs(ok, p_in, t_in)
        h_out = _call(steam.h_pt, ok, p_out, t_out)
    ok &= np.isfinite(h_in) & np.isfinite(s_in) & np.isfinite(h_out)
    if end_state:
        h_s = np.full(n, np.nan)
        t_s = np.full(n, np.nan)
        v_s = np.full(n, np.nan)
        if ok.any():
            h_s[ok], t_s[ok], v_s[ok] = steam.end_state_ps(p_out[ok], s_in[ok])
    else:
        h_s = _call(steam.h_ps, ok, p_out, s_in)
    _mark(reason, (reason == OK) & ~(ok & np.isfinite(h_s)), OUT_OF_RANGE)
    drop = h_in - h_out
    drop_s = h_in - h_s
    with np.errstate(invalid="ignore"):
        _mark(reason, (drop <= 0) | (drop_s <= 0), NO_ENTHALPY_DROP)
    good = reason == OK
    eff = np.full(n, np.nan)
    eff[good] = drop[good] / drop_s[good]
    extra = (
        {"t_out_isentropic": t_s, "v_out_isentropic": v_s, "slopes_in": slopes_in, "slopes_out": slopes_out}
        if end_state
        else {}
    )
    return {
        **extra,
        "h_in": h_in,
        "s_in": s_in,
        "h_out": h_out,
        "h_out_isentropic": h_s,
        "enthalpy_drop": drop,
        "isentropic_drop": drop_s,
        "efficiency": eff,
        "reason": reason,
    }


def section_expansion(p_in, t_in, p_out, t_out):
    """Enthalpy-drop figures of one superheated turbine section.

    Parameters
    ----------
    p_in : array_like
        Section inlet pressure, absolute, upstream of the stop/intercept valves [MPa].
    t_in : array_like
        Section inlet temperature [K].
    p_out : array_like
        Section outlet pressure, absolute [MPa].
    t_out : array_like
        Section outlet temperature [K].

    Returns
    -------
    SectionExpansion
        Inlet and outlet enthalpies, the isentropic end point, actual and isentropic drops,
        the efficiency and a reason code per point, each of the inputs' type (float for
        scalars, ndarray, or Series with the inputs' index).

    Notes
    -----
    A point is invalid (NaN, with its reason) when an input is NaN, infinite or not positive,
    when a temperature is above 1073.15 K (``T_MAX``), when
    ``p_out >= p_in``, when the inlet or the outlet is at or below saturation (their p and T
    then do not fix the state), outside IF97 validity, or when the actual or isentropic drop
    is not positive. Efficiencies above 1 (outlet entropy below inlet entropy, usually an
    instrument error) are returned as computed: screening decides plausibility.

    References
    ----------
    ASME PTC 6-2004 (enthalpy-drop efficiency); IAPWS R7-97(2012) for the properties.
    """
    shape = _Shape(("p_in", "t_in", "p_out", "t_out"), (p_in, t_in, p_out, t_out))
    r = _section_core(*shape.flat)
    return SectionExpansion(**{k: shape.restore(v) for k, v in r.items()})


def section_efficiency(p_in, t_in, p_out, t_out, *, return_details=False):
    """Enthalpy-drop efficiency of a superheated turbine section (ASME PTC 6).

    efficiency = (h_in - h_out) / (h_in - h(p_out, s_in)).

    Parameters
    ----------
    p_in : array_like
        Section inlet pressure, absolute, upstream of the stop/intercept valves [MPa].
    t_in : array_like
        Section inlet temperature [K].
    p_out : array_like
        Section outlet pressure, absolute [MPa].
    t_out : array_like
        Section outlet temperature [K].
    return_details : bool, optional
        Also return the ``SectionExpansion`` with enthalpies and reason codes.

    Returns
    -------
    efficiency : float, ndarray or Series
        Efficiency as a fraction [-]; NaN where the expansion is impossible or an input is
        missing (for scalars too: this entry point never raises on a physical impossibility).
    details : SectionExpansion
        Only with ``return_details=True``.

    Raises
    ------
    ValueError
        When an argument is not numeric or the arguments do not broadcast.

    Examples
    --------
    Cengel & Boles' adiabatic turbine, 3 MPa / 400 C to 50 kPa / 100 C, gives 0.6667.

    >>> round(section_efficiency(3.0, 673.15, 0.05, 373.15), 4)
    0.6667
    """
    d = section_expansion(p_in, t_in, p_out, t_out)
    return (d.efficiency, d) if return_details else d.efficiency


# --------------------------------------------------------------------------------------------
# LP expansion to the wet exhaust with the Baumann correction
# --------------------------------------------------------------------------------------------
@dataclass
class LPExpansion:
    """LP expansion from a superheated inlet to the (usually wet) exhaust.

    Attributes
    ----------
    h_in : float or array
        LP inlet specific enthalpy [kJ/kg].
    s_in : float or array
        LP inlet specific entropy [kJ/(kg K)].
    h_isentropic : float or array
        Enthalpy at exhaust pressure and inlet entropy [kJ/kg].
    p_wet : float or array
        Pressure where the expansion line crosses the saturated-vapour line [MPa]; NaN when
        the end point is dry.
    h_wet : float or array
        Enthalpy at that crossing (saturated vapour) [kJ/kg]; NaN when the end point is dry.
    eta_wet : float or array
        Efficiency of the wet part, eta_dry (1 - a * mean wetness) [-]; NaN when dry.
    eta_effective : float or array
        Overall efficiency inlet -> ELEP, (h_in - h_elep) / (h_in - h_isentropic) [-].
    h_elep : float or array
        Expansion-line end point enthalpy [kJ/kg].
    x : float or array
        Vapour mass fraction at the ELEP [-]; 1 where the end point is dry or superheated.
    moisture : float or array
        1 - x [-] (fraction, not percent).
    reason : int or array
        Reason code per point.
    """

    h_in: object
    s_in: object
    h_isentropic: object
    p_wet: object
    h_wet: object
    eta_wet: object
    eta_effective: object
    h_elep: object
    x: object
    moisture: object
    reason: object


#: Saturation-line table for the crossing search [ln p grid, uniform]: 20001 points from just
#: above the triple-point pressure to 16.5 MPa (below the region 3/4 boundary at 623.15 K).
#: Linear interpolation of h', h'', s', s'' (from isentrope.calc.steam) in ln p: measured
#: largest errors against the exact functions 1e-6 kJ/kg (h) and 3e-9 kJ/(kg K) (s) below
#: 2 MPa, 5e-5 kJ/kg and 7e-8 kJ/(kg K) from 2 to 16.5 MPa; the LP end points agree with an
#: independent iapws calculation (tests). Why a table: a regula-falsi search with exact
#: h_ps / h_sat_vapour calls (about 10 per point) made evaluate() on 525,600 rows take 94 s
#: (wall, loaded 2-core machine, no uncertainty); with the table it takes 16 s (6 s CPU).
_SAT_TABLE_P_LO = 0.000611212677444 * 1.001
_SAT_TABLE_P_HI = 16.5
_SAT_TABLE_N = 20001
#: Largest LP inlet pressure the LP expansion accepts [MPa] (the table's upper end).
LP_P_MAX = _SAT_TABLE_P_HI


def _frozen(a):
    a = np.asarray(a, dtype=float)
    a.flags.writeable = False
    return a


def _build_sat_table():
    u = np.linspace(np.log(_SAT_TABLE_P_LO), np.log(_SAT_TABLE_P_HI), _SAT_TABLE_N)
    p = np.exp(u)
    return (
        _frozen(u),
        _frozen(steam.h_sat_liquid(p)),
        _frozen(steam.h_sat_vapour(p)),
        _frozen(steam.s_sat_liquid(p)),
        _frozen(steam.s_sat_vapour(p)),
    )


_SAT_U, _SAT_HF, _SAT_HG, _SAT_SF, _SAT_SG = _build_sat_table()
_SAT_DU = (_SAT_U[-1] - _SAT_U[0]) / (_SAT_TABLE_N - 1)


def _sat_interp(u):
    """h', h'', s', s'' at ln p = u by linear interpolation in the saturation table."""
    k = np.clip(np.floor((u - _SAT_U[0]) / _SAT_DU).astype(np.int64), 0, _SAT_TABLE_N - 2)
    w = (u - _SAT_U[k]) / _SAT_DU
    out = []
    for tab in (_SAT_HF, _SAT_HG, _SAT_SF, _SAT_SG):
        lo = tab[k]
        out.append(lo + w * (tab[k + 1] - lo))
    return out


def _wet_isentropic(hf, hg, sf, sg, s):
    """Enthalpy at the given saturation state and entropy s (quality from s; valid where
    sf <= s <= sg, linear extrapolation outside) [kJ/kg]."""
    return hf + (s - sf) / (sg - sf) * (hg - hf)


def _crossing_pressure(h_in, s_in, eta, p_lo, p_hi):
    """Pressure where the dry expansion line h(p) = h_in - eta (h_in - h(p, s_in)) meets the
    saturated-vapour line h''(p): root of g(ln p) = h(p) - h''(p) in [p_lo, p_hi], Illinois
    regula falsi on the saturation table. g < 0 at p_lo (wet end), g > 0 at p_hi (superheated
    inlet; where the inlet isentrope is superheated the wet formula extrapolates with the
    same sign). Returns (p, converged)."""

    def g(u, i):
        hf, hg, sf, sg = _sat_interp(u)
        return h_in[i] - eta[i] * (h_in[i] - _wet_isentropic(hf, hg, sf, sg, s_in[i])) - hg

    n = h_in.size
    allidx = np.arange(n)
    a = np.log(np.maximum(p_lo, _SAT_TABLE_P_LO))
    b = np.log(np.minimum(p_hi, _SAT_TABLE_P_HI))
    fa, fb = g(a, allidx), g(b, allidx)
    valid = (fa < 0) & (fb > 0)
    side = np.zeros(n, dtype=np.int8)
    x = np.where(valid, a, np.nan)
    done = ~valid
    for _ in range(_CROSSING_MAX_ITER):
        ia = np.flatnonzero(~done)
        if ia.size == 0:
            break
        c = (a[ia] * fb[ia] - b[ia] * fa[ia]) / (fb[ia] - fa[ia])
        fc = g(c, ia)
        x[ia] = c
        conv = (np.abs(fc) < _CROSSING_TOL) | (np.abs(b[ia] - a[ia]) < 1e-13)
        right = fc > 0  # same sign as fb: replace b
        left = fc < 0
        # Illinois: halve the retained end's value when the same end is kept twice.
        ib, il = ia[right], ia[left]
        fa[ib] = np.where(side[ib] == -1, fa[ib] / 2, fa[ib])
        b[ib], fb[ib], side[ib] = c[right], fc[right], -1
        fb[il] = np.where(side[il] == 1, fb[il] / 2, fb[il])
        a[il], fa[il], side[il] = c[left], fc[left], 1
        done[ia[conv | ~np.isfinite(fc)]] = True
        x[ia[~np.isfinite(fc)]] = np.nan
    converged = valid & done & np.isfinite(x)
    return np.exp(x), converged


def _exhaust_states(p_exh, mask):
    """Exact h', h'', s', s'' and v', v'' at the exhaust pressure where ``mask`` (NaN
    elsewhere): ``steam.saturation_states``, the public saturation functions bit for bit in
    one pass, about three times faster (calc/DECISIONS.md, "Speed of the kernels")."""
    n = mask.shape[0]
    out = {k: np.full(n, np.nan) for k in ("hf", "hg", "sf", "sg", "vf", "vg")}
    if mask.any():
        got = steam.saturation_states(p_exh[mask])
        for k, v in got.items():
            out[k][mask] = v
    return (out["hf"], out["hg"], out["sf"], out["sg"]), (out["vf"], out["vg"])


def _exhaust_saturation(p_exh, mask):
    """Exact h', h'', s', s'' at the exhaust pressure where ``mask``."""
    return _exhaust_states(p_exh, mask)[0]


def _exhaust_volume(p_exh, h, sat, vols, mask):
    """Specific volume at (p_exh, h) [m3/kg]: v' + x (v'' - v') in the wet region from the
    exact saturation values (no h-inversion needed), steam.v_ph elsewhere."""
    hf, hg = sat[0], sat[1]
    vf, vg = vols
    with np.errstate(invalid="ignore", divide="ignore"):
        x = (h - hf) / (hg - hf)
        wet = mask & (x >= 0) & (x <= 1)
        v = np.where(wet, vf + x * (vg - vf), np.nan)
    other = mask & ~wet
    if other.any():
        v[other] = _call(steam.v_ph, other, p_exh, h)[other]
    return v


def _lp_core(p_in, t_in, p_exh, eta, a, exhaust_sat=None, inlet_states=None):
    """Flat float arrays in (a: scalar), dict of flat arrays out (see LPExpansion).
    ``exhaust_sat``: precomputed ``_exhaust_saturation(p_exh, all-true)`` to reuse;
    ``inlet_states``: an ``_InletStates`` to look the inlet h and s up in."""
    n = p_in.size
    reason = np.zeros(n, dtype=np.int64)
    finite = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_exh)
    _mark(reason, ~finite, MISSING_INPUT)
    with np.errstate(invalid="ignore"):
        _mark(
            reason,
            (p_in <= 0) | (p_exh <= 0) | (t_in <= 0) | (t_in > T_MAX) | (p_in > LP_P_MAX),
            OUT_OF_RANGE,
        )
        _mark(reason, p_exh >= p_in, PRESSURE_NOT_FALLING)
        _mark(reason, ~(np.isfinite(eta) & (eta > 0) & (eta <= 1)), NO_DRY_EFFICIENCY)
    ok = reason == OK
    _mark(reason, ok & ~_superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
    ok = reason == OK
    if inlet_states is None:
        h_in, s_in = _call_hs(ok, p_in, t_in)
    else:
        h_in, s_in = inlet_states.get(ok, p_in, t_in)
    ok &= np.isfinite(h_in) & np.isfinite(s_in)
    if exhaust_sat is None:
        hf, hg, sf, sg = _exhaust_saturation(p_exh, ok)
    else:
        hf, hg, sf, sg = exhaust_sat
    ok &= np.isfinite(hf) & np.isfinite(hg) & np.isfinite(sf) & np.isfinite(sg)
    # Isentropic end point: wet (the usual case) from the saturation values, else steam.h_ps.
    with np.errstate(invalid="ignore"):
        wet_s = ok & (s_in <= sg) & (s_in >= sf)
        h_s = np.where(wet_s, _wet_isentropic(hf, hg, sf, sg, s_in), np.nan)
    dry_s = ok & ~wet_s
    if dry_s.any():
        h_s[dry_s] = _call(steam.h_ps, dry_s, p_exh, s_in)[dry_s]
    ok &= np.isfinite(h_s)
    _mark(reason, (reason == OK) & ~ok, OUT_OF_RANGE)
    with np.errstate(invalid="ignore"):
        _mark(reason, ok & ~(h_in - h_s > 0), NO_ENTHALPY_DROP)
    ok = reason == OK

    h_dry_end = h_in - eta * (h_in - h_s)
    with np.errstate(invalid="ignore"):
        wet = ok & (h_dry_end < hg)
    p_wet = np.full(n, np.nan)
    h_s_wet = np.full(n, np.nan)
    if wet.any():
        iw = np.flatnonzero(wet)
        pw, conv = _crossing_pressure(h_in[iw], s_in[iw], eta[iw], p_exh[iw], p_in[iw])
        p_wet[iw] = pw
        failed = np.zeros(n, dtype=bool)
        failed[iw[~conv]] = True
        _mark(reason, failed, NO_CONVERGENCE)
        hfw, hgw, sfw, sgw = _sat_interp(np.log(pw))
        h_s_wet[iw] = _wet_isentropic(hfw, hgw, sfw, sgw, s_in[iw])
        wet &= reason == OK
    ok = reason == OK

    # Wet part: isentropic drop along the inlet isentrope from the crossing to the exhaust,
    # done at eta_wet = eta (1 - a y/2) with y the exhaust wetness (the wetness at the crossing
    # is 0). With A the end point without correction and B = eta a (h_s_wet - h_s) / 2,
    # h_elep = A + B y and y = (h'' - h_elep) / (h'' - h') (x is linear in h at fixed p in the
    # wet region), so the fixed point of the Baumann iteration is y = (h'' - A)/(h'' - h' + B):
    # exact, used instead of iterating.
    d_wet = np.where(wet, h_s_wet - h_s, 0.0)
    big_a = h_dry_end
    big_b = eta * a * d_wet / 2.0
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.where(wet, (hg - big_a) / (hg - hf + big_b), 0.0)
        _mark(reason, wet & ~((y >= 0) & (y < 1)), OUT_OF_RANGE)
    ok = reason == OK
    wet &= ok
    h_elep = np.where(ok, big_a + big_b * y, np.nan)
    y = np.where(ok, y, np.nan)
    eta_wet = np.where(wet, eta * (1.0 - a * y / 2.0), np.nan)
    h_wet = np.where(wet, h_in - eta * (h_in - h_s_wet), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        eta_eff = np.where(ok, (h_in - h_elep) / (h_in - h_s), np.nan)
    return {
        "h_in": h_in,
        "s_in": s_in,
        "h_isentropic": h_s,
        "p_wet": np.where(wet, p_wet, np.nan),
        "h_wet": h_wet,
        "eta_wet": eta_wet,
        "eta_effective": eta_eff,
        "h_elep": h_elep,
        "x": 1.0 - y,
        "moisture": y,
        "reason": reason,
    }


def _check_baumann(baumann):
    a = np.asarray(baumann, dtype=float)
    if a.ndim != 0 or not np.isfinite(a) or not (0.0 <= a <= BAUMANN_MAX):
        raise ValueError(f"baumann: expected one number in [0, {BAUMANN_MAX}], found {baumann!r}")
    return float(a)


def lp_expansion(p_in, t_in, p_exhaust, eta_dry, baumann=BAUMANN_DEFAULT):
    """Expansion-line end point of an LP turbine with the Baumann wetness correction.

    The dry expansion line is the single-step line of constant efficiency from the inlet,
    h(p) = h_in - eta_dry (h_in - h(p, s_in)). Where it crosses the saturated-vapour line
    (pressure ``p_wet``) the wet part starts; the isentropic drop from there to the exhaust
    along the inlet isentrope is done at eta_wet = eta_dry (1 - a * y_mean), y_mean the mean of
    the wetness at the crossing (0) and at the exhaust. The exhaust wetness and eta_wet are
    solved together (the fixed point has a closed form, see the code). With ``baumann=0`` the
    end point is the single-step h_in - eta_dry (h_in - h_isentropic).

    Parameters
    ----------
    p_in : array_like
        LP inlet (crossover) pressure, absolute [MPa].
    t_in : array_like
        LP inlet temperature; the inlet must be superheated [K].
    p_exhaust : array_like
        Exhaust (condenser) pressure, absolute [MPa].
    eta_dry : array_like
        Dry efficiency of the LP expansion, in (0, 1] [-].
    baumann : float, optional
        Baumann coefficient a (default 1.0, from memory); 0 switches the correction off [-].

    Returns
    -------
    LPExpansion
        ``h_elep`` [kJ/kg], ``x`` [-], ``moisture`` [fraction], the crossing, eta_wet, ... of
        the inputs' type. NaN with a reason code where the expansion is impossible.

    Raises
    ------
    ValueError
        When ``baumann`` is not one number in [0, 3], or an argument is not numeric.

    Notes
    -----
    Invalid points are NaN with a reason code (scalars too): inlet not superheated, exhaust
    pressure not below inlet pressure, inlet above ``LP_P_MAX`` (16.5 MPa) or ``T_MAX``
    (1073.15 K), ``eta_dry`` outside (0, 1]. The crossing is found on a saturation table
    (see ``_SAT_TABLE_N``); everything else uses isentrope.calc.steam directly.

    References
    ----------
    Baumann rule (calc/REFERENCES.md, from memory). IAPWS R7-97(2012) for the properties.
    """
    a = _check_baumann(baumann)
    shape = _Shape(("p_in", "t_in", "p_exhaust", "eta_dry"), (p_in, t_in, p_exhaust, eta_dry))
    r = _lp_core(*shape.flat, a)
    return LPExpansion(**{k: shape.restore(v) for k, v in r.items()})


# --------------------------------------------------------------------------------------------
# Exhaust loss and UEEP
# --------------------------------------------------------------------------------------------
class ExhaustLossCurve:
    """Exhaust loss [kJ/kg] against last-stage annulus velocity [m/s], linear between points.

    Parameters
    ----------
    velocity : array_like
        Annulus velocities, strictly increasing, positive [m/s].
    loss : array_like
        Exhaust loss at each velocity, dry basis, not negative [kJ/kg].

    Notes
    -----
    Outside the given velocity range the loss is NaN (no extrapolation): the figure is
    flagged ``VELOCITY_OUTSIDE_CURVE`` rather than guessed.
    """

    def __init__(self, velocity, loss):
        v = np.asarray(velocity, dtype=float)
        q = np.asarray(loss, dtype=float)
        if v.ndim != 1 or q.shape != v.shape or v.size < 2:
            raise ValueError(
                f"exhaust-loss curve: expected two equal 1-D sequences of at least 2 points, "
                f"found shapes {v.shape} and {q.shape}"
            )
        if not (np.all(np.isfinite(v)) and np.all(np.isfinite(q))):
            raise ValueError("exhaust-loss curve: every velocity and loss must be a finite number")
        if not np.all(np.diff(v) > 0) or v[0] <= 0:
            raise ValueError(
                f"exhaust-loss curve: velocities must be positive and strictly increasing, found {v.tolist()}"
            )
        if np.any(q < 0):
            raise ValueError(f"exhaust-loss curve: losses must not be negative, found {q.tolist()}")
        self.velocity = v
        self.loss = q

    @classmethod
    def from_points(cls, points):
        """Curve from ``[(velocity [m/s], loss [kJ/kg]), ...]``."""
        pts = np.asarray(points, dtype=float)
        if pts.ndim != 2 or pts.shape[1] != 2:
            raise ValueError(f"exhaust-loss curve: expected (velocity, loss) pairs, found shape {pts.shape}")
        return cls(pts[:, 0], pts[:, 1])

    def __call__(self, velocity):
        """Loss [kJ/kg] at ``velocity`` [m/s]; NaN outside the curve or for NaN velocity."""
        v = np.asarray(velocity, dtype=float)
        out = np.interp(v, self.velocity, self.loss)
        with np.errstate(invalid="ignore"):
            inside = (v >= self.velocity[0]) & (v <= self.velocity[-1])
        return np.where(inside, out, np.nan)

    def __repr__(self):
        return (
            f"ExhaustLossCurve({len(self.velocity)} points, {self.velocity[0]:g}-{self.velocity[-1]:g} m/s)"
        )


#: The default curve (shape only, from memory; see DEFAULT_EXHAUST_LOSS_POINTS).
DEFAULT_EXHAUST_LOSS_CURVE = ExhaustLossCurve.from_points(DEFAULT_EXHAUST_LOSS_POINTS)


def annulus_velocity(exhaust_flow, specific_volume, annulus_area):
    """Mean axial velocity through the last-stage annulus.

    Parameters
    ----------
    exhaust_flow : array_like
        LP exhaust mass flow through all exhaust ends together [kg/s].
    specific_volume : array_like
        Specific volume at the ELEP (mixture) [m3/kg].
    annulus_area : float
        Total last-stage annulus area of all exhaust ends [m2].

    Returns
    -------
    ndarray
        Velocity [m/s].
    """
    area = float(annulus_area)
    if not np.isfinite(area) or area <= 0:
        raise ValueError(f"annulus_area: expected a positive area [m2], found {annulus_area!r}")
    return np.asarray(exhaust_flow, dtype=float) * np.asarray(specific_volume, dtype=float) / area


def wetness_corrected_exhaust_loss(loss, moisture):
    """Exhaust loss corrected for wetness at the ELEP (Spencer, Cotton & Cannon 1963, from memory).

    loss_total = loss x 0.87 x (1 - 0.01 Y) x (1 - 0.0065 Y), Y = 100 x moisture.

    Parameters
    ----------
    loss : array_like
        Curve exhaust loss, dry basis [kJ/kg].
    moisture : array_like
        Moisture at the ELEP, fraction [-].

    Returns
    -------
    ndarray
        Loss to add to the ELEP to get the UEEP [kJ/kg].
    """
    y = 100.0 * np.asarray(moisture, dtype=float)
    return (
        np.asarray(loss, dtype=float)
        * EXHAUST_LOSS_FACTOR
        * (1.0 - EXHAUST_LOSS_WETNESS_1 * y)
        * (1.0 - EXHAUST_LOSS_WETNESS_2 * y)
    )


def _exhaust(p_exh, h_elep, moisture, exhaust_flow, area, curve, sat, vols):
    """velocity [m/s], corrected loss [kJ/kg], reason; area None -> NO_EXHAUST_DATA."""
    n = p_exh.size
    reason = np.zeros(n, dtype=np.int64)
    if area is None:
        reason[:] = NO_EXHAUST_DATA
        nan = np.full(n, np.nan)
        return nan, nan, reason
    _mark(reason, ~np.isfinite(h_elep), UPSTREAM_INVALID)
    _mark(reason, ~np.isfinite(exhaust_flow), NO_EXHAUST_DATA)
    ok = reason == OK
    v = _exhaust_volume(p_exh, h_elep, sat, vols, ok)
    _mark(reason, ok & ~np.isfinite(v), OUT_OF_RANGE)
    vel = annulus_velocity(exhaust_flow, v, area)
    loss = wetness_corrected_exhaust_loss(curve(vel), moisture)
    _mark(reason, ~np.isfinite(loss), VELOCITY_OUTSIDE_CURVE)
    good = reason == OK
    return np.where(np.isfinite(vel), vel, np.nan), np.where(good, loss, np.nan), reason


# --------------------------------------------------------------------------------------------
# Energy balance
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FlowFractions:
    """Effective flow of each section's enthalpy drop as a fraction of main steam flow.

    Each is the flow that, times the section's inlet-to-outlet enthalpy drop, gives the
    section's power; take them from the unit's heat balance (gland leakage, HP exhaust
    extraction to the top heater, extractions inside the IP and LP). There is no default:
    they are properties of one unit.

    Attributes
    ----------
    hp : float
        HP section [-].
    ip : float
        IP section [-].
    lp : float
        LP section, applied to crossover-to-UEEP drop [-].
    """

    hp: float
    ip: float
    lp: float

    def __post_init__(self):
        for name in ("hp", "ip", "lp"):
            v = getattr(self, name)
            if not isinstance(v, (int, float)) or not np.isfinite(v) or not (0 < v <= 1.5):
                raise ValueError(f"flow_fractions.{name}: expected a number in (0, 1.5], found {v!r}")

    @classmethod
    def coerce(cls, value):
        if isinstance(value, cls):
            return value
        if isinstance(value, Mapping):
            unknown = set(value) - {"hp", "ip", "lp"}
            missing = {"hp", "ip", "lp"} - set(value)
            if unknown or missing:
                raise ValueError(
                    f"flow_fractions: expected keys hp, ip, lp; missing {sorted(missing)}, unknown {sorted(unknown)}"
                )
            return cls(**{k: value[k] for k in ("hp", "ip", "lp")})
        raise ValueError(
            f"flow_fractions: expected a FlowFractions or a mapping with hp, ip, lp, found {value!r}"
        )


def energy_balance_ueep(gross_output, losses_mw, main_steam_flow, hp_drop, ip_drop, h_lp_in, flow_fractions):
    """UEEP from the generator output: the LP does the shaft work the HP and IP do not.

    gross + losses = m (f_hp dh_hp + f_ip dh_ip + f_lp (h_lp_in - UEEP)) / 1000.

    Parameters
    ----------
    gross_output : array_like
        Generator gross output [MW].
    losses_mw : array_like
        Mechanical plus generator losses [MW].
    main_steam_flow : array_like
        Main steam flow [kg/s].
    hp_drop : array_like
        HP enthalpy drop, throttle to cold reheat [kJ/kg].
    ip_drop : array_like
        IP enthalpy drop, hot reheat to crossover [kJ/kg].
    h_lp_in : array_like
        LP inlet (crossover) enthalpy [kJ/kg].
    flow_fractions : FlowFractions or mapping
        Effective section flows as fractions of main steam flow [-].

    Returns
    -------
    ndarray
        UEEP [kJ/kg]; NaN where an input is missing or the main steam flow is not positive.
    """
    ff = FlowFractions.coerce(flow_fractions)
    m = np.asarray(main_steam_flow, dtype=float)
    shaft_kw = 1000.0 * (np.asarray(gross_output, dtype=float) + np.asarray(losses_mw, dtype=float))
    with np.errstate(invalid="ignore", divide="ignore"):
        lp_kw = shaft_kw - m * (
            ff.hp * np.asarray(hp_drop, dtype=float) + ff.ip * np.asarray(ip_drop, dtype=float)
        )
        ueep = np.asarray(h_lp_in, dtype=float) - lp_kw / (m * ff.lp)
        return np.where(m > 0, ueep, np.nan)


def _elep_from_ueep(p_exh, ueep, exhaust_flow, area, curve, exhaust_sat, vols):
    """ELEP from UEEP by fixed-point iteration ELEP = UEEP - corrected loss(v(ELEP), Y(ELEP)).

    The loss depends on the end point only through the specific volume and the wetness, so
    the iteration contracts quickly; a fixed maximum number of steps with a per-point
    convergence check. Returns elep, moisture, velocity, loss, reason (flat arrays)."""
    n = p_exh.size
    reason = np.zeros(n, dtype=np.int64)
    _mark(reason, ~np.isfinite(ueep), UPSTREAM_INVALID)
    if area is None:
        _mark(reason, np.ones(n, dtype=bool), NO_EXHAUST_DATA)
    _mark(reason, ~np.isfinite(exhaust_flow), NO_EXHAUST_DATA)
    ok = reason == OK
    hf, hg = exhaust_sat[0], exhaust_sat[1]
    _mark(reason, ok & ~(np.isfinite(hf) & np.isfinite(hg)), OUT_OF_RANGE)
    ok = reason == OK
    h = ueep.copy()
    vel = np.full(n, np.nan)
    loss = np.full(n, np.nan)
    conv = np.zeros(n, dtype=bool)
    for _ in range(_ELEP_MAX_ITER):
        idx = np.flatnonzero(ok & ~conv)
        if idx.size == 0:
            break
        with np.errstate(invalid="ignore", divide="ignore"):
            y_a = np.clip((hg[idx] - h[idx]) / (hg[idx] - hf[idx]), 0.0, None)
            v = _exhaust_volume(
                p_exh[idx],
                h[idx],
                (hf[idx], hg[idx]),
                (vols[0][idx], vols[1][idx]),
                np.ones(idx.size, dtype=bool),
            )
            vel_a = v * exhaust_flow[idx] / area
            loss_a = wetness_corrected_exhaust_loss(curve(vel_a), y_a)
        h_new = ueep[idx] - loss_a
        vel[idx], loss[idx] = vel_a, loss_a
        bad = ~np.isfinite(h_new)
        if bad.any():
            ib = idx[bad]
            reason[ib] = np.where(np.isfinite(vel_a[bad]), VELOCITY_OUTSIDE_CURVE, OUT_OF_RANGE)
            ok[ib] = False
        good = ~bad
        ig = idx[good]
        step = np.abs(h_new[good] - h[ig])
        h[ig] = h_new[good]
        conv[ig] = step < _ELEP_TOL
    _mark(reason, ok & ~conv, NO_CONVERGENCE)
    good = reason == OK
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.clip((hg - h) / (hg - hf), 0.0, None)
    return (
        np.where(good, h, np.nan),
        np.where(good, y, np.nan),
        np.where(good, vel, np.nan),
        np.where(good, loss, np.nan),
        reason,
    )


# --------------------------------------------------------------------------------------------
# Uncertainty propagation
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class InstrumentUncertainty:
    """Standard uncertainty (k = 1) of one instrument: u = sqrt(absolute^2 + (relative x reading)^2).

    Attributes
    ----------
    absolute : float
        Absolute part, in the role's internal unit [MPa, K, kg/s or MW].
    relative : float
        Part proportional to the reading, fraction of reading [-].
    """

    absolute: float = 0.0
    relative: float = 0.0

    def __post_init__(self):
        for name in ("absolute", "relative"):
            v = getattr(self, name)
            if not isinstance(v, (int, float)) or not np.isfinite(v) or v < 0:
                raise ValueError(f"uncertainty {name}: expected a number >= 0, found {v!r}")

    def of(self, reading):
        """Standard uncertainty at ``reading`` [internal unit]."""
        r = np.asarray(reading, dtype=float)
        with np.errstate(invalid="ignore", over="ignore"):
            return np.hypot(self.absolute, self.relative * np.abs(r))


def default_uncertainties():
    """Default per-role standard uncertainties (see DEFAULT_UNCERTAINTY_BY_QUANTITY)."""
    return {
        role: InstrumentUncertainty(*DEFAULT_UNCERTAINTY_BY_QUANTITY[q]) for role, q in ROLE_QUANTITY.items()
    }


def _resolve_uncertainty(uncertainty):
    """None -> defaults; mapping -> defaults overridden (float = absolute); False -> None."""
    if uncertainty is False:
        return None
    out = default_uncertainties()
    if uncertainty is None:
        return out
    if not isinstance(uncertainty, Mapping):
        raise ValueError(
            f"uncertainty: expected None, False or a mapping role -> uncertainty, found {uncertainty!r}"
        )
    for role, u in uncertainty.items():
        if role not in ROLE_QUANTITY:
            raise ValueError(f"uncertainty: unknown role {role!r}; valid roles: {', '.join(ROLE_QUANTITY)}")
        if isinstance(u, InstrumentUncertainty):
            out[role] = u
        elif isinstance(u, Mapping):
            out[role] = InstrumentUncertainty(**u)
        elif isinstance(u, (int, float)) and not isinstance(u, bool):
            out[role] = InstrumentUncertainty(absolute=float(u))
        else:
            raise ValueError(
                f"uncertainty[{role!r}]: expected a number (absolute, internal unit), a mapping "
                f"{{absolute, relative}} or an InstrumentUncertainty, found {u!r}"
            )
    return out


def propagate_uncertainty(func, inputs, u, outputs, steps=None, base=None):
    """First-order (GUM) propagation of independent input uncertainties through ``func``.

    u_y^2 = sum_i (c_i u_i)^2 with c_i = dy/dx_i by central differences: one extra pair of
    evaluations of the vectorised ``func`` per input. Where one side of the pair is invalid
    the one-sided difference is used; where both are, the uncertainty is NaN.

    Parameters
    ----------
    func : callable
        ``func(dict name -> ndarray) -> dict name -> ndarray`` (vectorised).
    inputs : dict
        Input name -> values (1-D arrays of one length) [input unit].
    u : dict
        Input name -> standard uncertainty (k = 1), same shape or scalar [input unit].
        Inputs absent from ``u`` are taken as exact.
    outputs : sequence of str
        Names of the outputs of ``func`` to propagate to.
    steps : dict, optional
        Input name -> finite-difference step [input unit]; default the uncertainty itself.
    base : dict, optional
        ``func(inputs)`` when already computed (used for one-sided differences).

    Returns
    -------
    dict
        Output name -> combined standard uncertainty [output unit].

    References
    ----------
    JCGM 100:2008 (ISO GUM) Eq. (10) and 5.1.3 (numerical sensitivity coefficients);
    ASME PTC 19.1-2013.
    """
    n = len(next(iter(inputs.values())))
    var = {k: np.zeros(n) for k in outputs}
    for name, u_i in u.items():
        u_i = np.broadcast_to(np.asarray(u_i, dtype=float), (n,))
        if not np.any(u_i > 0):
            continue
        step = (
            u_i
            if steps is None or name not in steps
            else np.broadcast_to(np.asarray(steps[name], float), (n,))
        )
        plus = dict(inputs)
        minus = dict(inputs)
        plus[name] = inputs[name] + step
        minus[name] = inputs[name] - step
        fp, fm = func(plus), func(minus)
        for k in outputs:
            a, b = np.asarray(fp[k], float), np.asarray(fm[k], float)
            with np.errstate(invalid="ignore", divide="ignore"):
                c = (a - b) / (2.0 * step)
                one = ~(np.isfinite(a) & np.isfinite(b))
                if one.any():
                    if base is None:
                        base = func(inputs)
                    y0 = np.asarray(base[k], float)
                    c = np.where(one & np.isfinite(a), (a - y0) / step, c)
                    c = np.where(one & ~np.isfinite(a) & np.isfinite(b), (y0 - b) / step, c)
                var[k] = var[k] + np.where(u_i > 0, (c * u_i) ** 2, 0.0)
    return {k: np.sqrt(v) for k, v in var.items()}


def _perturbed_states(p, t, step, which, mask):
    """The two states of a central difference in ``which`` ("p" or "t") and where each is
    superheated within ``mask``: (p+, p-, t+, t-, ok+, ok-). A temperature step shares one
    t_sat(p) between both states."""
    if which == "t":
        pp, pm, tp, tm = p, p, t + step, t - step
        ts = _saturation_t(p, mask & np.isfinite(p))
        okp = _superheated(pp, tp, mask & np.isfinite(pp), ts)
        okm = _superheated(pm, tm, mask & np.isfinite(pm), ts)
    else:
        pp, pm, tp, tm = p + step, p - step, t, t
        okp = _superheated(pp, tp, mask & np.isfinite(pp))
        okm = _superheated(pm, tm, mask & np.isfinite(pm))
    return pp, pm, tp, tm, okp, okm


def _pt_derivative(func, p, t, step, which, f0, mask):
    """d func / d(which) at (p, t) by a central difference of the vectorised property
    function; one-sided where one perturbed state is not superheated (or invalid), NaN where
    neither is. ``which`` is "p" or "t"; ``step`` in that variable's unit."""
    pp, pm, tp, tm, okp, okm = _perturbed_states(p, t, step, which, mask)
    fp = _call(func, okp, pp, tp)
    fm = _call(func, okm, pm, tm)
    okp &= np.isfinite(fp)
    okm &= np.isfinite(fm)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(
            okp & okm,
            (fp - fm) / (2.0 * step),
            np.where(okp, (fp - f0) / step, np.where(okm, (f0 - fm) / step, np.nan)),
        )


def _call_slopes(mask, p, t):
    """``steam.hs_slopes_pt`` on the points selected by ``mask``; NaN elsewhere."""
    n = mask.shape[0]
    out = {k: np.full(n, np.nan) for k in ("h", "s", "dh_dt", "ds_dt", "dh_dp", "ds_dp")}
    if mask.any():
        got = steam.hs_slopes_pt(p[mask], t[mask])
        for k, v in got.items():
            out[k][mask] = v
    return out


def _call_hs(mask, p, t):
    """h and s (``steam.hs_pt``, one pass) on the points selected by ``mask``; NaN elsewhere."""
    h = np.full(mask.shape, np.nan)
    s = np.full(mask.shape, np.nan)
    if mask.any():
        h[mask], s[mask] = steam.hs_pt(p[mask], t[mask])
    return h, s


class _InletStates:
    """h and s of (p, T) states already evaluated within one ``evaluate`` call, found again
    by value: the LP dry group and the LP chain share the crossover inlet, so the LP chain
    finds its unperturbed inlet state here (the LP dry group's uncertainty uses analytic
    slopes and perturbs nothing; the LP chain's own difference states are kept too, for the
    re-evaluations that share them). Values are those of ``_call_hs`` (the IF97 sums are per
    point, so a state computed on a larger mask is the same bit for bit)."""

    def __init__(self):
        self._entries = []

    def add(self, p, t, mask, h, s):
        self._entries.append((p, t, mask.copy(), h, s))

    def get(self, mask, p, t):
        """Like ``_call_hs(mask, p, t)``: h, s where ``mask`` holds, NaN elsewhere."""
        h = np.full(mask.shape, np.nan)
        s = np.full(mask.shape, np.nan)
        todo = mask.copy()
        for ep, et, em, eh, es in self._entries:
            if not todo.any():
                break
            if ep.shape != p.shape or not (
                np.array_equal(ep, p, equal_nan=True) and np.array_equal(et, t, equal_nan=True)
            ):
                continue
            hit = todo & em
            h[hit], s[hit] = eh[hit], es[hit]
            todo &= ~em
        if todo.any():
            h[todo], s[todo] = steam.hs_pt(p[todo], t[todo])
            self.add(p, t, mask, h, s)
        return h, s


def _pt_derivative_hs(p, t, step, which, h0, s0, mask, inlet_states=None):
    """d h / d(which) and d s / d(which) at (p, t): the same central (or one-sided)
    differences as ``_pt_derivative`` of ``steam.h_pt`` and of ``steam.s_pt``, bit for bit,
    from one h-and-s evaluation per perturbed state and, for a temperature step, one
    saturation temperature shared by both states (calc/DECISIONS.md, "Speed of the kernels")."""
    pp, pm, tp, tm, okp, okm = _perturbed_states(p, t, step, which, mask)
    if inlet_states is None:
        hp_, sp_ = _call_hs(okp, pp, tp)
        hm_, sm_ = _call_hs(okm, pm, tm)
    else:
        hp_, sp_ = inlet_states.get(okp, pp, tp)
        hm_, sm_ = inlet_states.get(okm, pm, tm)
    out = []
    for fp, fm, f0 in ((hp_, hm_, h0), (sp_, sm_, s0)):
        okp_f = okp & np.isfinite(fp)
        okm_f = okm & np.isfinite(fm)
        with np.errstate(invalid="ignore", divide="ignore"):
            out.append(
                np.where(
                    okp_f & okm_f,
                    (fp - fm) / (2.0 * step),
                    np.where(okp_f, (fp - f0) / step, np.where(okm_f, (f0 - fm) / step, np.nan)),
                )
            )
    return out[0], out[1]


def _section_uncertainty(p_in, t_in, p_out, t_out, base, u, steps, inlet_states=None):
    """Standard uncertainty of a superheated section's efficiency (GUM first order).

    Same law as ``propagate_uncertainty``, with the sensitivity coefficients from the
    partial derivatives of h and s at the inlet and of h at the outlet: analytic where
    ``base`` carries them (``_section_core(..., end_state=True)``: IF97 regions 1 and 2, from
    cp and (dv/dT)_p of the Gibbs equations), else a central difference of the property
    functions that input enters (region 3 and 5 states). The isentropic end point follows by
    dh = T ds + v dp at constant p_out (dh_s = T_s ds_in) and constant s_in (dh_s = v_s
    dp_out), exact to the first order; the analytic and the differenced coefficients agree
    within the curvature over one uncertainty step (tests; speed: calc/DECISIONS.md, "Speed of the kernels").

    ``u`` and ``steps``: dicts with keys "p_in", "t_in", "p_out", "t_out" (arrays).
    ``inlet_states``: an ``_InletStates`` that keeps the inlet states for later reuse."""
    ok = base["reason"] == OK
    if inlet_states is not None:
        inlet_states.add(
            p_in, t_in, ok, np.where(ok, base["h_in"], np.nan), np.where(ok, base["s_in"], np.nan)
        )
    h1, s1, h2, h2s = base["h_in"], base["s_in"], base["h_out"], base["h_out_isentropic"]
    eta = base["efficiency"]
    d = h1 - h2s
    if "t_out_isentropic" in base:
        # T and v of the end point from the solve that gave h2s (``_section_core(...,
        # end_state=True)``): within 1e-13 relative of re-solving T(p, h) and then v(p, T).
        t2s, v2s = base["t_out_isentropic"], base["v_out_isentropic"]
    else:
        t2s = _call(steam.t_ph, ok, p_out, h2s)
        wet2 = ok & (p_out < P_CRIT)
        hg2 = _call(steam.h_sat_vapour, wet2, p_out)
        with np.errstate(invalid="ignore"):
            wet2 &= h2s <= hg2
        v2s = _call(steam.v_pt, ok & ~wet2, p_out, t2s)
        if wet2.any():
            v2s[wet2] = _call(steam.v_ph, wet2, p_out, h2s)[wet2]
    slopes_in, slopes_out = base.get("slopes_in"), base.get("slopes_out")
    var = np.zeros(p_in.size)
    for which, pv in (("t", "t_in"), ("p", "p_in")):
        if not np.any(u[pv] > 0):
            continue
        if slopes_in is not None:
            dh1, ds1 = slopes_in[f"dh_d{which}"], slopes_in[f"ds_d{which}"]
            fd = ok & ~(np.isfinite(dh1) & np.isfinite(ds1))
        else:
            dh1 = ds1 = np.full(p_in.size, np.nan)
            fd = ok
        if fd.any():  # outside IF97 regions 1 and 2 (or no analytic slopes): differences
            fdh, fds = _pt_derivative_hs(p_in, t_in, steps[pv], which, h1, s1, fd, inlet_states)
            dh1, ds1 = np.where(fd, fdh, dh1), np.where(fd, fds, ds1)
        dh2s = t2s * ds1
        c = (dh1 - eta * (dh1 - dh2s)) / d
        var += (c * u[pv]) ** 2
    for which, pv in (("t", "t_out"), ("p", "p_out")):
        if not np.any(u[pv] > 0):
            continue
        if slopes_out is not None:
            dh2 = slopes_out[f"dh_d{which}"]
            fd = ok & ~np.isfinite(dh2)
        else:
            dh2 = np.full(p_in.size, np.nan)
            fd = ok
        if fd.any():
            dh2 = np.where(fd, _pt_derivative(steam.h_pt, p_out, t_out, steps[pv], which, h2, fd), dh2)
        # kJ/kg per MPa: v [m3/kg] x 1 MPa = 1000 kJ/kg
        dh2s = 1000.0 * v2s if which == "p" else 0.0
        c = (-dh2 + eta * dh2s) / d
        var += (c * u[pv]) ** 2
    return np.where(ok, np.sqrt(var), np.nan)


def _fd_steps(u_roles, inputs):
    steps = {}
    for role, u in u_roles.items():
        q = ROLE_QUANTITY[role]
        floor = _MIN_STEP_ABS[q] + _MIN_STEP_REL[q] * np.abs(inputs[role])
        steps[role] = np.maximum(np.nan_to_num(u, nan=0.0), floor)
    return steps


# --------------------------------------------------------------------------------------------
# Orchestration over a frame of role columns
# --------------------------------------------------------------------------------------------

#: Column name -> unit of every figure column of ``SectionResults.to_frame()``.
FIGURE_UNITS = {name: unit for name, unit, _ in FIGURE_FIELDS}


@dataclass
class SectionResults:
    """Section figures of a frame of readings; every Series shares the frame's index.

    Attributes
    ----------
    hp_efficiency, ip_efficiency, lp_dry_efficiency, lp_efficiency, lp_used_energy_efficiency : Series
        Efficiencies as fractions [-].
    hp_efficiency_u, ip_efficiency_u, lp_dry_efficiency_u, lp_efficiency_u, lp_used_energy_efficiency_u : Series
        Their standard uncertainties (k = 1) [-]; NaN when uncertainty is off.
    hp_enthalpy_drop, ip_enthalpy_drop, lp_dry_enthalpy_drop, lp_enthalpy_drop : Series
        Actual enthalpy drops [kJ/kg].
    hp_isentropic_drop, ip_isentropic_drop, lp_dry_isentropic_drop, lp_isentropic_drop : Series
        Isentropic enthalpy drops [kJ/kg].
    hp_share, ip_share, lp_share : Series
        Share of the expansion-line drop HP + IP + LP (crossover -> ELEP), per kg [-].
    lp_saturation_p : Series
        Pressure where the LP expansion line crosses saturation [MPa].
    lp_elep, lp_elep_u, lp_ueep, lp_ueep_u : Series
        ELEP and UEEP enthalpies and their standard uncertainties [kJ/kg].
    lp_x, lp_moisture, lp_moisture_u : Series
        Vapour fraction, moisture and its uncertainty at the ELEP [-] (fractions).
    lp_exhaust_loss : Series
        Wetness-corrected exhaust loss [kJ/kg].
    lp_annulus_velocity : Series
        Last-stage annulus velocity [m/s].
    lp_estimate : Series
        1.0 where the LP efficiency, used-energy efficiency, ELEP, UEEP and moisture follow
        from an assumed LP efficiency (the expansion: a design value, or the LP dry group's
        efficiency taken for the whole LP), so that they are estimates whose ``_u`` includes
        the band of that assumption; 0.0 where the energy balance gives them [-].
    reason : Series
        Packed reason codes (int64), 4 bits per group of ``REASON_GROUPS``; 0 = all valid.
    lp_mode : str
        "expansion" or "energy_balance": how the LP exhaust figures were obtained.
    notes : tuple of str
        What was switched off and why (missing roles, missing parameters).
    """

    hp_efficiency: pd.Series
    hp_efficiency_u: pd.Series
    hp_enthalpy_drop: pd.Series
    hp_isentropic_drop: pd.Series
    hp_share: pd.Series
    ip_efficiency: pd.Series
    ip_efficiency_u: pd.Series
    ip_enthalpy_drop: pd.Series
    ip_isentropic_drop: pd.Series
    ip_share: pd.Series
    lp_dry_efficiency: pd.Series
    lp_dry_efficiency_u: pd.Series
    lp_dry_enthalpy_drop: pd.Series
    lp_dry_isentropic_drop: pd.Series
    lp_efficiency: pd.Series
    lp_efficiency_u: pd.Series
    lp_used_energy_efficiency: pd.Series
    lp_used_energy_efficiency_u: pd.Series
    lp_enthalpy_drop: pd.Series
    lp_isentropic_drop: pd.Series
    lp_share: pd.Series
    lp_saturation_p: pd.Series
    lp_elep: pd.Series
    lp_elep_u: pd.Series
    lp_ueep: pd.Series
    lp_ueep_u: pd.Series
    lp_x: pd.Series
    lp_moisture: pd.Series
    lp_moisture_u: pd.Series
    lp_exhaust_loss: pd.Series
    lp_annulus_velocity: pd.Series
    lp_estimate: pd.Series
    reason: pd.Series
    lp_mode: str
    notes: tuple

    def to_frame(self):
        """All figures as one DataFrame (frame's index), plus a constant ``lp_mode`` column."""
        cols = {name: getattr(self, name) for name, _, _ in FIGURE_FIELDS}
        df = pd.DataFrame(cols)
        df["lp_mode"] = self.lp_mode
        return df

    def reasons(self):
        """Plain-language reasons per row where any figure is NaN (Series of lists)."""
        return self.reason.map(reason_names)


_HP = ("throttle_p", "throttle_t", "cold_reheat_p", "cold_reheat_t")
_IP = ("hot_reheat_p", "hot_reheat_t", "crossover_p", "crossover_t")
_LPD = ("crossover_p", "crossover_t", "lp_extraction_p", "lp_extraction_t")
_LP_EXP = ("crossover_p", "crossover_t", "condenser_p")


def _column(frame, role, n):
    if role in frame.columns:
        col = frame[role]
        try:
            a = col.to_numpy(dtype=float, na_value=np.nan)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"frame column {role!r}: expected numbers, found dtype {col.dtype}") from exc
        return np.where(np.isinf(a), np.nan, a)  # +/-inf counts as missing
    return np.full(n, np.nan)


def _section_group(inp, roles, end_state=False):
    return _section_core(*(inp[r] for r in roles), end_state=end_state)


def _lp_figures(inp, cfg):
    """The whole LP exhaust chain for one set of inputs (used for values and for the
    finite-difference re-evaluations). Returns dict of flat arrays."""
    n = inp["crossover_p"].size
    p_in, t_in, p_exh = inp["crossover_p"], inp["crossover_t"], inp["condenser_p"]
    # Exhaust saturation values depend on the condenser pressure only: reuse them across the
    # finite-difference re-evaluations that leave it unchanged (cache local to one evaluate).
    cache = cfg["sat_cache"]
    hit = cache.get(id(p_exh))
    if hit is not None and hit[0] is p_exh:
        sat, vols = hit[1], hit[2]
    else:
        valid_p = np.isfinite(p_exh) & (p_exh > 0)
        sat, vols = _exhaust_states(p_exh, valid_p)
        cache[id(p_exh)] = (p_exh, sat, vols)
    flow = (
        inp["main_steam_flow"] * cfg["lp_exhaust_flow_fraction"]
        if cfg["lp_exhaust_flow_fraction"]
        else np.full(n, np.nan)
    )
    if cfg["mode"] == "expansion":
        # The expansion does not depend on the flow: a re-evaluation that changes only the
        # main steam flow (its uncertainty) reuses the expansion of the same inputs.
        key = tuple(inp[k] for k in (_LP_EXP + _LPD[2:]))
        done = cfg["lp_core_cache"]
        if done is not None and all(a is b for a, b in zip(done[0], key, strict=True)):
            r = done[1]
        else:
            if cfg["eta_source"] == "measured":
                eta = _section_group(inp, _LPD)["efficiency"]
            else:
                eta = np.full(n, cfg["eta_lp_design"])
            eta = eta + cfg.get("eta_shift", 0.0)  # the band of the assumed efficiency
            r = _lp_core(
                p_in, t_in, p_exh, eta, cfg["baumann"], exhaust_sat=sat, inlet_states=cfg.get("inlet_states")
            )
            if done is None:
                cfg["lp_core_cache"] = (key, r)
        lp_reason = r["reason"].copy()
        if cfg["eta_source"] == "measured":
            lp_reason[lp_reason == NO_DRY_EFFICIENCY] = UPSTREAM_INVALID
        vel, loss, ue_reason = _exhaust(
            p_exh, r["h_elep"], r["moisture"], flow, cfg["annulus_area"], cfg["curve"], sat, vols
        )
        ueep = np.where(ue_reason == OK, r["h_elep"] + loss, np.nan)
        h_in, h_s, h_elep, y = r["h_in"], r["h_isentropic"], r["h_elep"], r["moisture"]
        p_wet = r["p_wet"]
        hp_drop = ip_drop = None
    else:
        # A re-evaluation for one input's uncertainty leaves the other inputs' arrays as they
        # are (same objects): the HP and IP sections and the LP inlet block whose inputs it
        # does not touch are taken from the first evaluation (cache local to one evaluate).
        # About half the time of an energy-balance evaluate (calc/DECISIONS.md, "Speed of the kernels").
        parts = cfg.setdefault("eb_cache", {})

        def cached(name, keys, compute):
            key = tuple(inp[k] for k in keys)
            hit = parts.get(name)
            if hit is not None and all(x is y for x, y in zip(hit[0], key, strict=True)):
                return hit[1]
            value = compute()
            if hit is None:
                parts[name] = (key, value)
            return value

        hp = cached("hp", _HP, lambda: _section_group(inp, _HP))
        ip = cached("ip", _IP, lambda: _section_group(inp, _IP))
        hp_drop, ip_drop = hp["enthalpy_drop"], ip["enthalpy_drop"]

        # LP inlet and isentropic end first (they do not depend on the HP and IP figures).
        def lp_inlet():
            ue_reason = np.zeros(n, dtype=np.int64)
            fin = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_exh)
            _mark(ue_reason, ~fin, MISSING_INPUT)
            with np.errstate(invalid="ignore"):
                _mark(
                    ue_reason,
                    (p_in <= 0) | (p_exh <= 0) | (t_in <= 0) | (t_in > T_MAX) | (p_in > LP_P_MAX),
                    OUT_OF_RANGE,
                )
                _mark(ue_reason, p_exh >= p_in, PRESSURE_NOT_FALLING)
            ok = ue_reason == OK
            _mark(ue_reason, ok & ~_superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
            ok = ue_reason == OK
            h_in, s_in = _call_hs(ok, p_in, t_in)
            with np.errstate(invalid="ignore"):
                wet_s = ok & (s_in <= sat[3]) & (s_in >= sat[2])
                h_s = np.where(wet_s, _wet_isentropic(*sat, s_in), np.nan)
            h_s[ok & ~wet_s] = _call(steam.h_ps, ok & ~wet_s, p_exh, s_in)[ok & ~wet_s]
            _mark(ue_reason, ok & ~(np.isfinite(h_in) & np.isfinite(h_s)), OUT_OF_RANGE)
            return ue_reason, h_in, h_s

        ue_reason, h_in, h_s = cached("lp_inlet", _LP_EXP, lp_inlet)
        ue_reason = ue_reason.copy()  # marked further below; the cached one stays as it was
        _mark(
            ue_reason, ~np.isfinite(inp["gross_output"]) | ~np.isfinite(inp["main_steam_flow"]), MISSING_INPUT
        )
        _mark(ue_reason, (hp["reason"] != OK) | (ip["reason"] != OK), UPSTREAM_INVALID)
        with np.errstate(invalid="ignore"):
            _mark(ue_reason, ~(inp["main_steam_flow"] > 0), OUT_OF_RANGE)
        ueep = energy_balance_ueep(
            inp["gross_output"],
            cfg["losses_mw"],
            inp["main_steam_flow"],
            hp_drop,
            ip_drop,
            h_in,
            cfg["flow_fractions"],
        )
        with np.errstate(invalid="ignore"):
            _mark(ue_reason, ~((ueep < h_in) & (ueep >= h_s)), ENERGY_BALANCE_IMPLAUSIBLE)
        ueep = np.where(ue_reason == OK, ueep, np.nan)
        h_elep, y, vel, loss, lp_reason = _elep_from_ueep(
            p_exh, ueep, flow, cfg["annulus_area"], cfg["curve"], sat, vols
        )
        if cfg["annulus_area"] is None:
            loss = np.full(n, np.nan)
        p_wet = np.full(n, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        eff = (h_in - h_elep) / (h_in - h_s)
        used = (h_in - ueep) / (h_in - h_s)
    lp_ok = lp_reason == OK
    return {
        "lp_efficiency": np.where(lp_ok, eff, np.nan),
        "lp_used_energy_efficiency": np.where(ue_reason == OK, used, np.nan),
        "lp_enthalpy_drop": np.where(lp_ok, h_in - h_elep, np.nan),
        "lp_isentropic_drop": h_in - h_s,
        "lp_saturation_p": p_wet,
        "lp_elep": np.where(lp_ok, h_elep, np.nan),
        "lp_ueep": ueep,
        "lp_x": np.where(lp_ok, 1.0 - y, np.nan),
        "lp_moisture": np.where(lp_ok, y, np.nan),
        "lp_exhaust_loss": loss,
        "lp_annulus_velocity": vel,
        "lp_reason": lp_reason,
        "ueep_reason": ue_reason,
    }


def stage_group_weight(group_isentropic_drop, section_isentropic_drop, t_group_out, p_exhaust, eta_rest):
    """Points of a whole section's efficiency per point of the efficiency of its first stages.

    A stage group (the LP dry group: crossover to an LP extraction) that loses one point does
    ``0.01 dh_s,group`` less work per kg and leaves that energy in its exhaust. The stages
    after it expand from the hotter state and recover the part ``eta_rest (1 - T_exh / T_out)``
    of it: their isentropic drop grows by ``(1 - T_exh / T_out)`` per kJ/kg of inlet
    enthalpy at constant pressure, since ``(dh/ds)_p = T``. So

        weight = dh_s,group / dh_s,section x (1 - eta_rest (1 - T_exh / T_out)),

    with ``T_exh`` the saturation temperature at the exhaust pressure (a wet exhaust).
    Checked against a stage-by-stage integration with IF97 (tests/calc/test_sections.py).

    Parameters
    ----------
    group_isentropic_drop : array_like
        Isentropic drop of the group, inlet to its outlet pressure [kJ/kg].
    section_isentropic_drop : array_like
        Isentropic drop of the whole section, inlet to the exhaust pressure [kJ/kg].
    t_group_out : array_like
        Temperature at the group's outlet (the LP extraction) [K].
    p_exhaust : array_like
        Section exhaust (condenser) pressure, absolute [MPa].
    eta_rest : float or array_like
        Efficiency of the stages after the group [-].

    Returns
    -------
    ndarray or float
        The weight [-]; NaN where an input is missing or the weight falls outside (0, 1].
    """
    g = np.asarray(group_isentropic_drop, dtype=float)
    sec = np.asarray(section_isentropic_drop, dtype=float)
    t_out = np.asarray(t_group_out, dtype=float)
    p = np.atleast_1d(np.asarray(p_exhaust, dtype=float))
    ok = np.isfinite(p) & (p > 0.000611213) & (p < P_CRIT)
    t_exh = np.full(p.shape, np.nan)
    if ok.any():
        t_exh[ok] = steam.t_sat(p[ok])
    if np.ndim(p_exhaust) == 0:
        t_exh = t_exh[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = g / sec * (1.0 - np.asarray(eta_rest, dtype=float) * (1.0 - t_exh / t_out))
        w = np.where((w > 0) & (w <= 1), w, np.nan)
    return float(w) if w.ndim == 0 else w


def _add_assumption_uncertainty(out, base, inp, cfg, band, keys):
    """Combine into ``out[<key>_u]`` the uncertainty of the LP efficiency the expansion
    assumes: rectangular over +/- ``band``, u = band / sqrt(3) (JCGM 100:2008, 4.3.7),
    sensitivity by a central difference of the whole LP chain (one-sided where the upper
    step leaves (0, 1])."""
    u_eta = band / np.sqrt(3.0)
    hi = _lp_figures(inp, {**cfg, "eta_shift": u_eta, "lp_core_cache": None})
    lo = _lp_figures(inp, {**cfg, "eta_shift": -u_eta, "lp_core_cache": None})
    for k in keys:
        with np.errstate(invalid="ignore"):
            slope = np.where(np.isfinite(hi[k]), (hi[k] - lo[k]) / (2.0 * u_eta), (base[k] - lo[k]) / u_eta)
            out[f"{k}_u"] = np.hypot(out[f"{k}_u"], slope * u_eta)


#: ``evaluate`` works through longer frames in row blocks of this size: its temporaries then
#: stay in the caches (calc/DECISIONS.md, "Speed of the kernels").
EVALUATE_ROWS = 43_200


def evaluate(
    frame,
    *,
    eta_lp_design=ETA_LP_DESIGN_DEFAULT,
    eta_lp_band=ETA_LP_BAND_DEFAULT,
    lp_dry_efficiency_source="design",
    baumann=BAUMANN_DEFAULT,
    annulus_area=None,
    exhaust_loss_curve=None,
    lp_exhaust_flow_fraction=None,
    lp_mode="auto",
    flow_fractions=None,
    losses_mw=None,
    uncertainty=None,
):
    """HP, IP, LP dry-group and LP exhaust figures of every row of a role frame.

    Works the same on a frame of one-minute samples and on a frame of steady-window means
    (one row per window): each row is computed from its own readings.

    Parameters
    ----------
    frame : pandas.DataFrame
        One float column per role (``isentrope.daemon.roles``), internal units: pressures
        absolute [MPa], temperatures [K], ``gross_output`` [MW], ``main_steam_flow`` [kg/s].
        Other columns are ignored. A role column that is absent switches off the figures
        that need it (see ``SectionResults.notes``).
    eta_lp_design : float, optional
        LP dry efficiency for the expansion mode, in (0, 1] (default 0.88, typical; set the
        maker's design value) [-].
    eta_lp_band : float, optional
        Half-width of the band around the LP efficiency the expansion assumes (the design
        value, or the LP dry group's efficiency) in which the true one may lie, >= 0 (default
        0.02, +/- 2 points); its rectangular standard uncertainty, band / sqrt(3) (JCGM
        100:2008, 4.3.7), enters the ``_u`` of every LP figure the expansion gives [-].
    lp_dry_efficiency_source : {"design", "measured"}, optional
        "design" expands with ``eta_lp_design``; "measured" with the LP dry stage-group
        efficiency of the same row (needs the LP extraction roles; rows where it is NaN get
        NaN LP figures) [-].
    baumann : float, optional
        Baumann coefficient a, 0 switches the correction off (default 1.0, from memory) [-].
    annulus_area : float, optional
        Total last-stage annulus area of all LP exhaust ends [m2]. Without it the exhaust
        loss, the annulus velocity and the UEEP (expansion mode) or the ELEP and moisture
        (energy-balance mode) are NaN.
    exhaust_loss_curve : ExhaustLossCurve or sequence of (velocity, loss), optional
        Exhaust loss [kJ/kg] against annulus velocity [m/s]; default
        ``DEFAULT_EXHAUST_LOSS_CURVE`` (shape only, from memory): give the maker's curve.
    lp_exhaust_flow_fraction : float, optional
        LP exhaust (condenser) steam flow as a fraction of main steam flow, in (0, 1.5] [-].
    lp_mode : {"auto", "expansion", "energy_balance"}, optional
        How the LP exhaust end point is found. "auto" uses the energy balance when
        ``gross_output`` and ``main_steam_flow`` are in the frame and ``flow_fractions`` and
        ``losses_mw`` are given, the expansion otherwise.
    flow_fractions : FlowFractions or mapping {hp, ip, lp}, optional
        Effective section flows as fractions of main steam flow (energy balance) [-].
    losses_mw : float, optional
        Mechanical plus generator losses (energy balance) [MW].
    uncertainty : None, False or mapping, optional
        Per-role standard instrument uncertainties (k = 1). None uses the defaults
        (pressure 0.25 % of reading, temperature 1 K, flow 1 %, power 0.25 %; common
        practice); a mapping overrides roles (a number is an absolute uncertainty in the
        internal unit, or give ``InstrumentUncertainty(absolute, relative)``); False skips
        the propagation (the ``_u`` figures are NaN).

    Returns
    -------
    SectionResults
        Every figure as a Series on the frame's index, the packed reason codes, the LP mode
        used and notes on what was switched off.

    Raises
    ------
    ValueError
        On a bad parameter, a non-numeric role column, or an explicitly requested
        energy-balance mode whose roles or parameters are missing.

    References
    ----------
    ASME PTC 6-2004; Spencer, Cotton & Cannon (1963); JCGM 100:2008 (ISO GUM).
    """
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"frame: expected a pandas DataFrame of role columns, found {type(frame).__name__}")
    if len(frame) > EVALUATE_ROWS:
        # Row blocks: every figure is per row and every choice (mode, groups, notes) follows
        # from the columns, so the blocks give the figures of the whole (to the last bits of
        # the iterated solvers, as any other cut of the rows).
        kwargs = dict(
            eta_lp_design=eta_lp_design,
            eta_lp_band=eta_lp_band,
            lp_dry_efficiency_source=lp_dry_efficiency_source,
            baumann=baumann,
            annulus_area=annulus_area,
            exhaust_loss_curve=exhaust_loss_curve,
            lp_exhaust_flow_fraction=lp_exhaust_flow_fraction,
            lp_mode=lp_mode,
            flow_fractions=flow_fractions,
            losses_mw=losses_mw,
            uncertainty=uncertainty,
        )
        parts = [
            evaluate(frame.iloc[i : i + EVALUATE_ROWS], **kwargs) for i in range(0, len(frame), EVALUATE_ROWS)
        ]
        series = {name: pd.concat([getattr(p, name) for p in parts]) for name, _, _ in FIGURE_FIELDS}
        return SectionResults(**series, lp_mode=parts[0].lp_mode, notes=parts[0].notes)
    a = _check_baumann(baumann)
    band = float(eta_lp_band)
    if not (np.isfinite(band) and 0 <= band < 0.5):
        raise ValueError(f"eta_lp_band: expected a number in [0, 0.5), found {eta_lp_band!r}")
    eta_d = float(eta_lp_design) if eta_lp_design is not None else np.nan
    if lp_dry_efficiency_source not in ("design", "measured"):
        raise ValueError(
            f"lp_dry_efficiency_source: expected 'design' or 'measured', found {lp_dry_efficiency_source!r}"
        )
    if lp_dry_efficiency_source == "design" and not (np.isfinite(eta_d) and 0 < eta_d <= 1):
        raise ValueError(f"eta_lp_design: expected a number in (0, 1], found {eta_lp_design!r}")
    if lp_mode not in ("auto", "expansion", "energy_balance"):
        raise ValueError(f"lp_mode: expected 'auto', 'expansion' or 'energy_balance', found {lp_mode!r}")
    if annulus_area is not None:
        area = float(annulus_area)
        if not (np.isfinite(area) and area > 0):
            raise ValueError(f"annulus_area: expected a positive area [m2], found {annulus_area!r}")
        annulus_area = area
    if exhaust_loss_curve is None:
        curve = DEFAULT_EXHAUST_LOSS_CURVE
    elif isinstance(exhaust_loss_curve, ExhaustLossCurve):
        curve = exhaust_loss_curve
    else:
        curve = ExhaustLossCurve.from_points(exhaust_loss_curve)
    if lp_exhaust_flow_fraction is not None:
        f = float(lp_exhaust_flow_fraction)
        if not (np.isfinite(f) and 0 < f <= 1.5):
            raise ValueError(
                f"lp_exhaust_flow_fraction: expected a number in (0, 1.5], found {lp_exhaust_flow_fraction!r}"
            )
        lp_exhaust_flow_fraction = f
    ff = FlowFractions.coerce(flow_fractions) if flow_fractions is not None else None
    if losses_mw is not None:
        lm = float(losses_mw)
        if not (np.isfinite(lm) and lm >= 0):
            raise ValueError(f"losses_mw: expected a number >= 0 [MW], found {losses_mw!r}")
        losses_mw = lm
    u_roles = _resolve_uncertainty(uncertainty)

    n = len(frame)
    idx = frame.index
    cols = set(frame.columns)
    inp = {role: _column(frame, role, n) for role in ROLE_QUANTITY}
    notes = []

    eb_roles = {"gross_output", "main_steam_flow"}
    eb_missing = sorted(eb_roles - cols)
    eb_params_missing = [name for name, v in (("flow_fractions", ff), ("losses_mw", losses_mw)) if v is None]
    if lp_mode == "energy_balance":
        if eb_missing or eb_params_missing:
            raise ValueError(
                "lp_mode='energy_balance' needs the roles gross_output and main_steam_flow and the "
                f"parameters flow_fractions and losses_mw; missing roles {eb_missing}, missing parameters {eb_params_missing}"
            )
        mode = "energy_balance"
    elif lp_mode == "auto" and not eb_missing and not eb_params_missing:
        mode = "energy_balance"
    else:
        mode = "expansion"
        if lp_mode == "auto":
            notes.append(
                "LP exhaust from the expansion with the Baumann correction; the energy balance needs "
                f"roles {sorted(eb_roles)} (missing {eb_missing}) and parameters flow_fractions, losses_mw "
                f"(missing {eb_params_missing})"
            )

    def missing(roles):
        return sorted(set(roles) - cols)

    groups_missing = {
        "hp": missing(_HP),
        "ip": missing(_IP),
        "lp_dry": missing(_LPD),
        "lp": missing(_LP_EXP if mode == "expansion" else _LP_EXP + _HP + _IP + tuple(eb_roles)),
    }
    if lp_dry_efficiency_source == "measured" and mode == "expansion":
        groups_missing["lp"] = sorted(set(groups_missing["lp"]) | set(groups_missing["lp_dry"]))
    for g, m in groups_missing.items():
        if m:
            notes.append(f"{g} figures off: roles {m} not in the frame")
    if annulus_area is None:
        notes.append(
            "no annulus_area: exhaust loss, annulus velocity and "
            + ("UEEP" if mode == "expansion" else "ELEP, moisture and LP efficiency")
            + " are NaN"
        )
    if lp_exhaust_flow_fraction is None or "main_steam_flow" not in cols:
        notes.append(
            "exhaust loss needs main_steam_flow and lp_exhaust_flow_fraction: "
            + ("UEEP" if mode == "expansion" else "ELEP and moisture")
            + " are NaN"
        )
    if u_roles is None:
        notes.append("uncertainty propagation off: the _u figures are NaN")

    out = {}
    codes = {}
    inlet_states = _InletStates()  # crossover states shared by the LP dry group and LP chain

    def nan():
        return np.full(n, np.nan)

    # HP, IP, LP dry group
    for g, roles in (("hp", _HP), ("ip", _IP), ("lp_dry", _LPD)):
        if groups_missing[g]:
            codes[g] = np.full(n, NOT_MAPPED, dtype=np.int64)
            for k in ("efficiency", "efficiency_u", "enthalpy_drop", "isentropic_drop"):
                out[f"{g}_{k}"] = nan()
            continue
        r = _section_group(inp, roles, end_state=u_roles is not None)
        codes[g] = r["reason"]
        out[f"{g}_efficiency"] = r["efficiency"]
        good = r["reason"] == OK
        out[f"{g}_enthalpy_drop"] = np.where(good, r["enthalpy_drop"], np.nan)
        out[f"{g}_isentropic_drop"] = np.where(good, r["isentropic_drop"], np.nan)
        if u_roles is None:
            out[f"{g}_efficiency_u"] = nan()
        else:
            sub = {k: inp[k] for k in roles}
            uu = {k: u_roles[k].of(inp[k]) for k in roles}
            st = _fd_steps(uu, sub)
            keys = ("p_in", "t_in", "p_out", "t_out")
            out[f"{g}_efficiency_u"] = _section_uncertainty(
                *(inp[k] for k in roles),
                r,
                {kk: uu[k] for kk, k in zip(keys, roles, strict=True)},
                {kk: st[k] for kk, k in zip(keys, roles, strict=True)},
                inlet_states if g == "lp_dry" else None,
            )

    # LP exhaust
    lp_keys = (
        "lp_efficiency",
        "lp_used_energy_efficiency",
        "lp_enthalpy_drop",
        "lp_isentropic_drop",
        "lp_saturation_p",
        "lp_elep",
        "lp_ueep",
        "lp_x",
        "lp_moisture",
        "lp_exhaust_loss",
        "lp_annulus_velocity",
    )
    lp_u_keys = ("lp_efficiency", "lp_used_energy_efficiency", "lp_elep", "lp_ueep", "lp_moisture")
    if groups_missing["lp"]:
        codes["lp"] = np.full(n, NOT_MAPPED, dtype=np.int64)
        codes["lp_ueep"] = np.full(n, NOT_MAPPED, dtype=np.int64)
        for k in lp_keys + tuple(f"{k}_u" for k in lp_u_keys):
            out[k] = nan()
    else:
        cfg = {
            "mode": mode,
            "eta_source": lp_dry_efficiency_source,
            "eta_lp_design": eta_d,
            "baumann": a,
            "annulus_area": annulus_area,
            "curve": curve,
            "lp_exhaust_flow_fraction": lp_exhaust_flow_fraction,
            "flow_fractions": ff,
            "losses_mw": losses_mw,
            "sat_cache": {},
            "lp_core_cache": None,
            "inlet_states": inlet_states,
        }
        r = _lp_figures(inp, cfg)
        codes["lp"] = r["lp_reason"]
        codes["lp_ueep"] = r["ueep_reason"]
        for k in lp_keys:
            out[k] = r[k]
        if u_roles is None:
            for k in lp_u_keys:
                out[f"{k}_u"] = nan()
        else:
            if mode == "expansion":
                roles = list(_LP_EXP)
                if lp_dry_efficiency_source == "measured":
                    roles += ["lp_extraction_p", "lp_extraction_t"]
                if (
                    annulus_area is not None
                    and lp_exhaust_flow_fraction is not None
                    and "main_steam_flow" in cols
                ):
                    roles.append("main_steam_flow")
            else:
                roles = sorted(set(_LP_EXP + _HP + _IP) | eb_roles)
            uu = {k: u_roles[k].of(inp[k]) for k in roles}
            res = propagate_uncertainty(
                lambda d: _lp_figures({**inp, **d}, cfg),
                {k: inp[k] for k in roles},
                uu,
                lp_u_keys,
                steps=_fd_steps(uu, {k: inp[k] for k in roles}),
                base=r,
            )
            for k in lp_u_keys:
                out[f"{k}_u"] = np.where(np.isfinite(out[k]), res[k], np.nan)
            if mode == "expansion" and band > 0:
                _add_assumption_uncertainty(out, r, inp, cfg, band, lp_u_keys)

    # Shares of the expansion-line drop (per kg): HP + IP + LP to the ELEP.
    total = out["hp_enthalpy_drop"] + out["ip_enthalpy_drop"] + out["lp_enthalpy_drop"]
    with np.errstate(invalid="ignore", divide="ignore"):
        for g in ("hp", "ip", "lp"):
            out[f"{g}_share"] = out[f"{g}_enthalpy_drop"] / total

    if groups_missing["lp_dry"]:
        codes["lp_dry"] = np.full(n, NOT_MAPPED, dtype=np.int64)
    out["lp_estimate"] = np.full(n, 1.0 if mode == "expansion" else 0.0)
    out["reason"] = _pack_reason(codes)
    series = {name: pd.Series(out[name], index=idx, name=name) for name, _, _ in FIGURE_FIELDS}
    return SectionResults(**series, lp_mode=mode, notes=tuple(notes))


__all__ = [
    "OK",
    "MISSING_INPUT",
    "OUT_OF_RANGE",
    "PRESSURE_NOT_FALLING",
    "INLET_NOT_SUPERHEATED",
    "OUTLET_NOT_SUPERHEATED",
    "NO_ENTHALPY_DROP",
    "NO_CONVERGENCE",
    "NO_DRY_EFFICIENCY",
    "NOT_MAPPED",
    "NO_EXHAUST_DATA",
    "VELOCITY_OUTSIDE_CURVE",
    "ENERGY_BALANCE_IMPLAUSIBLE",
    "UPSTREAM_INVALID",
    "BAUMANN_DEFAULT",
    "BAUMANN_MAX",
    "DEFAULT_UNCERTAINTY_BY_QUANTITY",
    "LP_P_MAX",
    "T_MAX",
    "ROLE_QUANTITY",
    "FIGURE_FIELDS",
    "DEFAULT_EXHAUST_LOSS_CURVE",
    "DEFAULT_EXHAUST_LOSS_POINTS",
    "ETA_LP_DESIGN_DEFAULT",
    "ETA_LP_BAND_DEFAULT",
    "ExhaustLossCurve",
    "FIGURE_UNITS",
    "FlowFractions",
    "InstrumentUncertainty",
    "LPExpansion",
    "REASON_GROUPS",
    "REASON_TEXT",
    "SectionExpansion",
    "SectionResults",
    "annulus_velocity",
    "decode_reason",
    "default_uncertainties",
    "energy_balance_ueep",
    "evaluate",
    "lp_expansion",
    "propagate_uncertainty",
    "reason_names",
    "section_efficiency",
    "section_expansion",
    "stage_group_weight",
    "wetness_corrected_exhaust_loss",
]
