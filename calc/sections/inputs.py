"""Input handling shared by the section modules.

``Shape`` takes scalar / ndarray / Series arguments to flat float arrays and restores the
inputs' type on the outputs; ``call``, ``call_hs`` and ``call_slopes`` evaluate a steam
function on the points of a mask only (NaN elsewhere); ``superheated`` tells where p and T fix
a vapour state; ``InletStates`` finds (p, T) states already evaluated in one ``evaluate`` call
again by value. Internal units: MPa (absolute), K, kJ/kg, kJ/(kg K).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from isentrope.calc import steam
from isentrope.calc.names import ROLES, SECTION_ROLES

#: Critical pressure of water [MPa]. IAPWS R7-97(2012), Eq. (2)-(3) text (pc = 22.064 MPa).
P_CRIT = 22.064
#: Critical temperature of water [K]. IAPWS R7-97(2012) (Tc = 647.096 K).
T_CRIT = 647.096

#: Highest temperature accepted at a section boundary [K]: the upper limit of IF97 regions 1-3
#: (R7-97(2012) section 4). Region 5 (to 2273.15 K) is for gas-turbine temperatures, far above
#: any steam turbine's, and costs a point-by-point fallback: treated as out of range here.
T_MAX = 1073.15


#: Quantity of each role the section figures read (``calc.names``).
ROLE_QUANTITY = {role: ROLES[role][0] for role in SECTION_ROLES}

#: The roles of each section figure, inlet first: the HP and IP sections and the LP dry group
#: (p and T in, p and T out), the LP expansion (crossover state to condenser pressure), and
#: what the energy balance reads besides those of the HP, IP and LP expansion.
HP_ROLES = ("throttle_p", "throttle_t", "cold_reheat_p", "cold_reheat_t")
IP_ROLES = ("hot_reheat_p", "hot_reheat_t", "crossover_p", "crossover_t")
LP_DRY_ROLES = ("crossover_p", "crossover_t", "lp_extraction_p", "lp_extraction_t")
LP_EXPANSION_ROLES = ("crossover_p", "crossover_t", "condenser_p")
ENERGY_BALANCE_ROLES = ("gross_output", "main_steam_flow")
#: Every role the LP figures of the energy balance read.
LP_BALANCE_ROLES = LP_EXPANSION_ROLES + HP_ROLES + IP_ROLES + ENERGY_BALANCE_ROLES


class Shape:
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


def call(func, mask, *args):
    """Evaluate a steam function on the points selected by ``mask`` only; NaN elsewhere."""
    out = np.full(mask.shape, np.nan)
    if mask.any():
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            out[mask] = np.asarray(func(*[a[mask] for a in args]), dtype=float)
    return out


def superheated(p, t, mask, ts=None):
    """True where (p, t) is a vapour state fixed by p and T: above saturation, or above the
    critical temperature at supercritical pressure. NaN t_sat (below the triple point) is
    False. ``ts``: t_sat(p) where ``mask & (p < P_CRIT)`` when already computed [K]."""
    if ts is None:
        ts = saturation_t(p, mask)
    with np.errstate(invalid="ignore"):
        return np.where(p < P_CRIT, t > ts, t > T_CRIT) & mask


def saturation_t(p, mask):
    """t_sat(p) where ``mask`` holds and p is below the critical pressure; NaN elsewhere [K]."""
    return call(steam.t_sat, mask & (p < P_CRIT), p)


def call_slopes(mask, p, t):
    """``steam.hs_slopes_pt`` on the points selected by ``mask``; NaN elsewhere."""
    n = mask.shape[0]
    out = {k: np.full(n, np.nan) for k in ("h", "s", "dh_dt", "ds_dt", "dh_dp", "ds_dp")}
    if mask.any():
        got = steam.hs_slopes_pt(p[mask], t[mask])
        for k, v in got.items():
            out[k][mask] = v
    return out


def call_hs(mask, p, t):
    """h and s (``steam.hs_pt``, one pass) on the points selected by ``mask``; NaN elsewhere."""
    h = np.full(mask.shape, np.nan)
    s = np.full(mask.shape, np.nan)
    if mask.any():
        h[mask], s[mask] = steam.hs_pt(p[mask], t[mask])
    return h, s


class InletStates:
    """h and s of (p, T) states already evaluated within one ``evaluate`` call, found again
    by value: the LP dry group and the LP chain share the crossover inlet, so the LP chain
    finds its unperturbed inlet state here (the LP dry group's uncertainty uses analytic
    slopes and perturbs nothing; the LP chain's own difference states are kept too, for the
    re-evaluations that share them). Values are those of ``call_hs`` (the IF97 sums are per
    point, so a state computed on a larger mask is the same bit for bit)."""

    def __init__(self):
        self._entries = []

    def add(self, p, t, mask, h, s):
        self._entries.append((p, t, mask.copy(), h, s))

    def get(self, mask, p, t):
        """Like ``call_hs(mask, p, t)``: h, s where ``mask`` holds, NaN elsewhere."""
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
