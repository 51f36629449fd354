"""The report's sections, one renderer each: ``(data, figures) -> list of HTML parts``.

Each renderer reads only its ``ReportData`` and returns the HTML of its section (an empty list
when there is nothing to show); figures go through ``Figures.add``. ``RENDERERS`` is the
page's order.
"""

from __future__ import annotations

import html
import math

import numpy as np
import pandas as pd

from isentrope.calc import steam
from isentrope.calc.names import TRENDED_SECTIONS
from isentrope.daemon.analysis import CURRENT_WINDOW_DAYS
from isentrope.daemon.report.data import ReportData
from isentrope.daemon.report.page import (
    EFFICIENCY_COLUMNS,
    SECTION_COLOURS,
    SECTION_TITLES,
    Figures,
    fmt,
    plt,
    table,
)


def hs_diagram(ax, window: pd.Series) -> None:
    """Expansion of one steady window on an h-s diagram, with the saturation line."""
    p = np.geomspace(0.001, 22.0, 200)
    ax.plot(steam.s_sat_liquid(p), steam.h_sat_liquid(p), color="#777", lw=1)
    ax.plot(steam.s_sat_vapour(p), steam.h_sat_vapour(p), color="#777", lw=1, label="saturation line")
    pts = []
    for label, pr, tr in (
        ("throttle", "throttle_p", "throttle_t"),
        ("cold reheat", "cold_reheat_p", "cold_reheat_t"),
        ("hot reheat", "hot_reheat_p", "hot_reheat_t"),
        ("crossover", "crossover_p", "crossover_t"),
    ):
        if pr in window and tr in window and np.isfinite(window[pr]) and np.isfinite(window[tr]):
            pts.append(
                (label, float(steam.s_pt(window[pr], window[tr])), float(steam.h_pt(window[pr], window[tr])))
            )
    for (_, s1, h1), (_, s2, h2), col in (
        ((pts[0], pts[1], SECTION_COLOURS["hp"]), (pts[2], pts[3], SECTION_COLOURS["ip"]))
        if len(pts) == 4
        else ()
    ):
        ax.plot([s1, s2], [h1, h2], "-o", color=col, lw=2)
    for label, s, h in pts:
        ax.annotate(label, (s, h), textcoords="offset points", xytext=(6, 4), fontsize=8)
    if len(pts) == 4 and "condenser_p" in window and np.isfinite(window.get("lp_elep", np.nan)):
        h_e = float(window["lp_elep"])
        s_e = float(steam.s_ph(window["condenser_p"], h_e))
        estimate = float(window.get("lp_estimate", 0.0)) > 0.5
        ax.plot(
            [pts[3][1], s_e], [pts[3][2], h_e], "--o" if estimate else "-o", color=SECTION_COLOURS["lp"], lw=2
        )
        label = "ELEP (estimate)" if estimate else "ELEP"
        ax.annotate(label, (s_e, h_e), textcoords="offset points", xytext=(6, -10), fontsize=8)
        s_lo, s_hi = pts[0][1] - 0.3, s_e + 0.3
    else:
        s_lo, s_hi = 5.5, 8.2
    ax.set_xlim(s_lo, s_hi)
    ax.set_ylim(2000, 3700)
    ax.set_xlabel("specific entropy s [kJ/(kg K)]")
    ax.set_ylabel("specific enthalpy h [kJ/kg]")
    ax.grid(True, lw=0.3)
    ax.legend(loc="lower right", fontsize=8)


