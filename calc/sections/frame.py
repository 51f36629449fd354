"""Section figures of every row of a frame of role columns: ``evaluate`` and its results.

HP, IP and LP dry group (``dry``), the LP exhaust chain (``lp_chain``: the expansion of ``lp``
or the energy balance of ``exhaust``), the uncertainties (``uncertainty``) and the packed
reason codes (``reasons``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from isentrope.calc.names import FIGURE_FIELDS
from isentrope.calc.sections.dry import section_of
from isentrope.calc.sections.exhaust import (
    DEFAULT_EXHAUST_LOSS_CURVE,
    ExhaustLossCurve,
    FlowFractions,
)
from isentrope.calc.sections.inputs import (
    ENERGY_BALANCE_ROLES,
    HP_ROLES,
    IP_ROLES,
    LP_BALANCE_ROLES,
    LP_DRY_ROLES,
    LP_EXPANSION_ROLES,
    ROLE_QUANTITY,
    InletStates,
)
from isentrope.calc.sections.lp import BAUMANN_DEFAULT, check_baumann
from isentrope.calc.sections.lp_chain import (
    LP_FIGURES,
    LP_UNCERTAIN_FIGURES,
    LPCache,
    LPOptions,
    add_assumption_uncertainty,
    lp_chain_figures,
)
from isentrope.calc.sections.reasons import (
    NOT_MAPPED,
    OK,
    pack_reason,
    reason_names,
)
from isentrope.calc.sections.uncertainty import (
    fd_steps,
    propagate_uncertainty,
    resolve_uncertainty,
    section_uncertainty,
)

#: Default LP dry efficiency [-] used when no design value is configured: the middle of the
#: typical 85-90 % of large reheat units (calc/REFERENCES.md, from memory). Set the maker's value.
ETA_LP_DESIGN_DEFAULT = 0.88

#: Default half-width of the band around the LP efficiency the expansion assumes in which the
#: true one may lie [-]: +/- 2 points (project choice: the typical LP efficiencies of large
#: reheat units span 85-90 %, calc/REFERENCES.md, from memory). Taken as a rectangular
#: distribution, standard uncertainty band / sqrt(3) (JCGM 100:2008, 4.3.7).
ETA_LP_BAND_DEFAULT = 0.02


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


def _column(frame, role, n):
    if role in frame.columns:
        col = frame[role]
        try:
            a = col.to_numpy(dtype=float, na_value=np.nan)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"frame column {role!r}: expected numbers, found dtype {col.dtype}") from exc
        return np.where(np.isinf(a), np.nan, a)  # +/-inf counts as missing
    return np.full(n, np.nan)


@dataclass(frozen=True)
class _Arguments:
    """The checked arguments of ``evaluate`` (meaning and units there)."""

    lp_mode: str
    eta_source: str
    eta_lp_design: float
    eta_lp_band: float
    baumann: float
    annulus_area: float | None
    curve: ExhaustLossCurve
    lp_exhaust_flow_fraction: float | None
    flow_fractions: FlowFractions | None
    losses_mw: float | None
    uncertainty: dict | None


def _check_arguments(
    eta_lp_design,
    eta_lp_band,
    lp_dry_efficiency_source,
    baumann,
    annulus_area,
    exhaust_loss_curve,
    lp_exhaust_flow_fraction,
    lp_mode,
    flow_fractions,
    losses_mw,
    uncertainty,
) -> _Arguments:
    """``evaluate``'s keyword arguments checked and converted; ValueError on a bad one."""
    a = check_baumann(baumann)
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
    return _Arguments(
        lp_mode=lp_mode,
        eta_source=lp_dry_efficiency_source,
        eta_lp_design=eta_d,
        eta_lp_band=band,
        baumann=a,
        annulus_area=annulus_area,
        curve=curve,
        lp_exhaust_flow_fraction=lp_exhaust_flow_fraction,
        flow_fractions=ff,
        losses_mw=losses_mw,
        uncertainty=resolve_uncertainty(uncertainty),
    )


@dataclass(frozen=True)
class _Plan:
    """What one frame allows: the LP mode, the roles each figure group misses, the notes."""

    mode: str
    missing: dict
    notes: tuple


