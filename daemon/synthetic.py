"""A synthetic unit history with known degradation, for the demo and for tests.

The scenario is invented: **Greywater Bend Station, Unit 2**, a fictional 530 MW (gross)
subcritical drum unit with single reheat on a 60 Hz grid (3600 rpm): one HP turbine, one
IP turbine and two double-flow LP turbines, throttle and hot reheat steam at 538 degC. None
of its names, tags or numbers belong to a real plant; every figure below is made up for the
demo unless a comment names a source.

``generate`` returns a wide frame of every role of ``isentrope.daemon.roles`` in internal
units (MPa absolute, K, MW, kg/s, %) and a JSON-serialisable ``truth`` dict that records
what was injected: the gradual HP loss, the IP step after the trip, the flatlined
transmitter, the data gap, the spike burst, every shutdown and start-up, and a summary of
the true section efficiencies. The steam side is computed with ``isentrope.calc.steam``
(IAPWS-IF97): outlet temperatures follow from the true section efficiencies,
``h_out = h_in - eta (h_in - h(p_out, s_in))`` and ``T_out = T(p_out, h_out)``, so a
correct enthalpy-drop calculation on noise-free readings gives back the true efficiency.

Operating model (all invented, documented so that a reader can check the output):

* Load follows an hourly dispatch: a weekday and a weekend pattern on UTC clock hours with
  seasonal and day-to-day variation, quantised to 2.5 % of rating and held when the change
  would be small, so that there are long plateaus; ramps at 1.5 % of rating per minute; a
  small automatic-generation-control wander on top. Minimum dispatch 35 % of rating.
* Throttle pressure: constant 16.55 MPa above 80 % load (the control valves throttle),
  sliding with steam flow below, never under 5 MPa (the valves then close further).
* Cold reheat, crossover, LP extraction and first-stage pressures are proportional to the
  steam flow (Stodola's cone law with the flow-pressure ratio held; common practice, no
  source). The reheater loses 8 % of the cold reheat pressure (calc/REFERENCES.md: 7-10 % is
  common practice).
* Condenser pressure: seasonal (about 3.5 kPa in winter to 8.5 kPa in summer), a daily
  cycle of the cooling water and a load dependence.
* True efficiencies: a design curve against load fraction (HP 0.862, IP 0.912, LP dry
  stage group 0.880 at rating, within the typical ranges in calc/REFERENCES.md), the HP losing
  ``hp_rate`` points per 1000 operating hours (deposits), the IP stepping by ``ip_step``
  points from the restart after the trip (a rub), the LP dry group constant.
* Every section's true efficiency also wanders slowly (``WANDER``: 0.15 point, correlation
  time 12 h; its own random stream, in ``state`` as ``wander_<section>`` [points]), so that
  successive steady windows are correlated as on a real unit.
* The unit holds output: as a section loses efficiency the steam flow rises by the output
  sensitivities in calc/REFERENCES.md (HP 0.25 %, IP 0.2 % per point; from memory).
* Offline: output, flow and valve position are zero; pressures and temperatures decay
  towards ambient and come back during the two hours before a start-up.
* Sensor noise (standard deviations, common practice, no source): pressure 0.07 % of
  reading, condenser 0.03 kPa + 0.2 %, temperature 0.4 K, output 0.15 % + 0.05 MW, flow
  0.5 % + 0.5 kg/s, valve position 0.1 %, barometric 0.01 kPa.

Faults: one transmitter holds its last value (flatline), a stretch of rows is absent (data
gap: the rows are dropped, so a store written from the frame sees no samples there), and a
burst of samples on one transmitter lies outside its instrument range.

Structure: a ``ScenarioSpec`` (frozen dataclass, the arguments of ``generate_with_state``)
goes through one plain function per step, ``generate_from_spec`` calling them in order:
``timeline`` (checks, sample grid, events placed), ``load_profile`` (dispatch, outages, AGC
wander), ``true_efficiencies`` (design curves, HP loss, IP step, wander, flow to hold output),
``boundary_states`` (``process_states`` + IF97 ``expansion`` + offline decay), ``sensor_readings``
(noise), ``inject_faults`` (``flatline``, ``spike_burst``, ``data_gap``), then
``readings_frame``, ``state_frame`` and ``truth_record``. All draws come from one
``numpy`` Generator in that order (the wander from its own), so a step must keep its draws
and their order for the output to stay the same for a given seed.

The plant around the unit (``SCENARIO``, ``TAG_MAP``, plant units, configuration text, the
historian's deadbands) is ``isentrope.daemon.synthetic_plant``; this module re-exports it.

This is demonstration data. Figures computed from it say nothing about any real machine.

Regenerate from the command line: ``python -m isentrope.daemon.synthetic --days 30 -o DIR``.
"""

from __future__ import annotations

import argparse
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from itertools import pairwise
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from isentrope.calc import steam
from isentrope.daemon.roles import ROLES
from isentrope.daemon.synthetic_plant import (
    EXCEPTION_DEADBANDS,
    INHG_KPA,
    SCENARIO,
    TAG_DESCRIPTIONS,
    TAG_MAP,
    config_toml,
    exception_report,
    internal_to_plant,
    plant_to_internal,
    role_mappings,
    tag_map_toml,
    to_plant_units,
)

# The public names: the generator here, and the fictional plant's identity and instrumentation
# (isentrope.daemon.synthetic_plant), re-exported for the callers of this module.
__all__ = [
    "DEFAULT_SEED",
    "DESIGN_CURVES",
    "EXCEPTION_DEADBANDS",
    "GENERATOR_VERSION",
    "INHG_KPA",
    "NOISE",
    "RATING_MW",
    "SCENARIO",
    "TAG_DESCRIPTIONS",
    "TAG_MAP",
    "WANDER",
    "Efficiencies",
    "Faults",
    "Operation",
    "ScenarioSpec",
    "Timeline",
    "boundary_states",
    "config_toml",
    "data_gap",
    "design_efficiency",
    "dispatch",
    "events_table",
    "exception_report",
    "expansion",
    "flatline",
    "generate",
    "generate_from_spec",
    "generate_with_state",
    "inject_faults",
    "internal_to_plant",
    "load_profile",
    "main",
    "plant_to_internal",
    "process_states",
    "read_truth",
    "readings_frame",
    "role_mappings",
    "sensor_readings",
    "spike_burst",
    "state_frame",
    "tag_map_toml",
    "timeline",
    "to_plant_units",
    "true_efficiencies",
    "truth_record",
    "write_truth",
]

GENERATOR_VERSION = 2
MAX_ROWS = 6_000_000  # about 11 years at one minute; guards against runaway memory use
DEFAULT_SEED = 20250101