def planner(d: ReportData, figs: Figures) -> list[str]:
    """Summary for the planner: the state at the end of the stored history, per section."""
    parts: list[str] = []
    analysis, cur = d.analysis, d.config.economics.currency
    parts.append("<h2>Summary for the planner</h2>")
    if analysis is not None and analysis.sections:
        parts.append(
            f"<p>State at the end of the stored history, {analysis.end:%Y-%m-%d %H:%M} UTC (the "
            "analysis always covers the whole history from the baseline on, whatever the period "
            "of this report).</p>"
        )
    cost_col = f"extra fuel cost since the baseline end [{cur}]"
    rows = []
    outage = d.config.economics.planned_outage
    for s in TRENDED_SECTIONS:
        if analysis is not None and s in analysis.sections:
            o = analysis.sections[s]
            r = o.rate
            proj = o.projection
            pl = o.projected_loss
            oh = o.overhaul
            rows.append(
                {
                    "section": SECTION_TITLES[s],
                    "deviation now [pt] ± its standard error": f"{fmt(o.current, '+.2f')} ± {fmt(o.current_u, '.3f')}",
                    "one window's u [pt]": fmt(o.current_window_u, ".2f"),
                    "rate [pt/1000 h] (95 %)": (
                        f"{fmt(r.slope_per_1000h, '+.2f')} ({fmt(r.low, '+.2f')} to {fmt(r.high, '+.2f')})"
                        if r.status == "ok"
                        else r.status
                    ),
                    "steps": str(len(o.steps)),
                    f"at outage {outage or 'n/a'} [pt]": (
                        f"{fmt(proj.value, '+.2f')} ({fmt(proj.low, '+.2f')} to {fmt(proj.high, '+.2f')})"
                        if proj is not None and proj.status == "ok"
                        else "n/a"
                    ),
                    cost_col: fmt(o.losses["cumulative_fuel_cost"].iloc[-1], ",.0f")
                    if o.losses is not None and len(o.losses)
                    else "n/a",
                    f"cost to outage [{cur}]": fmt(pl.fuel_cost, ",.0f") if pl is not None else "n/a",
                    "overhaul payback [years]": fmt(oh.payback_years, ".1f") if oh is not None else "n/a",
                }
            )
        elif s in d.stored:
            last, n_steps = d.stored[s]
            rows.append(
                {
                    "section": SECTION_TITLES[s],
                    "deviation now [pt] ± its standard error": f"{fmt(last.get('deviation_now'), '+.2f')} ± "
                    f"{fmt(last.get('deviation_now_u'), '.3f')}",
                    "one window's u [pt]": fmt(last.get("deviation_now_window_u"), ".2f"),
                    "rate [pt/1000 h] (95 %)": f"{fmt(last.get('rate_per_1000h'), '+.2f')} "
                    f"({fmt(last.get('rate_low'), '+.2f')} to "
                    f"{fmt(last.get('rate_high'), '+.2f')})",
                    "steps": str(n_steps),
                    f"at outage {outage or 'n/a'} [pt]": fmt(last.get("projected"), "+.2f"),
                    cost_col: "see losses",
                    f"cost to outage [{cur}]": "n/a",
                    "overhaul payback [years]": "n/a",
                }
            )
    if rows:
        parts.append(table(pd.DataFrame(rows), left=("section",)))
        parts.append(
            "<p>Deviation is actual minus baseline expectation in percentage points (negative is "
            f"worse): the median of the steady windows of the last {CURRENT_WINDOW_DAYS:g} days. The ± "
            "after it is the standard error of that median from the scatter of those windows "
            "(1.4826 MAD / &radic;n, k = 1): how well the present level is known while the "
            "instruments are those of the baseline period, since a fixed instrument bias cancels in "
            "the deviation; the projection's interval carries it. “One window's u” is the median "
            "standard uncertainty (k = 1) of a single window's deviation from the configured "
            "instrument uncertainties and the baseline fit: read it as how far a change of "
            "instrument bias since the baseline (a recalibration, a replaced transmitter or "
            "thermocouple) could move the level, which the standard error does not cover; check the "
            "instruments before acting on a change smaller than about twice it. Rates are Theil-Sen "
            "slopes against operating hours; a rate whose interval includes zero is not yet a trend. "
            "Costs use the sensitivity coefficients of the configuration: replace them with the "
            "unit's own heat balance before using them in a business case.</p>"
        )
        pricing = [
            f"{SECTION_TITLES[s]}: {fmt(o.heat_rate_per_point, '.3f')} % heat rate and "
            f"{fmt(o.output_per_point, '.3f')} % output per point ({html.escape(o.pricing)})"
            for s, o in (analysis.sections.items() if analysis is not None else ())
            if o.pricing
        ]
        if pricing:
            parts.append(
                "<p>Priced per point of each trended figure. The LP dry stage group is the stages "
                "between the crossover and the LP extraction only: a point of it is worth its weight "
                "in the whole LP (its share of the LP's isentropic drop, less what the stages after "
                "it recover) times the whole LP's coefficients.</p><ul>"
                + "".join(f"<li>{p}</li>" for p in pricing)
                + "</ul>"
            )
    else:
        parts.append(
            "<p>No baseline model yet: configure <code>[baseline]</code> and process the reference "
            "period first.</p>"
        )
    if analysis is not None and analysis.notes:
        parts.append("<ul>" + "".join(f"<li>{html.escape(n)}</li>" for n in analysis.notes) + "</ul>")
    return parts


