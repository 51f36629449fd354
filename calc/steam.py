"""IAPWS-IF97 steam properties, vectorised over numpy arrays.

Regions 1 (compressed liquid), 2 (superheated vapour) and 4 (the saturation line, for
p <= 16.529 MPa) are evaluated here with pure numpy; the rare point in region 3 (near the
critical point, above 16.529 MPa and 623.15 K) or region 5 (above 1073.15 K) is sent to the
``iapws`` package point by point, which is correct but slower, and counted.

Units are IF97's own: pressure MPa (absolute), temperature K, specific enthalpy kJ/kg,
specific entropy kJ/(kg K), specific volume m3/kg.

Every public function accepts scalars, numpy arrays (broadcast against each other) or pandas
Series (the result is a Series with the same index). A scalar call whose point lies outside
IF97's validity raises ValueError naming the valid range; in arrays such a point becomes NaN
and carries a reason code, available with ``return_details=True``:

>>> h, details = h_pt(np.array([16.55, 120.0]), 811.15, return_details=True)
>>> details.reason          # doctest: +SKIP
array([0, 1])               # OK, OUT_OF_RANGE_P

How the sums are evaluated: each IF97 equation is a sum of n_k x^I_k y^J_k. The distinct
powers of x and of y are built by repeated multiplication (no ``pow`` per term); the terms
are grouped by J, a_j = sum_i n_ij x^I_i is accumulated from the x powers, and the sum is
``sum_j a_j y^J_j``; derivatives in y weight the same products by J and J(J-1). Blocks of
8192 points at a time keep the work in cache. No Python loop runs over points (only over
terms and blocks), except for the iapws fallback.

References
----------
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997 for the
Thermodynamic Properties of Water and Steam (equation and table numbers below refer to it).
"""

from __future__ import annotations

import math
import types
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from isentrope.calc import if97_coefficients as C

__all__ = [
    "h_pt",
    "s_pt",
    "v_pt",
    "cp_pt",
    "region",
    "p_sat",
    "t_sat",
    "h_sat_liquid",
    "h_sat_vapour",
    "s_sat_liquid",
    "s_sat_vapour",
    "v_sat_liquid",
    "v_sat_vapour",
    "h_ps",
    "t_ps",
    "x_ps",
    "t_ph",
    "x_ph",
    "s_ph",
    "v_ph",
    "hs_pt",
    "hs_slopes_pt",
    "saturation_states",
    "end_state_ps",
    "PropertyDetails",
    "OK",
    "OUT_OF_RANGE_P",
    "OUT_OF_RANGE_T",
    "OUT_OF_RANGE_H",
    "OUT_OF_RANGE_S",
    "NOT_FINITE",
    "NO_CONVERGENCE",
    "FALLBACK_FAILED",
    "SINGLE_PHASE",
    "REASON_TEXT",
]

# --------------------------------------------------------------------------------------------
# Reason codes (details.reason). 0 means the value is good.
OK = 0
OUT_OF_RANGE_P = 1
OUT_OF_RANGE_T = 2
OUT_OF_RANGE_H = 3
OUT_OF_RANGE_S = 4
NOT_FINITE = 5
NO_CONVERGENCE = 6
FALLBACK_FAILED = 7
#: x_ph / x_ps only: the state is single-phase, so quality is NaN by definition (not an error).
SINGLE_PHASE = 8

REASON_TEXT = types.MappingProxyType(
    {
        OK: "ok",
        OUT_OF_RANGE_P: "pressure outside IF97 validity",
        OUT_OF_RANGE_T: "temperature outside IF97 validity",
        OUT_OF_RANGE_H: "enthalpy outside IF97 validity at this pressure",
        OUT_OF_RANGE_S: "entropy outside IF97 validity at this pressure",
        NOT_FINITE: "input is NaN or infinite",
        NO_CONVERGENCE: "Newton iteration did not converge",
        FALLBACK_FAILED: "region 3/5 point: the iapws package could not evaluate it",
        SINGLE_PHASE: "single-phase state: quality undefined",
    }
)

# --------------------------------------------------------------------------------------------
# Constants of the formulation.
R = 0.461526  # specific gas constant of water [kJ/(kg K)], R7-97(2012) eq. (1)
T_CRIT = 647.096  # critical temperature [K], R7-97(2012) eq. (2)
P_CRIT = 22.064  # critical pressure [MPa], R7-97(2012) eq. (3)
T_MIN = 273.15  # lower temperature limit of IF97 [K], R7-97(2012) section 4
T_MAX_2 = 1073.15  # upper temperature limit of regions 1-3 [K]
T_MAX_5 = 2273.15  # upper temperature limit of region 5 [K]
P_MAX = 100.0  # upper pressure limit of regions 1-3 [MPa]
P_MAX_5 = 50.0  # upper pressure limit of region 5 [MPa]
T_13 = 623.15  # boundary between regions 1 and 3 [K]
#: p_sat(273.15 K), eq. (30): the lowest pressure at which a liquid exists [MPa].
P_MIN = 0.000611212677444
#: p_sat(623.15 K), eq. (30) evaluated here (all digits kept so that the region boundary
#: agrees with _psat): above it the saturation line lies in region 3 [MPa].
P_SAT_623 = 16.529164252604478

# Limits of the (p,T) validity, for messages.
_RANGE_PT = "0 < p <= 100 MPa for 273.15 <= T <= 1073.15 K, and 0 < p <= 50 MPa for 1073.15 < T <= 2273.15 K"
_RANGE_PS = (
    "0.000611213 <= p <= 100 MPa, s between the IF97 limits at that pressure "
    "(T from 273.15 to 1073.15 K, to 2273.15 K at p <= 50 MPa)"
)
_RANGE_PH = (
    "0.000611213 <= p <= 100 MPa, h between the IF97 limits at that pressure "
    "(T from 273.15 to 1073.15 K, to 2273.15 K at p <= 50 MPa)"
)

# --------------------------------------------------------------------------------------------
# Evaluation of the polynomial sums sum_k n_k x^I_k y^J_k.

_BLOCK = 8192  # points per block; keeps the power tables in cache (measured with tests/bench/bench_steam.py)


def _frozen(a):
    a = np.array(a, dtype=float)
    a.flags.writeable = False
    return a


def _ipow(x, k):
    """x**k for an integer k by repeated squaring (a libm pow per point is several times
    slower than these few multiplications)."""
    base = 1.0 / x if k < 0 else x
    k = abs(k)
    result = None
    while k:
        if k & 1:
            result = base.copy() if result is None else result * base
        k >>= 1
        if k:
            base = base * base
    return np.ones_like(x) if result is None else result