# --- the process (invented) ----------------------------------------------------------------
RATING_MW = 530.0  # gross rating (invented)
RATED_FLOW_KGS = 440.0  # main steam flow at rating, ~1584 t/h (invented)
THROTTLE_P_RATED = 16.55  # MPa abs, 2400 psia (invented; a usual throttle pressure for this class)
THROTTLE_P_MIN = 5.0  # MPa abs, sliding-pressure floor (invented)
SLIDING_BELOW = 0.80  # load fraction below which throttle pressure slides (invented)
FIRST_STAGE_P_RATED = 12.6  # MPa abs at rated flow (invented)
COLD_REHEAT_P_RATED = 3.90  # MPa abs at rated flow (invented)
REHEATER_DROP = 0.08  # fraction of cold reheat pressure (common practice: 7-10 %)
CROSSOVER_P_RATED = 0.95  # MPa abs at rated flow (invented)
LP_EXTRACTION_P_RATED = 0.25  # MPa abs at rated flow, still superheated (invented)
STEAM_T_SET = 538.0 + 273.15  # K, throttle and hot reheat (common practice: 538-566 degC)
FLOW_AT_ZERO_LOAD = 0.04  # no-load steam flow, fraction of rated (invented)

# Design efficiency at load fraction L: eta = at_rating - droop * (1 - L)**2 (invented;
# at-rating values inside calc/REFERENCES.md "typical section efficiencies").
DESIGN_CURVES = {
    "hp": {"at_rating": 0.862, "droop": 0.060},
    "ip": {"at_rating": 0.912, "droop": 0.020},
    "lp": {"at_rating": 0.880, "droop": 0.040},
}
HP_RATE_POINTS_PER_1000H = -0.4  # injected deposits (calc/REFERENCES.md: 0.3-0.5 point a year is common)
IP_STEP_POINTS = -1.0  # injected rub at the trip (calc/REFERENCES.md: 0.5-2 points is common)
# Output sensitivity per point of section efficiency (calc/REFERENCES.md, from memory): the unit
# holds output, so the steam flow rises by this fraction per point lost.
FLOW_PER_POINT = {"hp": 0.0025, "ip": 0.0020}

# Slow wander of every section's true efficiency (ambient and cooling water, soot blowing,
# control tuning, washing and fouling): first-order autoregressive with this standard
# deviation [points] and correlation time [h] (invented). Steady windows 1-5 h apart then
# share most of it: lag-1 correlation exp(-3/12) = 0.78 between windows 3 h apart, so the
# demo's deviations are serially correlated as a real unit's are.
WANDER = {"sd_points": 0.15, "tau_hours": 12.0}

RAMP_PER_MIN = 0.015  # load ramp, fraction of rating per minute (common practice 1-3 %/min)
MIN_DISPATCH = 0.35  # minimum dispatched load fraction (invented)
SYNC_LOAD = 0.08  # load held just after synchronising (invented)

# Standard deviations of the sensor noise (k = 1; common practice, no source).
NOISE = {
    "pressure_rel": 0.0007,  # 0.07 % of reading
    "condenser_abs_mpa": 3e-5,  # 0.03 kPa
    "condenser_rel": 0.002,
    "barometric_abs_mpa": 1e-5,  # 0.01 kPa
    "temperature_k": 0.4,
    "output_rel": 0.0015,
    "output_abs_mw": 0.05,
    "flow_rel": 0.005,
    "flow_abs_kgs": 0.5,
    "valve_abs": 0.1,
}

# Hourly load pattern (fraction of rating) on UTC clock hours, before seasonal and random
# variation (invented).
WEEKDAY_PATTERN = np.array(
    [
        0.55,
        0.55,
        0.52,
        0.52,
        0.55,
        0.60,
        0.72,
        0.88,
        0.95,
        0.95,
        0.95,
        0.95,
        0.92,
        0.92,
        0.95,
        0.95,
        0.98,
        1.00,
        1.00,
        1.00,
        0.95,
        0.85,
        0.72,
        0.62,
    ]
)
WEEKEND_PATTERN = np.array(
    [
        0.48,
        0.45,
        0.42,
        0.40,
        0.40,
        0.42,
        0.48,
        0.55,
        0.62,
        0.65,
        0.68,
        0.68,
        0.65,
        0.62,
        0.62,
        0.65,
        0.70,
        0.78,
        0.80,
        0.78,
        0.72,
        0.62,
        0.55,
        0.50,
    ]
)

# Offline behaviour per role: (ambient, time constant of the decay [min], minutes before a
# start-up over which the reading returns to its first online value). Ambient None means
# the barometric pressure.
OFFLINE = {
    "throttle_p": (None, 300.0, 120.0),
    "first_stage_p": (None, 60.0, 120.0),
    "cold_reheat_p": (None, 60.0, 120.0),
    "hot_reheat_p": (None, 60.0, 120.0),
    "crossover_p": (None, 30.0, 120.0),
    "lp_extraction_p": (None, 30.0, 120.0),
    "condenser_p": (None, 180.0, 120.0),
    "throttle_t": (310.0, 1200.0, 120.0),
    "cold_reheat_t": (310.0, 900.0, 120.0),
    "hot_reheat_t": (310.0, 1200.0, 120.0),
    "crossover_t": (310.0, 600.0, 120.0),
    "lp_extraction_t": (310.0, 400.0, 120.0),
    "gross_output": (0.0, 0.0, 0.0),
    "main_steam_flow": (0.0, 0.0, 0.0),
    "valve_position": (0.0, 0.0, 0.0),
}


# --- helpers --------------------------------------------------------------------------------
def design_efficiency(section: str, load_fraction):
    """Design (clean) efficiency of ``section`` ("hp", "ip", "lp") at ``load_fraction`` [-]."""
    if section not in DESIGN_CURVES:
        raise ValueError(f"section {section!r} is not one of {sorted(DESIGN_CURVES)}")
    c = DESIGN_CURVES[section]
    L = np.clip(np.asarray(load_fraction, dtype=float), 0.0, 1.05)
    return c["at_rating"] - c["droop"] * (1.0 - L) ** 2


def _ar1(rng: np.random.Generator, n: int, sigma: float, tau_steps: float) -> np.ndarray:
    """First-order autoregressive noise with stationary standard deviation ``sigma``."""
    a = math.exp(-1.0 / max(tau_steps, 1e-9))
    w = rng.standard_normal(n)
    w[1:] *= sigma * math.sqrt(1.0 - a * a)
    w[0] *= sigma
    return lfilter([1.0], [1.0, -a], w)


def _ts(value) -> pd.Timestamp:
    t = pd.Timestamp(value)
    return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")


def _dur(**kwargs) -> pd.Timedelta:
    """A duration rounded to whole seconds (the index has no finer resolution)."""
    return pd.Timedelta(**kwargs).round("s")


def _iso(t: pd.Timestamp) -> str:
    return pd.Timestamp(t).tz_convert("UTC").isoformat()