def period(d: ReportData, figs: Figures) -> list[str]:
    """The period's part of the whole-history analysis."""
    parts: list[str] = []
    start, end, cur, views = d.start, d.end, d.config.economics.currency, d.views
    if views:
        parts.append(f"<h3>The period {start:%Y-%m-%d %H:%M} to {end:%Y-%m-%d %H:%M} UTC</h3>")
        prow = []
        for s in TRENDED_SECTIONS:
            v = views.get(s)
            if v is None:
                continue
            r = v.rate
            prow.append(
                {
                    "section": SECTION_TITLES[s],
                    "steady windows": str(v.n_windows),
                    "deviation at period end [pt] ± its standard error": f"{fmt(v.deviation_end, '+.2f')} ± {fmt(v.deviation_end_u, '.3f')}",
                    "one window's u [pt]": fmt(v.window_u, ".2f"),
                    "rate at period end [pt/1000 h] (95 %)": (
                        f"{fmt(r.slope_per_1000h, '+.2f')} ({fmt(r.low, '+.2f')} to {fmt(r.high, '+.2f')})"
                        if r.status == "ok"
                        else r.status
                    ),
                    "steps in the period": "; ".join(
                        f"{st.size:+.2f} pt at {pd.Timestamp(st.time):%Y-%m-%d %H:%M}" for st in v.steps
                    )
                    or "none",
                    "lost energy in the period [MWh]": fmt(v.lost_mwh, ",.0f"),
                    f"extra fuel cost in the period [{cur}]": fmt(v.fuel_cost, ",.0f"),
                    f"extra fuel cost since the baseline end, to the period end [{cur}]": fmt(
                        v.cumulative_fuel_cost, ",.0f"
                    ),
                }
            )
        parts.append(table(pd.DataFrame(prow), left=("section", "steps in the period")))
        parts.append(
            "<p>Figures of the period from the whole-history analysis: the deviation and rate as the "
            "history up to the period end gives them; costs in the period are the sums over the UTC "
            "days that overlap it, and the cost since the baseline end runs to the last of those "
            "days.</p>"
        )
    return parts


