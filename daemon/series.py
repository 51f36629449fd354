"""The result series the worker writes, as data: measurement, tags, time stamp, fields, units.

One table for the code, the documentation and the dashboards. The measurement constants the
writers use come from here; ``markdown_table`` renders the tables of daemon/DECISIONS.md
("Result series"), and the tests check that document, ``deploy/dashboard.json`` and what a
demo run stores against ``SERIES`` (tests/daemon/test_series.py). Regenerate the document's
tables after a change with ``python -m isentrope.daemon.series --write``.

Every series has the tag ``unit`` (the ``[unit] name``); ``Series.tags`` lists the others.
Fractions are 0..1, deviations in percentage points; booleans and integers are stored as
numbers.
"""

from __future__ import annotations

import argparse
import re
from dataclasses import dataclass
from pathlib import Path

from isentrope.calc.names import FIGURE_FIELDS
from isentrope.calc.units import INTERNAL_UNIT
from isentrope.daemon.roles import ROLES


@dataclass(frozen=True)
class Field:
    """One field of a series: name, unit (``-`` for a pure number or a code) and meaning."""

    name: str
    unit: str
    text: str


@dataclass(frozen=True)
class Series:
    """One measurement.

    Attributes
    ----------
    measurement : str
        Its name in every store.
    job : str
        What writes it: ``"worker"`` (each cycle, backfill) or ``"analysis"`` (the
        degradation analysis, ``daemon.analysis.run_analysis``).
    tags : tuple of (str, str)
        Tags besides ``unit``: name and meaning.
    time : str
        What the time stamp of a row is.
    fields : tuple of Field
        Every field a row may carry (a NaN figure is not written).
    """

    measurement: str
    job: str
    tags: tuple[tuple[str, str], ...]
    time: str
    fields: tuple[Field, ...]

    @property
    def field_names(self) -> tuple[str, ...]:
        return tuple(f.name for f in self.fields)


def _fields(*rows: tuple[str, str, str]) -> tuple[Field, ...]:
    return tuple(Field(*r) for r in rows)


_FIGURES = tuple(Field(name, unit, text) for name, unit, text in FIGURE_FIELDS)
_ROLE_MEANS = tuple(
    Field(role, INTERNAL_UNIT[quantity], f"window mean of {text}")
    for role, (quantity, _, text) in ROLES.items()
)
_ALARM_FIELDS = _fields(
    ("raised", "-", "1 raised, 0 cleared"),
    ("value", "rule's unit", "the observed value at the transition"),
    ("threshold", "rule's unit", "the limit it crossed"),
)

SAMPLES_MEASUREMENT = "section_samples"
WINDOWS_MEASUREMENT = "steady_windows"
DEVIATION_MEASUREMENT = "deviation"
ALARMS_MEASUREMENT = "alarm_events"
STATUS_MEASUREMENT = "worker_status"
DEGRADATION_MEASUREMENT = "degradation"
STEPS_MEASUREMENT = "steps"
LOSSES_MEASUREMENT = "losses"
OPERATION_MEASUREMENT = "operation"
OUTLOOK_MEASUREMENT = "outlook"

_SECTION_TAG = ("section", "hp, ip, lp_dry (LP dry stage group), lp (whole LP, energy balance only)")

