"""Screening of plant readings before any physics: per-sample flags with reason codes.

Every sample of every role gets an integer bit mask of ``Reason`` codes; nothing is dropped.
Role-level codes (missing, out of range, flatline, spike) live in ``ScreenResult.flags``, one
column per role. Physical consistency of each turbine section (pressure falls, inlet
superheated, temperature falls, efficiency plausible) is checked row by row and lands in
``ScreenResult.section_flags``. ``row_flags`` ORs what one sample's calculation needs: the
codes of the needed roles and of the sections built only from them; ``ok`` is ``row_flags == 0``.

Everything is vectorised: running median filters (a Hampel-type identifier with a robust
block noise level) and running max/min over the whole column, steam properties over whole
arrays. The frame is in internal units (MPa absolute, K, MW,
kg/s, percent), one column per role.

A clean screen says the readings are self-consistent, not that the instruments are right.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation", J. American
   Statistical Association 69 (1974) 383-393 (the median/MAD outlier identifier).
.. [2] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997 for the
   Thermodynamic Properties of Water and Steam: critical point (eqs. 1-3), range of validity.
"""

from __future__ import annotations

import enum
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import ndimage

from isentrope.calc import rolling, sections, steam
from isentrope.calc.names import REQUIRED_ROLES

__all__ = [
    "Reason",
    "REASON_TEXT",
    "ScreenResult",
    "screen",
    "reason_names",
    "describe",
    "NEEDED_ROLES",
    "CONSISTENCY_PAIRS",
    "DEFAULT_RANGES",
    "FLATLINE_TOLERANCE",
    "DEFAULT_FLATLINE_RELATIVE",
    "SPIKE_FLOOR",
    "flatline_limit",
    "flatline_samples",
    "unit_online",
    "LOAD_ROLE",
]


class Reason(enum.IntFlag):
    """Why a sample is flagged. Bits combine; 0 means clean."""

    MISSING = 1
    OUT_OF_RANGE = 2
    FLATLINE = 4
    SPIKE = 8
    P_NOT_FALLING = 16
    INLET_NOT_SUPERHEATED = 32
    T_RISES = 64
    EFFICIENCY_IMPLAUSIBLE = 128
    GAUGE_ABSOLUTE_SUSPECT = 256


#: One line per reason, for reports and logs.
REASON_TEXT: Mapping[Reason, str] = {
    Reason.MISSING: "missing or not a number",
    Reason.OUT_OF_RANGE: "outside the configured instrument range",
    Reason.FLATLINE: "no change beyond the tolerance for longer than the flatline duration (stuck transmitter?)",
    Reason.SPIKE: "isolated jump against the running median (Hampel test)",
    Reason.P_NOT_FALLING: "section inlet pressure not above outlet pressure",
    Reason.INLET_NOT_SUPERHEATED: "section inlet at or below saturation temperature",
    Reason.T_RISES: "section outlet temperature above inlet temperature",
    Reason.EFFICIENCY_IMPLAUSIBLE: "section efficiency not computable or outside the plausible band",
    Reason.GAUGE_ABSOLUTE_SUSPECT: (
        "plausible only if a pressure were shifted by one atmosphere: "
        "a gauge reading declared absolute, or an absolute one declared gauge?"
    ),
}

# --- physical constants ------------------------------------------------------------------
#: Critical pressure [MPa] and temperature [K]: IAPWS R7-97(2012), eqs. (1)-(3).
P_CRIT = 22.064
T_CRIT = 647.096
#: Triple-point pressure [MPa]: IAPWS R7-97(2012) (611.657 Pa).
P_TRIPLE = 611.657e-6
#: IF97 range of validity used as default plausibility limits: 273.15 K <= T <= 1073.15 K,
#: p <= 100 MPa (IAPWS R7-97(2012), section 1; regions 1-4).
T_MIN_IF97, T_MAX_IF97, P_MAX_IF97 = 273.15, 1073.15, 100.0
#: One standard atmosphere [MPa] (NIST SP 811 B.8): the shift a gauge/absolute mix-up causes.
P_ATM = 0.101325

# --- roles ---------------------------------------------------------------------------------
#: Roles whose flags spoil a sample by default: the required roles of the role table.
NEEDED_ROLES = REQUIRED_ROLES

#: Inlet/outlet pairs checked for physical consistency (not the trended sections of calc.names):
#: name -> (inlet p, inlet T, outlet p, outlet T or None, check the efficiency band).
CONSISTENCY_PAIRS: Mapping[str, tuple[str, str, str, str | None, bool]] = {
    "hp": ("throttle_p", "throttle_t", "cold_reheat_p", "cold_reheat_t", True),
    "ip": ("hot_reheat_p", "hot_reheat_t", "crossover_p", "crossover_t", True),
    "lp": ("crossover_p", "crossover_t", "condenser_p", None, False),
    "lp_group": ("crossover_p", "crossover_t", "lp_extraction_p", "lp_extraction_t", True),
}

_HIGH_P = ("throttle_p", "cold_reheat_p", "hot_reheat_p", "first_stage_p")
_LOW_P = ("crossover_p", "lp_extraction_p")
_TEMPS = ("throttle_t", "cold_reheat_t", "hot_reheat_t", "crossover_t", "lp_extraction_t")
_PRESSURES = _HIGH_P + _LOW_P + ("condenser_p", "barometric_p")