def _auto_events(start: pd.Timestamp, days: float) -> dict:
    """Default event placement: fixed fractions of the span, at set clock times.

    Spans shorter than 10 days get no shutdowns and place the trip and the faults at plain
    fractions of the span so that they do not overlap.
    """
    if days < 10:

        def frac_of_span(frac):
            return start + pd.Timedelta(minutes=round(frac * days * 1440.0))

        return {
            "shutdowns": [],
            "trip_at": frac_of_span(0.45),
            "flatline_at": frac_of_span(0.15),
            "gap_at": frac_of_span(0.80),
            "spike_at": frac_of_span(0.93),
        }

    def at(frac, hours):
        return start + pd.Timedelta(days=math.floor(frac * days)) + pd.Timedelta(hours=hours)

    shutdowns = [(at(0.10, 22.0), 40.0)]  # weekend-style reserve shutdown
    if days >= 90:
        shutdowns.append((at(0.27, 21.0), 9 * 24.0 + 7.0))  # planned outage (no turbine work)
    shutdowns.append((at(0.88, 23.0), 36.0))
    return {
        "shutdowns": shutdowns,
        "trip_at": at(0.55, 14.6),
        "flatline_at": at(0.30, 9.25),
        "gap_at": at(0.70, 12.0),
        "spike_at": at(0.80, 10.5),
    }


# --- the scenario spec ----------------------------------------------------------------------
@dataclass(frozen=True)
class ScenarioSpec:
    """What to generate: span, sampling, seed, noise, the injected losses and the events.

    The defaults are those of ``generate_with_state``, whose docstring gives every field's
    meaning and unit. Times take anything ``pandas.Timestamp`` takes (naive means UTC);
    ``"auto"`` places an event at a fixed fraction of the span (``_auto_events``), None leaves
    it out.
    """

    start: Any = "2025-01-01"
    days: float = 365
    freq: str = "1min"
    seed: int = DEFAULT_SEED
    noise: float = 1.0
    faults: bool = True
    hp_rate: float = HP_RATE_POINTS_PER_1000H
    ip_step: float = IP_STEP_POINTS
    initial_hours: float = 0.0
    wander: float = 1.0
    shutdowns: Any = "auto"
    trip_at: Any = "auto"
    trip_hours: float = 7.0
    flatline_at: Any = "auto"
    flatline_role: str = "cold_reheat_t"
    flatline_days: float = 2.0
    gap_at: Any = "auto"
    gap_hours: float = 12.0
    spike_at: Any = "auto"
    spike_role: str = "throttle_p"
    spike_minutes: int = 15


@dataclass(frozen=True)
class Timeline:
    """A spec placed on its sample grid: the index and the events, in minutes since start.

    ``outages`` are ``(off, on, kind)`` [min], sorted, kind "shutdown" or "trip"; ``trip``,
    ``flatline``, ``gap`` and ``spike`` are the resolved start times (None: left out), with
    the fault durations after the short-span shortening of automatically placed faults.
    """

    start: pd.Timestamp
    step: pd.Timedelta
    step_min: float
    index: pd.DatetimeIndex
    tmin: np.ndarray
    outages: list
    trip: Any
    flatline: Any
    flatline_days: float
    gap: Any
    gap_hours: float
    spike: Any

    @property
    def n(self) -> int:
        return len(self.index)


@dataclass(frozen=True)
class Operation:
    """How the unit ran: ``load`` [fraction of rating, 0 offline], ``online`` (bool) and
    ``warm_min``, minutes since the last synchronisation (inf before the first) [min]."""

    load: np.ndarray
    online: np.ndarray
    warm_min: np.ndarray


@dataclass(frozen=True)
class Efficiencies:
    """The true section efficiencies [fractions] and what follows from them.

    ``wander`` is the slow wander in each [points]; ``flow_fraction`` the main steam flow
    [fraction of rated] that holds the output with the losses; ``ip_step_time`` the first
    online sample after the rub (None without one).
    """

    operating_hours: np.ndarray
    eta_hp: np.ndarray
    eta_ip: np.ndarray
    eta_lp: np.ndarray
    wander: dict
    flow_fraction: np.ndarray
    ip_step_time: Any


@dataclass(frozen=True)
class Faults:
    """``measured`` with the faults written in, ``in_gap`` (rows the gap removes) and
    ``record`` (the truth entries "flatline", "spike", "gap" of the faults injected)."""

    measured: dict
    in_gap: np.ndarray
    record: dict


def _is_auto(value) -> bool:
    return isinstance(value, str) and value == "auto"


# --- the steps of the generation --------------------------------------------------------------
def timeline(spec: ScenarioSpec) -> Timeline:
    """Check ``spec`` and place it on its grid: index, automatic events, outages."""
    start = _ts(spec.start)
    step = pd.Timedelta(spec.freq)
    days = spec.days
    if not pd.Timedelta(seconds=1) <= step <= pd.Timedelta(hours=1):
        raise ValueError(f"freq {spec.freq!r} is outside the valid range 1s to 1h")
    if not days > 0:
        raise ValueError(f"days must be positive, found {days!r}")
    for role in (spec.flatline_role, spec.spike_role):
        if role not in TAG_MAP:
            raise ValueError(f"role {role!r} is not one of {sorted(TAG_MAP)}")
    step_min = step.total_seconds() / 60.0
    n = int(round(days * 1440.0 / step_min))
    if not 2 <= n <= MAX_ROWS:
        raise ValueError(
            f"days={days!r} at freq={spec.freq!r} gives {n} rows; valid: 2 to {MAX_ROWS} "
            "(use a coarser freq or a shorter span)"
        )
    index = pd.date_range(start, periods=n, freq=step, name="time")
    end = start + n * step
    tmin = np.arange(n) * step_min  # minutes since start

    auto = _auto_events(start, days)
    shutdown_list = auto["shutdowns"] if _is_auto(spec.shutdowns) else list(spec.shutdowns or [])
    trip = auto["trip_at"] if _is_auto(spec.trip_at) else spec.trip_at
    flat = auto["flatline_at"] if _is_auto(spec.flatline_at) else spec.flatline_at
    gap = auto["gap_at"] if _is_auto(spec.gap_at) else spec.gap_at
    spike = auto["spike_at"] if _is_auto(spec.spike_at) else spec.spike_at
    flatline_days, gap_hours = spec.flatline_days, spec.gap_hours
    if days < 10:  # short spans: shorten the automatically placed faults so they fit
        if _is_auto(spec.flatline_at):
            flatline_days = min(flatline_days, 0.2 * days)
        if _is_auto(spec.gap_at):
            gap_hours = min(gap_hours, 2.4 * days)
    if not spec.faults:
        flat = gap = spike = None

    def minute(t) -> float:
        return (_ts(t) - start).total_seconds() / 60.0

    # Outages: (off, on, kind), in minutes since start.
    outages = [(minute(t), minute(t) + 60.0 * h, "shutdown") for t, h in shutdown_list]
    if trip is not None:
        outages.append((minute(trip), minute(trip) + 60.0 * spec.trip_hours, "trip"))
    outages.sort()
    for (_, a1, ka), (b0, _, kb) in pairwise(outages):
        if b0 < a1 + 240.0:
            raise ValueError(
                f"{kb} at minute {b0:.0f} starts before the {ka} ending at minute {a1:.0f} "
                "is over (allow 4 h between them)"
            )
    for off, _, kind in outages:
        if not 0.0 < off < tmin[-1]:
            raise ValueError(
                f"{kind} at {_iso(start + pd.Timedelta(minutes=off))} is outside the "
                f"history {_iso(start)} to {_iso(end)}"
            )
    return Timeline(
        start, step, step_min, index, tmin, outages, trip, flat, flatline_days, gap, gap_hours, spike
    )