SERIES: tuple[Series, ...] = (
    Series(
        SAMPLES_MEASUREMENT,
        "worker",
        (),
        "each raw sample",
        _FIGURES
        + _fields(
            ("quality_flags", "-", "calc.quality.Reason bit mask"),
            ("ok", "-", "1 where the sample passed screening"),
            ("steady", "-", "1 where the sample lies in a steady period"),
        ),
    ),
    Series(
        WINDOWS_MEASUREMENT,
        "worker",
        (),
        "first sample of the window",
        _fields(
            ("duration_s", "s", "first to last sample, plus one sample spacing"),
            ("n_samples", "-", "samples in the window"),
        )
        + _ROLE_MEANS
        + _FIGURES,
    ),
    Series(
        DEVIATION_MEASUREMENT,
        "worker",
        (_SECTION_TAG, ("model", "baseline model id")),
        "the steady window",
        _fields(
            ("efficiency", "-", "the window's section efficiency"),
            ("expected", "-", "the baseline's expectation"),
            ("expected_u", "-", "its standard uncertainty"),
            ("deviation", "points", "actual - expected"),
            ("deviation_u", "points", "standard uncertainty of the deviation"),
            ("extrapolated", "-", "1 where the baseline is outside its range: no deviation given"),
            (
                "lp_weight",
                "-",
                "lp_dry only: points of the whole LP per point of the group (its pricing weight)",
            ),
        ),
    ),
    Series(
        ALARMS_MEASUREMENT,
        "worker",
        (
            (
                "section",
                "hp, ip, lp_dry, lp; the role (data quality); historian (no data); unit (unit state)",
            ),
            (
                "rule",
                "deviation_warning, deviation_alarm, exhaust_moisture, data_quality, unit_offline, no_data; "
                "from the analysis degradation_rate and step_change",
            ),
        ),
        "the transition",
        _ALARM_FIELDS,
    ),
    Series(
        STATUS_MEASUREMENT,
        "worker",
        (("worker", "checkpoint name: run/<unit>, backfill/..., or the analysis job's name"),),
        "the cycle (or analysis run) start",
        _fields(
            ("last_processed_s", "s since 1970 UTC", "the checkpoint"),
            ("lag_s", "s", "wall clock minus the checkpoint"),
            ("rows_read", "-", "rows read this cycle"),
            ("rows_flagged", "-", "rows flagged by screening"),
            ("chunks", "-", "chunks processed"),
            ("cycle_duration_s", "s", "the cycle's duration"),
            ("ok", "-", "1 when the cycle (or analysis run) succeeded"),
            ("pending_writes", "-", "result frames waiting for the store"),
            ("analysis_end_s", "s since 1970 UTC", "analysis rows: the end of the history analysed"),
            ("duration_s", "s", "analysis rows: the run's duration"),
            ("sections", "-", "analysis rows: sections analysed"),
        ),
    ),
    Series(
        DEGRADATION_MEASUREMENT,
        "analysis",
        (_SECTION_TAG,),
        "each UTC midnight and the end of the history",
        _fields(
            ("rate_per_1000h", "points/1000 h", "Theil-Sen degradation rate per 1000 operating hours"),
            ("rate_low", "points/1000 h", "lower end of its 95 % interval"),
            ("rate_high", "points/1000 h", "upper end of its 95 % interval"),
            ("rate_per_month", "points/730 h", "the rate per 730 operating hours"),
            ("rate_intercept", "points", "the fitted line at the last block's zero hours"),
            ("rate_span_h", "h", "operating hours spanned by the fit"),
            ("rate_ok", "-", "1 where a rate could be fitted"),
            ("n_windows", "-", "windows used"),
            ("operating_hours", "h", "operating hours from the first window"),
            ("deviation_now", "points", "median of the last 7 days' windows"),
            ("deviation_now_u", "points", "its standard error from their scatter"),
            ("deviation_now_window_u", "points", "median deviation_u of those windows"),
            ("step_offset", "points", "net of the steps detected by then"),
            ("projected", "points", "deviation projected to the planned outage (last row)"),
            ("projected_low", "points", "lower end of the projection's interval"),
            ("projected_high", "points", "upper end of the projection's interval"),
        ),
    ),
    Series(
        STEPS_MEASUREMENT,
        "analysis",
        (_SECTION_TAG,),
        "the step's first window at the new level (least-squares change point)",
        _fields(
            ("size", "points", "step size"),
            ("size_u", "points", "its standard uncertainty"),
            ("detected_at_s", "s since 1970 UTC", "when the scan that found it ran"),
        ),
    ),
    Series(
        LOSSES_MEASUREMENT,
        "analysis",
        (_SECTION_TAG,),
        "each UTC day (its online hours and mean online output)",
        _fields(
            ("deviation", "points", "the day's deviation"),
            ("heat_rate_change", "%", "heat-rate change it causes"),
            ("output_change_mw", "MW", "output change it causes"),
            ("lost_mwh", "MWh", "energy lost that day"),
            ("fuel_cost", "currency", "fuel cost of the loss that day"),
            ("cumulative_lost_mwh", "MWh", "energy lost since the reference start"),
            ("cumulative_fuel_cost", "currency", "fuel cost since the reference start"),
        ),
    ),
    Series(
        OPERATION_MEASUREMENT,
        "analysis",
        (),
        "each UTC day",
        _fields(
            ("online_hours", "h", "hours with gross output above online_mw"),
            ("output_mw", "MW", "mean gross output while online"),
            ("span_h", "h", "hours of the day covered by readings"),
            ("hours_start", "h", "operating hours at the day's start"),
            ("hours_end", "h", "operating hours at the day's end"),
        ),
    ),
    Series(
        OUTLOOK_MEASUREMENT,
        "analysis",
        (_SECTION_TAG,),
        "end of the history (latest run only)",
        _fields(
            ("projected_hours", "h", "operating hours to the planned outage"),
            ("projected_mean_deviation", "points", "mean projected deviation until then"),
            ("projected_lost_mwh", "MWh", "energy the projected loss costs until then"),
            ("projected_lost_mwh_low", "MWh", "lower end of its interval"),
            ("projected_lost_mwh_high", "MWh", "upper end of its interval"),
            ("projected_fuel_cost", "currency", "fuel cost of the projected loss"),
            ("projected_fuel_cost_low", "currency", "lower end of its interval"),
            ("projected_fuel_cost_high", "currency", "upper end of its interval"),
            ("overhaul_payback_years", "years", "simple payback of the overhaul case"),
            ("overhaul_payback_hours", "h", "the same in operating hours"),
            ("overhaul_saving_per_hour", "currency/h", "saving per operating hour after the overhaul"),
            ("overhaul_saving_per_year", "currency/year", "saving per year after the overhaul"),
            ("overhaul_break_even_s", "s since 1970 UTC", "date the overhaul pays back"),
        ),
    ),
)