#: Default plausibility limits (low, high) in internal units; ``ranges=`` overrides per role.
#: Steam pressures and temperatures: the IF97 range of validity (IAPWS R7-97(2012)), pressures
#: above the triple point. Condenser: a condenser in service is below the atmosphere (common
#: practice, no source). Barometric: 50-110 kPa (common practice, no source; see
#: isentrope.calc.units.BAROMETRIC_KPA_RANGE). Flow not negative; valve position 0-100 % with
#: 2 % calibration slack (common practice, no source).
DEFAULT_RANGES: Mapping[str, tuple[float, float]] = {
    **{r: (P_TRIPLE, P_MAX_IF97) for r in _HIGH_P + _LOW_P},
    "condenser_p": (P_TRIPLE, P_ATM),
    "barometric_p": (0.050, 0.110),
    **{r: (T_MIN_IF97, T_MAX_IF97) for r in _TEMPS},
    "main_steam_flow": (0.0, np.inf),
    "valve_position": (-2.0, 102.0),
}

#: Largest change [internal unit] still counted as "no change" by the flatline test (common
#: practice, no source: well below the noise of a live transmitter, above float round-off).
#: None disables the test: a control valve may rest wide open for hours, and barometers are
#: often recorded at 0.1 kPa resolution. These are floors: a relative tolerance (see
#: ``DEFAULT_FLATLINE_RELATIVE``) widens the band where it is larger.
FLATLINE_TOLERANCE: Mapping[str, float | None] = {
    **{r: 1e-4 for r in _HIGH_P},  # 0.1 kPa
    **{r: 1e-5 for r in _LOW_P},  # 0.01 kPa
    "condenser_p": 1e-6,  # 1 Pa
    **{r: 0.01 for r in _TEMPS},  # K
    "gross_output": 0.01,  # MW
    "main_steam_flow": 0.01,  # kg/s
    "valve_position": None,
    "barometric_p": None,
}

#: Smallest deviation from the running median that can be a spike: max(relative * |median|,
#: absolute) [internal unit] (common practice, no source). Keeps the Hampel test quiet on
#: signals so smooth that their MAD is near zero (quantised or compressed historian data).
SPIKE_FLOOR: Mapping[str, tuple[float, float]] = {
    **{r: (0.005, 1e-4) for r in _HIGH_P + _LOW_P + ("condenser_p",)},
    "barometric_p": (0.0, 5e-4),
    **{r: (0.0, 2.0) for r in _TEMPS},
    "gross_output": (0.005, 1.0),
    "main_steam_flow": (0.005, 1.0),
    "valve_position": (0.0, 2.0),
}

#: Smallest spike on data stored by exception, in deadbands of the role [-]: the historian
#: keeps a reading only when it moved beyond its deadband, so an excursion of up to about two
#: deadbands from a held value is what ordinary noise looks like there (project choice, no
#: source). Raises the absolute part of ``SPIKE_FLOOR``.
DEADBAND_SPIKE_FACTOR = 2.0
#: Flatline duration: common practice, no source (a live transmitter moves within minutes).
DEFAULT_FLATLINE = "2h"
#: Relative flatline tolerance [-]: a stretch is "unchanged" while its readings span no more
#: than max(absolute tolerance of the role, relative * largest |reading| of the stretch).
#: 1e-6 is the default of ``[screening] flatline_tolerance`` (project choice, no source); at
#: the readings of a steam unit (up to 35 MPa, 1073 K, 1300 MW) it stays below every floor of
#: ``FLATLINE_TOLERANCE``, so there the absolute floors decide.
DEFAULT_FLATLINE_RELATIVE = 1e-6
#: Spike test window [samples] and threshold [noise standard deviations]. A sample is a spike
#: when it lies further than threshold * sigma from the running median of the window, sigma
#: being the robust (MAD-based) noise level of its block. The textbook Hampel identifier uses
#: 3 (Hampel 1974); 5 keeps false flags on Gaussian noise rare over a year of one-minute data
#: (common practice, no source).
DEFAULT_SPIKE_WINDOW = 15
DEFAULT_SPIKE_THRESHOLD = 5.0
#: Clock interval over which the noise level of the spike test is estimated, aligned on the
#: Unix epoch (UTC) so that results do not depend on where a frame starts (common practice,
#: no source: long enough for a stable median at one-minute sampling, short enough to follow
#: changes of the noise with load). A caller processing chunks needs this much data on either
#: side of a chunk for final spike flags.
SPIKE_SCALE_BLOCK = "1h"
#: MAD to standard deviation for Gaussian noise: 1 / Phi^-1(3/4) = 1.4826.
MAD_TO_SIGMA = 1.482602218505602
#: Plausible HP/IP/LP-dry-group efficiency band [fraction] (project default; typical large
#: reheat units run HP 0.82-0.88 and IP 0.89-0.93, from memory, calc/REFERENCES.md).
DEFAULT_EFFICIENCY_BAND = (0.5, 1.0)

_HINT_TRIGGERS = Reason.P_NOT_FALLING | Reason.INLET_NOT_SUPERHEATED | Reason.EFFICIENCY_IMPLAUSIBLE


def reason_names(mask) -> list[str]:
    """Names of the reason bits set in ``mask`` (an int or ``Reason``), lowest bit first."""
    try:
        value = int(mask)
    except (TypeError, ValueError):
        raise ValueError(f"mask must be an integer bit mask, found {mask!r}") from None
    unknown = value & ~sum(int(r) for r in Reason)
    if value < 0 or unknown:
        raise ValueError(f"mask {value} has bits that are not Reason codes ({unknown})")
    return [r.name for r in Reason if value & r]


def describe(mask) -> str:
    """One readable line for a mask: "NAME (text); NAME (text)"; "" when clean."""
    return "; ".join(f"{name} ({REASON_TEXT[Reason[name]]})" for name in reason_names(mask))