def dispatch(tl: Timeline, rng: np.random.Generator) -> np.ndarray:
    """The dispatched load [fraction of rating] on every row, before outages and AGC wander.

    Hourly setpoints (weekday/weekend pattern, season, day-to-day and hourly draws from
    ``rng``), quantised and held on small changes, joined by ramps of ``RAMP_PER_MIN``.
    """
    start, n, step_min = tl.start, tl.n, tl.step_min
    n_hours = int(math.ceil(n * step_min / 60.0)) + 1
    hours = pd.date_range(start.floor("h"), periods=n_hours, freq="h")
    doy = hours.day_of_year.to_numpy()
    weekend = hours.day_of_week.to_numpy() >= 5
    hod = hours.hour.to_numpy()
    base = np.where(weekend, WEEKEND_PATTERN[hod], WEEKDAY_PATTERN[hod])
    summer = np.cos(2 * np.pi * (doy - 200) / 365.25)  # +1 in mid-July
    day_index = (hours - start.floor("h")).days.to_numpy()
    day_offset = rng.normal(0.0, 0.03, day_index.max() + 1)[day_index]
    target = base + 0.04 * summer * (hod >= 8) + day_offset + rng.normal(0.0, 0.015, n_hours)
    target = np.clip(np.round(target / 0.025) * 0.025, MIN_DISPATCH, 1.0)
    setpoint = target.copy()
    for k in range(1, n_hours):  # hold small changes: long plateaus
        setpoint[k] = setpoint[k - 1] if abs(target[k] - setpoint[k - 1]) < 0.03 else target[k]
    hour_min = (hours - start).total_seconds().to_numpy() / 60.0
    ramp = np.abs(np.diff(setpoint)) / RAMP_PER_MIN
    knot_t = np.empty(2 * n_hours - 1)
    knot_v = np.empty(2 * n_hours - 1)
    knot_t[0], knot_v[0] = hour_min[0], setpoint[0]
    knot_t[1::2], knot_v[1::2] = hour_min[1:], setpoint[:-1]
    knot_t[2::2], knot_v[2::2] = hour_min[1:] + ramp, setpoint[1:]
    return np.interp(tl.tmin, knot_t, knot_v)


def load_profile(tl: Timeline, rng: np.random.Generator) -> Operation:
    """Dispatch, outages (ramp-down, offline, synchronising and loading curve) and AGC wander."""
    n, tmin = tl.n, tl.tmin
    load = dispatch(tl, rng)
    online = np.ones(n, dtype=bool)
    warm_min = np.full(n, np.inf)  # minutes since the last synchronisation
    for off, on, kind in tl.outages:
        if kind == "shutdown":
            near = (tmin < off) & (tmin > off - 300.0)
            load[near] = np.minimum(load[near], 0.10 + (off - tmin[near]) * 0.008)
        online[(tmin >= off) & (tmin < on)] = False
        after = tmin >= on
        tau = tmin[after] - on
        curve = np.where(
            tau < 30.0,
            SYNC_LOAD,
            np.where(
                tau < 90.0,
                SYNC_LOAD + (tau - 30.0) / 60.0 * (MIN_DISPATCH - SYNC_LOAD),
                np.where(tau < 150.0, MIN_DISPATCH, MIN_DISPATCH + (tau - 150.0) * 0.01),
            ),
        )
        load[after] = np.minimum(load[after], curve)
        warm_min[after] = np.minimum(warm_min[after], tau)
    load = np.clip(load + _ar1(rng, n, 0.002, 4.0 / tl.step_min), 0.05, 1.02)
    load[~online] = 0.0
    return Operation(load, online, warm_min)


def true_efficiencies(spec: ScenarioSpec, tl: Timeline, op: Operation) -> Efficiencies:
    """Design curves, HP loss per operating hour, IP step after the trip and the wander.

    The wander draws from its own generator (seed ``[seed, 1]``), so the other draws do not
    change with it.
    """
    n, step_min, tmin = tl.n, tl.step_min, tl.tmin
    load, online = op.load, op.online
    op_hours = spec.initial_hours + np.cumsum(online) * step_min / 60.0
    counted = op_hours - spec.initial_hours
    eta_hp = design_efficiency("hp", load) + spec.hp_rate / 100.0 * counted / 1000.0
    eta_ip = design_efficiency("ip", load)
    eta_lp = design_efficiency("lp", load)
    ip_step_time = None
    if tl.trip is not None:
        trip_on = next(on for off, on, kind in tl.outages if kind == "trip")
        after_rub = tmin >= trip_on
        eta_ip = eta_ip + np.where(after_rub, spec.ip_step / 100.0, 0.0)
        if after_rub.any():
            ip_step_time = tl.index[np.argmax(after_rub & online)]
    wander_rng = np.random.default_rng([int(spec.seed), 1])
    wander_pts = {
        sec: spec.wander * _ar1(wander_rng, n, WANDER["sd_points"], WANDER["tau_hours"] * 60.0 / step_min)
        for sec in ("hp", "ip", "lp")
    }
    eta_hp = eta_hp + wander_pts["hp"] / 100.0
    eta_ip = eta_ip + wander_pts["ip"] / 100.0
    eta_lp = eta_lp + wander_pts["lp"] / 100.0
    hp_loss_pts = -spec.hp_rate * counted / 1000.0
    ip_loss_pts = np.where(after_rub, -spec.ip_step, 0.0) if tl.trip is not None else 0.0
    flow_frac = (FLOW_AT_ZERO_LOAD + (1.0 - FLOW_AT_ZERO_LOAD) * load) * (
        1.0 + FLOW_PER_POINT["hp"] * hp_loss_pts + FLOW_PER_POINT["ip"] * ip_loss_pts
    )
    return Efficiencies(op_hours, eta_hp, eta_ip, eta_lp, wander_pts, flow_frac, ip_step_time)