def efficiency(d: ReportData, figs: Figures) -> list[str]:
    """Per section: the efficiency of each steady window with the baseline expectation, and
    the deviation with its alarm levels, fitted trend, projection and steps."""
    parts: list[str] = []
    analysis, start, end, windows = d.analysis, d.start, d.end, d.windows
    a, outage, pyplot = d.config.alarms, d.config.economics.planned_outage, plt()
    parts.append("<h2>Section efficiency and deviation</h2>")
    for s in TRENDED_SECTIONS:
        col = EFFICIENCY_COLUMNS[s]
        if not len(windows) or col not in windows.columns or not np.isfinite(windows[col]).any():
            continue
        if s == "lp" and not d.lp_energy_balance:
            continue  # the whole LP from an assumed efficiency: an estimate, not trended
        fig, (ax1, ax2) = pyplot.subplots(2, 1, figsize=(9, 6), sharex=True)
        ax1.plot(
            windows.index,
            100 * windows[col],
            ".",
            ms=2,
            color=SECTION_COLOURS[s],
            alpha=0.6,
            label="steady window",
        )
        dv = d.deviation.get(s)
        if dv is not None and len(dv) and "expected" in dv:
            e, eu = 100 * dv["expected"], 100 * dv.get("expected_u", 0 * dv["expected"])
            ax1.plot(dv.index, e, "-", color="#111", lw=0.6, label="baseline expectation")
            ax1.fill_between(
                dv.index, e - 2 * eu, e + 2 * eu, color="#999", alpha=0.35, lw=0, label="expectation ± 2 u"
            )
            ax2.plot(
                dv.index, dv["deviation"], ".", ms=2, color=SECTION_COLOURS[s], alpha=0.6, label="deviation"
            )
            ax2.axhline(a.deviation_warning, color="#b9770e", ls="--", lw=1, label="warning level")
            ax2.axhline(a.deviation_alarm, color="#922b21", ls="--", lw=1, label="alarm level")
            o = analysis.sections.get(s) if analysis is not None else None
            if o is not None and o.rate.status == "ok":
                h = o.hours
                last_block = o.steps[-1].index if len(o.steps) else 0
                t = o.deviation.index[last_block:]
                hh = h[last_block:]
                inside = (t >= start) & (t < end)  # the period's part of the whole-history fit
                line = o.rate.intercept + o.rate.slope_per_1000h * hh[inside] / 1000.0
                if inside.any():
                    ax2.plot(t[inside], line, "-", color="#111", lw=1.2, label="fitted trend")
                if o.projection is not None and o.projection.status == "ok" and outage is not None:
                    tp = pd.Timestamp(outage).tz_localize("UTC")
                    ax2.errorbar(
                        [tp],
                        [o.projection.value],
                        yerr=[
                            [o.projection.value - o.projection.low],
                            [o.projection.high - o.projection.value],
                        ],
                        fmt="s",
                        color="#111",
                        capsize=4,
                        label="projection at outage",
                    )
                for st in (x for x in o.steps if start <= pd.Timestamp(x.time) < end):
                    ax2.axvline(pd.Timestamp(st.time), color="#111", lw=0.8, ls=":")
                    ax2.annotate(
                        f"step {st.size:+.2f} pt",
                        (pd.Timestamp(st.time), ax2.get_ylim()[0]),
                        textcoords="offset points",
                        xytext=(3, 5),
                        fontsize=8,
                    )
        ax1.set_ylabel("efficiency [%]")
        ax1.grid(True, lw=0.3)
        ax1.legend(fontsize=8, loc="lower left")
        ax2.set_ylabel("deviation [points]")
        ax2.grid(True, lw=0.3)
        if ax2.get_legend_handles_labels()[0]:
            ax2.legend(fontsize=8, loc="lower left", ncol=3)
        fig.autofmt_xdate()
        parts.append(f"<h3>{SECTION_TITLES[s]}</h3>")
        parts.append(
            figs.add(
                fig,
                f"{s}_efficiency",
                f"{SECTION_TITLES[s]}: efficiency of each steady window "
                "with the baseline expectation (top), deviation with alarm levels, fitted trend, "
                "projection and steps (bottom).",
            )
        )
    return parts


