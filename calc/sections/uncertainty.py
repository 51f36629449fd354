"""First-order uncertainty propagation (ISO GUM, ASME PTC 19.1) for the section figures.

Sensitivity coefficients by central finite differences of the same vectorised functions, or
analytic from the IF97 partial derivatives for superheated sections; combined root-sum-square.

References
----------
JCGM 100:2008 (ISO GUM), Evaluation of measurement data - Guide to the expression of
uncertainty in measurement, section 5 (law of propagation of uncertainty).
ASME PTC 19.1-2013, Test Uncertainty.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from isentrope.calc import steam
from isentrope.calc.sections.inputs import (
    P_CRIT,
    ROLE_QUANTITY,
    call,
    call_hs,
    saturation_t,
    superheated,
)
from isentrope.calc.sections.reasons import OK

#: Default standard instrument uncertainties (k = 1) per quantity, as (absolute, relative):
#: pressure 0.25 % of reading, temperature 1 K (the task's defaults, common practice);
#: flow 1 % of reading, power 0.25 % of reading (common practice, no source).
DEFAULT_UNCERTAINTY_BY_QUANTITY = {
    "pressure": (0.0, 0.0025),
    "temperature": (1.0, 0.0),
    "flow": (0.0, 0.01),
    "power": (0.0, 0.0025),
}


#: Smallest finite-difference step per quantity [internal unit] (keeps the central difference
#: above the solvers' round-off when a configured uncertainty is tiny; common practice).
_MIN_STEP_ABS = {"pressure": 0.0, "temperature": 1e-3, "flow": 1e-3, "power": 1e-3}
_MIN_STEP_REL = {"pressure": 1e-5, "temperature": 0.0, "flow": 1e-5, "power": 1e-5}


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


def resolve_uncertainty(uncertainty):
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
        ts = saturation_t(p, mask & np.isfinite(p))
        okp = superheated(pp, tp, mask & np.isfinite(pp), ts)
        okm = superheated(pm, tm, mask & np.isfinite(pm), ts)
    else:
        pp, pm, tp, tm = p + step, p - step, t, t
        okp = superheated(pp, tp, mask & np.isfinite(pp))
        okm = superheated(pm, tm, mask & np.isfinite(pm))
    return pp, pm, tp, tm, okp, okm


def pt_derivative(func, p, t, step, which, f0, mask):
    """d func / d(which) at (p, t) by a central difference of the vectorised property
    function; one-sided where one perturbed state is not superheated (or invalid), NaN where
    neither is. ``which`` is "p" or "t"; ``step`` in that variable's unit."""
    pp, pm, tp, tm, okp, okm = _perturbed_states(p, t, step, which, mask)
    fp = call(func, okp, pp, tp)
    fm = call(func, okm, pm, tm)
    okp &= np.isfinite(fp)
    okm &= np.isfinite(fm)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(
            okp & okm,
            (fp - fm) / (2.0 * step),
            np.where(okp, (fp - f0) / step, np.where(okm, (f0 - fm) / step, np.nan)),
        )


def pt_derivative_hs(p, t, step, which, h0, s0, mask, inlet_states=None):
    """d h / d(which) and d s / d(which) at (p, t): the same central (or one-sided)
    differences as ``pt_derivative`` of ``steam.h_pt`` and of ``steam.s_pt``, bit for bit,
    from one h-and-s evaluation per perturbed state and, for a temperature step, one
    saturation temperature shared by both states (calc/DECISIONS.md, "Speed of the kernels")."""
    pp, pm, tp, tm, okp, okm = _perturbed_states(p, t, step, which, mask)
    if inlet_states is None:
        hp_, sp_ = call_hs(okp, pp, tp)
        hm_, sm_ = call_hs(okm, pm, tm)
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


def section_uncertainty(p_in, t_in, p_out, t_out, base, u, steps, inlet_states=None):
    """Standard uncertainty of a superheated section's efficiency (GUM first order).

    Same law as ``propagate_uncertainty``, with the sensitivity coefficients from the
    partial derivatives of h and s at the inlet and of h at the outlet: analytic where
    ``base`` carries them (``section_core(..., end_state=True)``: IF97 regions 1 and 2, from
    cp and (dv/dT)_p of the Gibbs equations), else a central difference of the property
    functions that input enters (region 3 and 5 states). The isentropic end point follows by
    dh = T ds + v dp at constant p_out (dh_s = T_s ds_in) and constant s_in (dh_s = v_s
    dp_out), exact to the first order; the analytic and the differenced coefficients agree
    within the curvature over one uncertainty step (tests; speed: calc/DECISIONS.md, "Speed of the kernels").

    ``u`` and ``steps``: dicts with keys "p_in", "t_in", "p_out", "t_out" (arrays).
    ``inlet_states``: an ``InletStates`` that keeps the inlet states for later reuse."""
    ok = base["reason"] == OK
    if inlet_states is not None:
        inlet_states.add(
            p_in, t_in, ok, np.where(ok, base["h_in"], np.nan), np.where(ok, base["s_in"], np.nan)
        )
    h1, s1, h2, h2s = base["h_in"], base["s_in"], base["h_out"], base["h_out_isentropic"]
    eta = base["efficiency"]
    d = h1 - h2s
    if "t_out_isentropic" in base:
        # T and v of the end point from the solve that gave h2s (``section_core(...,
        # end_state=True)``): within 1e-13 relative of re-solving T(p, h) and then v(p, T).
        t2s, v2s = base["t_out_isentropic"], base["v_out_isentropic"]
    else:
        t2s = call(steam.t_ph, ok, p_out, h2s)
        wet2 = ok & (p_out < P_CRIT)
        hg2 = call(steam.h_sat_vapour, wet2, p_out)
        with np.errstate(invalid="ignore"):
            wet2 &= h2s <= hg2
        v2s = call(steam.v_pt, ok & ~wet2, p_out, t2s)
        if wet2.any():
            v2s[wet2] = call(steam.v_ph, wet2, p_out, h2s)[wet2]
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
            fdh, fds = pt_derivative_hs(p_in, t_in, steps[pv], which, h1, s1, fd, inlet_states)
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
            dh2 = np.where(fd, pt_derivative(steam.h_pt, p_out, t_out, steps[pv], which, h2, fd), dh2)
        # kJ/kg per MPa: v [m3/kg] x 1 MPa = 1000 kJ/kg
        dh2s = 1000.0 * v2s if which == "p" else 0.0
        c = (-dh2 + eta * dh2s) / d
        var += (c * u[pv]) ** 2
    return np.where(ok, np.sqrt(var), np.nan)


def fd_steps(u_roles, inputs):
    steps = {}
    for role, u in u_roles.items():
        q = ROLE_QUANTITY[role]
        floor = _MIN_STEP_ABS[q] + _MIN_STEP_REL[q] * np.abs(inputs[role])
        steps[role] = np.maximum(np.nan_to_num(u, nan=0.0), floor)
    return steps