def process_states(tl: Timeline, op: Operation, eff: Efficiencies, rng: np.random.Generator) -> dict:
    """True pressures, inlet temperatures, output, flow and valve position [internal units].

    Keys are roles; the section outlet temperatures come from ``expansion``. Draws from
    ``rng`` in a fixed order: barometric, throttle pressure, condenser, throttle and hot
    reheat temperature.
    """
    n, step_min, index = tl.n, tl.step_min, tl.index
    load, warm_min, flow_frac = op.load, op.warm_min, eff.flow_fraction
    baro = 0.1006 + _ar1(rng, n, 0.0007, 2880.0 / step_min)
    flow_at_slide = FLOW_AT_ZERO_LOAD + (1.0 - FLOW_AT_ZERO_LOAD) * SLIDING_BELOW
    p_slide = THROTTLE_P_RATED * flow_frac / flow_at_slide
    p_thr = np.clip(p_slide, THROTTLE_P_MIN, THROTTLE_P_RATED)
    p_thr = p_thr * (1.0 + _ar1(rng, n, 0.001, 10.0 / step_min))
    valve = np.where(
        load >= SLIDING_BELOW,
        62.0 + (load - SLIDING_BELOW) / (1.0 - SLIDING_BELOW) * 33.0,
        62.0 * np.minimum(1.0, p_slide / THROTTLE_P_MIN),
    )
    p_crh = COLD_REHEAT_P_RATED * flow_frac
    hour_of_day = index.hour.to_numpy() + index.minute.to_numpy() / 60.0
    doy_min = index.day_of_year.to_numpy() + hour_of_day / 24.0
    p_cond_kpa = (
        6.0
        + 2.5 * np.cos(2 * np.pi * (doy_min - 205.0) / 365.25)
        + 0.3 * np.cos(2 * np.pi * (hour_of_day - 15.0) / 24.0)
    )
    p_cond_kpa = p_cond_kpa * (0.55 + 0.45 * load) + _ar1(rng, n, 0.1, 360.0 / step_min)

    t_thr_set = STEAM_T_SET - np.clip(0.40 - load, 0.0, None) / 0.32 * 40.0
    t_hrh_set = STEAM_T_SET - np.clip(0.60 - load, 0.0, None) / 0.52 * 50.0
    t_thr = np.minimum(t_thr_set, 440.0 + 273.15 + 100.0 * warm_min / 240.0)
    t_hrh = np.minimum(t_hrh_set, 420.0 + 273.15 + 120.0 * warm_min / 240.0)
    t_thr = t_thr + _ar1(rng, n, 1.0, 20.0 / step_min)
    t_hrh = t_hrh + _ar1(rng, n, 1.2, 20.0 / step_min)
    return {
        "throttle_p": p_thr,
        "throttle_t": t_thr,
        "cold_reheat_p": p_crh,
        "hot_reheat_p": (1.0 - REHEATER_DROP) * p_crh,
        "hot_reheat_t": t_hrh,
        "crossover_p": CROSSOVER_P_RATED * flow_frac,
        "lp_extraction_p": LP_EXTRACTION_P_RATED * flow_frac,
        "condenser_p": np.maximum(p_cond_kpa, 2.5) / 1000.0,
        "gross_output": RATING_MW * load,
        "main_steam_flow": RATED_FLOW_KGS * flow_frac,
        "first_stage_p": FIRST_STAGE_P_RATED * flow_frac,
        "valve_position": valve,
        "barometric_p": baro,
    }


def expansion(process: Mapping[str, np.ndarray], eff: Efficiencies, online: np.ndarray) -> dict:
    """Outlet temperatures of the HP, IP and LP dry group from the true efficiencies (IF97).

    ``h_out = h_in - eta (h_in - h(p_out, s_in))``, ``T_out = T(p_out, h_out)`` on the online
    rows; NaN offline. Returns ``cold_reheat_t``, ``crossover_t``, ``lp_extraction_t`` [K].
    """
    on = online
    p_thr, t_thr = process["throttle_p"], process["throttle_t"]
    p_crh, p_hrh, t_hrh = process["cold_reheat_p"], process["hot_reheat_p"], process["hot_reheat_t"]
    p_xo, p_ext = process["crossover_p"], process["lp_extraction_p"]
    h1 = steam.h_pt(p_thr[on], t_thr[on])
    s1 = steam.s_pt(p_thr[on], t_thr[on])
    h2 = h1 - eff.eta_hp[on] * (h1 - steam.h_ps(p_crh[on], s1))
    t_crh_on = steam.t_ph(p_crh[on], h2)
    h3 = steam.h_pt(p_hrh[on], t_hrh[on])
    s3 = steam.s_pt(p_hrh[on], t_hrh[on])
    h4 = h3 - eff.eta_ip[on] * (h3 - steam.h_ps(p_xo[on], s3))
    t_xo_on = steam.t_ph(p_xo[on], h4)
    s4 = steam.s_pt(p_xo[on], t_xo_on)
    h5 = h4 - eff.eta_lp[on] * (h4 - steam.h_ps(p_ext[on], s4))
    t_ext_on = steam.t_ph(p_ext[on], h5)
    for name, arr in (("cold reheat", t_crh_on), ("crossover", t_xo_on), ("LP extraction", t_ext_on)):
        bad = ~np.isfinite(arr)
        if bad.any():
            raise RuntimeError(
                f"steam properties failed for {bad.sum()} {name} points; "
                "the scenario left the range of isentrope.calc.steam"
            )
    out = {}
    for role, arr in (("cold_reheat_t", t_crh_on), ("crossover_t", t_xo_on), ("lp_extraction_t", t_ext_on)):
        out[role] = np.full(len(on), np.nan)
        out[role][on] = arr
    return out


def _fill_offline(true: dict, online: np.ndarray, tmin: np.ndarray, baro: np.ndarray) -> None:
    """Offline readings: decay from the last online value, return before the next start-up."""
    if online.all():
        return
    n = len(online)
    idx = np.arange(n)
    last_on = np.maximum.accumulate(np.where(online, idx, -1))
    next_on = np.minimum.accumulate(np.where(online, idx, n)[::-1])[::-1]
    off = ~online
    lo, nx = last_on[off], next_on[off]
    t = tmin[off]
    for role, (ambient, tau, blend_min) in OFFLINE.items():
        x = true[role]
        amb = baro[off] if ambient is None else np.full(off.sum(), ambient)
        v_last = np.where(lo >= 0, x[np.maximum(lo, 0)], amb)
        dt = t - tmin[np.maximum(lo, 0)]
        decayed = amb + (v_last - amb) * (np.exp(-dt / tau) if tau > 0 else 0.0)
        if blend_min > 0:
            has_next = nx < n
            v_next = np.where(has_next, x[np.minimum(nx, n - 1)], decayed)
            to_go = np.where(has_next, tmin[np.minimum(nx, n - 1)] - t, np.inf)
            w = np.clip(1.0 - to_go / blend_min, 0.0, 1.0)
            decayed = (1.0 - w) * decayed + w * v_next
        x[off] = decayed


