"""Superheated sections: the enthalpy-drop efficiency of ASME PTC 6 (HP, IP, LP dry group).

efficiency = (h_in - h_out) / (h_in - h(p_out, s_in)), inlet and outlet fixed by their
measured p and T; and the weight of a stage group's efficiency in its whole section's.

References
----------
ASME PTC 6-2004, Steam Turbines (enthalpy-drop efficiency of a turbine section).
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from isentrope.calc import steam
from isentrope.calc.sections.inputs import P_CRIT, T_MAX, Shape, call, call_hs, call_slopes, superheated
from isentrope.calc.sections.reasons import (
    INLET_NOT_SUPERHEATED,
    MISSING_INPUT,
    NO_ENTHALPY_DROP,
    OK,
    OUT_OF_RANGE,
    OUTLET_NOT_SUPERHEATED,
    PRESSURE_NOT_FALLING,
    mark,
)


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


def section_core(p_in, t_in, p_out, t_out, end_state=False):
    """Flat float arrays in, dict of flat arrays out (see ``SectionExpansion``). With
    ``end_state`` also "t_out_isentropic" [K] and "v_out_isentropic" [m3/kg], the temperature
    and volume of the isentropic end point from the same solve that gives its enthalpy (for
    ``section_uncertainty``; the other figures are the same bit for bit), and "slopes_in",
    "slopes_out": dicts of the partial derivatives of h and s at the inlet and outlet
    (``steam.hs_slopes_pt``, NaN where not OK or outside IF97 regions 1 and 2)."""
    n = p_in.size
    reason = np.zeros(n, dtype=np.int64)
    finite = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_out) & np.isfinite(t_out)
    mark(reason, ~finite, MISSING_INPUT)
    with np.errstate(invalid="ignore"):
        mark(reason, (p_in <= 0) | (p_out <= 0) | (t_in <= 0) | (t_out <= 0), OUT_OF_RANGE)
        mark(reason, (t_in > T_MAX) | (t_out > T_MAX), OUT_OF_RANGE)
        mark(reason, p_out >= p_in, PRESSURE_NOT_FALLING)
    ok = reason == OK
    mark(reason, ok & ~superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
    ok = reason == OK
    mark(reason, ok & ~superheated(p_out, t_out, ok), OUTLET_NOT_SUPERHEATED)
    ok = reason == OK
    if end_state:
        # with the partial derivatives for the uncertainty (same h and s, bit for bit)
        slopes_in = call_slopes(ok, p_in, t_in)
        slopes_out = call_slopes(ok, p_out, t_out)
        h_in, s_in, h_out = slopes_in["h"], slopes_in["s"], slopes_out["h"]
    else:
        h_in, s_in = call_hs(ok, p_in, t_in)
        h_out = call(steam.h_pt, ok, p_out, t_out)
    ok &= np.isfinite(h_in) & np.isfinite(s_in) & np.isfinite(h_out)
    if end_state:
        h_s = np.full(n, np.nan)
        t_s = np.full(n, np.nan)
        v_s = np.full(n, np.nan)
        if ok.any():
            h_s[ok], t_s[ok], v_s[ok] = steam.end_state_ps(p_out[ok], s_in[ok])
    else:
        h_s = call(steam.h_ps, ok, p_out, s_in)
    mark(reason, (reason == OK) & ~(ok & np.isfinite(h_s)), OUT_OF_RANGE)
    drop = h_in - h_out
    drop_s = h_in - h_s
    with np.errstate(invalid="ignore"):
        mark(reason, (drop <= 0) | (drop_s <= 0), NO_ENTHALPY_DROP)
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


def section_of(inp, roles, end_state=False):
    """``section_core`` of the four arrays of ``inp`` (role -> flat array) named by ``roles``
    (inlet p, inlet T, outlet p, outlet T; e.g. ``inputs.HP_ROLES``)."""
    return section_core(*(inp[r] for r in roles), end_state=end_state)


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
    shape = Shape(("p_in", "t_in", "p_out", "t_out"), (p_in, t_in, p_out, t_out))
    r = section_core(*shape.flat)
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
