"""LP expansion from a superheated inlet to the wet exhaust with the Baumann correction.

The dry expansion line of constant efficiency meets the saturated-vapour line at a pressure
found on a saturation table (``_crossing_pressure``); the wet part below it runs at the
Baumann-corrected efficiency, solved in closed form for the exhaust wetness.

References
----------
Baumann rule (calc/REFERENCES.md, from memory).
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from isentrope.calc import steam
from isentrope.calc.sections.exhaust import exhaust_saturation
from isentrope.calc.sections.inputs import T_MAX, Shape, call, call_hs, superheated
from isentrope.calc.sections.reasons import (
    INLET_NOT_SUPERHEATED,
    MISSING_INPUT,
    NO_CONVERGENCE,
    NO_DRY_EFFICIENCY,
    NO_ENTHALPY_DROP,
    OK,
    OUT_OF_RANGE,
    PRESSURE_NOT_FALLING,
    mark,
)

#: Default Baumann coefficient ``a`` [-]: wet-stage efficiency = dry efficiency
#: x (1 - a * mean wetness). Baumann rule, a about 1 (calc/REFERENCES.md, from memory).
BAUMANN_DEFAULT = 1.0
#: Largest Baumann coefficient accepted [-] (published values lie well below; common practice).
BAUMANN_MAX = 3.0


#: Saturation-crossing root finder (Illinois regula falsi on ln p): stop when the residual is
#: below this [kJ/kg], at most this many iterations (convergence is checked per point).
_CROSSING_TOL = 1e-7
_CROSSING_MAX_ITER = 60


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


def wet_isentropic(hf, hg, sf, sg, s):
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
        return h_in[i] - eta[i] * (h_in[i] - wet_isentropic(hf, hg, sf, sg, s_in[i])) - hg

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


def lp_core(p_in, t_in, p_exh, eta, a, exhaust_sat=None, inlet_states=None):
    """Flat float arrays in (a: scalar), dict of flat arrays out (see LPExpansion).
    ``exhaust_sat``: precomputed ``exhaust_saturation(p_exh, all-true)`` to reuse;
    ``inlet_states``: an ``InletStates`` to look the inlet h and s up in."""
    n = p_in.size
    reason = np.zeros(n, dtype=np.int64)
    finite = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_exh)
    mark(reason, ~finite, MISSING_INPUT)
    with np.errstate(invalid="ignore"):
        mark(
            reason,
            (p_in <= 0) | (p_exh <= 0) | (t_in <= 0) | (t_in > T_MAX) | (p_in > LP_P_MAX),
            OUT_OF_RANGE,
        )
        mark(reason, p_exh >= p_in, PRESSURE_NOT_FALLING)
        mark(reason, ~(np.isfinite(eta) & (eta > 0) & (eta <= 1)), NO_DRY_EFFICIENCY)
    ok = reason == OK
    mark(reason, ok & ~superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
    ok = reason == OK
    if inlet_states is None:
        h_in, s_in = call_hs(ok, p_in, t_in)
    else:
        h_in, s_in = inlet_states.get(ok, p_in, t_in)
    ok &= np.isfinite(h_in) & np.isfinite(s_in)
    if exhaust_sat is None:
        hf, hg, sf, sg = exhaust_saturation(p_exh, ok)
    else:
        hf, hg, sf, sg = exhaust_sat
    ok &= np.isfinite(hf) & np.isfinite(hg) & np.isfinite(sf) & np.isfinite(sg)
    # Isentropic end point: wet (the usual case) from the saturation values, else steam.h_ps.
    with np.errstate(invalid="ignore"):
        wet_s = ok & (s_in <= sg) & (s_in >= sf)
        h_s = np.where(wet_s, wet_isentropic(hf, hg, sf, sg, s_in), np.nan)
    dry_s = ok & ~wet_s
    if dry_s.any():
        h_s[dry_s] = call(steam.h_ps, dry_s, p_exh, s_in)[dry_s]
    ok &= np.isfinite(h_s)
    mark(reason, (reason == OK) & ~ok, OUT_OF_RANGE)
    with np.errstate(invalid="ignore"):
        mark(reason, ok & ~(h_in - h_s > 0), NO_ENTHALPY_DROP)
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
        mark(reason, failed, NO_CONVERGENCE)
        hfw, hgw, sfw, sgw = _sat_interp(np.log(pw))
        h_s_wet[iw] = wet_isentropic(hfw, hgw, sfw, sgw, s_in[iw])
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
        mark(reason, wet & ~((y >= 0) & (y < 1)), OUT_OF_RANGE)
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


def check_baumann(baumann):
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
    a = check_baumann(baumann)
    shape = Shape(("p_in", "t_in", "p_exhaust", "eta_dry"), (p_in, t_in, p_exhaust, eta_dry))
    r = lp_core(*shape.flat, a)
    return LPExpansion(**{k: shape.restore(v) for k, v in r.items()})