def boundary_states(tl: Timeline, op: Operation, eff: Efficiencies, rng: np.random.Generator) -> dict:
    """The true (noise-free, fault-free) value of every role on every row [internal units].

    ``process_states`` and ``expansion`` online; offline, readings decay towards ambient and
    return before the next start-up (``OFFLINE``). Keys in ``TAG_MAP`` order.
    """
    process = process_states(tl, op, eff, rng)
    outlets = expansion(process, eff, op.online)
    true = {role: process[role] if role in process else outlets[role] for role in TAG_MAP}
    _fill_offline(true, op.online, tl.tmin, process["barometric_p"])
    return true


def sensor_readings(true: Mapping[str, np.ndarray], rng: np.random.Generator, noise: float = 1.0) -> dict:
    """``true`` plus sensor noise (``NOISE`` scaled by ``noise``), one draw per role in
    ``TAG_MAP`` order so that the draws stay reproducible."""
    measured = {}
    for role in TAG_MAP:
        x = true[role]
        quantity = ROLES[role][0]
        z = rng.standard_normal(len(x)) * noise
        if role == "condenser_p":
            sd = NOISE["condenser_abs_mpa"] + NOISE["condenser_rel"] * x
        elif role == "barometric_p":
            sd = NOISE["barometric_abs_mpa"]
        elif quantity == "pressure":
            sd = NOISE["pressure_rel"] * x
        elif quantity == "temperature":
            sd = NOISE["temperature_k"]
        elif quantity == "power":
            sd = NOISE["output_abs_mw"] + NOISE["output_rel"] * np.abs(x)
        elif quantity == "flow":
            sd = NOISE["flow_abs_kgs"] + NOISE["flow_rel"] * x
        else:
            sd = NOISE["valve_abs"]
        measured[role] = x + sd * z
    return measured


def flatline(measured: dict, tl: Timeline, role: str) -> dict:
    """Hold ``role`` at its last reading from ``tl.flatline`` for ``tl.flatline_days``, in
    its plant unit (a frozen gauge transmitter stays frozen). Writes into ``measured[role]``;
    returns the truth entry."""
    index, n = tl.index, tl.n
    f0, f1 = _ts(tl.flatline), _ts(tl.flatline) + _dur(days=tl.flatline_days)
    i0, i1 = index.searchsorted(f0), index.searchsorted(f1)
    if not 0 < i0 < i1 <= n:
        raise ValueError(f"flatline {_iso(f0)} to {_iso(f1)} is outside the history")
    unit = TAG_MAP[role]["unit"]
    plant = internal_to_plant(measured[role], unit, measured["barometric_p"])
    held = float(plant[i0 - 1])
    measured[role][i0:i1] = plant_to_internal(held, unit, measured["barometric_p"][i0:i1])
    return {
        "role": role,
        "tag": TAG_MAP[role]["tag"],
        "start": _iso(index[i0]),
        "end": _iso(f1),
        "held_value": held,
        "held_unit": unit,
    }


def spike_burst(measured: dict, tl: Timeline, role: str, minutes: float) -> dict:
    """Readings of ``role`` outside its instrument range (high, low, normal, repeated) for
    ``minutes`` from ``tl.spike``. Writes into ``measured[role]``; returns the truth entry."""
    index, n = tl.index, tl.n
    s0 = _ts(tl.spike)
    i0 = index.searchsorted(s0)
    i1 = min(n, index.searchsorted(s0 + _dur(minutes=minutes)))
    if not 0 <= i0 < i1:
        raise ValueError(f"spike burst at {_iso(s0)} is outside the history")
    unit = TAG_MAP[role]["unit"]
    lo, hi = TAG_MAP[role]["range"]
    span = hi - lo
    k = np.arange(i1 - i0)
    pattern = np.where(k % 3 == 0, hi + 0.2 * span, np.where(k % 3 == 1, lo - 0.05 * span, np.nan))
    rows = i0 + k[np.isfinite(pattern)]
    measured[role][rows] = plant_to_internal(
        pattern[np.isfinite(pattern)], unit, measured["barometric_p"][rows]
    )
    return {
        "role": role,
        "tag": TAG_MAP[role]["tag"],
        "start": _iso(index[i0]),
        "end": _iso(index[i1 - 1] + tl.step),
        "samples": int(len(rows)),
        "high_value": hi + 0.2 * span,
        "low_value": lo - 0.05 * span,
        "unit": unit,
        "range": [lo, hi],
    }


def data_gap(tl: Timeline, placed: Mapping[str, Mapping]) -> tuple[np.ndarray, dict]:
    """Rows absent from ``tl.gap`` for ``tl.gap_hours``: the mask and the truth entry.

    ``placed`` holds the other faults' truth entries; the gap must not overlap them.
    """
    index, n = tl.index, tl.n
    in_gap = np.zeros(n, dtype=bool)
    g0, g1 = _ts(tl.gap), _ts(tl.gap) + _dur(hours=tl.gap_hours)
    i0, i1 = index.searchsorted(g0), index.searchsorted(g1)
    if not 0 < i0 < i1 <= n:
        raise ValueError(f"data gap {_iso(g0)} to {_iso(g1)} is outside the history")
    in_gap[i0:i1] = True
    for kind in ("flatline", "spike"):
        fault = placed.get(kind)
        if fault and pd.Timestamp(fault["start"]) < g1 and g0 < pd.Timestamp(fault["end"]):
            raise ValueError(
                f"data gap {_iso(g0)} to {_iso(g1)} overlaps the {kind} "
                f"{fault['start']} to {fault['end']}; place them apart"
            )
    return in_gap, {
        "start": _iso(index[i0]),
        "end": _iso(g1),
        "rows": "absent",
        "missing_samples": int(i1 - i0),
    }


def inject_faults(spec: ScenarioSpec, tl: Timeline, measured: Mapping[str, np.ndarray]) -> Faults:
    """The flatline, the spike burst and the data gap of ``tl`` (each only when placed).

    ``measured`` is not changed: the faulted roles are copied. (The trip is an outage, in
    ``load_profile``; its IP step in ``true_efficiencies``.)
    """
    out = dict(measured)
    record = {}
    if tl.flatline is not None:
        out[spec.flatline_role] = out[spec.flatline_role].copy()
        record["flatline"] = flatline(out, tl, spec.flatline_role)
    if tl.spike is not None:
        out[spec.spike_role] = out[spec.spike_role].copy()
        record["spike"] = spike_burst(out, tl, spec.spike_role, spec.spike_minutes)
    in_gap = np.zeros(tl.n, dtype=bool)
    if tl.gap is not None:
        in_gap, record["gap"] = data_gap(tl, record)
    return Faults(out, in_gap, record)