@dataclass(frozen=True)
class ScreenResult:
    """Outcome of ``screen``.

    Attributes
    ----------
    flags : pandas.DataFrame
        Role-level ``Reason`` bit mask per sample, one int64 column per column of the frame.
    section_flags : pandas.DataFrame
        Per section present ("hp", "ip", "lp", "lp_group"): the flags of its roles ORed with
        its physics codes, int64.
    row_flags : pandas.Series
        int64 mask per sample: OR of the ``needed`` roles' flags and of the sections made only
        of needed roles.
    ok : pandas.Series
        bool, ``row_flags == 0``.
    needed : tuple of str
        Roles that spoil a sample.
    details : pandas.DataFrame or None
        With ``return_details=True``: the section efficiencies used by the band test
        ("<section>_efficiency" [fraction], NaN where not evaluated) and the spike score of each
        tested role ("<role>_spike_score", deviation from the running median in noise standard
        deviations).
    """

    flags: pd.DataFrame
    section_flags: pd.DataFrame
    row_flags: pd.Series
    ok: pd.Series
    needed: tuple[str, ...]
    details: pd.DataFrame | None = None

    @staticmethod
    def names(mask) -> list[str]:
        """Names of the reasons in ``mask``; see ``reason_names``."""
        return reason_names(mask)

    def summary(self) -> pd.DataFrame:
        """Sample counts per role (and section, and "row") and reason.

        Rows are the roles, then the sections, then "row" (``row_flags``); columns are the
        reason names plus "flagged" (any reason) and "samples".
        """
        blocks = {c: self.flags[c].to_numpy() for c in self.flags.columns}
        blocks.update({f"section:{c}": self.section_flags[c].to_numpy() for c in self.section_flags.columns})
        blocks["row"] = self.row_flags.to_numpy()
        rows = {}
        for label, m in blocks.items():
            counts = {r.name: int(np.count_nonzero(m & int(r))) for r in Reason}
            counts["flagged"] = int(np.count_nonzero(m))
            counts["samples"] = int(len(m))
            rows[label] = counts
        return pd.DataFrame.from_dict(rows, orient="index")

    def describe_rows(self) -> pd.Series:
        """Reason names of each flagged sample, comma-separated (flagged samples only)."""
        flagged = self.row_flags[self.row_flags != 0]
        labels = {int(v): ",".join(reason_names(v)) for v in np.unique(flagged.to_numpy())}
        return flagged.map(labels).astype(object)


# --- role-level tests ----------------------------------------------------------------------
@dataclass(frozen=True)
class _Grid:
    """Window bookkeeping shared by every role's flatline test."""

    t: np.ndarray  # sample times [ns]
    start: np.ndarray  # first index of the trailing window [t - W, t]
    window_ns: int
    step: int | None  # constant step [ns], or None on an irregular grid
    grace: int  # one sampling step [ns]
    spans: np.ndarray  # window start sample within one step of t - W (dense case)
    rows: np.ndarray  # arange(n)

    @classmethod
    def build(cls, t: np.ndarray, window_ns: int) -> _Grid:
        step = rolling.regular_step(t)
        grace = step if step is not None else rolling.typical_step(t)
        start = rolling.window_start(t, window_ns)
        rows = np.arange(len(t))
        spans = (t[start] <= t - window_ns + grace) & (start < rows)
        return cls(t, start, window_ns, step, grace, spans, rows)


def flatline_limit(hi, lo, tolerance: float, relative: float = DEFAULT_FLATLINE_RELATIVE):
    """Largest span of readings still counted as "unchanged" by the flatline test.

    Parameters
    ----------
    hi, lo : array_like
        Largest and smallest reading of a stretch [internal unit].
    tolerance : float
        Absolute floor of the role (``FLATLINE_TOLERANCE``) [internal unit].
    relative : float
        Tolerance relative to the largest magnitude of the stretch, max(|hi|, |lo|) [-].

    Returns
    -------
    ndarray or float
        max(tolerance, relative * max(|hi|, |lo|)) [internal unit]; NaN where hi or lo is NaN
        and ``relative`` > 0.
    """
    if relative == 0:
        return np.full(np.shape(hi), float(tolerance)) if np.ndim(hi) else float(tolerance)
    with np.errstate(invalid="ignore"):
        return np.maximum(tolerance, relative * np.maximum(np.abs(hi), np.abs(lo)))