class _PowerPlan:
    """How to build x^e for a sorted set of integer exponents e by multiplication only.

    x^e0 comes from repeated squaring (of 1 / x for a negative e0), each next power is the
    previous one times x^(e_k - e_(k-1)); the needed steps x^d are built once per block by a
    short ladder.
    """

    def __init__(self, exponents):
        e = np.unique(np.asarray(exponents, dtype=np.int64))
        e.flags.writeable = False
        self.exponents = e
        self.first = int(e[0])
        steps = np.diff(e)
        self.steps = tuple(int(d) for d in steps)
        self.max_step = int(steps.max()) if steps.size else 0

    def build(self, x):
        """Rows x^e for every exponent e, shape (len(exponents), len(x))."""
        m = x.shape[0]
        out = np.empty((len(self.exponents), m))
        first = self.first
        if first == 0:
            out[0] = 1.0
        elif first == 1:
            out[0] = x
        else:
            out[0] = _ipow(x, first)
        if self.max_step:
            ladder = [None, x]
            for d in range(2, self.max_step + 1):
                ladder.append(ladder[d // 2] * ladder[d - d // 2])
            for k, d in enumerate(self.steps, start=1):
                np.multiply(out[k - 1], ladder[d], out=out[k])
        return out


def _rows_sum(b):
    """Sum of the rows of ``b``, added one row after the other, so that every point's sum is
    made by the same operations in the same order however many points are in the block
    (results must not depend on how a period was cut into chunks).

    ``np.add.reduce(b, axis=0)`` over a C-contiguous block of two or more points adds the rows
    one after the other (its inner loop runs along the points); over a single point it runs
    along the rows and sums them pairwise, in another order, so one point goes through a
    Python loop over the rows. tests/calc/test_steam.py checks both against a plain
    row-by-row sum for 1 to 70 points and the block sizes.
    """
    b = np.ascontiguousarray(b)
    if b.shape[1] >= 2:
        return np.add.reduce(b, axis=0)
    out = b[0].copy()
    for r in range(1, b.shape[0]):
        out += b[r]
    return out


class _PowerSum:
    """sum_k n_k x^I_k y^J_k and its derivatives, for integer exponents I and J.

    The terms are grouped by J: a_j(x) = sum_i n_ij x^I_i is accumulated row by row from the
    x-power table (two numpy operations per term), then b_j = a_j y^J_j, and the sum and its
    y-derivatives are weighted row sums of b. No BLAS matrix product: measured while writing
    this module on the shared two-core machine, a (27 x 17) @ (17 x 8192) product took
    1.3 ms single-threaded and 12 ms with OpenBLAS threads under load, against 0.8 ms for
    this row accumulation (which also skips the zero entries).
    """

    def __init__(self, n, i, j, i_scale=1):
        # i_scale: the I of the table are multiples of 1/i_scale; the caller passes
        # x = base**(1/i_scale) (used for the quarter powers of the 2a T(p,s) equation).
        n = np.asarray(n, dtype=float)
        i = np.rint(np.asarray(i, dtype=float) * i_scale).astype(np.int64)
        j = np.asarray(j, dtype=np.int64)
        self.xplan = _PowerPlan(i)
        self.yplan = _PowerPlan(j)
        iu, ju = self.xplan.exponents, self.yplan.exponents
        rows, rows_di = [], []
        for jv in ju:
            sel = np.flatnonzero(j == jv)
            pos = tuple(int(np.searchsorted(iu, i[k])) for k in sel)
            rows.append((pos, tuple(float(n[k]) for k in sel)))
            keep = [k for k in sel if i[k] != 0]
            rows_di.append(
                (
                    tuple(int(np.searchsorted(iu, i[k])) for k in keep),
                    tuple(float(n[k] * i[k] / i_scale) for k in keep),
                )
            )
        self.rows = tuple(rows)
        self.rows_di = tuple(rows_di)
        jf = ju.astype(float)
        # Factors that turn the rows b_j, multiplied in place one after the other, into
        # J_j b_j and then J_j (J_j - 1) b_j: the weighted sums of the y-derivatives are then
        # plain row sums (``_rows_sum``) of b itself.
        self.w_steps = (_frozen(jf[:, None]), _frozen((jf - 1.0)[:, None]))

    @staticmethod
    def _accumulate(rows, xp, m):
        a = np.empty((len(rows), m))
        tmp = np.empty(m)
        for r, (pos, coef) in enumerate(rows):
            row = a[r]
            if not pos:
                row[:] = 0.0
                continue
            np.multiply(xp[pos[0]], coef[0], out=row)
            for q, c in zip(pos[1:], coef[1:], strict=True):
                np.multiply(xp[q], c, out=tmp)
                row += tmp
        return a

    def value(self, x, y):
        """The sum itself."""
        out = np.empty(x.shape[0])
        for lo in range(0, x.shape[0], _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            m = x[sl].shape[0]
            b = self._accumulate(self.rows, self.xplan.build(x[sl]), m)
            b *= self.yplan.build(y[sl])
            out[sl] = _rows_sum(b)
        return out

    def derivatives(self, x, y, order_y=2, with_x=False, with_xy=False):
        """g, g_y, g_yy (up to ``order_y``), with ``with_x`` g_x, and with ``with_xy`` (which
        needs ``with_x``) the mixed g_xy as well.

        Returns an array of shape (order_y + 1 + with_x + with_xy, len(x)).
        """
        if with_xy and not with_x:
            raise ValueError(
                "with_xy needs with_x (the mixed derivative is built from the x-derivative sums)"
            )
        m_all = x.shape[0]
        rows = order_y + 1
        out = np.empty((rows + int(with_x) + int(with_xy), m_all))
        for lo in range(0, m_all, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            m = x[sl].shape[0]
            xp = self.xplan.build(x[sl])
            yp = self.yplan.build(y[sl])
            b = self._accumulate(self.rows, xp, m)
            b *= yp
            out[0, sl] = _rows_sum(b)
            for r in range(1, rows):
                b *= self.w_steps[r - 1]  # now J b, then J (J - 1) b
                out[r, sl] = _rows_sum(b)
            if with_x:
                bx = self._accumulate(self.rows_di, xp, m)
                bx *= yp
                out[rows, sl] = _rows_sum(bx)
                if with_xy:
                    bx *= self.w_steps[0]
                    out[rows + 1, sl] = _rows_sum(bx)
        if order_y >= 1:
            out[1] /= y
        if order_y >= 2:
            out[2] /= y * y
        if with_x:
            out[rows] /= x
        if with_xy:
            out[rows + 1] /= x * y
        return out


_G1 = _PowerSum(C.R1_N, C.R1_I, C.R1_J)
_G2R = _PowerSum(C.R2_N, C.R2_I, C.R2_J)
_G2I = _PowerSum(C.R2_N0, [0] * len(C.R2_J0), C.R2_J0)
_B1PH = _PowerSum(C.T1PH_N, C.T1PH_I, C.T1PH_J)
_B1PS = _PowerSum(C.T1PS_N, C.T1PS_I, C.T1PS_J)
_B2APH = _PowerSum(C.T2APH_N, C.T2APH_I, C.T2APH_J)
_B2BPH = _PowerSum(C.T2BPH_N, C.T2BPH_I, C.T2BPH_J)
_B2CPH = _PowerSum(C.T2CPH_N, C.T2CPH_I, C.T2CPH_J)
_B2APS = _PowerSum(C.T2APS_N, C.T2APS_I, C.T2APS_J, i_scale=4)
_B2BPS = _PowerSum(C.T2BPS_N, C.T2BPS_I, C.T2BPS_J)
_B2CPS = _PowerSum(C.T2CPS_N, C.T2CPS_I, C.T2CPS_J)


def _region1(p, t, need):
    """Region-1 properties from the Gibbs equation (7) with the relations of Table 3.

    ``need`` is a collection of names among "h", "s", "v", "cp" and "dvdt" (the isobaric
    derivative (dv/dT)_p = v alpha_v [m3/(kg K)], alpha_v of Table 3); returns a dict of arrays.
    """
    pi = p / 16.53
    tau = 1386.0 / t
    order = 2 if "cp" in need else 1
    with_xy = "dvdt" in need
    with_x = "v" in need or with_xy
    d = _G1.derivatives(7.1 - pi, tau - 1.222, order_y=order, with_x=with_x, with_xy=with_xy)
    g, g_t = d[0], d[1]
    out = {}
    if "h" in need:
        out["h"] = R * t * tau * g_t
    if "s" in need:
        out["s"] = R * (tau * g_t - g)
    if "cp" in need:
        out["cp"] = -R * tau * tau * d[2]
    if with_x:
        g_p = -d[order + 1]  # d/dpi of (7.1 - pi)^I
        out["v"] = R * t * pi * g_p / p / 1000.0
    if with_xy:
        g_pt = -d[order + 2]  # gamma_pi_tau
        out["dvdt"] = R * pi * (g_p - tau * g_pt) / p / 1000.0
    return out


def _region2(p, t, need):
    """Region-2 properties from eq. (15): ideal part (16, Table 10) + residual part (17, Table 11),
    with the relations of Table 12.

    ``need`` is a collection of names among "h", "s", "v", "cp" and "dvdt" ((dv/dT)_p =
    v alpha_v [m3/(kg K)], alpha_v of Table 12); returns a dict of arrays.
    """
    pi = p
    tau = 540.0 / t
    order = 2 if "cp" in need else 1
    with_xy = "dvdt" in need
    with_x = "v" in need or with_xy
    d0 = _G2I.derivatives(np.ones_like(tau), tau, order_y=order)
    dr = _G2R.derivatives(pi, tau - 0.5, order_y=order, with_x=with_x, with_xy=with_xy)
    g_t = d0[1] + dr[1]
    out = {}
    if "h" in need:
        out["h"] = R * t * tau * g_t
    if "s" in need:
        out["s"] = R * (tau * g_t - (np.log(pi) + d0[0] + dr[0]))
    if "cp" in need:
        out["cp"] = -R * tau * tau * (d0[2] + dr[2])
    if with_x:
        out["v"] = R * t * (1.0 + pi * dr[order + 1]) / p / 1000.0
    if with_xy:
        # alpha_v of Table 12: (1 + pi gr_pi - tau pi gr_pi_tau) / (1 + pi gr_pi) / T
        out["dvdt"] = R * (1.0 + pi * dr[order + 1] - tau * pi * dr[order + 2]) / p / 1000.0
    return out


_FORWARD = types.MappingProxyType({1: _region1, 2: _region2})


def _psat(t):
    """Saturation pressure p_sat(T) [MPa], eq. (30) with (29); 273.15 <= T <= 647.096 K."""
    n = C.SAT_N
    th = t + n[9] / (t - n[10])
    a = th * th + n[1] * th + n[2]
    b = n[3] * th * th + n[4] * th + n[5]
    c = n[6] * th * th + n[7] * th + n[8]
    return (2.0 * c / (-b + np.sqrt(b * b - 4.0 * a * c))) ** 4


def _tsat(p):
    """Saturation temperature T_sat(p) [K], eq. (31); 611.213 Pa <= p <= 22.064 MPa."""
    n = C.SAT_N
    beta = np.sqrt(np.sqrt(p))
    e = beta * beta + n[3] * beta + n[6]
    f = n[1] * beta * beta + n[4] * beta + n[7]
    g = n[2] * beta * beta + n[5] * beta + n[8]
    d = 2.0 * g / (-f - np.sqrt(f * f - 4.0 * e * g))
    return (n[10] + d - np.sqrt((n[10] + d) ** 2 - 4.0 * (n[9] + n[10] * d))) / 2.0


def _p_b23(t):
    """Pressure on the region 2-3 boundary [MPa], eq. (5)."""
    n = C.B23_N
    return n[1] + n[2] * t + n[3] * t * t


def _t_b23(p):
    """Temperature on the region 2-3 boundary [K], eq. (6)."""
    n = C.B23_N
    return n[4] + np.sqrt((p - n[5]) / n[3])


def _h_b2bc(p):
    """Enthalpy on the boundary between subregions 2b and 2c [kJ/kg], eq. (21)."""
    n = C.B2BC_N
    return n[4] + np.sqrt((p - n[5]) / n[3])


def _p_b2bc(h):
    """Pressure on the boundary between subregions 2b and 2c [MPa], eq. (20)."""
    n = C.B2BC_N
    return n[1] + n[2] * h + n[3] * h * h


# Backward equations: start values for the Newton polish, exposed for the verification tests.
def _t1_ph(p, h):
    """Backward T(p,h) region 1 [K], eq. (11), Table 6."""
    return _B1PH.value(p, h / 2500.0 + 1.0)


def _t1_ps(p, s):
    """Backward T(p,s) region 1 [K], eq. (13), Table 8."""
    return _B1PS.value(p, s + 2.0)


def _t2a_ph(p, h):
    """Backward T(p,h) subregion 2a [K], eq. (22), Table 20."""
    return _B2APH.value(p, h / 2000.0 - 2.1)


def _t2b_ph(p, h):
    """Backward T(p,h) subregion 2b [K], eq. (23), Table 21."""
    return _B2BPH.value(p - 2.0, h / 2000.0 - 2.6)


def _t2c_ph(p, h):
    """Backward T(p,h) subregion 2c [K], eq. (24), Table 22."""
    return _B2CPH.value(p + 25.0, h / 2000.0 - 1.8)


def _t2a_ps(p, s):
    """Backward T(p,s) subregion 2a [K], eq. (25), Table 25 (I in quarters: x = p^(1/4))."""
    return _B2APS.value(np.sqrt(np.sqrt(p)), s / 2.0 - 2.0)


def _t2b_ps(p, s):
    """Backward T(p,s) subregion 2b [K], eq. (26), Table 26."""
    return _B2BPS.value(p, 10.0 - s / 0.7853)


def _t2c_ps(p, s):
    """Backward T(p,s) subregion 2c [K], eq. (27), Table 27."""
    return _B2CPS.value(p, 2.0 - s / 2.9251)


def _t2_ph(p, h):
    """Backward T(p,h) region 2 with the subregion choice of section 6.3.1 (p = 4 MPa, B2bc)."""
    out = np.empty(p.shape[0])
    a = p <= 4.0
    b = ~a & ((p <= 6.546699678) | (h >= _h_b2bc(np.maximum(p, 6.546699678))))
    c = ~a & ~b
    for mask, fn in ((a, _t2a_ph), (b, _t2b_ph), (c, _t2c_ph)):
        if mask.any():
            out[mask] = fn(p[mask], h[mask])
    return out


def _t2_ps(p, s):
    """Backward T(p,s) region 2 with the subregion choice of section 6.3.2 (4 MPa, s = 5.85)."""
    out = np.empty(p.shape[0])
    a = p <= 4.0
    b = ~a & (s >= 5.85)
    c = ~a & ~b
    for mask, fn in ((a, _t2a_ps), (b, _t2b_ps), (c, _t2c_ps)):
        if mask.any():
            out[mask] = fn(p[mask], s[mask])
    return out


_BACKWARD = types.MappingProxyType({(1, "h"): _t1_ph, (1, "s"): _t1_ps, (2, "h"): _t2_ph, (2, "s"): _t2_ps})


# --------------------------------------------------------------------------------------------
# Region of a (p, T) point, R7-97(2012) section 4 (Figure 1).


def _region_pt(p, t):
    """Region number (1, 2, 3, 5; 0 outside validity) and reason code per point."""
    reg = np.zeros(p.shape[0], dtype=np.int8)
    reason = np.zeros(p.shape[0], dtype=np.int8)
    finite = np.isfinite(p) & np.isfinite(t)
    reason[~finite] = NOT_FINITE
    bad_p = finite & ((p <= 0.0) | (p > P_MAX))
    reason[bad_p] = OUT_OF_RANGE_P
    bad_t = finite & ~bad_p & ((t < T_MIN) | (t > T_MAX_5))
    reason[bad_t] = OUT_OF_RANGE_T
    ok = finite & ~bad_p & ~bad_t
    hot = ok & (t > T_MAX_2)
    reason[hot & (p > P_MAX_5)] = OUT_OF_RANGE_P
    reg[hot & (p <= P_MAX_5)] = 5
    ok &= ~hot
    cold = ok & (t <= T_13)
    ps = _psat(np.where(cold, t, T_13))
    reg[cold & (p >= ps)] = 1
    reg[cold & (p < ps)] = 2
    warm = ok & ~cold
    is3 = warm & (p > _p_b23(t))
    reg[is3] = 3
    reg[warm & ~is3] = 2
    return reg, reason


# --------------------------------------------------------------------------------------------
# Point-by-point fallback to the iapws package (regions 3 and 5, the saturation line above
# 16.529 MPa). Correct but slow (~0.2-1 ms per point); counted in details.n_fallback.


def _iapws_points(p, other, key):
    """Evaluate points with iapws.IAPWS97(P=p, <key>=other).

    Returns a dict of arrays "t", "h", "s", "v", "x" (x NaN when single-phase), the region
    per point, and a bool array telling which points iapws evaluated.
    """
    from iapws import IAPWS97  # imported here: the vectorised path never needs it

    n = p.shape[0]
    out = {k: np.full(n, np.nan) for k in ("t", "h", "s", "v", "x")}
    reg = np.zeros(n, dtype=np.int8)
    ok = np.zeros(n, dtype=bool)
    for k in range(n):  # fallback only: region 3/5 points are rare in turbine duty
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                st = IAPWS97(**{"P": float(p[k]), key: float(other[k])})
        except Exception:  # noqa: BLE001 - any failure of the third-party solver flags the point
            continue
        if getattr(st, "status", 0) != 1 or st.h is None or not math.isfinite(st.h):
            continue
        out["t"][k], out["h"][k], out["s"][k], out["v"][k] = st.T, st.h, st.s, st.v
        r = int(st.region)
        reg[k] = r
        if r == 4 and st.x is not None:
            out["x"][k] = st.x
        ok[k] = True
    return out, reg, ok


# --------------------------------------------------------------------------------------------
# Newton polish of a backward-equation start value.

_MAX_NEWTON = 8
#: Residual below which the last Newton step is taken and the point is done. With quadratic
#: convergence the returned T then leaves a residual of order 1e-13 (tests check 1e-9 in s).
_ACCEPT = types.MappingProxyType({"s": 1e-8, "h": 1e-5})


def _newton(region, kind, p, y, t0, t_lo, t_hi, extra, exit_lo=False):
    """Solve kind(p, T) = y for T with the forward equation of ``region``.

    Iterates stay within [t_lo, t_hi]; with ``exit_lo`` a point whose iterate falls below
    t_lo leaves instead (not converged): used when trying region 2 first.
    Returns (t, converged, props) where props holds "h", "s" and, if asked in ``extra``,
    "v" at the solution (h or s corrected to first order for the last step: dh = T ds).
    """
    fwd = _FORWARD[region]
    other = "h" if kind == "s" else "s"
    need = {kind, other, "cp"} | ({"v"} & set(extra))
    n = p.shape[0]
    t = np.clip(t0, t_lo, t_hi)
    t = np.where(np.isfinite(t), t, 0.5 * (t_lo + t_hi))
    conv = np.zeros(n, dtype=bool)
    props = {k: np.full(n, np.nan) for k in need - {"cp"}}
    act = np.arange(n)
    for _ in range(_MAX_NEWTON):
        if act.size == 0:
            break
        ta = t[act]
        pr = fwd(p[act], ta, need)
        r = pr[kind] - y[act]
        slope = pr["cp"] if kind == "h" else pr["cp"] / ta
        step = r / slope
        t_new = ta - step
        done = (np.abs(r) <= _ACCEPT[kind]) & np.isfinite(t_new)
        di = act[done]
        t[di] = t_new[done]
        conv[di] = True
        props[kind][di] = y[di]
        if kind == "s":
            props["h"][di] = pr["h"][done] - ta[done] * r[done]
        else:
            props["s"][di] = pr["s"][done] - r[done] / ta[done]
        if "v" in props:
            props["v"][di] = pr["v"][done]
        keep = ~done & np.isfinite(t_new)
        if exit_lo:
            keep &= t_new >= t_lo[act]
        act = act[keep]
        t[act] = np.clip(t_new[keep], t_lo[act], t_hi[act])
    if "v" in props and conv.any():
        # v at the polished temperature (the last step moved T by < 1e-5 K).
        ci = np.flatnonzero(conv)
        props["v"][ci] = fwd(p[ci], t[ci], {"v"})["v"]
    return t, conv, props


def _solve(kind, p, y, want):
    """State from (p, s) or (p, h): T and the properties in ``want`` ("t","h","s","v","x").

    Returns (values dict, reason, region, n_fallback).
    """
    n = p.shape[0]
    val = {k: np.full(n, np.nan) for k in want}
    reason = np.zeros(n, dtype=np.int8)
    reg = np.zeros(n, dtype=np.int8)
    bad_range = OUT_OF_RANGE_S if kind == "s" else OUT_OF_RANGE_H
    finite = np.isfinite(p) & np.isfinite(y)
    reason[~finite] = NOT_FINITE
    okp = finite & (p >= P_MIN) & (p <= P_MAX)
    reason[finite & ~okp] = OUT_OF_RANGE_P
    n_fallback = 0

    def put(idx, region_no, t, props, x=None):
        reg[idx] = region_no
        if "t" in val:
            val["t"][idx] = t
        for k in ("h", "s", "v"):
            if k in val:
                val[k][idx] = props[k]
        if "x" in val and x is not None:
            val["x"][idx] = x

    idx = np.flatnonzero(okp)
    pp, yy = p[idx], y[idx]
    high = pp > P_SAT_623
    t_b = np.where(high, _t_b23(np.maximum(pp, P_SAT_623)), _tsat(np.minimum(pp, P_SAT_623)))

    # 1. Region 2 first (most turbine points): backward start, Newton; a point whose
    #    converged T lies at or above the region-2 boundary temperature is in region 2
    #    (s and h rise with T along an isobar, so no other region can hold it).
    t0 = _BACKWARD[(2, kind)](pp, yy)
    #    The backward equations are within about 0.03 K of the solution inside region 2,
    #    so a start value more than 2 K below the boundary is a wet or liquid point.
    cand = np.isfinite(t0) & (t0 >= t_b - 2.0)
    ci = np.flatnonzero(cand)
    done = np.zeros(idx.size, dtype=bool)
    to_fallback = np.zeros(idx.size, dtype=bool)
    hot = np.zeros(idx.size, dtype=bool)  # above region 2: region 5 or beyond IF97
    if ci.size:
        lo = t_b[ci] - 2.0
        hi = np.full(ci.size, 1078.0)
        t, conv, props = _newton(2, kind, pp[ci], yy[ci], t0[ci], lo, hi, want, exit_lo=True)
        acc = conv & (t >= t_b[ci] - 1e-9) & (t <= T_MAX_2 + 1e-9)
        # Keep T inside region 2 when rounding put it a hair outside (|dT| <= 1e-9 K).
        t = np.clip(t, t_b[ci], T_MAX_2)
        put(idx[ci[acc]], 2, t[acc], {k: v[acc] for k, v in props.items()})
        done[ci[acc]] = True
        above = conv & (t > T_MAX_2 + 1e-9)
        hot[ci[above]] = True

    # 2. The rest at p <= 16.529 MPa: liquid, wet or a region-2 point Newton missed.
    rest = ~done & ~to_fallback
    liquid = np.zeros(idx.size, dtype=bool)
    lo_i = np.flatnonzero(rest & ~high)
    if lo_i.size:
        pl, yl = pp[lo_i], yy[lo_i]
        ts = _tsat(pl)
        need = {"h", "s", "v"} & (set(want) | {kind})
        need.add(kind)
        sat1 = _region1(pl, ts, need)
        sat2 = _region2(pl, ts, need)
        y1, y2 = sat1[kind], sat2[kind]
        liq = yl <= y1
        wet = ~liq & (yl < y2)
        vap = ~liq & ~wet
        liquid[lo_i[liq]] = True
        if wet.any():
            x = (yl[wet] - y1[wet]) / (y2[wet] - y1[wet])
            props = {k: sat1[k][wet] + x * (sat2[k][wet] - sat1[k][wet]) for k in need}
            put(idx[lo_i[wet]], 4, ts[wet], props, x)
        if vap.any():
            vi = lo_i[vap]
            pv, yv = pp[vi], yy[vi]
            y25 = _region2(pv, np.full(vi.size, T_MAX_2), {kind})[kind]
            beyond = yv > y25
            hot[vi[beyond]] = True
            wi = np.flatnonzero(~beyond)
            if wi.size:
                tsv = ts[vap][wi]
                frac = (yv[wi] - y2[vap][wi]) / (y25[wi] - y2[vap][wi])
                t_start = tsv + frac * (T_MAX_2 - tsv)
                t, conv, props = _newton(
                    2, kind, pv[wi], yv[wi], t_start, tsv - 1.0, np.full(wi.size, T_MAX_2 + 1.0), want
                )
                gi = vi[wi[conv]]
                t = np.clip(t, tsv, T_MAX_2)
                put(idx[gi], 2, t[conv], {k: v[conv] for k, v in props.items()})
                reason[idx[vi[wi[~conv]]]] = NO_CONVERGENCE

    # 3. The rest above 16.529 MPa: region 1 below 623.15 K, otherwise iapws (region 3).
    hi_i = np.flatnonzero(rest & high)
    if hi_i.size:
        y13 = _region1(pp[hi_i], np.full(hi_i.size, T_13), {kind})[kind]
        liq = yy[hi_i] <= y13
        liquid[hi_i[liq]] = True
        other = hi_i[~liq]
        if other.size:
            y25 = _region2(pp[other], np.full(other.size, T_MAX_2), {kind})[kind]
            hot[other[yy[other] > y25]] = True
            to_fallback[other[yy[other] <= y25]] = True

    # 4. Region 1: backward start, Newton, then the 273.15 K limit.
    li = np.flatnonzero(liquid)
    if li.size:
        pl, yl = pp[li], yy[li]
        t0 = _BACKWARD[(1, kind)](pl, yl)
        t_top = np.where(pl > P_SAT_623, T_13, _tsat(np.minimum(pl, P_SAT_623)))
        t, conv, props = _newton(1, kind, pl, yl, t0, np.full(li.size, 250.0), t_top + 1.0, want)
        inside = conv & (t >= T_MIN - 1e-9)
        t = np.clip(t, T_MIN, t_top)
        put(idx[li[inside]], 1, t[inside], {k: v[inside] for k, v in props.items()})
        reason[idx[li[conv & ~inside]]] = bad_range
        nc = li[~conv]
        if nc.size:
            y_min = _region1(pp[nc], np.full(nc.size, T_MIN), {kind})[kind]
            reason[idx[nc]] = np.where(yy[nc] < y_min, bad_range, NO_CONVERGENCE)

    # 5. Fallback points (region 3, region 5, wet states above 16.529 MPa). Region 5 ends at
    #    50 MPa and 2273.15 K.
    reason[idx[hot & (pp > P_MAX_5)]] = bad_range
    to_fallback |= hot & (pp <= P_MAX_5)
    fi = np.flatnonzero(to_fallback)
    if fi.size:
        n_fallback = int(fi.size)
        out, freg, fok = _iapws_points(pp[fi], yy[fi], kind)
        g = fi[fok]
        reg[idx[g]] = freg[fok]
        for k in want:
            val[k][idx[g]] = out[k][fok]
        failed = fi[~fok]
        reason[idx[failed]] = FALLBACK_FAILED
        beyond = failed[hot[failed]]
        if beyond.size:  # above the region-5 limit 2273.15 K, or iapws trouble?
            top, _, tok = _iapws_points_pt(pp[beyond], np.full(beyond.size, T_MAX_5), kind)
            reason[idx[beyond[tok & (yy[beyond] > top)]]] = bad_range
    return val, reason, reg, n_fallback


# --------------------------------------------------------------------------------------------
# Cores of the public functions: flat float arrays in, (value, reason, region, n_fallback) out.


def _core_pt(prop):
    def core(p, t):
        reg, reason = _region_pt(p, t)
        out = np.full(p.shape[0], np.nan)
        for r in (1, 2):
            m = reg == r
            if m.any():
                out[m] = _FORWARD[r](p[m], t[m], {prop})[prop]
        fb = np.flatnonzero((reg == 3) | (reg == 5))
        if fb.size:
            key = "cp" if prop == "cp" else prop
            vals, _, ok = _iapws_points_pt(p[fb], t[fb], key)
            out[fb[ok]] = vals[ok]
            reason[fb[~ok]] = FALLBACK_FAILED
            reg[fb[~ok]] = 0
        return out, reason, reg, int(fb.size)

    return core


def _core_hs_pt(p, t):
    """h and s of one block from one region-1/2 evaluation (the Gibbs sums serve both)."""
    reg, reason = _region_pt(p, t)
    h = np.full(p.shape[0], np.nan)
    s = np.full(p.shape[0], np.nan)
    for r in (1, 2):
        m = reg == r
        if m.any():
            d = _FORWARD[r](p[m], t[m], ("h", "s"))
            h[m], s[m] = d["h"], d["s"]
    fb = np.flatnonzero((reg == 3) | (reg == 5))
    if fb.size:
        for prop, out in (("h", h), ("s", s)):
            vals, _, ok = _iapws_points_pt(p[fb], t[fb], prop)
            out[fb[ok]] = vals[ok]
            out[fb[~ok]] = np.nan
    return h, s


def hs_pt(p, t):
    """Specific enthalpy [kJ/kg] and entropy [kJ/(kg K)] at flat float arrays p [MPa] and
    T [K] in one pass: the same values, bit for bit, as ``h_pt`` and ``s_pt`` (same region
    choice and the same sums; NaN outside IF97), at about the cost of one of them. A kernel
    of calc/sections/ (the perturbed states of its uncertainty propagation): flat float
    arrays in, no broadcasting or reason codes.

    Parameters
    ----------
    p : ndarray
        Pressure, absolute [MPa], flat float array.
    t : ndarray
        Temperature [K], flat float array of the same length.

    Returns
    -------
    h, s : ndarray
        Specific enthalpy [kJ/kg] and entropy [kJ/(kg K)].

    References
    ----------
    IAPWS R7-97(2012): region 1 eq. (7) with Table 3, region 2 eq. (15) with Table 12.
    """
    p = np.ascontiguousarray(p, dtype=float).reshape(-1)
    t = np.ascontiguousarray(t, dtype=float).reshape(-1)
    n = p.shape[0]
    h = np.empty(n)
    s = np.empty(n)
    with np.errstate(all="ignore"):
        for lo in range(0, n, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            h[sl], s[sl] = _core_hs_pt(p[sl], t[sl])
    return h, s


def hs_slopes_pt(p, t):
    """h [kJ/kg], s [kJ/(kg K)] and their partial derivatives at flat float arrays p [MPa] and
    T [K] from one region-1/2 Gibbs evaluation: (dh/dT)_p = cp, (ds/dT)_p = cp / T,
    (dh/dp)_T = v - T (dv/dT)_p and (ds/dp)_T = -(dv/dT)_p (Maxwell; per MPa: kJ/kg/MPa and
    kJ/(kg K)/MPa). h and s are bit for bit those of ``hs_pt`` (region 3 and 5 points
    included, from the same fallback); the derivatives are NaN outside regions 1 and 2
    (callers difference there). A kernel of calc/sections/ (the sensitivity coefficients of
    its uncertainty propagation).

    Parameters
    ----------
    p : ndarray
        Pressure, absolute [MPa], flat float array.
    t : ndarray
        Temperature [K], flat float array of the same length.

    Returns
    -------
    dict of ndarray
        "h", "s", "dh_dt", "ds_dt", "dh_dp", "ds_dp".

    References
    ----------
    IAPWS R7-97(2012): region 1 eq. (7) with Table 3 (cp, alpha_v), region 2 eq. (15) with
    Table 12.
    """
    p = np.ascontiguousarray(p, dtype=float).reshape(-1)
    t = np.ascontiguousarray(t, dtype=float).reshape(-1)
    n = p.shape[0]
    keys = ("h", "s", "dh_dt", "ds_dt", "dh_dp", "ds_dp")
    out = {k: np.full(n, np.nan) for k in keys}
    need = ("h", "s", "cp", "v", "dvdt")
    with np.errstate(all="ignore"):
        for lo in range(0, n, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            pb, tb = p[sl], t[sl]
            reg, _ = _region_pt(pb, tb)
            for r in (1, 2):
                m = reg == r
                if not m.any():
                    continue
                d = _FORWARD[r](pb[m], tb[m], need)
                idx = np.flatnonzero(m) + lo
                out["h"][idx], out["s"][idx] = d["h"], d["s"]
                out["dh_dt"][idx] = d["cp"]
                out["ds_dt"][idx] = d["cp"] / tb[m]
                # per MPa: v [m3/kg] x 1 MPa = 1000 kJ/kg
                out["dh_dp"][idx] = 1000.0 * (d["v"] - tb[m] * d["dvdt"])
                out["ds_dp"][idx] = -1000.0 * d["dvdt"]
            fb = np.flatnonzero((reg == 3) | (reg == 5))
            if fb.size:
                for prop in ("h", "s"):
                    vals, _, ok = _iapws_points_pt(pb[fb], tb[fb], prop)
                    out[prop][fb[ok] + lo] = vals[ok]
    return out


def saturation_states(p):
    """h [kJ/kg], s [kJ/(kg K)] and v [m3/kg] of saturated liquid and vapour at flat float
    pressures p [MPa] in one pass (one T_sat(p), one region-1 and one region-2 evaluation
    instead of one of each per property): bit for bit ``h_sat_liquid`` ... ``v_sat_vapour``,
    NaN where those are NaN. A kernel of calc/sections/ (the exhaust saturation of its LP
    chain, evaluated again for every condenser-pressure difference of its uncertainty).

    Parameters
    ----------
    p : ndarray
        Pressure, absolute [MPa], flat float array; NaN results outside the triple-point to
        critical-point range.

    Returns
    -------
    dict of ndarray
        "hf", "hg", "sf", "sg", "vf", "vg".

    References
    ----------
    IAPWS R7-97(2012): saturation temperature eq. (31), region 1 eq. (7), region 2 eq. (15).
    """
    p = np.ascontiguousarray(p, dtype=float).reshape(-1)
    n = p.shape[0]
    out = {k: np.full(n, np.nan) for k in ("hf", "hg", "sf", "sg", "vf", "vg")}
    with np.errstate(all="ignore"):
        ok = np.isfinite(p) & (p >= P_MIN) & (p <= P_CRIT)
    low = np.flatnonzero(ok & (p <= P_SAT_623))
    if low.size:
        with np.errstate(all="ignore"):
            ts = _tsat(p[low])
            liquid = _region1(p[low], ts, ("h", "s", "v"))
            vapour = _region2(p[low], ts, ("h", "s", "v"))
        for k in ("h", "s", "v"):
            out[k + "f"][low] = liquid[k]
            out[k + "g"][low] = vapour[k]
    high = np.flatnonzero(ok & (p > P_SAT_623))  # near the critical point: the public functions
    if high.size:
        for k, fn in (
            ("hf", h_sat_liquid),
            ("hg", h_sat_vapour),
            ("sf", s_sat_liquid),
            ("sg", s_sat_vapour),
            ("vf", v_sat_liquid),
            ("vg", v_sat_vapour),
        ):
            out[k][high] = fn(p[high])
    return out


def end_state_ps(p, s):
    """h [kJ/kg], T [K] and v [m3/kg] at flat float arrays p [MPa] and s [kJ/(kg K)] from
    one solve: h is bit for bit ``h_ps`` (the Newton iterates do not depend on the extra
    properties asked for); T and v are those of the same solution (NaN outside IF97).
    A kernel of calc/sections/ (the isentropic end point and its sensitivities,
    dh_s = T ds + v dp, without a second solve).

    Parameters
    ----------
    p : ndarray
        Pressure, absolute [MPa], flat float array.
    s : ndarray
        Specific entropy [kJ/(kg K)], flat float array of the same length.

    Returns
    -------
    h, t, v : ndarray
        Specific enthalpy [kJ/kg], temperature [K] and specific volume [m3/kg].

    References
    ----------
    IAPWS R7-97(2012); backward equations as in ``h_ps``.
    """
    p = np.ascontiguousarray(p, dtype=float).reshape(-1)
    s = np.ascontiguousarray(s, dtype=float).reshape(-1)
    n = p.shape[0]
    out = {k: np.empty(n) for k in ("h", "t", "v")}
    with np.errstate(all="ignore"):
        for lo in range(0, n, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            val, _, _, _ = _solve("s", p[sl], s[sl], ("h", "t", "v"))
            for k in out:
                out[k][sl] = val[k]
    return out["h"], out["t"], out["v"]


def _iapws_points_pt(p, t, prop):
    """iapws.IAPWS97(P=, T=) point by point for region 3/5 points; returns (values, regions, ok)."""
    from iapws import IAPWS97

    n = p.shape[0]
    vals = np.full(n, np.nan)
    reg = np.zeros(n, dtype=np.int8)
    ok = np.zeros(n, dtype=bool)
    for k in range(n):  # fallback only
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                st = IAPWS97(P=float(p[k]), T=float(t[k]))
            v = float(getattr(st, prop))
        except Exception:  # noqa: BLE001 - any failure of the third-party solver flags the point
            continue
        if getattr(st, "status", 0) == 1 and math.isfinite(v):
            vals[k], reg[k], ok[k] = v, int(st.region), True
    return vals, reg, ok


def _core_region(p, t):
    reg, reason = _region_pt(p, t)
    return reg.astype(np.int64), reason, reg, 0


def _saturation_range(x, low, high, out_of_range):
    """Reason codes of the points of a saturation-line input ``x`` (NOT_FINITE, or
    ``out_of_range`` outside ``[low, high]``) and the mask of the points inside."""
    reason = np.zeros(x.shape[0], dtype=np.int8)
    finite = np.isfinite(x)
    reason[~finite] = NOT_FINITE
    ok = finite & (x >= low) & (x <= high)
    reason[finite & ~ok] = out_of_range
    return reason, ok


def _core_psat(t):
    reason, ok = _saturation_range(t, T_MIN, T_CRIT, OUT_OF_RANGE_T)
    out = np.full(t.shape[0], np.nan)
    out[ok] = _psat(t[ok])
    return out, reason, np.where(ok, 4, 0).astype(np.int8), 0


def _core_tsat(p):
    reason, ok = _saturation_range(p, P_MIN, P_CRIT, OUT_OF_RANGE_P)
    out = np.full(p.shape[0], np.nan)
    out[ok] = _tsat(p[ok])
    return out, reason, np.where(ok, 4, 0).astype(np.int8), 0


def _core_sat(prop, quality):
    def core(p):
        reason, ok = _saturation_range(p, P_MIN, P_CRIT, OUT_OF_RANGE_P)
        out = np.full(p.shape[0], np.nan)
        reg = np.where(ok, 4, 0).astype(np.int8)
        low = np.flatnonzero(ok & (p <= P_SAT_623))
        if low.size:
            fwd = _region1 if quality == 0 else _region2
            out[low] = fwd(p[low], _tsat(p[low]), {prop})[prop]
        fb = np.flatnonzero(ok & (p > P_SAT_623))
        if fb.size:
            vals, _, fok = _iapws_points(p[fb], np.full(fb.size, float(quality)), "x")
            out[fb[fok]] = vals[{"h": "h", "s": "s", "v": "v"}[prop]][fok]
            reason[fb[~fok]] = FALLBACK_FAILED
        return out, reason, reg, int(fb.size)

    return core


def _core_solve(kind, prop):
    def core(p, y):
        val, reason, reg, nfb = _solve(kind, p, y, (prop,))
        out = val[prop]
        if prop == "x":
            single = (reason == OK) & (reg != 4)
            reason = reason.copy()
            reason[single] = SINGLE_PHASE
            out[single] = np.nan
        return out, reason, reg, nfb

    return core


# --------------------------------------------------------------------------------------------
# Public layer: input handling (scalar / ndarray / Series), details, errors.


@dataclass(frozen=True)
class PropertyDetails:
    """Diagnostics of one call (``return_details=True``).

    Attributes
    ----------
    reason : numpy.ndarray of int
        Per point: 0 (``OK``) or one of the reason codes of this module (``REASON_TEXT``).
        Same shape as the result.
    region : numpy.ndarray of int
        IF97 region used per point (1, 2, 3, 4 = wet/saturation, 5; 0 = not evaluated).
    n_fallback : int
        Number of points sent to the iapws package (regions 3 and 5).
    """

    reason: np.ndarray
    region: np.ndarray
    n_fallback: int


def _to_array(name, a):
    if isinstance(a, pd.Series):
        try:
            return a.to_numpy(dtype=float, na_value=np.nan)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"{name}: expected numbers, found Series of dtype {a.dtype}: {exc}") from None
    try:
        return np.asarray(a, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected numbers, found {type(a).__name__}: {exc}") from None


def _run_blocks(core, flat):
    """Run a core over blocks of points so that every temporary stays in cache."""
    n = flat[0].shape[0]
    if n <= _BLOCK:
        with np.errstate(all="ignore"):
            return core(*flat)
    value = None
    reason = np.empty(n, dtype=np.int8)
    reg = np.empty(n, dtype=np.int8)
    n_fallback = 0
    with np.errstate(all="ignore"):
        for lo in range(0, n, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            v, r, g, nf = core(*(a[sl] for a in flat))
            if value is None:
                value = np.empty(n, dtype=v.dtype)
            value[sl], reason[sl], reg[sl] = v, r, g
            n_fallback += nf
    return value, reason, reg, n_fallback


def _call(fname, core, names, args, return_details, valid):
    index = None
    for a in args:
        if isinstance(a, pd.Series):
            if index is None:
                index = a.index
            elif not a.index.equals(index):
                raise ValueError(f"{fname}: Series arguments must share one index")
    arrays = [_to_array(n, a) for n, a in zip(names, args, strict=True)]
    scalar = index is None and all(a.ndim == 0 for a in arrays)
    try:
        bcast = np.broadcast_arrays(*arrays)
    except ValueError:
        shapes = ", ".join(f"{n} {a.shape}" for n, a in zip(names, arrays, strict=True))
        raise ValueError(f"{fname}: argument shapes do not broadcast: {shapes}") from None
    shape = bcast[0].shape
    flat = [np.ascontiguousarray(b, dtype=float).reshape(-1) for b in bcast]
    value, reason, reg, n_fallback = _run_blocks(core, flat)
    if scalar:
        code = int(reason[0])
        if code not in (OK, SINGLE_PHASE):
            found = ", ".join(f"{n} = {float(a):g}" for n, a in zip(names, arrays, strict=True))
            raise ValueError(f"{fname}({found}): {REASON_TEXT[code]}; valid: {valid}")
        result = value[0].item()
    else:
        result = value.reshape(shape)
        if index is not None:
            result = pd.Series(result, index=index)
    if not return_details:
        return result
    details = PropertyDetails(
        reason=reason.astype(np.int64).reshape(shape),
        region=reg.astype(np.int64).reshape(shape),
        n_fallback=int(n_fallback),
    )
    return result, details


_CORE_H_PT = _core_pt("h")
_CORE_S_PT = _core_pt("s")
_CORE_V_PT = _core_pt("v")
_CORE_CP_PT = _core_pt("cp")


def h_pt(p, t, return_details=False):
    """Specific enthalpy from pressure and temperature.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    t : array_like
        Temperature [K]
    return_details : bool
        Also return a ``PropertyDetails`` (reason codes, regions, fallback count).

    Returns
    -------
    h : float, ndarray or Series
        Specific enthalpy [kJ/kg]; NaN where the point is outside IF97 (array input).

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    References
    ----------
    IAPWS R7-97(2012): region 1 eq. (7), region 2 eq. (15), boundaries eqs. (5) and (30);
    region 3/5 points through the iapws package.
    """
    return _call("h_pt", _CORE_H_PT, ("p", "t"), (p, t), return_details, _RANGE_PT)


def s_pt(p, t, return_details=False):
    """Specific entropy from pressure and temperature.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    t : array_like
        Temperature [K]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    s : float, ndarray or Series
        Specific entropy [kJ/(kg K)]

    References
    ----------
    IAPWS R7-97(2012): region 1 eq. (7) and Table 3, region 2 eq. (15) and Table 12.
    """
    return _call("s_pt", _CORE_S_PT, ("p", "t"), (p, t), return_details, _RANGE_PT)


def v_pt(p, t, return_details=False):
    """Specific volume from pressure and temperature.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    t : array_like
        Temperature [K]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    v : float, ndarray or Series
        Specific volume [m3/kg]

    References
    ----------
    IAPWS R7-97(2012): region 1 eq. (7) and Table 3, region 2 eq. (15) and Table 12.
    """
    return _call("v_pt", _CORE_V_PT, ("p", "t"), (p, t), return_details, _RANGE_PT)


def cp_pt(p, t, return_details=False):
    """Specific isobaric heat capacity from pressure and temperature.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    t : array_like
        Temperature [K]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    cp : float, ndarray or Series
        Specific isobaric heat capacity [kJ/(kg K)]

    References
    ----------
    IAPWS R7-97(2012): region 1 Table 3, region 2 Table 12.
    """
    return _call("cp_pt", _CORE_CP_PT, ("p", "t"), (p, t), return_details, _RANGE_PT)


def region(p, t, return_details=False):
    """IF97 region of each (p, T) point.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    t : array_like
        Temperature [K]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    region : int, ndarray of int or Series
        1 (compressed liquid, up to and including the saturation line), 2 (vapour), 3, 5,
        or 0 outside validity (array input; scalar input raises ValueError).

    References
    ----------
    IAPWS R7-97(2012) section 4 and Figure 1; boundaries eq. (5) (B23) and eq. (30).
    """
    return _call("region", _core_region, ("p", "t"), (p, t), return_details, _RANGE_PT)


def p_sat(t, return_details=False):
    """Saturation pressure.

    Parameters
    ----------
    t : array_like
        Temperature, 273.15 to 647.096 [K]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    p : float, ndarray or Series
        Saturation pressure, absolute [MPa]

    References
    ----------
    IAPWS R7-97(2012) eq. (30), Table 34.
    """
    return _call("p_sat", _core_psat, ("t",), (t,), return_details, "273.15 <= T <= 647.096 K")


def t_sat(p, return_details=False):
    """Saturation temperature.

    Parameters
    ----------
    p : array_like
        Pressure, absolute, 0.000611213 to 22.064 [MPa]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    t : float, ndarray or Series
        Saturation temperature [K]

    References
    ----------
    IAPWS R7-97(2012) eq. (31), Table 34.
    """
    return _call("t_sat", _core_tsat, ("p",), (p,), return_details, "0.000611213 <= p <= 22.064 MPa")


_RANGE_SAT = "0.000611213 <= p <= 22.064 MPa"


def _sat_doc(prop, phase, unit):
    return f"""Specific {prop} of saturated {phase} at a pressure.

    Parameters
    ----------
    p : array_like
        Pressure, absolute, 0.000611213 to 22.064 [MPa]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    value : float, ndarray or Series
        Specific {prop} [{unit}]

    References
    ----------
    IAPWS R7-97(2012): T_sat from eq. (31), then region 1 (liquid) or region 2 (vapour);
    above 16.529 MPa the saturation line lies in region 3 and the iapws package is used.
    """


def _make_sat(name, prop, quality, phase, unit):
    core = _core_sat(prop, quality)

    def fn(p, return_details=False):
        return _call(name, core, ("p",), (p,), return_details, _RANGE_SAT)

    fn.__name__ = fn.__qualname__ = name
    fn.__doc__ = _sat_doc({"h": "enthalpy", "s": "entropy", "v": "volume"}[prop], phase, unit)
    return fn


h_sat_liquid = _make_sat("h_sat_liquid", "h", 0, "liquid", "kJ/kg")
h_sat_vapour = _make_sat("h_sat_vapour", "h", 1, "vapour", "kJ/kg")
s_sat_liquid = _make_sat("s_sat_liquid", "s", 0, "liquid", "kJ/(kg K)")
s_sat_vapour = _make_sat("s_sat_vapour", "s", 1, "vapour", "kJ/(kg K)")
v_sat_liquid = _make_sat("v_sat_liquid", "v", 0, "liquid", "m3/kg")
v_sat_vapour = _make_sat("v_sat_vapour", "v", 1, "vapour", "m3/kg")

_CORE_H_PS = _core_solve("s", "h")
_CORE_T_PS = _core_solve("s", "t")
_CORE_X_PS = _core_solve("s", "x")
_CORE_T_PH = _core_solve("h", "t")
_CORE_X_PH = _core_solve("h", "x")
_CORE_S_PH = _core_solve("h", "s")
_CORE_V_PH = _core_solve("h", "v")


def h_ps(p, s, return_details=False):
    """Specific enthalpy from pressure and entropy: the isentropic end point.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    s : array_like
        Specific entropy [kJ/(kg K)]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    h : float, ndarray or Series
        Specific enthalpy [kJ/kg]

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    Notes
    -----
    Compressed liquid and superheated points start from the IF97 backward equation T(p,s)
    (region 1 eq. (13); subregions 2a, 2b, 2c eqs. (25)-(27)) and are polished with Newton
    steps on the forward equation until s_pt(p, T) matches s (to about 1e-12 kJ/(kg K)).
    Wet points (s between the saturated-liquid and saturated-vapour entropies) are a mixture
    of the saturation states with the quality given by s.

    References
    ----------
    IAPWS R7-97(2012) sections 5.2.2 and 6.3.2; region 3/5 points through the iapws package.
    """
    return _call("h_ps", _CORE_H_PS, ("p", "s"), (p, s), return_details, _RANGE_PS)


def t_ps(p, s, return_details=False):
    """Temperature from pressure and entropy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    s : array_like
        Specific entropy [kJ/(kg K)]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    t : float, ndarray or Series
        Temperature [K] (the saturation temperature for a wet point)

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    Notes
    -----
    Compressed liquid and superheated points start from the IF97 backward equation T(p,s)
    (region 1 eq. (13); subregions 2a, 2b, 2c eqs. (25)-(27)) and are polished with Newton
    steps on the forward equation until s_pt(p, T) matches s (to about 1e-12 kJ/(kg K)).
    Wet points (s between the saturated-liquid and saturated-vapour entropies) are a mixture
    of the saturation states with the quality given by s.

    References
    ----------
    IAPWS R7-97(2012) sections 5.2.2 and 6.3.2.
    """
    return _call("t_ps", _CORE_T_PS, ("p", "s"), (p, s), return_details, _RANGE_PS)


def x_ps(p, s, return_details=False):
    """Vapour quality (dryness fraction) from pressure and entropy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    s : array_like
        Specific entropy [kJ/(kg K)]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    x : float, ndarray or Series
        Quality [-], 0 to 1 in the wet region; NaN for a single-phase state (reason
        ``SINGLE_PHASE``, not an error: a scalar call returns NaN).

    References
    ----------
    IAPWS R7-97(2012) section 8 (saturation line) with regions 1 and 2.
    """
    return _call("x_ps", _CORE_X_PS, ("p", "s"), (p, s), return_details, _RANGE_PS)


def t_ph(p, h, return_details=False):
    """Temperature from pressure and enthalpy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    h : array_like
        Specific enthalpy [kJ/kg]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    t : float, ndarray or Series
        Temperature [K] (the saturation temperature for a wet point)

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    Notes
    -----
    Compressed liquid and superheated points start from the IF97 backward equation T(p,h)
    (region 1 eq. (11); subregions 2a, 2b, 2c eqs. (22)-(24), split by p = 4 MPa and the
    B2bc line eq. (21)) and are polished with Newton steps on the forward equation until
    h_pt(p, T) matches h (to about 1e-10 kJ/kg). Wet points are a mixture of the saturation
    states with the quality given by h.

    References
    ----------
    IAPWS R7-97(2012) sections 5.2.1 and 6.3.1; region 3/5 points through the iapws package.
    """
    return _call("t_ph", _CORE_T_PH, ("p", "h"), (p, h), return_details, _RANGE_PH)


def x_ph(p, h, return_details=False):
    """Vapour quality (dryness fraction) from pressure and enthalpy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    h : array_like
        Specific enthalpy [kJ/kg]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    x : float, ndarray or Series
        Quality [-], 0 to 1 in the wet region; NaN for a single-phase state (reason
        ``SINGLE_PHASE``, not an error: a scalar call returns NaN). Moisture is 1 - x.

    References
    ----------
    IAPWS R7-97(2012) section 8 (saturation line) with regions 1 and 2.
    """
    return _call("x_ph", _CORE_X_PH, ("p", "h"), (p, h), return_details, _RANGE_PH)


def s_ph(p, h, return_details=False):
    """Specific entropy from pressure and enthalpy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    h : array_like
        Specific enthalpy [kJ/kg]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    s : float, ndarray or Series
        Specific entropy [kJ/(kg K)] (wet: mixture by quality)

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    Notes
    -----
    Compressed liquid and superheated points start from the IF97 backward equation T(p,h)
    (region 1 eq. (11); subregions 2a, 2b, 2c eqs. (22)-(24), split by p = 4 MPa and the
    B2bc line eq. (21)) and are polished with Newton steps on the forward equation until
    h_pt(p, T) matches h (to about 1e-10 kJ/kg). Wet points are a mixture of the saturation
    states with the quality given by h.

    References
    ----------
    IAPWS R7-97(2012) sections 5.2.1 and 6.3.1.
    """
    return _call("s_ph", _CORE_S_PH, ("p", "h"), (p, h), return_details, _RANGE_PH)


def v_ph(p, h, return_details=False):
    """Specific volume from pressure and enthalpy.

    Parameters
    ----------
    p : array_like
        Pressure, absolute [MPa]
    h : array_like
        Specific enthalpy [kJ/kg]
    return_details : bool
        Also return a ``PropertyDetails``.

    Returns
    -------
    v : float, ndarray or Series
        Specific volume [m3/kg] (wet: mixture by quality)

    Raises
    ------
    ValueError
        Scalar input outside IF97's validity.

    Notes
    -----
    Compressed liquid and superheated points start from the IF97 backward equation T(p,h)
    (region 1 eq. (11); subregions 2a, 2b, 2c eqs. (22)-(24), split by p = 4 MPa and the
    B2bc line eq. (21)) and are polished with Newton steps on the forward equation until
    h_pt(p, T) matches h (to about 1e-10 kJ/kg). Wet points are a mixture of the saturation
    states with the quality given by h.

    References
    ----------
    IAPWS R7-97(2012) sections 5.2.1 and 6.3.1.
    """
    return _call("v_ph", _CORE_V_PH, ("p", "h"), (p, h), return_details, _RANGE_PH)
