"""The LP exhaust chain of ``evaluate``: its options, the cache its re-evaluations share, and
its figures for one set of inputs.

``lp_chain_figures`` runs the whole chain (the expansion of ``lp`` with the assumed LP
efficiency and the Baumann rule, or the energy balance of ``exhaust``; then the exhaust loss,
ELEP, UEEP and moisture) on flat arrays of role values, for the values and for each
finite-difference re-evaluation of the uncertainty; ``add_assumption_uncertainty`` adds the
uncertainty of the assumed LP efficiency. Internal units: MPa (absolute), K, kJ/kg, kg/s, MW.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from isentrope.calc import steam
from isentrope.calc.sections.dry import section_of
from isentrope.calc.sections.exhaust import (
    ExhaustLossCurve,
    FlowFractions,
    elep_from_ueep,
    energy_balance_ueep,
    exhaust_figures,
    exhaust_states,
)
from isentrope.calc.sections.inputs import (
    HP_ROLES,
    IP_ROLES,
    LP_DRY_ROLES,
    LP_EXPANSION_ROLES,
    T_MAX,
    InletStates,
    call,
    call_hs,
    superheated,
)
from isentrope.calc.sections.lp import LP_P_MAX, lp_core, wet_isentropic
from isentrope.calc.sections.reasons import (
    ENERGY_BALANCE_IMPLAUSIBLE,
    INLET_NOT_SUPERHEATED,
    MISSING_INPUT,
    NO_DRY_EFFICIENCY,
    OK,
    OUT_OF_RANGE,
    PRESSURE_NOT_FALLING,
    UPSTREAM_INVALID,
    mark,
)

#: The figures of ``lp_chain_figures`` that ``evaluate`` returns, and those it gives a standard
#: uncertainty (``<figure>_u``).
LP_FIGURES = (
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
LP_UNCERTAIN_FIGURES = ("lp_efficiency", "lp_used_energy_efficiency", "lp_elep", "lp_ueep", "lp_moisture")


@dataclass(frozen=True)
class LPOptions:
    """How ``evaluate`` computes the LP exhaust chain: its checked arguments and the mode.

    Attributes
    ----------
    mode : str
        "expansion" (an assumed LP efficiency with the Baumann correction) or
        "energy_balance" (the UEEP from the generator output).
    eta_source : str
        "design" (``eta_lp_design``) or "measured" (the LP dry group's efficiency of the row).
    eta_lp_design : float
        LP dry efficiency of the expansion when ``eta_source`` is "design" [-].
    baumann : float
        Baumann coefficient a [-].
    annulus_area : float or None
        Total last-stage annulus area [m2]; None: no exhaust loss.
    curve : ExhaustLossCurve
        Exhaust loss [kJ/kg] against annulus velocity [m/s].
    lp_exhaust_flow_fraction : float or None
        LP exhaust flow as a fraction of main steam flow [-].
    flow_fractions : FlowFractions or None
        Effective section flows of the energy balance [-].
    losses_mw : float or None
        Mechanical plus generator losses of the energy balance [MW].
    eta_shift : float
        Added to the assumed LP efficiency (the band of that assumption) [-].
    """

    mode: str
    eta_source: str
    eta_lp_design: float
    baumann: float
    annulus_area: float | None
    curve: ExhaustLossCurve
    lp_exhaust_flow_fraction: float | None
    flow_fractions: FlowFractions | None
    losses_mw: float | None
    eta_shift: float = 0.0


@dataclass
class LPCache:
    """What the evaluations of the LP chain within one ``evaluate`` call share.

    Attributes
    ----------
    inlet_states : InletStates
        Crossover states, shared with the LP dry group.
    saturation : dict
        ``id(p_exh)`` -> (p_exh, saturation values, volumes) at the exhaust pressure.
    expansion : tuple or None
        (input arrays, ``lp_core`` result) of the first expansion, reused while the arrays
        are the same objects.
    energy_balance : dict
        Part name ("hp", "ip", "lp_inlet") -> (input arrays, value), likewise.
    """

    inlet_states: InletStates
    saturation: dict = field(default_factory=dict)
    expansion: tuple | None = None
    energy_balance: dict = field(default_factory=dict)


def lp_chain_figures(inp, opts: LPOptions, cache: LPCache):
    """The whole LP exhaust chain for one set of inputs (used for values and for the
    finite-difference re-evaluations). Returns dict of flat arrays."""
    n = inp["crossover_p"].size
    p_in, t_in, p_exh = inp["crossover_p"], inp["crossover_t"], inp["condenser_p"]
    # Exhaust saturation values depend on the condenser pressure only: reuse them across the
    # finite-difference re-evaluations that leave it unchanged (cache local to one evaluate).
    hit = cache.saturation.get(id(p_exh))
    if hit is not None and hit[0] is p_exh:
        sat, vols = hit[1], hit[2]
    else:
        valid_p = np.isfinite(p_exh) & (p_exh > 0)
        sat, vols = exhaust_states(p_exh, valid_p)
        cache.saturation[id(p_exh)] = (p_exh, sat, vols)
    flow = (
        inp["main_steam_flow"] * opts.lp_exhaust_flow_fraction
        if opts.lp_exhaust_flow_fraction
        else np.full(n, np.nan)
    )
    if opts.mode == "expansion":
        # The expansion does not depend on the flow: a re-evaluation that changes only the
        # main steam flow (its uncertainty) reuses the expansion of the same inputs.
        key = tuple(inp[k] for k in (LP_EXPANSION_ROLES + LP_DRY_ROLES[2:]))
        done = cache.expansion
        if done is not None and all(a is b for a, b in zip(done[0], key, strict=True)):
            r = done[1]
        else:
            if opts.eta_source == "measured":
                eta = section_of(inp, LP_DRY_ROLES)["efficiency"]
            else:
                eta = np.full(n, opts.eta_lp_design)
            eta = eta + opts.eta_shift  # the band of the assumed efficiency
            r = lp_core(
                p_in, t_in, p_exh, eta, opts.baumann, exhaust_sat=sat, inlet_states=cache.inlet_states
            )
            if done is None:
                cache.expansion = (key, r)
        lp_reason = r["reason"].copy()
        if opts.eta_source == "measured":
            lp_reason[lp_reason == NO_DRY_EFFICIENCY] = UPSTREAM_INVALID
        vel, loss, ue_reason = exhaust_figures(
            p_exh, r["h_elep"], r["moisture"], flow, opts.annulus_area, opts.curve, sat, vols
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
        parts = cache.energy_balance

        def cached(name, keys, compute):
            key = tuple(inp[k] for k in keys)
            hit = parts.get(name)
            if hit is not None and all(x is y for x, y in zip(hit[0], key, strict=True)):
                return hit[1]
            value = compute()
            if hit is None:
                parts[name] = (key, value)
            return value

        hp = cached("hp", HP_ROLES, lambda: section_of(inp, HP_ROLES))
        ip = cached("ip", IP_ROLES, lambda: section_of(inp, IP_ROLES))
        hp_drop, ip_drop = hp["enthalpy_drop"], ip["enthalpy_drop"]

        # LP inlet and isentropic end first (they do not depend on the HP and IP figures).
        def lp_inlet():
            ue_reason = np.zeros(n, dtype=np.int64)
            fin = np.isfinite(p_in) & np.isfinite(t_in) & np.isfinite(p_exh)
            mark(ue_reason, ~fin, MISSING_INPUT)
            with np.errstate(invalid="ignore"):
                mark(
                    ue_reason,
                    (p_in <= 0) | (p_exh <= 0) | (t_in <= 0) | (t_in > T_MAX) | (p_in > LP_P_MAX),
                    OUT_OF_RANGE,
                )
                mark(ue_reason, p_exh >= p_in, PRESSURE_NOT_FALLING)
            ok = ue_reason == OK
            mark(ue_reason, ok & ~superheated(p_in, t_in, ok), INLET_NOT_SUPERHEATED)
            ok = ue_reason == OK
            h_in, s_in = call_hs(ok, p_in, t_in)
            with np.errstate(invalid="ignore"):
                wet_s = ok & (s_in <= sat[3]) & (s_in >= sat[2])
                h_s = np.where(wet_s, wet_isentropic(*sat, s_in), np.nan)
            h_s[ok & ~wet_s] = call(steam.h_ps, ok & ~wet_s, p_exh, s_in)[ok & ~wet_s]
            mark(ue_reason, ok & ~(np.isfinite(h_in) & np.isfinite(h_s)), OUT_OF_RANGE)
            return ue_reason, h_in, h_s

        ue_reason, h_in, h_s = cached("lp_inlet", LP_EXPANSION_ROLES, lp_inlet)
        ue_reason = ue_reason.copy()  # marked further below; the cached one stays as it was
        mark(
            ue_reason, ~np.isfinite(inp["gross_output"]) | ~np.isfinite(inp["main_steam_flow"]), MISSING_INPUT
        )
        mark(ue_reason, (hp["reason"] != OK) | (ip["reason"] != OK), UPSTREAM_INVALID)
        with np.errstate(invalid="ignore"):
            mark(ue_reason, ~(inp["main_steam_flow"] > 0), OUT_OF_RANGE)
        ueep = energy_balance_ueep(
            inp["gross_output"],
            opts.losses_mw,
            inp["main_steam_flow"],
            hp_drop,
            ip_drop,
            h_in,
            opts.flow_fractions,
        )
        with np.errstate(invalid="ignore"):
            mark(ue_reason, ~((ueep < h_in) & (ueep >= h_s)), ENERGY_BALANCE_IMPLAUSIBLE)
        ueep = np.where(ue_reason == OK, ueep, np.nan)
        h_elep, y, vel, loss, lp_reason = elep_from_ueep(
            p_exh, ueep, flow, opts.annulus_area, opts.curve, sat, vols
        )
        if opts.annulus_area is None:
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


def add_assumption_uncertainty(out, base, inp, opts, cache, band, keys):
    """Combine into ``out[<key>_u]`` the uncertainty of the LP efficiency the expansion
    assumes: rectangular over +/- ``band``, u = band / sqrt(3) (JCGM 100:2008, 4.3.7),
    sensitivity by a central difference of the whole LP chain (one-sided where the upper
    step leaves (0, 1])."""
    u_eta = band / np.sqrt(3.0)
    # a fresh expansion for each shifted efficiency; the exhaust states and inlet states shared
    hi = lp_chain_figures(inp, replace(opts, eta_shift=u_eta), replace(cache, expansion=None))
    lo = lp_chain_figures(inp, replace(opts, eta_shift=-u_eta), replace(cache, expansion=None))
    for k in keys:
        with np.errstate(invalid="ignore"):
            slope = np.where(np.isfinite(hi[k]), (hi[k] - lo[k]) / (2.0 * u_eta), (base[k] - lo[k]) / u_eta)
            out[f"{k}_u"] = np.hypot(out[f"{k}_u"], slope * u_eta)