def _number(value) -> float | None:
    """``value`` as a float, None when it is not a real number (bools are not numbers here)."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        return None
    return float(value)


def _check_flatline_tolerances(tolerance, relative) -> None:
    tol = _number(tolerance)
    if tol is None or not (np.isfinite(tol) and tol >= 0):
        raise ValueError(f"flatline tolerance must be a finite number >= 0, found {tolerance!r}")
    rel = _number(relative)
    if rel is None or not (np.isfinite(rel) and 0 <= rel < 1):
        raise ValueError(f"flatline_relative must be a number in [0, 1), found {relative!r}")


def _relative_part_matters(values: np.ndarray, valid: np.ndarray, tol: float, rel_step: float) -> bool:
    """False when ``rel_step`` times the largest finite |value| of the column is within the
    floor ``tol``: then no step and no window of the column has a limit above ``tol``, and the
    flatline test may leave the relative part out with the same result (the rounded products
    rel * m <= rel_step * m <= rel_step * largest grow with m). At the default 1e-6 this holds
    for every reading of a steam unit; it takes the flatline test of a unit-year (14 roles of
    the synthetic unit) from 119 to 100 ms (best of 3, shared 2-core machine)."""
    if not valid.any():
        return False
    largest = max(abs(float(np.nanmax(values))), abs(float(np.nanmin(values))))
    return not rel_step * largest <= tol


def _flatline(values: np.ndarray, grid: _Grid, tol: float, rel: float = 0.0) -> np.ndarray:
    """Samples inside a stretch of at least the window whose finite values span no more than
    ``flatline_limit(hi, lo, tol, rel)`` (hi, lo: largest and smallest value of the window)."""
    n = len(values)
    if n < 2:
        return np.zeros(n, dtype=bool)
    valid = np.isfinite(values)
    dense = bool(valid.all())
    # Cheap pre-check: a window can only be flat if no step d between successive finite
    # samples inside it exceeds max(tol, rel * m), m the larger magnitude of the pair. (Where
    # the relative part decides, a flat window lies on one side of zero, say 0 < lo <= hi, with
    # hi - lo <= rel * hi; a step inside it has d <= hi - lo and m >= lo + d, and d > rel * m
    # would give hi - lo < d.) Live signals move all the time, so the running max/min is
    # usually not needed at all. The relative part is widened by 1e-9 against round-off: a
    # step let through here is still judged by the exact test below.
    rel_step = rel * (1.0 + 1e-9)
    if rel > 0 and not _relative_part_matters(values, valid, tol, rel_step):
        rel = rel_step = 0.0
    if dense:
        moves = np.empty(n, dtype=np.int64)
        moves[0] = 0
        d = np.abs(np.diff(values))
        if rel > 0:
            step_tol = np.maximum(tol, rel_step * np.maximum(np.abs(values[1:]), np.abs(values[:-1])))
            np.greater(d, step_tol, out=moves[1:], casting="unsafe")
        else:
            np.greater(d, tol, out=moves[1:], casting="unsafe")
        first = grid.start
        spans = grid.spans
    else:
        idx = np.flatnonzero(valid)
        if len(idx) < 2:
            return np.zeros(n, dtype=bool)
        moves = np.zeros(n, dtype=np.int64)
        v = values[idx]
        step_tol = tol if rel == 0 else np.maximum(tol, rel_step * np.maximum(np.abs(v[1:]), np.abs(v[:-1])))
        moves[idx[1:]] = np.abs(np.diff(v)) > step_tol
        first = np.minimum(rolling.next_valid(valid)[grid.start], n - 1)
        spans = (grid.t[first] <= grid.t - grid.window_ns + grid.grace) & (first < grid.rows)
    cm = np.cumsum(moves)
    # moves in (first, e] = cm[e] - cm[first]
    candidate = spans & (cm == cm[first])
    if not dense:
        candidate &= valid
    if not candidate.any():
        return np.zeros(n, dtype=bool)
    hi, lo = rolling.trailing_max_min(values, grid.t, grid.window_ns, grid.step)
    with np.errstate(invalid="ignore"):
        end_ok = candidate & (hi - lo <= (tol if rel == 0 else flatline_limit(hi, lo, tol, rel)))
    return rolling.covered(end_ok, grid.start) & valid


def flatline_samples(
    values: pd.Series,
    flatline: str | pd.Timedelta = DEFAULT_FLATLINE,
    tolerance: float = 0.0,
    relative: float = DEFAULT_FLATLINE_RELATIVE,
) -> pd.Series:
    """Which samples of one reading lie in a stretch that did not change for ``flatline``.

    The test of ``screen`` (Reason.FLATLINE) for a single series: a sample is flagged when it
    lies inside a stretch of at least ``flatline`` whose finite readings span no more than
    ``flatline_limit(hi, lo, tolerance, relative)``.

    Parameters
    ----------
    values : pandas.Series
        Readings of one role in internal units (MPa abs, K, MW, kg/s, %), sorted unique UTC
        DatetimeIndex; NaN samples are never flagged and do not break a stretch [internal unit].
    flatline : str or Timedelta, optional
        Shortest flagged stretch [duration].
    tolerance : float, optional
        Absolute floor (``FLATLINE_TOLERANCE`` of the role) [internal unit].
    relative : float, optional
        Relative tolerance, in [0, 1) [-].

    Returns
    -------
    pandas.Series
        bool, same index as ``values``.

    Raises
    ------
    ValueError
        Bad index, duration or tolerances, naming what was found.
    """
    if not isinstance(values, pd.Series):
        raise ValueError(f"values must be a pandas Series, found {type(values).__name__}")
    _check_flatline_tolerances(tolerance, relative)
    t = rolling.times_ns(values.index)
    grid = _Grid.build(t, rolling.to_ns(flatline, "flatline"))
    try:
        v = values.to_numpy(dtype=float, na_value=np.nan)
    except (TypeError, ValueError):
        raise ValueError(f"values are not numeric (dtype {values.dtype})") from None
    return pd.Series(
        _flatline(v, grid, float(tolerance), float(relative)), index=values.index, name=values.name
    )


def _block_medians(d: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """Median of the finite ``d`` in each group (groups contiguous and non-decreasing); NaN if none."""
    fin = np.isfinite(d)
    d, group = d[fin], group[fin]
    out = np.full(n_groups, np.nan)
    if len(d) == 0:
        return out
    counts = np.bincount(group, minlength=n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    has = counts > 0
    widest = int(counts.max())
    if n_groups * widest <= 4 * len(d) + 4096:
        # one row per group, NaN-padded, sorted row by row (groups are contiguous in d)
        pos = np.arange(len(d)) - starts[group]
        rows = np.full((n_groups, widest), np.nan)
        rows[group, pos] = d
        rows.sort(axis=1)
        r = np.flatnonzero(has)
        c = counts[has]
        out[has] = 0.5 * (rows[r, (c - 1) // 2] + rows[r, c // 2])
        return out
    # very uneven groups: one sort over all (measured about 15x slower)
    order = np.lexsort((d, group))
    d_sorted = d[order]
    lo = starts[has] + (counts[has] - 1) // 2
    hi = starts[has] + counts[has] // 2
    out[has] = 0.5 * (d_sorted[lo] + d_sorted[hi])
    return out


def _noise_scale(values: np.ndarray, t: np.ndarray, block_ns: int) -> np.ndarray:
    """Robust noise standard deviation per sample, from successive differences per clock block.

    sigma = 1.4826 * median(|x_i - x_i-1|) / sqrt(2) over the pairs of successive finite
    samples that lie in the same block; blocks are fixed intervals of ``block_ns`` counted
    from the Unix epoch (UTC), so a sample's noise level depends only on the samples of its
    own block, never on where the frame starts. The differences of white noise have variance
    2 sigma^2; a spike or a step moves the median of a block little. NaN for a block with
    no such pair (no spike test there).

    It is chosen for the clock alignment and the steadier estimate (a median of about 60
    differences instead of 15), not for speed; it costs about as much as a second running
    median filter (calc/DECISIONS.md, "Speed of the kernels").
    """
    n = len(values)
    if n < 2:
        return np.full(n, np.nan)
    factor = MAD_TO_SIGMA / np.sqrt(2.0)
    step = rolling.regular_step(t)
    if step is not None and block_ns % step == 0 and block_ns // step >= 2:
        m = block_ns // step
        first_block_end = (t[0] // block_ns + 1) * block_ns
        in_first = int(-(-(first_block_end - t[0]) // step))  # samples of the first block
        pad = m - in_first
        nb = -(-(n + pad) // m)
        grid = np.full(nb * m, np.nan)
        grid[pad : pad + n] = values
        rows = grid.reshape(nb, m)
        if np.isfinite(values).all():
            d = np.abs(np.diff(rows, axis=1))
        else:
            # pair each finite sample with the previous finite one of its row (block)
            fin = np.isfinite(rows)
            col = np.where(fin, np.arange(m), -1)
            last = np.maximum.accumulate(col, axis=1)
            prev = last[:, :-1]
            r_idx = np.arange(nb)[:, None]
            d = np.abs(rows[:, 1:] - rows[r_idx, np.maximum(prev, 0)])
            d[(prev < 0) | ~fin[:, 1:]] = np.nan
        d.sort(axis=1)  # NaN last
        c = np.isfinite(d).sum(axis=1)
        r = np.arange(nb)
        lo = np.maximum((c - 1) // 2, 0)
        hi = np.maximum(c // 2, 0)
        med = np.where(c > 0, 0.5 * (d[r, lo] + d[r, np.minimum(hi, m - 2)]), np.nan)
        return np.repeat(med * factor, m)[pad : pad + n]
    finite = np.flatnonzero(np.isfinite(values))
    out = np.full(n, np.nan)
    if len(finite) < 2:
        return out
    tv, v = t[finite], values[finite]
    block = tv // block_ns
    block_id = np.concatenate(([0], np.cumsum(block[1:] != block[:-1])))
    n_groups = int(block_id[-1]) + 1
    same = block_id[1:] == block_id[:-1]
    d = np.where(same, np.abs(np.diff(v)), np.nan)
    med = _block_medians(d, block_id[1:], n_groups)
    out[finite] = med[block_id] * factor
    return out


def _spike(values, t, window, threshold, floor, block_ns, want_score):
    """Hampel-type test over the finite samples: (flag array, score array or None)."""
    n = len(values)
    finite = np.isfinite(values)
    dense = bool(finite.all())
    v = values if dense else values[finite]
    if len(v) < window:
        return np.zeros(n, dtype=bool), (np.full(n, np.nan) if want_score else None)
    med = ndimage.median_filter(v, size=window, mode="mirror")
    resid = v - med
    np.abs(resid, out=resid)
    scale = _noise_scale(values, t, block_ns)
    if not dense:
        scale = scale[finite]
    limit = scale * threshold
    rel, absolute = floor
    if rel > 0:
        lim_rel = np.abs(med)
        lim_rel *= rel
        np.maximum(lim_rel, absolute, out=lim_rel)
        np.maximum(limit, lim_rel, out=limit)
    else:
        np.maximum(limit, absolute, out=limit)
    with np.errstate(invalid="ignore"):
        hit = resid > limit  # NaN limit (block without a noise level): no flag
    score = None
    if want_score:
        with np.errstate(divide="ignore", invalid="ignore"):
            sc = np.where(scale > 0, resid / scale, np.where(resid > 0, np.inf, 0.0))
            sc = np.where(np.isnan(scale), np.nan, sc)
    if dense:
        return hit, (sc if want_score else None)
    flag = np.zeros(n, dtype=bool)
    flag[finite] = hit
    if want_score:
        score = np.full(n, np.nan)
        score[finite] = sc
    return flag, score


# --- section physics -----------------------------------------------------------------------
def _subset(a: np.ndarray, sel: np.ndarray | None) -> np.ndarray:
    """a[sel], or a itself when sel is None (all rows)."""
    return a if sel is None else a[sel]


def _saturation_temperature(p: np.ndarray) -> np.ndarray:
    """T_sat(p) [K] below the critical pressure, T_crit at and above it, NaN below the triple point."""
    sub = (p >= P_TRIPLE) & (p < P_CRIT)
    if sub.all():
        return np.asarray(steam.t_sat(p), dtype=float)
    out = np.where(p >= P_CRIT, T_CRIT, np.nan)
    if sub.any():
        out[sub] = np.asarray(steam.t_sat(p[sub]), dtype=float)
    return out


def _section_codes(p_in, t_in, p_out, t_out, with_efficiency, band, margin, given=None):
    """Physics codes and efficiency for rows with finite inputs (arrays of equal length).

    ``given``: efficiencies already computed for these rows [fraction], used instead of
    calling section_efficiency.
    """
    codes = np.zeros(len(p_in), dtype=np.int64)
    codes[p_in <= p_out] |= int(Reason.P_NOT_FALLING)
    codes[~(t_in > _saturation_temperature(p_in) + margin)] |= int(Reason.INLET_NOT_SUPERHEATED)
    if t_out is not None:
        codes[t_out > t_in] |= int(Reason.T_RISES)
    if not with_efficiency:
        return codes, None
    todo = codes == 0
    if given is not None:
        eff = np.where(todo, given, np.nan)
    elif todo.all():
        eff = np.asarray(sections.section_efficiency(p_in, t_in, p_out, t_out), dtype=float)
    else:
        eff = np.full(len(p_in), np.nan)
        if todo.any():
            eff[todo] = np.asarray(
                sections.section_efficiency(p_in[todo], t_in[todo], p_out[todo], t_out[todo]), dtype=float
            )
    low, high = band
    with np.errstate(invalid="ignore"):
        bad = todo & ~((eff >= low) & (eff <= high))
    codes[bad] |= int(Reason.EFFICIENCY_IMPLAUSIBLE)
    return codes, eff


def _physics(frame_values, roles, band, margin, given=None):
    """Codes and efficiency of one section over the whole frame (0 / NaN where inputs missing)."""
    p_in_r, t_in_r, p_out_r, t_out_r, with_eff = roles
    cols = [p_in_r, t_in_r, p_out_r] + ([t_out_r] if t_out_r else [])
    arrays = [frame_values[c] for c in cols]
    n = len(arrays[0])
    finite = np.logical_and.reduce([np.isfinite(a) for a in arrays])
    sel = None if finite.all() else np.flatnonzero(finite)
    codes = np.zeros(n, dtype=np.int64)
    eff = np.full(n, np.nan) if with_eff else None
    if n == 0 or (sel is not None and len(sel) == 0):
        return codes, eff
    p_in, t_in, p_out = (_subset(a, sel) for a in arrays[:3])
    t_out = _subset(arrays[3], sel) if t_out_r else None
    g = None if given is None or not with_eff else _subset(given, sel)
    c, e = _section_codes(p_in, t_in, p_out, t_out, with_eff, band, margin, g)
    # Gauge/absolute hint: would shifting one of the two pressures by one atmosphere make an
    # impossible expansion plausible?
    suspect = np.flatnonzero(c & int(_HINT_TRIGGERS))
    if len(suspect) and g is not None:
        # given efficiencies: a shift can only explain what the readings themselves show
        t_o = t_out[suspect] if t_out is not None else None
        c0, _ = _section_codes(p_in[suspect], t_in[suspect], p_out[suspect], t_o, with_eff, band, margin)
        suspect = suspect[c0 != 0]
    if len(suspect):
        hint = np.zeros(len(suspect), dtype=bool)
        ti = t_in[suspect]
        to = t_out[suspect] if t_out is not None else None
        for dp_in, dp_out in ((P_ATM, 0.0), (-P_ATM, 0.0), (0.0, P_ATM), (0.0, -P_ATM)):
            pi, po = p_in[suspect] + dp_in, p_out[suspect] + dp_out
            possible = np.flatnonzero((pi > 0) & (po > 0) & ~hint)
            if len(possible) == 0:
                continue
            c2, _ = _section_codes(
                pi[possible],
                ti[possible],
                po[possible],
                to[possible] if to is not None else None,
                with_eff,
                band,
                margin,
            )
            hint[possible[c2 == 0]] = True
        c[suspect[hint]] |= int(Reason.GAUGE_ABSOLUTE_SUSPECT)
    if sel is None:
        return c, e
    codes[sel] = c
    if with_eff:
        eff[sel] = e
    return codes, eff


# --- unit state ----------------------------------------------------------------------------
#: The role whose reading says whether the unit runs: generator gross output [MW].
LOAD_ROLE = "gross_output"


def unit_online(frame: pd.DataFrame, online_mw: float) -> pd.Series:
    """Whether the unit is online at each sample: gross output at or above ``online_mw``.

    Tag-quality rules judge the tags only while the unit runs: offline, pressures and
    temperatures decay, transmitters leave their ranges and historians stop storing, and none
    of that is an instrument fault.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings in internal units with a "gross_output" column [MW].
    online_mw : float
        Below this gross output the unit is offline [MW].

    Returns
    -------
    pandas.Series
        bool per sample, same index. A sample without a gross output reading counts as
        offline when more than half of the other columns are missing as well (no output at
        all: the historian has next to nothing for the unit), and as online otherwise (a
        failed output transmitter on a running unit keeps its own MISSING flag in force).
    """
    if not isinstance(frame, pd.DataFrame) or LOAD_ROLE not in frame.columns:
        raise ValueError(f"unit_online needs a DataFrame with a {LOAD_ROLE!r} column (gross output, MW)")
    limit = _number(online_mw)
    if limit is None or not np.isfinite(limit):
        raise ValueError(f"online_mw must be a finite number of MW, found {online_mw!r}")
    load = frame[LOAD_ROLE].to_numpy(dtype=float, na_value=np.nan)
    others = frame.drop(columns=[LOAD_ROLE])
    with np.errstate(invalid="ignore"):
        online = load >= limit
    absent = ~np.isfinite(load)
    if absent.any() and len(others.columns):
        missing_share = others.isna().to_numpy().mean(axis=1)
        online |= absent & (missing_share <= 0.5)
    return pd.Series(online, index=frame.index, name="online")


# --- entry point ---------------------------------------------------------------------------
def screen(
    frame: pd.DataFrame,
    ranges: Mapping[str, tuple[float, float] | None] | None = None,
    flatline: str | pd.Timedelta | None = DEFAULT_FLATLINE,
    spike: int | None = DEFAULT_SPIKE_WINDOW,
    *,
    spike_threshold: float = DEFAULT_SPIKE_THRESHOLD,
    spike_scale_block: str | pd.Timedelta = SPIKE_SCALE_BLOCK,
    flatline_tolerance: Mapping[str, float | None] | None = None,
    flatline_relative: float = DEFAULT_FLATLINE_RELATIVE,
    spike_floor: Mapping[str, tuple[float, float]] | None = None,
    efficiency_band: tuple[float, float] = DEFAULT_EFFICIENCY_BAND,
    superheat_margin: float = 0.0,
    needed: tuple[str, ...] | None = None,
    efficiencies: Mapping[str, object] | None = None,
    deadband: Mapping[str, float] | None = None,
    return_details: bool = False,
) -> ScreenResult:
    """Flag every sample of every role with the reasons it cannot be trusted.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings in internal units, one float column per role, a sorted unique UTC
        DatetimeIndex. Columns that are not roles get the missing and range tests only
        (and flatline/spike if a tolerance/floor is given for them).
    ranges : mapping of str to (float, float) or None, optional
        Role -> (low, high) instrument range in internal units (MPa abs, K, MW, kg/s, %),
        overriding ``DEFAULT_RANGES``; None for a role switches its range test off.
    flatline : str or Timedelta or None, optional
        A role whose readings stay within its flatline limit for at least this long is
        flagged FLATLINE over the whole stretch [duration]. The limit of a stretch is
        max(absolute tolerance of the role, ``flatline_relative`` * largest |reading| of the
        stretch) (``flatline_limit``). None switches the test off.
    spike : int or None, optional
        Window of the running median [samples, odd, >= 3], centred, over the finite
        samples. None switches the test off.
    spike_threshold : float, optional
        Deviation from the running median, in robust noise standard deviations (MAD of
        successive differences within each clock interval of ``spike_scale_block``), beyond
        which a sample is a spike [-]; never less than the role's ``SPIKE_FLOOR``.
    spike_scale_block : str or Timedelta, optional
        Clock interval (aligned on the Unix epoch, UTC) of the noise level [duration]; the
        result for a sample depends only on the samples of its own interval and the spike
        window around it.
    flatline_tolerance : mapping of str to float or None, optional
        Role -> absolute tolerance [internal unit], overriding ``FLATLINE_TOLERANCE`` (None:
        no test for the role, whatever ``flatline_relative``).
    flatline_relative : float, optional
        Tolerance relative to the reading, in [0, 1) (default ``DEFAULT_FLATLINE_RELATIVE``;
        0 leaves the absolute tolerances alone) [-].
    spike_floor : mapping of str to (float, float), optional
        Role -> (relative [-], absolute [internal unit]) smallest spike, overriding ``SPIKE_FLOOR``.
    efficiency_band : (float, float), optional
        Plausible HP, IP and LP-dry-group efficiency [fraction]; outside is EFFICIENCY_IMPLAUSIBLE.
    superheat_margin : float, optional
        A section inlet must be more than this above saturation [K].
    needed : tuple of str, optional
        Roles whose flags spoil a sample; default ``NEEDED_ROLES`` present in the frame.
    efficiencies : mapping of str to array_like, optional
        Section name ("hp", "ip", "lp_group") -> efficiency per sample already computed
        from the same readings [fraction], aligned with ``frame``; used for the band test
        instead of calling ``section_efficiency`` again (it dominates the run time of a
        screen; calc/DECISIONS.md, "Speed of the kernels").
    deadband : mapping of str to float, optional
        Role -> exception deadband of the historian [internal unit], for readings taken onto a
        grid from data stored by exception (isentrope.daemon.stores.grid). The spike floor of
        the role becomes at least ``DEADBAND_SPIKE_FACTOR`` deadbands (held readings have no
        scatter, so the noise level of the spike test falls to its floor). The flatline test
        is left as it is: a held value is an exact copy, so a flat stretch longer than the
        longest hold holds two stored readings, and a live transmitter's stored readings
        differ by its noise while a stuck one repeats its value (the caller keeps
        ``flatline`` longer than every hold; ``isentrope.daemon.config`` checks it).
    return_details : bool, optional
        Also return section efficiencies and spike scores in ``details``.

    Returns
    -------
    ScreenResult
        Flags per role, per section and per row, ``ok`` and optional details; same index as
        ``frame``. No row is dropped.

    Raises
    ------
    ValueError
        Bad arguments (index not a sorted unique DatetimeIndex, non-numeric column, even or
        too small spike window, inverted range or band), naming what was found.

    Notes
    -----
    Section physics needs ``isentrope.calc.steam`` (saturation temperature) and
    ``isentrope.calc.sections.section_efficiency``; a section is checked only when all its
    roles are columns of the frame. Physics codes set GAUGE_ABSOLUTE_SUSPECT in addition when
    moving the inlet or outlet pressure by one atmosphere (101.325 kPa) would make the section
    consistent; out-of-range pressures get it when the shifted value is in range.
    """
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"frame must be a pandas DataFrame, found {type(frame).__name__}")
    t = rolling.times_ns(frame.index)
    n = len(frame)
    values: dict[str, np.ndarray] = {}
    for c in frame.columns:
        try:
            # contiguous: a column of a DataFrame block is a strided view (a 128-byte stride
            # for 16 roles), and every pass of the tests below runs slower over it (the
            # flatline test of a unit-year of the synthetic unit: 265 ms strided, 100 ms not)
            values[c] = np.ascontiguousarray(frame[c].to_numpy(dtype=float, na_value=np.nan))
        except (TypeError, ValueError):
            raise ValueError(f"column {c!r} is not numeric (dtype {frame[c].dtype})") from None

    rng = dict(DEFAULT_RANGES)
    if ranges is not None:
        rng.update(ranges)
    for role, r in rng.items():
        if r is not None and not (len(r) == 2 and r[0] <= r[1]):
            raise ValueError(f"range of {role} must be (low, high) with low <= high, found {r!r}")
    tolerance = dict(FLATLINE_TOLERANCE)
    if flatline_tolerance is not None:
        tolerance.update(flatline_tolerance)
    floors = dict(SPIKE_FLOOR)
    if spike_floor is not None:
        floors.update(spike_floor)
    for role, band in (deadband or {}).items():
        b = _number(band)
        if b is None or not (np.isfinite(b) and b >= 0):
            raise ValueError(f"deadband of {role} must be a finite number >= 0, found {band!r}")
        if role in floors:
            rel, absolute = floors[role]
            floors[role] = (rel, max(absolute, DEADBAND_SPIKE_FACTOR * b))
    for role, tol in tolerance.items():
        if tol is not None:
            try:
                _check_flatline_tolerances(tol, 0.0)
            except ValueError:
                raise ValueError(
                    f"flatline tolerance of {role} must be a finite number >= 0 or None, found {tol!r}"
                ) from None
    _check_flatline_tolerances(0.0, flatline_relative)
    flat_ns = None if flatline is None else rolling.to_ns(flatline, "flatline")
    if spike is not None:
        if isinstance(spike, bool) or not isinstance(spike, (int, np.integer)) or spike < 3 or spike % 2 == 0:
            raise ValueError(f"spike window must be an odd number of samples >= 3, found {spike!r}")
        if not spike_threshold > 0:
            raise ValueError(f"spike_threshold must be > 0, found {spike_threshold!r}")
    low_eff, high_eff = efficiency_band
    if not 0 <= low_eff < high_eff:
        raise ValueError(
            f"efficiency_band must be (low, high) with 0 <= low < high, found {efficiency_band!r}"
        )
    grid = _Grid.build(t, flat_ns) if flat_ns is not None else None
    block_ns = rolling.to_ns(spike_scale_block, "spike_scale_block")
    given: dict[str, np.ndarray] = {}
    for name, e in (efficiencies or {}).items():
        if name not in CONSISTENCY_PAIRS or not CONSISTENCY_PAIRS[name][4]:
            raise ValueError(f"efficiencies: unknown section {name!r}; give 'hp', 'ip' or 'lp_group'")
        if isinstance(e, pd.Series) and not e.index.equals(frame.index):
            raise ValueError(f"efficiencies[{name!r}] must have the same index as frame")
        arr = np.asarray(e, dtype=float)
        if arr.shape != (n,):
            raise ValueError(
                f"efficiencies[{name!r}] must have one value per row ({n}), found shape {arr.shape}"
            )
        given[name] = arr

    flag_block = np.zeros((n, len(values)), dtype=np.int64, order="F")
    flags: dict[str, np.ndarray] = {}
    scores: dict[str, np.ndarray] = {}
    for k, (c, v) in enumerate(values.items()):
        f = flag_block[:, k]
        finite = np.isfinite(v)
        f[~finite] |= int(Reason.MISSING)
        r = rng.get(c)
        if r is not None:
            lo, hi = r
            with np.errstate(invalid="ignore"):
                out = finite & ((v < lo) | (v > hi))
            f[out] |= int(Reason.OUT_OF_RANGE)
            if c in _PRESSURES and out.any():
                shifted_ok = ((v + P_ATM >= lo) & (v + P_ATM <= hi)) | ((v - P_ATM >= lo) & (v - P_ATM <= hi))
                f[out & shifted_ok] |= int(Reason.GAUGE_ABSOLUTE_SUSPECT)
        tol = tolerance.get(c)
        if flat_ns is not None and tol is not None:
            f[_flatline(v, grid, float(tol), float(flatline_relative))] |= int(Reason.FLATLINE)
        if spike is not None and c in floors:
            hit, score = _spike(v, t, int(spike), float(spike_threshold), floors[c], block_ns, return_details)
            f[hit] |= int(Reason.SPIKE)
            if return_details:
                scores[c] = score
        flags[c] = f

    section_codes: dict[str, np.ndarray] = {}
    efficiencies: dict[str, np.ndarray] = {}
    for name, roles in CONSISTENCY_PAIRS.items():
        cols = [r for r in roles[:4] if r]
        if not all(r in values for r in cols):
            continue
        codes, eff = _physics(values, roles, (low_eff, high_eff), float(superheat_margin), given.get(name))
        section_codes[name] = codes
        if roles[4]:
            efficiencies[name] = eff

    if needed is None:
        needed = tuple(r for r in NEEDED_ROLES if r in values)
    else:
        needed = tuple(needed)
        absent = [r for r in needed if r not in values]
        if absent:
            raise ValueError(f"needed role(s) {', '.join(absent)} are not columns of the frame")

    row = np.zeros(n, dtype=np.int64)
    for r in needed:
        row |= flags[r]
    section_flags = {}
    for name, codes in section_codes.items():
        members = [r for r in CONSISTENCY_PAIRS[name][:4] if r]
        combined = codes.copy()
        for r in members:
            combined |= flags[r]
        section_flags[name] = combined
        if all(r in needed for r in members):
            row |= codes

    index = frame.index
    details = None
    if return_details:
        cols = {f"{k}_efficiency": v for k, v in efficiencies.items()}
        cols.update({f"{k}_spike_score": v for k, v in scores.items()})
        details = pd.DataFrame(cols, index=index)
    row_s = pd.Series(row, index=index, name="row_flags")
    return ScreenResult(
        flags=pd.DataFrame(flag_block, index=index, columns=list(frame.columns), copy=False),
        section_flags=pd.DataFrame(section_flags, index=index, columns=list(section_flags), dtype=np.int64),
        row_flags=row_s,
        ok=pd.Series(row == 0, index=index, name="ok"),
        needed=needed,
        details=details,
    )