BY_MEASUREMENT: dict[str, Series] = {s.measurement: s for s in SERIES}


def markdown_table(job: str) -> str:
    """The Markdown table of the series ``job`` writes, as daemon/DECISIONS.md shows it."""
    lines = ["| measurement | extra tags | time | fields [unit] |", "| --- | --- | --- | --- |"]
    for s in SERIES:
        if s.job != job:
            continue
        tags = "; ".join(f"`{name}` ({text})" for name, text in s.tags)
        fields = ", ".join(f"`{f.name}` [{f.unit}]" for f in s.fields)
        lines.append(f"| `{s.measurement}` | {tags} | {s.time} | {fields} |")
    return "\n".join(lines)


#: Where the tables stand in daemon/DECISIONS.md: between these marker lines.
_MARKER = re.compile(r"(<!-- series-table: (\w+) -->\n)(.*?)(<!-- end series-table -->)", re.S)


def render_document(text: str) -> str:
    """``text`` with every marked series table replaced by the one ``markdown_table`` makes."""
    return _MARKER.sub(lambda m: m.group(1) + markdown_table(m.group(2)) + "\n" + m.group(4), text)


def marked_jobs(text: str) -> list[str]:
    """The jobs whose tables ``text`` marks."""
    return [m.group(2) for m in _MARKER.finditer(text)]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(
        description="Print or rewrite the result-series tables of daemon/DECISIONS.md"
    )
    ap.add_argument("--write", action="store_true", help="rewrite daemon/DECISIONS.md in place")
    args = ap.parse_args(argv)
    path = Path(__file__).with_name("DECISIONS.md")
    text = render_document(path.read_text(encoding="utf-8"))
    if args.write:
        path.write_text(text, encoding="utf-8")
    else:
        for job in ("worker", "analysis"):
            print(markdown_table(job), end="\n\n")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
