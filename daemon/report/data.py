"""What the report shows, read from the store once: no HTML and no figures here."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from isentrope.calc import quality
from isentrope.calc.baseline import BaselineModel
from isentrope.daemon.analysis import alarm_series, period_view
from isentrope.daemon.pipeline import Pipeline
from isentrope.daemon.series import (
    ALARMS_MEASUREMENT,
    DEGRADATION_MEASUREMENT,
    DEVIATION_MEASUREMENT,
    STEPS_MEASUREMENT,
    WINDOWS_MEASUREMENT,
)


@dataclass
class ReportData:
    """The figures of one report.

    Attributes
    ----------
    config : isentrope.daemon.config.Config
    start, end : pandas.Timestamp
        Period reported (UTC).
    out : pathlib.Path
        Folder of index.html and the PNG files.
    windows : pandas.DataFrame
        The period's ``steady_windows`` rows.
    deviation : dict of str to pandas.DataFrame
        Section -> the period's ``deviation`` rows under the saved baseline model.
    analysis : isentrope.daemon.analysis.Analysis or None
        The whole-history analysis (see ``write_report``).
    views : dict
        Section -> the period's part of the analysis (``analysis.period_view``).
    stored : dict of str to tuple
        Section -> (last stored ``degradation`` row of the period, number of stored steps),
        for a section with a baseline but no analysis given.
    alarm_events : list of (str, str, pandas.DataFrame)
        (section or tag, rule, the period's ``alarm_events`` rows) of every alarm series.
    raw_rows : int
        Raw rows found in the period.
    quality_summary : pandas.DataFrame or None
        Per-role screening counts of the raw readings (``calc.quality.ScreenResult.summary``).
    lp_energy_balance : bool
        The whole LP comes from the energy balance (measured), not an assumed efficiency.
    hs_window : pandas.Timestamp or None
        The steady window asked for on the h-s diagram.
    """

    config: object
    start: pd.Timestamp
    end: pd.Timestamp
    out: Path
    windows: pd.DataFrame
    deviation: dict
    analysis: object = None
    views: dict = field(default_factory=dict)
    stored: dict = field(default_factory=dict)
    alarm_events: list = field(default_factory=list)
    raw_rows: int = 0
    quality_summary: pd.DataFrame | None = None
    lp_energy_balance: bool = False
    hs_window: pd.Timestamp | None = None


def _read(store, measurement, start, end, tags) -> pd.DataFrame:
    frame = store.read_results(measurement, start, end, tags)
    return frame.sort_index() if len(frame) else frame


def gather(
    store, config, start, end, out: Path, *, analysis=None, hs_window=None, readings=None
) -> ReportData:
    """Read everything the report shows for ``[start, end)`` (see ``write_report``)."""
    unit = config.unit.name
    tags = {"unit": unit}
    saved = store.load_state(f"baseline/{unit}") or {}
    models = {s: BaselineModel.from_json(t) for s, t in sorted(saved.get("models", {}).items())}
    deviation = {
        s: _read(store, DEVIATION_MEASUREMENT, start, end, {**tags, "section": s, "model": m.model_id})
        for s, m in models.items()
    }
    stored = {}
    for s in models:
        if analysis is None or s not in analysis.sections:
            d = _read(store, DEGRADATION_MEASUREMENT, start, end, {**tags, "section": s})
            steps = _read(store, STEPS_MEASUREMENT, start, end, {**tags, "section": s})
            stored[s] = (d.iloc[-1] if len(d) else pd.Series(dtype=float), len(steps))
    events = [
        (s, rule, _read(store, ALARMS_MEASUREMENT, start, end, {**tags, "section": s, "rule": rule}))
        for s, rule in alarm_series(config)
    ]
    if readings is not None:
        raw = readings.loc[(readings.index >= start) & (readings.index < end)]
    else:
        raw = store.read(
            config.mappings, start, end, barometric_kpa=config.screening.barometric_kpa, grid=config.read_grid
        )
    pipe = Pipeline(config)
    summary = quality.screen(raw, **pipe.screen_kwargs(raw)).summary() if len(raw) else None
    return ReportData(
        config=config,
        start=start,
        end=end,
        out=out,
        windows=_read(store, WINDOWS_MEASUREMENT, start, end, tags),
        deviation=deviation,
        analysis=analysis,
        views=period_view(analysis, start, end) if analysis is not None else {},
        stored=stored,
        alarm_events=events,
        raw_rows=len(raw),
        quality_summary=summary,
        lp_energy_balance=bool(pipe.lp_energy_balance),
        hs_window=hs_window,
    )