def readings_frame(tl: Timeline, measured: Mapping[str, np.ndarray], in_gap: np.ndarray) -> pd.DataFrame:
    """The output frame: one column per role (``ROLES`` order), the gap's rows left out."""
    kept = np.flatnonzero(~in_gap)
    values = np.empty((len(kept), len(ROLES)))  # one block: no copy when the frame is built
    for j, role in enumerate(ROLES):
        np.take(measured[role], kept, out=values[:, j])
    return pd.DataFrame(values, index=tl.index[kept], columns=list(ROLES), copy=False)


def state_frame(
    tl: Timeline,
    op: Operation,
    eff: Efficiencies,
    in_gap: np.ndarray,
    true: Mapping[str, np.ndarray] | None = None,
) -> pd.DataFrame:
    """The state behind the readings on the full index (see ``generate_with_state``);
    ``true_<role>`` columns only when ``true`` is given."""
    columns = {
        "online": op.online,
        "load_fraction": op.load,
        "operating_hours": eff.operating_hours,
        "eta_hp": eff.eta_hp,
        "eta_ip": eff.eta_ip,
        "eta_lp": eff.eta_lp,
        "wander_hp": eff.wander["hp"],
        "wander_ip": eff.wander["ip"],
        "wander_lp": eff.wander["lp"],
        "in_gap": in_gap,
    }
    if true is not None:
        columns.update({f"true_{role}": true[role] for role in ROLES})
    return pd.DataFrame(columns, index=tl.index)


def truth_record(
    spec: ScenarioSpec, tl: Timeline, op: Operation, eff: Efficiencies, state: pd.DataFrame, faults: Mapping
) -> dict:
    """The JSON-serialisable record of what was injected (see fixtures/README.md)."""
    start, index, step = tl.start, tl.index, tl.step
    hp_rate, initial_hours = spec.hp_rate, spec.initial_hours
    step_h = step.total_seconds() / 3600.0
    events = []
    for off, on, kind in tl.outages:
        t_off = start + pd.Timedelta(minutes=off)
        t_on = start + pd.Timedelta(minutes=on)
        if t_on > index[-1]:
            t_on = None
        events.append(
            {
                "kind": kind,
                "offline": _iso(t_off),
                "online": _iso(t_on) if t_on is not None else None,
                "hours": round((on - off) / 60.0, 3),
            }
        )
    part = state[["eta_hp", "eta_ip", "eta_lp", "load_fraction"]]
    daily = part[state["online"].to_numpy()].resample("1D").mean()
    hours_end = state["operating_hours"].resample("1D").last()
    at_rating_hp = DESIGN_CURVES["hp"]["at_rating"] + hp_rate / 100.0 * (hours_end - initial_hours) / 1000.0

    def series(s):
        return [None if not np.isfinite(v) else round(float(v), 6) for v in s.to_numpy()]

    return {
        "scenario": dict(SCENARIO),
        "generator": {
            "module": "isentrope.daemon.synthetic",
            "version": GENERATOR_VERSION,
            "start": _iso(start),
            "end": _iso(index[-1] + step),
            "days": spec.days,
            "freq": spec.freq,
            "seed": spec.seed,
            "noise_scale": spec.noise,
            "samples": int(len(index)),
        },
        "units": "internal: MPa absolute, K, MW, kg/s, percent; efficiencies as fractions; "
        "efficiency changes in percentage points",
        "design_curves": {
            k: dict(v, form="at_rating - droop * (1 - load_fraction)**2") for k, v in DESIGN_CURVES.items()
        },
        "hp": {
            "rate_points_per_1000h": hp_rate,
            "initial_hours": initial_hours,
            "form": "design_hp(load) + rate/100 * (operating_hours - initial_hours)/1000",
            "at_rating_start": round(float(at_rating_hp.iloc[0]), 6),
            "at_rating_end": round(float(at_rating_hp.iloc[-1]), 6),
        },
        "ip": {
            "step_points": spec.ip_step if tl.trip is not None else 0.0,
            "step_time": _iso(eff.ip_step_time) if eff.ip_step_time is not None else None,
            "cause": "rub at the trip; applies from the restart after the trip",
        },
        "lp": {"form": "design_lp(load), no change over the history"},
        "trip": (
            {"time": _iso(_ts(tl.trip)), "restart": next(e["online"] for e in events if e["kind"] == "trip")}
            if tl.trip is not None
            else None
        ),
        "outages": events,
        "startups": [e["online"] for e in events if e["online"] is not None],
        "shutdowns": [e["offline"] for e in events],
        "flatline": faults.get("flatline"),
        "gap": faults.get("gap"),
        "spike": faults.get("spike"),
        "operating_hours": round(float(op.online.sum() * step_h), 3),
        "online_fraction": round(float(op.online.mean()), 6),
        "noise_sd": dict(NOISE),
        "wander": dict(WANDER, scale=spec.wander),
        "efficiency_daily": {
            "date": [d.strftime("%Y-%m-%d") for d in daily.index],
            "eta_hp_mean": series(daily["eta_hp"]),
            "eta_ip_mean": series(daily["eta_ip"]),
            "eta_lp_mean": series(daily["eta_lp"]),
            "load_fraction_mean": series(daily["load_fraction"]),
            "eta_hp_at_rating_end_of_day": series(at_rating_hp.reindex(daily.index)),
        },
        "caution": "invented demonstration data for a fictional unit; advisory performance "
        "information only, not a protective function",
    }


def generate_from_spec(
    spec: ScenarioSpec, *, full_state: bool = True
) -> tuple[pd.DataFrame, dict, pd.DataFrame]:
    """Run the steps for ``spec``: frame, truth and state as ``generate_with_state`` returns
    them (``true_<role>`` state columns only with ``full_state``)."""
    tl = timeline(spec)
    rng = np.random.default_rng(spec.seed)  # one stream, drawn in the order of the steps
    op = load_profile(tl, rng)
    eff = true_efficiencies(spec, tl, op)
    true = boundary_states(tl, op, eff, rng)
    measured = sensor_readings(true, rng, spec.noise)
    faults = inject_faults(spec, tl, measured)
    frame = readings_frame(tl, faults.measured, faults.in_gap)
    state = state_frame(tl, op, eff, faults.in_gap, true if full_state else None)
    return frame, truth_record(spec, tl, op, eff, state, faults.record), state


# --- the generator --------------------------------------------------------------------------
def generate(
    start="2025-01-01",
    days: float = 365,
    freq: str = "1min",
    seed: int = DEFAULT_SEED,
    **options,
) -> tuple[pd.DataFrame, dict]:
    """A synthetic history of Greywater Bend Unit 2 and the truth injected into it.

    Parameters
    ----------
    start : str or Timestamp
        First sample time (naive means UTC).
    days : float
        Length of the history [d].
    freq : str
        Sample interval, a pandas frequency between 1 s and 1 h (e.g. "1min").
    seed : int
        Seed of the numpy Generator; the same arguments give the same output.
    **options
        See ``generate_with_state``.

    Returns
    -------
    frame : DataFrame
        UTC index ``time``, one column per role in internal units (MPa abs, K, MW, kg/s, %).
        Rows of the data gap are absent.
    truth : dict
        JSON-serialisable record of what was injected (see fixtures/README.md).
    """
    frame, truth, _ = generate_with_state(start, days, freq, seed, **options, _full_state=False)
    return frame, truth