def coverage(d: ReportData, figs: Figures) -> list[str]:
    """Share of each week inside steady windows."""
    parts: list[str] = []
    windows, pyplot = d.windows, plt()
    if len(windows) and "duration_s" in windows:
        weekly = windows["duration_s"].resample("W").sum() / (7 * 86400.0) * 100.0
        fig, ax = pyplot.subplots(figsize=(9, 2.6))
        ax.bar(weekly.index, weekly.to_numpy(), width=5, color="#555")
        ax.set_ylabel("steady time [% of week]")
        ax.grid(True, lw=0.3, axis="y")
        fig.autofmt_xdate()
        parts.append("<h2>Steady-state coverage</h2>")
        parts.append(
            figs.add(
                fig,
                "steady_coverage",
                "Share of each week inside steady windows (the only periods used for trending).",
            )
        )
    return parts


def moisture(d: ReportData, figs: Figures) -> list[str]:
    """LP exhaust moisture per steady window against its limit."""
    parts: list[str] = []
    windows, config, a, pyplot = d.windows, d.config, d.config.alarms, plt()
    if len(windows) and "lp_moisture" in windows and np.isfinite(windows["lp_moisture"]).any():
        fig, ax = pyplot.subplots(figsize=(9, 2.8))
        ax.plot(windows.index, 100 * windows["lp_moisture"], ".", ms=2, color=SECTION_COLOURS["lp"])
        ax.axhline(a.moisture_limit_percent, color="#922b21", ls="--", lw=1, label="limit")
        ax.set_ylabel("exhaust moisture [%]")
        ax.grid(True, lw=0.3)
        ax.legend(fontsize=8)
        fig.autofmt_xdate()
        parts.append("<h2>LP exhaust moisture</h2>")
        estimate = "lp_estimate" in windows and bool((windows["lp_estimate"] > 0.5).any())
        sc = config.sections
        if estimate:
            assumed = (
                "the LP dry stage-group efficiency taken for the whole LP"
                if sc.lp_dry_efficiency_source == "measured"
                else f"an assumed LP efficiency of {sc.eta_lp_design:g}"
            )
            mode = f"estimate: expansion line from {assumed} with the Baumann rule"
            parts.append(
                f"<p><strong>Estimates.</strong> No energy balance is mapped (main steam flow and flow "
                f"fractions), so the LP efficiency, ELEP, UEEP and exhaust moisture follow from {assumed} "
                f"and are not measured. Their uncertainty includes a band of ± {sc.eta_lp_band_points:g} "
                "points on that efficiency, and the moisture alarm rests on the same assumption.</p>"
            )
        else:
            mode = "from the energy balance on the generator output"
        parts.append(
            figs.add(
                fig,
                "lp_moisture",
                f"LP exhaust moisture per steady window ({mode}) with the "
                f"configured limit of {a.moisture_limit_percent:g} %.",
            )
        )
    return parts


def expansion(d: ReportData, figs: Figures) -> list[str]:
    """The expansion of one steady window on the h-s diagram."""
    parts: list[str] = []
    windows, hs_window, pyplot = d.windows, d.hs_window, plt()
    if len(windows) and "gross_output" in windows:
        if hs_window is not None and pd.Timestamp(hs_window) in windows.index:
            w = windows.loc[pd.Timestamp(hs_window)]
        else:
            recent = windows[windows.index >= windows.index[-1] - pd.Timedelta(days=30)]
            w = recent.loc[recent["gross_output"].idxmax()]
        fig, ax = pyplot.subplots(figsize=(7, 5.5))
        hs_diagram(ax, w)
        parts.append("<h2>Expansion on the h-s diagram</h2>")
        parts.append(
            figs.add(
                fig,
                "hs_diagram",
                f"Expansion of the steady window starting {w.name:%Y-%m-%d %H:%M} "
                f"UTC at {w['gross_output']:.0f} MW: HP, IP and the LP expansion line to the ELEP.",
            )
        )
    return parts


