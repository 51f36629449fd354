"""The LP exhaust: saturation states at the exhaust pressure, the exhaust-loss curve against
last-stage annulus velocity, the UEEP, and the energy balance on the generator output.

References
----------
Spencer, R. C., Cotton, K. C. and Cannon, C. N. (1963), A method for predicting the
performance of steam turbine-generators 16,500 kW and larger, ASME paper 62-WA-209.
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from isentrope.calc import steam
from isentrope.calc.sections.inputs import call
from isentrope.calc.sections.reasons import (
    NO_CONVERGENCE,
    NO_EXHAUST_DATA,
    OK,
    OUT_OF_RANGE,
    UPSTREAM_INVALID,
    VELOCITY_OUTSIDE_CURVE,
    mark,
)

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


#: ELEP from UEEP in the energy-balance mode (fixed-point iteration on the exhaust loss).
_ELEP_TOL = 1e-6
_ELEP_MAX_ITER = 30


def exhaust_states(p_exh, mask):
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


def exhaust_saturation(p_exh, mask):
    """Exact h', h'', s', s'' at the exhaust pressure where ``mask``."""
    return exhaust_states(p_exh, mask)[0]


def exhaust_volume(p_exh, h, sat, vols, mask):
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
        v[other] = call(steam.v_ph, other, p_exh, h)[other]
    return v


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


def exhaust_figures(p_exh, h_elep, moisture, exhaust_flow, area, curve, sat, vols):
    """velocity [m/s], corrected loss [kJ/kg], reason; area None -> NO_EXHAUST_DATA."""
    n = p_exh.size
    reason = np.zeros(n, dtype=np.int64)
    if area is None:
        reason[:] = NO_EXHAUST_DATA
        nan = np.full(n, np.nan)
        return nan, nan, reason
    mark(reason, ~np.isfinite(h_elep), UPSTREAM_INVALID)
    mark(reason, ~np.isfinite(exhaust_flow), NO_EXHAUST_DATA)
    ok = reason == OK
    v = exhaust_volume(p_exh, h_elep, sat, vols, ok)
    mark(reason, ok & ~np.isfinite(v), OUT_OF_RANGE)
    vel = annulus_velocity(exhaust_flow, v, area)
    loss = wetness_corrected_exhaust_loss(curve(vel), moisture)
    mark(reason, ~np.isfinite(loss), VELOCITY_OUTSIDE_CURVE)
    good = reason == OK
    return np.where(np.isfinite(vel), vel, np.nan), np.where(good, loss, np.nan), reason


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


def elep_from_ueep(p_exh, ueep, exhaust_flow, area, curve, exhaust_sat, vols):
    """ELEP from UEEP by fixed-point iteration ELEP = UEEP - corrected loss(v(ELEP), Y(ELEP)).

    The loss depends on the end point only through the specific volume and the wetness, so
    the iteration contracts quickly; a fixed maximum number of steps with a per-point
    convergence check. Returns elep, moisture, velocity, loss, reason (flat arrays)."""
    n = p_exh.size
    reason = np.zeros(n, dtype=np.int64)
    mark(reason, ~np.isfinite(ueep), UPSTREAM_INVALID)
    if area is None:
        mark(reason, np.ones(n, dtype=bool), NO_EXHAUST_DATA)
    mark(reason, ~np.isfinite(exhaust_flow), NO_EXHAUST_DATA)
    ok = reason == OK
    hf, hg = exhaust_sat[0], exhaust_sat[1]
    mark(reason, ok & ~(np.isfinite(hf) & np.isfinite(hg)), OUT_OF_RANGE)
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
            v = exhaust_volume(
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
    mark(reason, ok & ~conv, NO_CONVERGENCE)
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