def generate_with_state(
    start="2025-01-01",
    days: float = 365,
    freq: str = "1min",
    seed: int = DEFAULT_SEED,
    *,
    noise: float = 1.0,
    faults: bool = True,
    hp_rate: float = HP_RATE_POINTS_PER_1000H,
    ip_step: float = IP_STEP_POINTS,
    initial_hours: float = 0.0,
    wander: float = 1.0,
    shutdowns="auto",
    trip_at="auto",
    trip_hours: float = 7.0,
    flatline_at="auto",
    flatline_role: str = "cold_reheat_t",
    flatline_days: float = 2.0,
    gap_at="auto",
    gap_hours: float = 12.0,
    spike_at="auto",
    spike_role: str = "throttle_p",
    spike_minutes: int = 15,
    _full_state: bool = True,
) -> tuple[pd.DataFrame, dict, pd.DataFrame]:
    """Like ``generate``, and also the noise-free state behind the readings.

    Builds a ``ScenarioSpec`` from the arguments and runs ``generate_from_spec``.

    Parameters
    ----------
    noise : float
        Scale of the sensor noise (1 = the levels in ``NOISE``; 0 = none). Process
        fluctuations (temperature and pressure wander, load-control wander) stay.
    faults : bool
        Inject the flatline, the data gap and the spike burst.
    hp_rate : float
        HP efficiency change per 1000 operating hours [percentage points].
    ip_step : float
        IP efficiency step from the restart after the trip [percentage points].
    initial_hours : float
        Operating hours already run at ``start`` with no HP loss counted [h].
    wander : float
        Scale of the slow wander of the true efficiencies (1 = ``WANDER``; 0 = none) [-].
    shutdowns : "auto", None or sequence of (start, hours)
        Planned or reserve shutdowns: the load ramps down, the unit is offline for
        ``hours`` [h] and starts up again.
    trip_at : "auto", None or time
        A trip from load (offline at once) for ``trip_hours`` [h]; None: no trip, no IP step.
    flatline_at, gap_at, spike_at : "auto", None or time
        Start of each fault; None leaves it out.
    flatline_role, spike_role : str
        Role whose transmitter flatlines / spikes.
    flatline_days, gap_hours, spike_minutes : float
        Durations [d], [h], [min].

    Returns
    -------
    frame, truth
        As ``generate``.
    state : DataFrame
        Full index (gap rows included): ``online``, ``load_fraction``, ``operating_hours``
        [h], ``eta_hp``, ``eta_ip``, ``eta_lp`` (true fractions, wander included),
        ``wander_hp``, ``wander_ip``, ``wander_lp`` (the wander in them [points]), ``in_gap`` and
        ``true_<role>`` for every role (noise-free, fault-free, internal units).
    """
    spec = ScenarioSpec(
        start,
        days,
        freq,
        seed,
        noise=noise,
        faults=faults,
        hp_rate=hp_rate,
        ip_step=ip_step,
        initial_hours=initial_hours,
        wander=wander,
        shutdowns=shutdowns,
        trip_at=trip_at,
        trip_hours=trip_hours,
        flatline_at=flatline_at,
        flatline_role=flatline_role,
        flatline_days=flatline_days,
        gap_at=gap_at,
        gap_hours=gap_hours,
        spike_at=spike_at,
        spike_role=spike_role,
        spike_minutes=spike_minutes,
    )
    return generate_from_spec(spec, full_state=_full_state)


def events_table(truth: Mapping) -> pd.DataFrame:
    """Every injected event of ``truth`` as rows (kind, start, end, role), sorted by start.

    Kinds: ``shutdown`` and ``trip`` (unit offline), ``ip_step`` (start = end = the step),
    ``flatline``, ``gap``, ``spike``. Times are UTC Timestamps; ``end`` is exclusive. What lies
    outside these rows (and outside a settling margin the caller chooses) is a clean stretch,
    where only the gradual HP loss is present.
    """
    rows = []
    for e in truth.get("outages", []):
        end = pd.Timestamp(e["online"]) if e["online"] else pd.Timestamp(truth["generator"]["end"])
        rows.append((e["kind"], pd.Timestamp(e["offline"]), end, None))
    ip = truth.get("ip") or {}
    if ip.get("step_time"):
        t = pd.Timestamp(ip["step_time"])
        rows.append(("ip_step", t, t, None))
    for kind in ("flatline", "gap", "spike"):
        e = truth.get(kind)
        if e:
            rows.append((kind, pd.Timestamp(e["start"]), pd.Timestamp(e["end"]), e.get("role")))
    table = pd.DataFrame(rows, columns=["kind", "start", "end", "role"])
    return table.sort_values("start", kind="stable").reset_index(drop=True)


def write_truth(truth: Mapping, path) -> Path:
    """Write ``truth`` as indented JSON to ``path``; returns the path."""
    path = Path(path)
    path.write_text(json.dumps(truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    return path


def read_truth(path) -> dict:
    """Read a truth file written by ``write_truth``."""
    return json.loads(Path(path).read_text(encoding="utf-8"))


def main(argv: Sequence[str] | None = None) -> int:
    """Write a synthetic history (wide CSV: time, then one column per plant tag, plant units;
    or role columns in internal units with ``--internal``), its truth file and a configuration."""
    parser = argparse.ArgumentParser(
        prog="python -m isentrope.daemon.synthetic",
        description="Write the synthetic Greywater Bend Unit 2 history.",
    )
    parser.add_argument("-o", "--out", help="output folder (created)")
    parser.add_argument("--start", default="2025-01-01")
    parser.add_argument("--days", type=float, default=30.0)
    parser.add_argument("--freq", default="1min")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument(
        "--internal",
        action="store_true",
        help="write internal units (MPa abs, K, ...) instead of the plant units",
    )
    args = parser.parse_args(argv)
    if not args.out:
        parser.error("-o/--out is required")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    frame, truth = generate(args.start, args.days, args.freq, args.seed)
    data = frame if args.internal else to_plant_units(frame)
    if not args.internal:
        data = data.rename(columns={role: TAG_MAP[role]["tag"] for role in data.columns})
    data.to_csv(out / "history.csv", float_format="%.6g", date_format="%Y-%m-%dT%H:%M:%SZ")
    write_truth(truth, out / "truth.json")
    (out / "config.toml").write_text(config_toml(), encoding="utf-8")
    print(
        f"wrote {len(frame)} rows to {out / 'history.csv'}, truth to {out / 'truth.json'}, "
        f"configuration to {out / 'config.toml'}"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