def cost(d: ReportData, figs: Figures) -> list[str]:
    """Cumulative extra fuel cost per section over the period."""
    parts: list[str] = []
    analysis, start, end, cur, pyplot = d.analysis, d.start, d.end, d.config.economics.currency, plt()
    if analysis is not None and any(o.losses is not None for o in analysis.sections.values()):
        fig, ax = pyplot.subplots(figsize=(9, 3))
        for s, o in analysis.sections.items():
            part = (
                o.losses[(o.losses.index < end) & (o.losses.index + pd.Timedelta(days=1) > start)]
                if o.losses is not None
                else None
            )
            if part is not None and len(part):
                ax.plot(
                    part.index,
                    part["cumulative_fuel_cost"],
                    color=SECTION_COLOURS[s],
                    label=SECTION_TITLES[s],
                )
        ax.set_ylabel(f"cumulative fuel cost [{cur}]")
        ax.grid(True, lw=0.3)
        ax.legend(fontsize=8)
        fig.autofmt_xdate()
        parts.append("<h2>Cost of lost efficiency</h2>")
        parts.append(
            figs.add(
                fig,
                "cumulative_cost",
                "Cumulative extra fuel cost since the baseline end, per "
                "section, over the days of the period, at the configured fuel price and "
                "sensitivities.",
            )
        )
    return parts


def alarms(d: ReportData, figs: Figures) -> list[str]:
    """The period's alarm events."""
    parts: list[str] = []
    ev_rows = []
    moisture_estimate = not d.lp_energy_balance
    for s, rule, events in d.alarm_events:
        for t, r in events.iterrows():
            ev_rows.append(
                {
                    "time [UTC]": f"{t:%Y-%m-%d %H:%M}",
                    "section or tag": s,
                    "rule": rule
                    + (" (estimate)" if rule == "exhaust_moisture" and moisture_estimate else ""),
                    "event": "raised" if bool(r.get("raised")) else "cleared",
                    "value": fmt(r.get("value"), ".3g"),
                    "threshold": fmt(r.get("threshold"), ".3g"),
                }
            )
    parts.append("<h2>Alarm events</h2>")
    if ev_rows:
        ev = pd.DataFrame(ev_rows).sort_values("time [UTC]", kind="stable")
        parts.append(table(ev.head(200), left=("time [UTC]", "section or tag", "rule", "event")))
        if len(ev) > 200:
            parts.append(
                f"<p>{len(ev) - 200} further events not shown; export them with "
                "<code>isentrope export</code>.</p>"
            )
    else:
        parts.append("<p>No alarm events in the period.</p>")
    return parts


def data_quality(d: ReportData, figs: Figures) -> list[str]:
    """Screening counts per mapped tag."""
    summ = d.quality_summary
    if summ is None:
        return []
    config = d.config
    tagged = {m.role: m.tag for m in config.mappings}
    keep = [r for r in summ.index if r in tagged]
    q = summ.loc[keep].copy()
    reasons = [c for c in q.columns if c not in ("flagged", "samples") and q[c].sum() > 0]
    counts = pd.DataFrame(
        {
            "role": keep,
            "tag": [tagged[r] for r in keep],
            "samples": q["samples"].to_numpy(),
            "flagged": q["flagged"].to_numpy(),
            "flagged [%]": [
                fmt(100 * f / n if n else math.nan, ".2f")
                for f, n in zip(q["flagged"], q["samples"], strict=True)
            ],
        }
    )
    for c in reasons:
        counts[c.lower()] = q[c].to_numpy()
    expected = int(round((d.end - d.start) / pd.Timedelta(minutes=1)))
    return [
        "<h2>Data quality per tag</h2>",
        table(counts, left=("role", "tag")),
        f"<p>Samples found: {d.raw_rows:,} rows against {expected:,} one-minute intervals in the "
        "period (missing rows are gaps in the store). Flagged samples are excluded from steady "
        "windows and trends.</p>",
    ]


#: The page's sections, in order.
RENDERERS = (planner, period, efficiency, coverage, moisture, expansion, cost, alarms, data_quality)