def _plan(args: _Arguments, cols: set) -> _Plan:
    """The LP mode and the figure groups switched off by missing roles or parameters, with a
    note for each; ValueError when the energy balance is asked for and cannot be had."""
    notes = []
    eb_missing = sorted(set(ENERGY_BALANCE_ROLES) - cols)
    eb_params_missing = [
        name
        for name, v in (("flow_fractions", args.flow_fractions), ("losses_mw", args.losses_mw))
        if v is None
    ]
    if args.lp_mode == "energy_balance":
        if eb_missing or eb_params_missing:
            raise ValueError(
                "lp_mode='energy_balance' needs the roles gross_output and main_steam_flow and the "
                f"parameters flow_fractions and losses_mw; missing roles {eb_missing}, missing parameters {eb_params_missing}"
            )
        mode = "energy_balance"
    elif args.lp_mode == "auto" and not eb_missing and not eb_params_missing:
        mode = "energy_balance"
    else:
        mode = "expansion"
        if args.lp_mode == "auto":
            notes.append(
                "LP exhaust from the expansion with the Baumann correction; the energy balance needs "
                f"roles {sorted(ENERGY_BALANCE_ROLES)} (missing {eb_missing}) and parameters flow_fractions, losses_mw "
                f"(missing {eb_params_missing})"
            )

    def missing(roles):
        return sorted(set(roles) - cols)

    groups_missing = {
        "hp": missing(HP_ROLES),
        "ip": missing(IP_ROLES),
        "lp_dry": missing(LP_DRY_ROLES),
        "lp": missing(LP_EXPANSION_ROLES if mode == "expansion" else LP_BALANCE_ROLES),
    }
    if args.eta_source == "measured" and mode == "expansion":
        groups_missing["lp"] = sorted(set(groups_missing["lp"]) | set(groups_missing["lp_dry"]))
    for g, m in groups_missing.items():
        if m:
            notes.append(f"{g} figures off: roles {m} not in the frame")
    if args.annulus_area is None:
        notes.append(
            "no annulus_area: exhaust loss, annulus velocity and "
            + ("UEEP" if mode == "expansion" else "ELEP, moisture and LP efficiency")
            + " are NaN"
        )
    if args.lp_exhaust_flow_fraction is None or "main_steam_flow" not in cols:
        notes.append(
            "exhaust loss needs main_steam_flow and lp_exhaust_flow_fraction: "
            + ("UEEP" if mode == "expansion" else "ELEP and moisture")
            + " are NaN"
        )
    if args.uncertainty is None:
        notes.append("uncertainty propagation off: the _u figures are NaN")
    return _Plan(mode=mode, missing=groups_missing, notes=tuple(notes))


def _superheated_groups(inp, plan: _Plan, u_roles, inlet_states: InletStates, n):
    """HP, IP and LP dry group: figures and their uncertainties (dict of flat arrays) and
    reason codes (dict group -> codes). The LP dry group's crossover states go to
    ``inlet_states`` for the LP chain."""
    out = {}
    codes = {}
    for g, roles in (("hp", HP_ROLES), ("ip", IP_ROLES), ("lp_dry", LP_DRY_ROLES)):
        if plan.missing[g]:
            codes[g] = np.full(n, NOT_MAPPED, dtype=np.int64)
            for k in ("efficiency", "efficiency_u", "enthalpy_drop", "isentropic_drop"):
                out[f"{g}_{k}"] = np.full(n, np.nan)
            continue
        r = section_of(inp, roles, end_state=u_roles is not None)
        codes[g] = r["reason"]
        out[f"{g}_efficiency"] = r["efficiency"]
        good = r["reason"] == OK
        out[f"{g}_enthalpy_drop"] = np.where(good, r["enthalpy_drop"], np.nan)
        out[f"{g}_isentropic_drop"] = np.where(good, r["isentropic_drop"], np.nan)
        if u_roles is None:
            out[f"{g}_efficiency_u"] = np.full(n, np.nan)
        else:
            sub = {k: inp[k] for k in roles}
            uu = {k: u_roles[k].of(inp[k]) for k in roles}
            st = fd_steps(uu, sub)
            keys = ("p_in", "t_in", "p_out", "t_out")
            out[f"{g}_efficiency_u"] = section_uncertainty(
                *(inp[k] for k in roles),
                r,
                {kk: uu[k] for kk, k in zip(keys, roles, strict=True)},
                {kk: st[k] for kk, k in zip(keys, roles, strict=True)},
                inlet_states if g == "lp_dry" else None,
            )
    return out, codes


def _lp_uncertain_roles(args: _Arguments, mode, cols):
    """The roles whose instrument uncertainty reaches the LP exhaust figures."""
    if mode != "expansion":
        return sorted(set(LP_BALANCE_ROLES))
    roles = list(LP_EXPANSION_ROLES)
    if args.eta_source == "measured":
        roles += ["lp_extraction_p", "lp_extraction_t"]
    if (
        args.annulus_area is not None
        and args.lp_exhaust_flow_fraction is not None
        and "main_steam_flow" in cols
    ):
        roles.append("main_steam_flow")
    return roles


