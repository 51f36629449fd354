"""The pipeline: calc/ composed in the fixed order of DESIGN.md, one results object out, no I/O.

``Pipeline(config).process(frame, start, end, alarm_state=..., baselines=...)`` takes a frame
of plant readings in internal units (what ``Store.read`` returns) that covers the window
``[start, end)`` *plus* the margins ``Pipeline.margins`` before and after it, and returns a
``CycleResults`` for the window only:

1. ``calc.quality.screen``: per-sample reason flags; a flagged sample is never steady.
2. ``calc.steady.tag_steady``: steady flag per sample.
3. Steady windows, aligned here (see ``align_steady_windows``): runs of steady samples cut at
   fixed clock boundaries (multiples of ``[steady] max_length`` from the Unix epoch), at gaps
   longer than ``max_gap`` and at every non-steady sample; shorter than ``min_length`` dropped.
   A window belongs to the chunk in which its clock bucket *ends*, so however time is cut into
   chunks, every window is produced once and with the same samples. (calc.steady's own
   windows split long plateaus counting from the start of the run, which depends on where the
   frame starts; the worker would then give different windows after a catch-up.)
4. ``calc.sections.evaluate`` per sample (trends) and per steady window from the window-
   averaged readings (test practice: average the readings, then compute).
5. ``calc.baseline.deviation`` per steady window and section, when a baseline model is given;
   only windows that start after the model's reference period, so that it does not matter when
   during a run the model was fitted.
6. ``calc.alarms.evaluate_alarms`` on the windows not yet seen by the saved alarm state, on
   the per-tag screening flags, and on absent rows: a stretch without any row (a historian
   outage) is a run of ``no_data`` observations on the sample grid (see ``absent_row_times``).

Determinism: the same frame, window and state give identical results; the results inside the
window depend only on the samples in the window and its margins, so re-processing any window
(after an outage, a kill, or from a look-back) gives the same numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from isentrope.calc import alarms, baseline, quality, sections, steady, units
from isentrope.daemon.roles import ROLES

# the result series (measurement, tags, fields, units) are data in daemon.series
from isentrope.daemon.series import (
    ALARMS_MEASUREMENT,
    DEVIATION_MEASUREMENT,
    SAMPLES_MEASUREMENT,
    WINDOWS_MEASUREMENT,
)
from isentrope.daemon.timeutil import as_timedelta

#: The section of the ``no_data`` alarm: no row at all came from the plant historian.
HISTORIAN_SECTION = "historian"
#: The section of the unit-level ``unit_offline`` state (one event when the unit goes offline,
#: one when it returns), and the quantity it watches: 1 offline, 0 online, per row.
UNIT_SECTION = "unit"
QUANTITY_OFFLINE = "unit_offline"
#: How long the unit must be offline before the ``unit_offline`` event: a dip of output
#: below ``online_mw`` while synchronising is not an outage (project choice, no source).
OFFLINE_AFTER = "10min"
#: Tag-quality observation while the unit is offline: between the clearing (0.25) and the
#: raising (0.5) level of the ``data_quality`` rule, so that it neither raises nor clears an
#: alarm and restarts a pending streak: the rule is suspended, and a tag that goes bad at a
#: trip does not raise at once after the restart.
TAG_SUSPENDED = 0.4


@dataclass
class CycleResults:
    """Everything the pipeline computed for one window ``[start, end)``.

    Attributes
    ----------
    start, end : pandas.Timestamp
        The window (UTC); results outside it are not included.
    final_end : pandas.Timestamp
        Results before this time are final; per-sample rows after it are provisional.
    samples : pandas.DataFrame
        One row per sample in the window (UTC index ``time``): the section figures of
        ``calc.sections`` (efficiencies [fraction], enthalpies and drops [kJ/kg], moisture
        [fraction], ``*_u`` standard uncertainties (k = 1) in the same unit), ``quality_flags``
        (int bit mask of ``calc.quality`` reason codes), ``ok`` (bool: passed screening) and
        ``steady`` (bool).
    windows : pandas.DataFrame
        One row per steady window, index = time of its first sample (UTC): ``end`` (time of
        its last sample), ``duration_s`` [s], ``n_samples`` [-], the mean of every mapped role
        over the window (internal units: MPa abs, K, MW, kg/s, %) and the section figures
        computed from those means (units as in ``samples``).
    deviation : pandas.DataFrame
        One row per (steady window, section) with a baseline model: columns ``section``,
        ``efficiency`` [fraction], ``expected`` [fraction], ``expected_u`` [fraction],
        ``deviation`` [percentage points, actual minus expected], ``deviation_u`` [points],
        ``extrapolated`` (bool; deviation NaN there), ``model_id`` (str). Empty without models.
    alarm_events : pandas.DataFrame
        Alarm transitions from ``calc.alarms.evaluate_alarms`` (UTC index ``time``; columns
        section, rule, kind "raised"/"cleared", value, threshold, message). Empty when
        nothing changed.
    alarm_state : dict or None
        JSON-serialisable alarm state after this window (None when alarms are not evaluated).
    counts : dict
        ``rows_read`` (frame rows incl. margins), ``rows_in_window``, ``rows_flagged``
        (samples in the window failing screening), ``steady_samples``, ``windows``,
        ``deviations``, ``alarm_events``.
    notes : list of str
        What was switched off and why (missing optional roles, no baseline model, ...).
    """

    start: pd.Timestamp
    end: pd.Timestamp
    final_end: pd.Timestamp
    samples: pd.DataFrame
    windows: pd.DataFrame
    deviation: pd.DataFrame
    alarm_events: pd.DataFrame
    alarm_state: dict | None
    counts: dict
    notes: list = field(default_factory=list)

    def writes(self, tags: dict[str, str]) -> list[tuple[str, pd.DataFrame, dict[str, str]]]:
        """The result series as ``(measurement, frame, tags)`` for ``Store.write_results``.

        Only numeric and bool columns are written (the store contract); string columns such as
        ``lp_mode`` and ``model_id`` are carried as tags where they identify a series.
        """
        out: list[tuple[str, pd.DataFrame, dict[str, str]]] = []
        if len(self.samples):
            out.append((SAMPLES_MEASUREMENT, _numeric(self.samples), dict(tags)))
        if len(self.windows):
            w = self.windows.drop(columns=["end"], errors="ignore")
            out.append((WINDOWS_MEASUREMENT, _numeric(w), dict(tags)))
        if len(self.deviation):
            for (section, model_id), part in self.deviation.groupby(["section", "model_id"], sort=True):
                frame = _numeric(part.drop(columns=["section", "model_id"]))
                out.append(
                    (DEVIATION_MEASUREMENT, frame, {**tags, "section": str(section), "model": str(model_id)})
                )
        out.extend(alarm_event_writes(self.alarm_events, tags))
        return out


def alarm_event_writes(
    events: pd.DataFrame, tags: dict[str, str]
) -> list[tuple[str, pd.DataFrame, dict[str, str]]]:
    """Alarm events (the frame ``calc.alarms.evaluate_alarms`` returns) as ``(measurement,
    frame, tags)`` for ``Store.write_results``: one series per section and rule, tagged with
    both, with ``raised`` (bool), ``value`` and ``threshold``. No events, no series."""
    out: list[tuple[str, pd.DataFrame, dict[str, str]]] = []
    if not len(events):
        return out
    for (section, rule), part in events.groupby(["section", "rule"], sort=True):
        frame = pd.DataFrame(
            {
                "raised": (part["kind"] == "raised").to_numpy(dtype=bool),
                "value": pd.to_numeric(part["value"], errors="coerce").to_numpy(dtype=float),
                "threshold": pd.to_numeric(part["threshold"], errors="coerce").to_numpy(dtype=float),
            },
            index=pd.DatetimeIndex(part.index, name="time"),
        )
        out.append((ALARMS_MEASUREMENT, frame, {**tags, "section": str(section), "rule": str(rule)}))
    return out


def _numeric(frame: pd.DataFrame) -> pd.DataFrame:
    keep = [
        c
        for c in frame.columns
        if pd.api.types.is_bool_dtype(frame[c]) or pd.api.types.is_numeric_dtype(frame[c])
    ]
    out = frame[keep].copy()
    for c in keep:
        if pd.api.types.is_integer_dtype(out[c]):
            out[c] = out[c].astype(float)
    out.index.name = "time"
    return out


# --------------------------------------------------------------------------------------
# steady windows on fixed clock boundaries
# --------------------------------------------------------------------------------------
def align_steady_windows(
    frame: pd.DataFrame,
    steady: pd.Series,
    *,
    max_length,
    max_gap,
    min_length,
    start: pd.Timestamp | None = None,
    end: pd.Timestamp | None = None,
    columns=None,
) -> pd.DataFrame:
    """Steady windows cut at fixed clock boundaries, with the mean of ``columns``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Readings, UTC index (internal units).
    steady : pandas.Series of bool
        Steady flag per sample, same index.
    max_length : str or Timedelta
        Windows never cross a multiple of this from the Unix epoch.
    max_gap : str or Timedelta
        A longer gap between two steady samples ends a window.
    min_length : str or Timedelta
        Shorter windows (first to last sample, plus one sample spacing) are dropped.
    start, end : Timestamp or None
        Keep only windows whose clock bucket ends in ``(start, end]``; None keeps all.
    columns : list of str or None
        Columns averaged over each window; None means every column of ``frame``.

    Returns
    -------
    pandas.DataFrame
        Index = first sample time (``time``); ``end`` (last sample time), ``duration_s`` [s],
        ``n_samples`` [-] and the mean of each column, in its own unit.
    """
    max_length, max_gap, min_length = (
        as_timedelta(max_length),
        as_timedelta(max_gap),
        as_timedelta(min_length),
    )
    if max_length <= pd.Timedelta(0):
        raise ValueError(f"max_length must be positive, found {max_length}")
    columns = list(frame.columns) if columns is None else list(columns)
    empty = pd.DataFrame(
        columns=["end", "duration_s", "n_samples", *columns],
        index=pd.DatetimeIndex([], tz="UTC", name="time"),
    )
    flags = steady.reindex(frame.index).fillna(False).to_numpy(dtype=bool)
    if not flags.any():
        return empty.astype({c: float for c in ["duration_s", "n_samples", *columns]})
    idx = frame.index
    spacing = pd.Series(idx).diff().median() if len(idx) > 1 else pd.Timedelta(0)
    spacing = pd.Timedelta(0) if pd.isna(spacing) else spacing
    # run ids: a new run after every non-steady sample, gap or clock boundary
    broken = np.cumsum(~flags)
    times = idx[flags]
    bucket = times.floor(max_length) if max_length.total_seconds() >= 1 else times
    brk = broken[flags]
    new = np.ones(len(times), dtype=bool)
    if len(times) > 1:
        gap = np.asarray((times[1:] - times[:-1]) > max_gap, dtype=bool)
        new[1:] = gap | (np.diff(brk) != 0) | (bucket.asi8[1:] != bucket.asi8[:-1])
    run = np.cumsum(new)
    sub = frame.loc[flags, columns].astype(float)
    sub.index = times
    grouped = sub.groupby(run, sort=True)
    means = grouped.mean()
    first = pd.Series(times).groupby(run).first()
    last = pd.Series(times).groupby(run).last()
    n = grouped.size()
    buckets = pd.Series(bucket).groupby(run).first()
    duration = (last - first) + spacing
    keep = np.array(duration >= min_length, dtype=bool)
    if start is not None or end is not None:
        bucket_end = buckets + max_length
        inside = np.ones(len(buckets), dtype=bool)
        if start is not None:
            inside &= (bucket_end > start).to_numpy()
        if end is not None:
            inside &= (bucket_end <= end).to_numpy()
        keep &= inside
    out = means.loc[keep].copy()
    out.insert(0, "n_samples", n.loc[keep].astype(float).to_numpy())
    out.insert(0, "duration_s", duration.loc[keep].dt.total_seconds().to_numpy())
    out.insert(0, "end", pd.DatetimeIndex(last.loc[keep]))
    out.index = pd.DatetimeIndex(first.loc[keep], name="time")
    return out


# --------------------------------------------------------------------------------------
# the pipeline
# --------------------------------------------------------------------------------------
#: Section -> efficiency column of calc.sections that its baseline model is fitted to. "lp_dry"
#: is the LP dry stage group (crossover -> LP extraction); "lp" is the whole LP, its used-energy
#: efficiency (crossover -> UEEP), trended only where the energy balance gives it (main steam
#: flow and flow fractions mapped): from an assumed LP efficiency it would trend the assumption.
BASELINE_COLUMNS = {
    "hp": "hp_efficiency",
    "ip": "ip_efficiency",
    "lp_dry": "lp_dry_efficiency",
    "lp": "lp_used_energy_efficiency",
}

#: Deviation column of the LP dry stage group: points of the whole LP's efficiency per point of
#: the group's in the window [-] (``calc.sections.stage_group_weight``), by which it is priced.
WORK_SHARE = "lp_weight"

#: Window column of the pressure ratio across the control valves and the first-stage nozzles,
#: first-stage pressure over throttle pressure [-] (added where both are in the windows).
FIRST_STAGE_RATIO = "first_stage_ratio"

#: Sections whose baseline carries the operating-mode terms. The control valves stand in front
#: of the HP and their throttling counts against it (inlet upstream of the stop valves, ASME
#: PTC 6 enthalpy-drop method), so at one load another valve point or sliding-pressure curve
#: moves the HP efficiency; the IP and LP inlets lie behind the reheater and do not see it
#: (common practice, no source).
MODE_SECTIONS = ("hp",)


def with_mode_terms(windows: pd.DataFrame) -> pd.DataFrame:
    """``windows`` with ``first_stage_ratio`` (first-stage over throttle pressure [-]) added
    where both pressures are columns; the frame itself when they are not."""
    if not {"first_stage_p", "throttle_p"} <= set(windows.columns) or FIRST_STAGE_RATIO in windows:
        return windows
    out = windows.copy()
    with np.errstate(invalid="ignore", divide="ignore"):
        out[FIRST_STAGE_RATIO] = out["first_stage_p"].to_numpy(dtype=float) / out["throttle_p"].to_numpy(
            dtype=float
        )
    return out


class Pipeline:
    """calc/ composed in the fixed order of DESIGN.md for one unit's configuration.

    Parameters
    ----------
    config : isentrope.daemon.config.Config
        The unit's validated configuration.

    Attributes
    ----------
    margins : (Timedelta, Timedelta)
        How much data before and after a window ``process`` needs so that the results inside
        the window do not depend on where the window starts or ends.
    """

    def __init__(self, config):

        self.config = config
        #: What the last ``fit_baselines`` left out of the models, one line each.
        self.baseline_notes: list[str] = []
        self.roles = [r for r in ROLES if r in config.roles]
        # The historian's deadbands (internal units) where the reads come onto a grid: they
        # raise the spike floor (calc.quality) and are the noise floor of each PTC 6
        # fluctuation (calc.steady); rows as stored carry none. A floor, not an addition:
        # adding the deadband to the seen fluctuation (the worst case) cut the steady windows
        # of a 120-day synthetic history at 5 min (half the deadbands of
        # synthetic.EXCEPTION_DEADBANDS; 20 kPa on throttle pressure against its 41 kPa limit)
        # from 1180 to 671 against the regular export; with the floor 1233, and the rates and
        # steps of tests/daemon/test_exception_data.py within their tolerances either way.
        self.deadbands = dict(config.deadbands) if config.read_grid is not None else {}
        baro = config.screening.barometric_kpa
        if baro is None:
            baro = units.STANDARD_ATMOSPHERE_KPA
        # Instrument ranges in internal units for calc.quality. A gauge range is referred to the
        # configured constant barometric pressure (or the standard atmosphere): a range is a
        # coarse limit, a few kPa of weather do not matter to it.
        self.ranges: dict[str, tuple[float, float]] = {}
        for role, m in config.roles.items():
            if m.range is None:
                continue
            internal = units.INTERNAL_UNIT[units.quantity(m.unit)]
            lo, hi = (float(units.convert(float(v), m.unit, internal, barometric_kpa=baro)) for v in m.range)
            self.ranges[role] = (min(lo, hi), max(lo, hi))
        st, sc = config.steady, config.screening
        # calc.quality's flatline flags a whole flat stretch once it has lasted ``flatline``,
        # its Hampel spike window is centred and its spike noise level comes from the clock
        # block (SPIKE_SCALE_BLOCK, 1 h from the epoch) around a sample: each looks ahead as
        # well as back. calc.steady marks a sample steady when a trailing ``window`` that
        # *covers* it passes, so it looks ahead by one window too. A window's results are
        # final once this much data before and after it has been seen (plus, before, one
        # steady-window clock bucket and a gap).

        spike = max(as_timedelta(sc.spike_window), as_timedelta(getattr(quality, "SPIKE_SCALE_BLOCK", "0s")))
        look = as_timedelta(st.window) + as_timedelta(sc.flatline) + spike
        self._before = look + as_timedelta(st.max_length) + as_timedelta(st.max_gap)
        self._after = look

    @property
    def lp_energy_balance(self) -> bool:
        """True when ``calc.sections.evaluate`` takes the LP exhaust from the energy balance
        (the flow fractions configured, ``gross_output`` and ``main_steam_flow`` mapped, the
        mode not forced to the expansion); the LP figures are then measured, not estimates."""
        sc = self.config.sections
        return (
            sc.lp_mode != "expansion"
            and sc.reheat_flow_fraction is not None
            and sc.crossover_flow_fraction is not None
            and {"gross_output", "main_steam_flow"} <= set(self.roles)
        )

    def moisture_label(self) -> str:
        """What the moisture alarm rests on: measured (energy balance) or an assumption."""
        sc = self.config.sections
        if self.lp_energy_balance:
            return "LP exhaust moisture (energy balance)"
        if sc.lp_dry_efficiency_source == "measured":
            assumed = "the LP dry stage-group efficiency taken for the whole LP"
        else:
            assumed = f"an assumed LP efficiency of {sc.eta_lp_design:g}"
        return f"LP exhaust moisture, an estimate from {assumed} (+/- {sc.eta_lp_band_points:g} pt)"

    @property
    def margins(self) -> tuple[pd.Timedelta, pd.Timedelta]:
        """(before, after): data needed around a window for final results there."""
        return self._before, self._after

    # --- calc arguments from the configuration -------------------------------------------
    def section_kwargs(self) -> dict:
        """The keyword arguments of ``calc.sections.evaluate`` from ``[sections]`` and ``[unit]``
        (the cycles and the routine-test evaluation use the same)."""
        sc, unit = self.config.sections, self.config.unit
        kwargs: dict = dict(
            eta_lp_design=sc.eta_lp_design,
            eta_lp_band=sc.eta_lp_band_points / 100.0,
            lp_dry_efficiency_source=sc.lp_dry_efficiency_source,
            baumann=sc.baumann,
            lp_mode=sc.lp_mode,
        )
        if sc.annulus_area_m2 is not None:
            kwargs["annulus_area"] = sc.annulus_area_m2
        if sc.exhaust_loss_curve is not None:
            kwargs["exhaust_loss_curve"] = [tuple(p) for p in sc.exhaust_loss_curve]
        if sc.lp_exhaust_flow_fraction is not None:
            kwargs["lp_exhaust_flow_fraction"] = sc.lp_exhaust_flow_fraction
        if sc.reheat_flow_fraction is not None and sc.crossover_flow_fraction is not None:
            # HP: all of main steam flow; IP: hot reheat flow; LP: LP inlet (crossover) flow
            kwargs["flow_fractions"] = {
                "hp": 1.0,
                "ip": sc.reheat_flow_fraction,
                "lp": sc.crossover_flow_fraction,
            }
            # generator losses taken at rating: a constant of the energy balance [MW]
            kwargs["losses_mw"] = sc.mechanical_losses_mw + (1.0 - sc.generator_efficiency) * unit.rating_mw
        unc = {}
        for role, u in self.config.uncertainties.items():
            if role not in sections.ROLE_QUANTITY:
                continue
            if u.basis == "percent_of_reading":
                unc[role] = sections.InstrumentUncertainty(0.0, u.value / 100.0)
            else:  # kelvin: absolute in K, the internal unit
                unc[role] = sections.InstrumentUncertainty(float(u.value), 0.0)
        kwargs["uncertainty"] = unc
        return kwargs

    def screen_kwargs(self, frame: pd.DataFrame) -> dict:
        """Keyword arguments of ``calc.quality.screen`` for ``frame`` under this configuration
        (ranges, rates, flatline tolerances, spike window, deadbands), as ``process`` screens."""
        sc = self.config.screening
        # flatline_tolerance is relative to the reading; calc.quality keeps its per-role
        # absolute tolerances as floors (FLATLINE_TOLERANCE), as `isentrope check` does.
        return dict(
            ranges=self.ranges,
            flatline=as_timedelta(sc.flatline),
            flatline_relative=float(sc.flatline_tolerance),
            spike=spike_samples(frame.index, sc.spike_window),
            spike_threshold=float(sc.spike_threshold),
            efficiency_band=tuple(sc.efficiency_band),
            deadband=self.deadbands,
        )

    def _steady_kwargs(self) -> dict:
        st, unit = self.config.steady, self.config.unit
        limits = {
            "throttle_p": (st.throttle_p_percent / 100.0, st.throttle_p_kpa / 1000.0),  # [-], [MPa]
            "throttle_t": (0.0, st.temperature_k),  # [K]
            "hot_reheat_t": (0.0, st.temperature_k),  # [K]
            "condenser_p": (st.exhaust_p_percent / 100.0, st.exhaust_p_kpa / 1000.0),  # [-], [MPa]
            "gross_output": (st.load_band_percent / 100.0, 0.0),  # fraction of rating
        }
        return dict(
            method=st.method,
            window=as_timedelta(st.window),
            min_length=as_timedelta(st.min_length),
            max_gap=as_timedelta(st.max_gap),
            limits=limits,
            offline_mw=unit.online_mw or None,
            rating_mw=unit.rating_mw or None,
            max_length=as_timedelta(st.max_length),
            r_critical=float(st.r_critical),
            r_lambdas=tuple(st.r_filter),
            deadband=self.deadbands,
        )

    # --- the chain ------------------------------------------------------------------------
    def process(
        self,
        frame: pd.DataFrame,
        start,
        end,
        *,
        final_end=None,
        alarm_state: dict | None = None,
        baselines: dict | None = None,
    ) -> CycleResults:
        """Compute every result for the window ``[start, end)``.

        Parameters
        ----------
        frame : pandas.DataFrame
            Readings in internal units (UTC index, one column per mapped role) covering
            ``[start - margins[0], end + margins[1])``; may hold NaN, gaps and rows out of
            range: they are flagged, never an error.
        start, end : Timestamp
            The window whose per-sample results are returned (UTC).
        final_end : Timestamp or None
            Results before this time are final (the frame holds the full after-margin past
            it); steady windows, deviations and alarms are produced only up to it. None means
            ``end`` (the frame reaches ``end + margins[1]``). Per-sample rows after it are
            provisional: the worker writes them for fresh dashboards and replaces them later.
        alarm_state : dict or None
            Saved alarm state; windows at or before its ``until`` time are not fed again.
        baselines : dict or None
            Section -> ``calc.baseline.BaselineModel``; without, no deviation is computed.

        Returns
        -------
        CycleResults
        """

        start, end = pd.Timestamp(start), pd.Timestamp(end)
        final_end = end if final_end is None else min(pd.Timestamp(final_end), end)
        notes: list[str] = []
        frame = _clean(frame, self.roles)
        inside = (frame.index >= start) & (frame.index < end)
        if not len(frame):
            return self._nothing(start, end, final_end, alarm_state)

        # Section figures of every sample first (margins included: about 1 % more rows for a
        # 30-day chunk), so that screening's efficiency-band test reuses them instead of
        # solving the same expansions again (measured: that second solve was about a third
        # of the screening time of a unit-year).
        section_kwargs = self.section_kwargs()
        evaluated = sections.evaluate(frame[self.roles], **section_kwargs)
        notes.extend(evaluated.notes)
        per_sample = evaluated.to_frame().set_axis(frame.index, axis=0)
        given = {"hp": per_sample["hp_efficiency"], "ip": per_sample["ip_efficiency"]}
        if {"lp_extraction_p", "lp_extraction_t"} <= set(frame.columns) and "lp_dry_efficiency" in per_sample:
            given["lp_group"] = per_sample["lp_dry_efficiency"]
        screen = quality.screen(frame, efficiencies=given, **self.screen_kwargs(frame))
        ok = screen.ok.reindex(frame.index).fillna(False).astype(bool)
        st = steady.tag_steady(frame, ok=ok, **self._steady_kwargs())
        steady_flag = st.steady.reindex(frame.index).fillna(False).astype(bool) & ok

        in_frame = frame.loc[inside]
        st_cfg = self.config.steady
        windows = align_steady_windows(
            frame,
            steady_flag,
            max_length=st_cfg.max_length,
            max_gap=st_cfg.max_gap,
            min_length=st_cfg.min_length,
            start=start,
            end=final_end,
            columns=self.roles,
        )
        samples = per_sample.loc[inside].copy()
        samples["quality_flags"] = screen.row_flags.reindex(in_frame.index).fillna(0).astype("int64")
        samples["ok"] = ok.loc[inside].to_numpy()
        samples["steady"] = steady_flag.loc[inside].to_numpy()
        samples.index.name = "time"
        if len(windows):
            # the window figures from the window-averaged readings (test practice)
            of_windows = sections.evaluate(windows[self.roles].reset_index(drop=True), **section_kwargs)
            windows = windows.join(of_windows.to_frame().set_axis(windows.index, axis=0))

        deviation = self.deviation(windows, baselines or {}, notes)
        events, new_state = self.cycle_alarms(
            windows,
            deviation,
            alarm_state,
            final_end,
            notes,
            screen=screen,
            start=start,
            rows=frame.index,
            rows_end=end,
            online=quality.unit_online(frame, float(self.config.unit.online_mw)),
        )

        counts = {
            "rows_read": int(len(frame)),
            "rows_in_window": int(inside.sum()),
            "rows_flagged": int((~ok.loc[inside]).sum()),
            "steady_samples": int(steady_flag.loc[inside].sum()),
            "windows": int(len(windows)),
            "deviations": int(len(deviation)),
            "alarm_events": int(len(events)),
        }
        return CycleResults(
            start=start,
            end=end,
            final_end=final_end,
            samples=samples,
            windows=windows,
            deviation=deviation,
            alarm_events=events,
            alarm_state=new_state,
            counts=counts,
            notes=sorted(set(notes)),
        )

    def _nothing(self, start, end, final_end, alarm_state) -> CycleResults:
        """Results of a window without a single sample (an outage of the plant historian):
        no figures; the ``no_data`` alarm runs on from the last row it saw (alarm state)."""
        empty = pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC", name="time"))
        notes = ["no samples in the window"]
        events, new_state = self.cycle_alarms(
            empty, empty.copy(), alarm_state, final_end, notes, rows=empty.index, start=start, rows_end=end
        )
        counts = dict.fromkeys(
            ("rows_read", "rows_in_window", "rows_flagged", "steady_samples", "windows", "deviations"), 0
        )
        counts["alarm_events"] = int(len(events))
        return CycleResults(
            start=start,
            end=end,
            final_end=final_end,
            samples=empty,
            windows=empty.copy(),
            deviation=empty.copy(),
            alarm_events=events,
            alarm_state=new_state,
            counts=counts,
            notes=notes,
        )

    # --- baseline ---------------------------------------------------------------------------
    def fit_baselines(self, windows: pd.DataFrame) -> tuple[dict, list[str]]:
        """Fit one baseline model per section on the reference-period steady windows.

        Returns ``(models, problems)``: section -> ``BaselineModel``, and one line per section
        that could not be fitted (too few windows, missing figures).
        """

        cfg = self.config.baseline
        models, problems = {}, []
        self.baseline_notes = []
        windows = with_mode_terms(windows)
        for section, col in BASELINE_COLUMNS.items():
            if col not in windows.columns or not np.isfinite(windows[col].to_numpy(dtype=float)).any():
                continue
            if section == "lp" and not self.lp_energy_balance:
                continue
            try:
                models[section] = baseline.fit_baseline(
                    windows,
                    section,
                    efficiency_col=col,
                    load_col="gross_output",
                    rating_mw=float(self.config.unit.rating_mw),
                    extra_cols=self.mode_terms(section, windows),
                    degree=int(cfg.degree),
                    reference_period=(cfg.start, cfg.end),
                    load_margin=float(cfg.margin_percent) / 100.0,
                )
            except ValueError as exc:
                problems.append(f"{section}: {exc}")
        return models, problems

    def mode_terms(self, section: str, windows: pd.DataFrame | None = None) -> list[str]:
        """The operating-mode regressors of ``section``'s baseline (``calc.baseline`` extra
        columns): for the sections of ``MODE_SECTIONS``, ``valve_position`` [%] where mapped,
        ``first_stage_ratio`` [-] where ``first_stage_p`` is mapped, and ``throttle_p`` [MPa]
        (the sliding-pressure curve) with either; none for the others.

        With ``windows`` (all steady windows; the reference period is taken from them), a term
        is left out where its column is missing, finite in fewer than half of the reference
        windows or constant there (a broken or unused valve transmitter then costs the term,
        not the section's whole baseline), and where load and the terms before it explain it
        (``calc.baseline.select_terms``: a reference period in one operating mode cannot
        tell a mode term from load). What was left out and why is in ``baseline_notes``.
        """

        if section not in MODE_SECTIONS:
            return []
        mapped = set(self.roles)
        terms = []
        if "valve_position" in mapped:
            terms.append("valve_position")
        if "first_stage_p" in mapped:
            terms.append(FIRST_STAGE_RATIO)
        if terms:
            terms.append("throttle_p")
        if windows is None:
            return terms
        cfg = self.config.baseline
        ref = windows
        if cfg.start is not None and isinstance(windows.index, pd.DatetimeIndex):
            ref = windows[
                (windows.index >= pd.Timestamp(cfg.start)) & (windows.index <= pd.Timestamp(cfg.end))
            ]
        usable = []
        for term in terms:
            v = ref[term].to_numpy(dtype=float) if term in ref.columns else np.empty(0)
            fin = np.isfinite(v)
            if len(v) and fin.mean() >= 0.5 and np.ptp(v[fin]) > 0:
                usable.append(term)
            else:
                self.baseline_notes.append(f"{section}: term {term} left out: missing or constant")
        if not usable or "gross_output" not in ref.columns:
            return usable
        taken, vifs = baseline.select_terms(
            ref, usable, rating_mw=float(self.config.unit.rating_mw), degree=int(cfg.degree)
        )
        for term in usable:
            if term not in taken:
                self.baseline_notes.append(
                    f"{section}: term {term} left out: in the reference windows load and the terms "
                    f"before it explain it (variance inflation {vifs.get(term, math.inf):.3g} > "
                    f"{baseline.MAX_VIF:g})"
                )
        return taken

    def deviation(self, windows: pd.DataFrame, baselines: dict, notes: list | None = None) -> pd.DataFrame:
        """Deviation rows of the steady ``windows`` from the ``baselines`` (section -> model),
        windows of the reference period left out (see ``CycleResults.deviation``)."""

        notes = [] if notes is None else notes

        cols = ["section", "efficiency", *baseline.DEVIATION_COLUMNS]
        empty = pd.DataFrame(columns=cols, index=pd.DatetimeIndex([], tz="UTC", name="time"))
        if not baselines:
            notes.append("no baseline model yet: deviation not computed")
            return empty
        parts = []
        for section in sorted(baselines):
            model = baselines[section]
            col = BASELINE_COLUMNS.get(section, model.efficiency_col)
            if not len(windows) or col not in windows.columns:
                continue
            if section == "lp" and not self.lp_energy_balance:
                continue
            # only windows after the reference period: whether a model existed when a reference
            # window was processed depends on the cycle, so those windows get no deviation at all
            ref_end = self.config.baseline.end or model.reference_end
            after_reference = (
                (windows.index >= pd.Timestamp(ref_end))
                if ref_end is not None
                else np.ones(len(windows), dtype=bool)
            )
            w = windows.loc[after_reference]
            if not len(w):
                continue
            u_col = f"{col}_u" if f"{col}_u" in w.columns else None
            dev = baseline.deviation(model, with_mode_terms(w), efficiency_col=col, efficiency_u_col=u_col)
            dev.insert(0, "efficiency", w[col].to_numpy(dtype=float))
            dev.insert(0, "section", section)
            needed = {"lp_dry_isentropic_drop", "lp_isentropic_drop", "lp_extraction_t", "condenser_p"}
            if section == "lp_dry" and needed <= set(w.columns):
                dev[WORK_SHARE] = sections.stage_group_weight(
                    w["lp_dry_isentropic_drop"].to_numpy(dtype=float),
                    w["lp_isentropic_drop"].to_numpy(dtype=float),
                    w["lp_extraction_t"].to_numpy(dtype=float),
                    w["condenser_p"].to_numpy(dtype=float),
                    float(self.config.sections.eta_lp_design),
                )
            parts.append(dev)
        if not parts:
            return empty
        out = pd.concat(parts)
        out.index.name = "time"
        return out

    # --- alarms -----------------------------------------------------------------------------
    def alarm_rules(self) -> list:
        """``calc.alarms.Rule`` objects from ``[alarms]``.

        Deviation warning and alarm per section (persistence in steady windows, hysteresis in
        points), LP exhaust moisture on the steady windows, data quality per mapped tag (bad
        for longer than ``data_quality_limit``) and no data at all (no row for
        ``no_data_limit``; none when that is 0), and the unit-level ``unit_offline`` state
        (offline for ``OFFLINE_AFTER``; the data-quality rule is suspended meanwhile, see
        ``alarm_observations``). Degradation-rate and step rules need the
        deviation history over months; they belong to the trend report, not to one cycle.
        """

        a = self.config.alarms
        n = int(a.persistence)
        limit = a.moisture_limit_percent / 100.0
        no_data = []
        if as_timedelta(a.no_data_limit) > pd.Timedelta(0):
            no_data.append(
                alarms.Rule(
                    "no_data",
                    alarms.QUANTITY_NO_DATA,
                    "above",
                    0.5,
                    0.5,
                    raise_after_duration=f"{int(as_timedelta(a.no_data_limit).total_seconds())}s",
                    sections=(HISTORIAN_SECTION,),
                    label="no rows from the historian",
                )
            )
        return [
            alarms.Rule(
                "deviation_warning",
                alarms.QUANTITY_DEVIATION,
                "below",
                float(a.deviation_warning),
                float(a.deviation_warning) + float(a.hysteresis),
                n,
                n,
                steady_only=True,
                unit="points",
                label="efficiency deviation warning",
            ),
            alarms.Rule(
                "deviation_alarm",
                alarms.QUANTITY_DEVIATION,
                "below",
                float(a.deviation_alarm),
                float(a.deviation_alarm) + float(a.hysteresis),
                n,
                n,
                steady_only=True,
                unit="points",
                label="efficiency deviation alarm",
            ),
            # cleared half a point of moisture below the limit (project choice, no source)
            alarms.Rule(
                "exhaust_moisture",
                alarms.QUANTITY_MOISTURE,
                "above",
                limit,
                limit - 0.005,
                n,
                n,
                sections=("lp",),
                label=self.moisture_label(),
            ),
            alarms.Rule(
                "data_quality",
                alarms.QUANTITY_TAG_BAD,
                "above",
                0.5,
                0.25,  # TAG_SUSPENDED lies between: neither raises nor clears
                raise_after_duration=f"{int(as_timedelta(a.data_quality_limit).total_seconds())}s",
                label="tag missing, flatlined or out of range while the unit runs",
            ),
            alarms.Rule(
                "unit_offline",
                QUANTITY_OFFLINE,
                "above",
                0.5,
                0.5,
                raise_after_duration=OFFLINE_AFTER,
                sections=(UNIT_SECTION,),
                label=f"unit offline (gross output below online_mw {self.config.unit.online_mw:g} MW)",
            ),
            *no_data,
        ]

    def cycle_alarms(self, windows, deviation, state, final_end, notes, **where):
        """Alarm events and the new alarm state of one cycle: from the final results (before
        ``final_end``) only; absent rows up to ``rows_end``. ``where`` holds the keywords
        ``screen``, ``start``, ``rows``, ``rows_end`` and ``online`` of ``alarm_observations``.

        The state machines of ``calc.alarms`` skip observations at or before the last one
        they consumed, so the look-back overlap of consecutive cycles raises nothing twice.
        (``isentrope.daemon.fleet`` overrides this to keep the observations instead.)
        """

        obs = self.alarm_observations(windows, deviation, final_end, state=state, **where)
        if obs is None:
            return no_events(), (dict(state) if state else None)
        new_state, events = alarms.evaluate_alarms(state or None, obs, self.alarm_rules())
        return events, new_state

    def alarm_observations(
        self,
        windows,
        deviation,
        final_end,
        screen=None,
        start=None,
        rows=None,
        state=None,
        rows_end=None,
        online=None,
    ):
        """The observation frame ``calc.alarms.evaluate_alarms`` reads for one window, or None.

        Deviation per steady window and section, LP exhaust moisture per steady window, per
        mapped role 1/0 for a sample in ``[start, final_end)`` flagged bad by screening, and
        (with ``rows``, the frame's row times, margins included) ``no_data`` for the
        historian: 0 at each row in ``[start, rows_end)``, 1 on the sample grid where rows
        are absent there (``absent_row_times``; a gap before the frame's first row continues
        from the time the saved ``state`` last saw). ``rows_end`` (default ``final_end``) may
        reach past ``final_end``: whether a row has arrived needs no look-ahead, so ``process``
        passes the window end and a live outage is seen ``settle`` after it happens, not also
        the after-margin later. (A separate method so that ``isentrope.daemon.fleet`` can run
        the machines after the partitions, in time order.)

        With ``online`` (bool per row, ``calc.quality.unit_online``), the unit state: 1/0 per
        row in ``[start, final_end)`` for the ``unit_offline`` rule, and the tag-quality
        observations of offline rows become ``TAG_SUSPENDED`` (the tag rules are suspended
        while the unit is offline; ``no_data`` is not: a silent historian is still seen).
        """

        parts = []
        if (
            rows is not None
            and start is not None
            and as_timedelta(self.config.alarms.no_data_limit) > pd.Timedelta(0)
        ):
            machine = ((state or {}).get("machines") or {}).get(f"no_data|{HISTORIAN_SECTION}") or {}
            seen = machine.get("last_time")
            got, absent = absent_row_times(
                rows, start, final_end if rows_end is None else rows_end, last_seen=seen
            )
            times = got.append(absent)
            if len(times):
                parts.append(
                    pd.DataFrame(
                        {
                            "time": times,
                            "section": HISTORIAN_SECTION,
                            "quantity": alarms.QUANTITY_NO_DATA,
                            "value": np.r_[np.zeros(len(got)), np.ones(len(absent))],
                            "steady": True,
                        }
                    )
                )
        if len(deviation):
            parts.append(
                pd.DataFrame(
                    {
                        "time": deviation.index,
                        "section": deviation["section"].to_numpy(),
                        "quantity": alarms.QUANTITY_DEVIATION,
                        "value": deviation["deviation"].to_numpy(dtype=float),
                        "steady": True,
                    }
                )
            )
        if len(windows) and "lp_moisture" in windows.columns:
            parts.append(
                pd.DataFrame(
                    {
                        "time": windows.index,
                        "section": "lp",
                        "quantity": alarms.QUANTITY_MOISTURE,
                        "value": windows["lp_moisture"].to_numpy(dtype=float),
                        "steady": True,
                    }
                )
            )
        offline = None
        if online is not None and start is not None:
            sel = (online.index >= start) & (online.index < final_end)
            if sel.any():
                offline = ~online.to_numpy(dtype=bool)[sel]
                parts.append(
                    pd.DataFrame(
                        {
                            "time": online.index[sel],
                            "section": UNIT_SECTION,
                            "quantity": QUANTITY_OFFLINE,
                            "value": offline.astype(float),
                            "steady": True,
                        }
                    )
                )
        if screen is not None:
            flags = screen.flags
            sel = (flags.index >= start) & (flags.index < final_end)
            roles = [r for r in self.roles if r in flags.columns]
            if sel.any() and roles:
                bad = (flags.loc[sel, roles].to_numpy() != 0).astype(float)
                times = flags.index[sel]
                if online is not None:
                    off = ~online.reindex(times).fillna(True).to_numpy(dtype=bool)
                    bad[off, :] = TAG_SUSPENDED
                for j, role in enumerate(roles):
                    parts.append(
                        pd.DataFrame(
                            {
                                "time": times,
                                "section": role,
                                "quantity": alarms.QUANTITY_TAG_BAD,
                                "value": bad[:, j],
                                "steady": True,
                            }
                        )
                    )
        if not parts:
            return None
        return pd.concat(parts, ignore_index=True)


def sample_spacing(index: pd.DatetimeIndex) -> pd.Timedelta:
    """The typical spacing of the rows: median difference, whole seconds, at least 1 s; 60 s
    when there are fewer than three rows."""
    spacing = pd.Timedelta(seconds=60)
    if len(index) > 2:
        d = pd.Series(index).diff().median()
        if pd.notna(d) and d > pd.Timedelta(0):
            spacing = max(pd.Timedelta(seconds=1), d.round("1s"))
    return spacing


def absent_row_times(
    rows: pd.DatetimeIndex, start, end, last_seen=None, spacing=None
) -> tuple[pd.DatetimeIndex, pd.DatetimeIndex]:
    """Row times in ``[start, end)`` and the times there where rows are absent.

    An absence is a stretch longer than two sample spacings (``spacing``, default
    ``sample_spacing`` of ``rows``) between one row and the next, or from the last row to
    ``end``; it is marked on the grid ``row + k x spacing`` (k = 1, 2, ...) inside the
    stretch. The stretch before the first row of ``rows`` counts from the last row before
    ``start`` (in ``rows``) or else from ``last_seen`` (ISO time or Timestamp, what the
    ``no_data`` alarm saw last); without either, nothing before the first row is marked (the
    data may simply begin later, or the alarm state was lost).

    The stretch after the last row is an absence too: that is how an outage is seen while it
    lasts. A backfill whose end lies after the last stored row therefore ends with the
    ``no_data`` alarm raised; the next run with the same alarm state clears it at the first
    row. Rows are assumed periodic: read a historian that stores exceptions only on a grid
    (``[read]``; its rows stop once every hold has aged out), or switch the alarm off
    (``[alarms] no_data_limit = "0s"``).

    Returns
    -------
    (DatetimeIndex, DatetimeIndex)
        The rows inside the window, and the absent times, both UTC.
    """
    start, end = pd.Timestamp(start), pd.Timestamp(end)
    idx = pd.DatetimeIndex(rows)
    idx = (idx.tz_localize("UTC") if idx.tz is None else idx.tz_convert("UTC")).as_unit("ns")
    step = int((sample_spacing(idx) if spacing is None else pd.Timedelta(spacing)).value)
    t = np.unique(idx.asi8)
    lo, hi = int(start.value), int(end.value)
    inside = t[(t >= lo) & (t < hi)]
    before = t[t < lo]
    prior = int(before[-1]) if len(before) else None
    if prior is None and last_seen is not None:
        prior = int(pd.Timestamp(last_seen).value)
    points = np.concatenate([[prior] if prior is not None else [], inside, [hi]]).astype(np.int64)
    absent = []
    for k in np.flatnonzero(np.diff(points) > 2 * step).tolist():  # the gaps only
        a, b = int(points[k]), int(points[k + 1])
        k0 = max(1, -(-(lo - a) // step))  # the first grid time at or after start
        grid = a + step * np.arange(k0, -(-(b - a) // step), dtype=np.int64)
        absent.append(grid[(grid >= lo) & (grid < min(b, hi))])
    absent_ns = np.concatenate(absent) if absent else np.empty(0, dtype=np.int64)
    as_index = lambda ns: pd.DatetimeIndex(pd.to_datetime(ns, unit="ns", utc=True), name="time")  # noqa: E731
    return as_index(inside), as_index(absent_ns)


def spike_samples(index: pd.DatetimeIndex, spike_window) -> int:
    """The Hampel window of ``calc.quality.screen`` in samples: ``spike_window`` divided by the
    typical sample spacing (median, whole seconds), odd, at least 3."""
    spacing = sample_spacing(index)
    n = int(round(as_timedelta(spike_window) / spacing))
    n = max(3, n)
    return n if n % 2 == 1 else n + 1


def no_events() -> pd.DataFrame:
    """An empty alarm-event frame with the columns and dtypes of ``alarm_events``."""
    return pd.DataFrame(
        {
            c: np.array([], dtype=float if c in ("value", "threshold") else object)
            for c in ("section", "rule", "kind", "value", "threshold", "message")
        },
        index=pd.DatetimeIndex([], tz="UTC", name="time"),
    )


def _clean(frame: pd.DataFrame, roles: list[str]) -> pd.DataFrame:
    """Sorted unique UTC index, one float column per mapped role (absent ones all NaN).

    Strings and other non-numbers become NaN (screening flags them as missing); duplicate
    times keep the last sample, as the store contract does.
    """
    out = frame.copy()
    if not isinstance(out.index, pd.DatetimeIndex):
        raise ValueError(f"readings need a DatetimeIndex (UTC), found {type(out.index).__name__}")
    if out.index.tz is None:
        raise ValueError("readings need a UTC index; found times without a time zone")
    out.index = out.index.tz_convert("UTC")
    out = out[~out.index.duplicated(keep="last")].sort_index()
    data = {
        r: pd.to_numeric(out[r], errors="coerce").astype(float)
        if r in out.columns
        else pd.Series(np.nan, index=out.index)
        for r in roles
    }
    result = pd.DataFrame(data, index=out.index)
    result.index.name = "time"
    return result
