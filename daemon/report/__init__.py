"""The HTML report: one self-contained page with its PNG figures, for real or demo data.

``write_report(store, config, start, end, out_dir)`` reads the result series the worker and
the analysis wrote (``section_samples``, ``steady_windows``, ``deviation``, ``alarm_events``,
``degradation``, ``steps``, ``losses``, ``outlook``), re-screens the raw readings for the
data-quality table, draws the figures with matplotlib (Agg, no display), and writes
``index.html`` (figures embedded as data URIs, so the one file can be mailed or printed)
plus the PNG files beside it.

The package: ``data`` reads what the report shows (``ReportData``, no HTML), ``parts`` renders
each section of the page from it (one function each, ``RENDERERS`` in page order), ``page``
holds the style, the cautions and the HTML and figure helpers.

The page is plain and printable: black text, one accent colour per section chosen here for
contrast in print, no decoration. Every figure states its units; every number in the
tables states its unit. The cautions open and close the page.
"""

from __future__ import annotations

import html
from pathlib import Path

import pandas as pd

from isentrope.daemon import __version__
from isentrope.daemon.redact import redact
from isentrope.daemon.report.data import ReportData, gather
from isentrope.daemon.report.page import (
    CAUTION,
    EFFICIENCY_COLUMNS,
    SECTION_COLOURS,
    SECTION_TITLES,
    Figures,
    caution,
    document,
)
from isentrope.daemon.report.parts import RENDERERS

__all__ = [
    "CAUTION",
    "EFFICIENCY_COLUMNS",
    "SECTION_COLOURS",
    "SECTION_TITLES",
    "ReportData",
    "gather",
    "write_report",
]


def write_report(
    store,
    config,
    start,
    end,
    out_dir,
    *,
    analysis=None,
    hs_window: pd.Timestamp | None = None,
    readings: pd.DataFrame | None = None,
) -> Path:
    """Write the report for ``[start, end)`` into ``out_dir``; returns the path of index.html.

    Parameters
    ----------
    store : isentrope.daemon.stores.base.Store
    config : isentrope.daemon.config.Config
    start, end : pandas.Timestamp
        Period reported (UTC).
    out_dir : path
        Folder for index.html and the PNG files (created).
    analysis : isentrope.daemon.analysis.Analysis or None
        The analysis of the unit's whole history (``run_analysis``), which may reach past the
        period: the planner summary shows its state at the end of the history, the period
        table and the figures the period's part of it (``analysis.period_view``). None reads
        the stored ``degradation``/``steps`` series of the period instead (and the planner
        table then shows what was stored at the period end).
    hs_window : Timestamp or None
        Start of the steady window drawn on the h-s diagram; None: the highest-load steady
        window of the last 30 days.
    readings : pandas.DataFrame or None
        The raw readings of the period in internal units when the caller already holds them
        (the demo does); None reads them from the store for the data-quality table.
    """
    start, end = pd.Timestamp(start), pd.Timestamp(end)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    data = gather(store, config, start, end, out, analysis=analysis, hs_window=hs_window, readings=readings)
    figs = Figures(out)
    unit = config.unit.name
    parts = [
        f"<h1>Turbine section performance: {html.escape(config.unit.plant or '')} {html.escape(unit)}</h1>",
        f'<p class="meta">Period {start:%Y-%m-%d %H:%M} to {end:%Y-%m-%d %H:%M} UTC; rating '
        f"{config.unit.rating_mw:g} MW; produced by isentrope {html.escape(__version__)} on "
        f"{pd.Timestamp.now(tz='UTC'):%Y-%m-%d %H:%M} UTC.</p>",
        caution(),
    ]
    for render in RENDERERS:
        parts += render(data, figs)
    parts.append(caution())
    path = out / "index.html"
    path.write_text(redact(document(f"Turbine section performance: {unit}", parts)), encoding="utf-8")
    return path