def _lp_exhaust(inp, args: _Arguments, plan: _Plan, cols, inlet_states: InletStates, n):
    """LP exhaust figures and their uncertainties (dict of flat arrays) and reason codes
    (dict "lp", "lp_ueep" -> codes)."""
    if plan.missing["lp"]:
        codes = {g: np.full(n, NOT_MAPPED, dtype=np.int64) for g in ("lp", "lp_ueep")}
        return {
            k: np.full(n, np.nan) for k in LP_FIGURES + tuple(f"{k}_u" for k in LP_UNCERTAIN_FIGURES)
        }, codes
    opts = LPOptions(
        mode=plan.mode,
        eta_source=args.eta_source,
        eta_lp_design=args.eta_lp_design,
        baumann=args.baumann,
        annulus_area=args.annulus_area,
        curve=args.curve,
        lp_exhaust_flow_fraction=args.lp_exhaust_flow_fraction,
        flow_fractions=args.flow_fractions,
        losses_mw=args.losses_mw,
    )
    cache = LPCache(inlet_states)
    r = lp_chain_figures(inp, opts, cache)
    codes = {"lp": r["lp_reason"], "lp_ueep": r["ueep_reason"]}
    out = {k: r[k] for k in LP_FIGURES}
    if args.uncertainty is None:
        for k in LP_UNCERTAIN_FIGURES:
            out[f"{k}_u"] = np.full(n, np.nan)
        return out, codes
    roles = _lp_uncertain_roles(args, plan.mode, cols)
    uu = {k: args.uncertainty[k].of(inp[k]) for k in roles}
    res = propagate_uncertainty(
        lambda d: lp_chain_figures({**inp, **d}, opts, cache),
        {k: inp[k] for k in roles},
        uu,
        LP_UNCERTAIN_FIGURES,
        steps=fd_steps(uu, {k: inp[k] for k in roles}),
        base=r,
    )
    for k in LP_UNCERTAIN_FIGURES:
        out[f"{k}_u"] = np.where(np.isfinite(out[k]), res[k], np.nan)
    if plan.mode == "expansion" and args.eta_lp_band > 0:
        add_assumption_uncertainty(out, r, inp, opts, cache, args.eta_lp_band, LP_UNCERTAIN_FIGURES)
    return out, codes


def _results(out, codes, plan: _Plan, index, n) -> SectionResults:
    """The shares of the expansion-line drop, the estimate flag and the packed reasons added
    to ``out``; every figure as a Series on ``index``."""
    # Shares of the expansion-line drop (per kg): HP + IP + LP to the ELEP.
    total = out["hp_enthalpy_drop"] + out["ip_enthalpy_drop"] + out["lp_enthalpy_drop"]
    with np.errstate(invalid="ignore", divide="ignore"):
        for g in ("hp", "ip", "lp"):
            out[f"{g}_share"] = out[f"{g}_enthalpy_drop"] / total
    out["lp_estimate"] = np.full(n, 1.0 if plan.mode == "expansion" else 0.0)
    out["reason"] = pack_reason(codes)
    series = {name: pd.Series(out[name], index=index, name=name) for name, _, _ in FIGURE_FIELDS}
    return SectionResults(**series, lp_mode=plan.mode, notes=plan.notes)


def _evaluate_rows(frame, args: _Arguments) -> SectionResults:
    """``evaluate`` on one block of rows, arguments checked."""
    n = len(frame)
    inp = {role: _column(frame, role, n) for role in ROLE_QUANTITY}
    cols = set(frame.columns)
    plan = _plan(args, cols)
    inlet_states = InletStates()  # crossover states shared by the LP dry group and LP chain
    groups, group_codes = _superheated_groups(inp, plan, args.uncertainty, inlet_states, n)
    lp, lp_codes = _lp_exhaust(inp, args, plan, cols, inlet_states, n)
    return _results({**groups, **lp}, {**group_codes, **lp_codes}, plan, frame.index, n)


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
    args = _check_arguments(
        eta_lp_design,
        eta_lp_band,
        lp_dry_efficiency_source,
        baumann,
        annulus_area,
        exhaust_loss_curve,
        lp_exhaust_flow_fraction,
        lp_mode,
        flow_fractions,
        losses_mw,
        uncertainty,
    )
    if len(frame) <= EVALUATE_ROWS:
        return _evaluate_rows(frame, args)
    # Row blocks: every figure is per row and every choice (mode, groups, notes) follows from
    # the columns, so the blocks give the figures of the whole (to the last bits of the
    # iterated solvers, as any other cut of the rows).
    parts = [
        _evaluate_rows(frame.iloc[i : i + EVALUATE_ROWS], args) for i in range(0, len(frame), EVALUATE_ROWS)
    ]
    series = {name: pd.concat([getattr(p, name) for p in parts]) for name, _, _ in FIGURE_FIELDS}
    return SectionResults(**series, lp_mode=parts[0].lp_mode, notes=parts[0].notes)
