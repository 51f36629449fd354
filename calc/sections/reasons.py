"""Reason codes of the section figures (0 = figure valid) and their packing.

One code per figure group; ``evaluate`` packs them into one integer, four bits per group
(``REASON_GROUPS`` in nibble order; ``decode_reason`` splits it again).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

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


def pack_reason(codes: Mapping[str, np.ndarray]) -> np.ndarray:
    out = np.zeros_like(next(iter(codes.values())), dtype=np.int64)
    for i, g in enumerate(REASON_GROUPS):
        out |= (codes[g].astype(np.int64) & 0xF) << (4 * i)
    return out


def mark(reason, mask, code):
    """Set ``code`` where ``mask`` holds and no earlier reason is set (first reason wins)."""
    reason[(reason == OK) & mask] = code
