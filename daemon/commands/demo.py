"""`isentrope demo`: the whole job on a synthetic unit-year, in the embedded SQLite store.

Writes a year of one-minute readings of the fictional Greywater Bend Unit 2
(``isentrope.daemon.synthetic``) into a SQLite store in a folder, with a configuration file
beside it, runs the full backfill (progress bar on stderr), fits the baseline on the first
weeks, runs the worker's analysis job (rates, steps, alarms and costs, written to the store as
the scheduled worker writes them), and writes the HTML report and a short summary per section
from what that job stored. Run it again with the same folder: the data is written again
(replacing, not duplicating) and the backfill resumes from its checkpoint.

Demonstration data only; the figures say nothing about any real machine.
"""

from __future__ import annotations

import logging
import math
import sys
import time
from pathlib import Path

import pandas as pd

NAME = "demo"
HELP = "run the whole job on a synthetic unit-year in a local SQLite store and write a report"

logger = logging.getLogger("isentrope.demo")

#: Demo scenario settings (invented for the demo; see isentrope.daemon.synthetic).
DEMO_START = "2025-01-01"
BASELINE_WEEKS = 6
PLANNED_OUTAGE = "2026-04-01"
#: Backfill chunk of the demo. The pipeline is chunk-invariant (tests/daemon/test_pipeline.py),
#: so long chunks only trade memory for fewer fixed costs per chunk (reads, section solver
#: set-up, writes). Measured on the shared 2-core machine: see README "Performance".
DEMO_CHUNK = "30d"


#: Section labels of the summary table (the LP dry stage group is not the whole LP).
SUMMARY_NAMES = {"hp": "HP", "ip": "IP", "lp_dry": "LP dry", "lp": "LP"}


def add_arguments(parser) -> None:
    parser.add_argument(
        "-d",
        "--dir",
        default="isentrope-demo",
        metavar="DIR",
        help="folder for the store, configuration, truth and report (default: ./isentrope-demo)",
    )
    parser.add_argument(
        "--days", type=float, default=365.0, help="length of the synthetic history [d] (default 365)"
    )
    parser.add_argument("--seed", type=int, default=None, help="seed of the synthetic history")
    parser.add_argument("--no-report", action="store_true", help="skip the HTML report")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def demo_config_toml(store_path: str, start: pd.Timestamp, days: float) -> str:
    """The synthetic unit's configuration with the demo's baseline, economics and sections."""
    from isentrope.daemon import synthetic

    weeks = min(BASELINE_WEEKS, max(1.0, days / 7.0 / 4.0))
    base_end = start + pd.Timedelta(weeks=weeks)
    extra = f"""
[sections]
# Last-stage annulus of the two double-flow LP turbines: 4 flows x 7.5 m2 (invented).
annulus_area_m2 = 30.0
lp_exhaust_flow_fraction = 0.62

[baseline]
# The weeks after the (fictional) overhaul that ended on {start:%Y-%m-%d}.
start = "{start:%Y-%m-%dT%H:%M:%SZ}"
end = "{base_end:%Y-%m-%dT%H:%M:%SZ}"

[economics]
# Prices invented for the demo.
currency = "USD"
fuel_price_per_gj = 2.6
heat_rate_kj_per_kwh = 8100.0
boiler_efficiency = 0.88
planned_outage = "{PLANNED_OUTAGE}"

[economics.overhaul.hp]
recoverable_points = 3.0
cost = 2500000.0

[economics.overhaul.ip]
recoverable_points = 1.0
cost = 1500000.0
"""
    return synthetic.config_toml(store_path=store_path) + extra


def run(args) -> int:
    from isentrope.daemon import synthetic
    from isentrope.daemon.analysis import load_analysis, raised_alarms
    from isentrope.daemon.commands.progress import hours_bar
    from isentrope.daemon.config import load_config
    from isentrope.daemon.stores import open_store
    from isentrope.daemon.worker import Worker

    t0 = time.perf_counter()
    folder = Path(args.dir)
    folder.mkdir(parents=True, exist_ok=True)
    start = pd.Timestamp(DEMO_START, tz="UTC")
    end = start + pd.Timedelta(days=float(args.days))
    cfg_path = folder / "greywater2.toml"
    cfg_path.write_text(demo_config_toml("greywater2.sqlite", start, float(args.days)), encoding="utf-8")
    config = load_config(cfg_path)

    print(
        f"isentrope demo: synthetic history of {synthetic.SCENARIO['plant']}, {synthetic.SCENARIO['unit']} "
        f"(fictional), {args.days:g} days from {start:%Y-%m-%d}",
        file=sys.stderr,
    )
    kwargs = {} if args.seed is None else {"seed": args.seed}
    frame, truth = synthetic.generate(start=start, days=float(args.days), **kwargs)
    synthetic.write_truth(truth, folder / "truth.json")
    plant = synthetic.to_plant_units(frame)
    t_gen = time.perf_counter()

    store = open_store(config.store.kind, **config.store.open_options())
    try:
        written = store.write_raw(config.mappings, plant)
        t_raw = time.perf_counter()
        worker = Worker.from_config(
            config,
            store,
            checkpoint_name=f"demo/{config.unit.name}",
            start_default=start,
            lookback="0s",
            settle="0s",
            chunk=DEMO_CHUNK,
        )
        done = store.get_checkpoint(worker.checkpoint_name)
        bar, progress = hours_bar(start, end, done, "backfill", disable=args.no_progress)
        try:
            report = worker.run_cycle(until=end, progress=progress)
        finally:
            bar.close()
        if not report.ok:
            raise RuntimeError(f"demo backfill stopped: {report.error}")
        t_back = time.perf_counter()
        # the baseline models as versioned JSON files next to the results, for tracing
        saved = store.load_state(f"baseline/{config.unit.name}") or {}
        for section, text in sorted(saved.get("models", {}).items()):
            (folder / f"baseline-{section}.json").write_text(text, encoding="utf-8")
        # the worker's analysis job, as the scheduled worker runs it; the summary and the
        # report below read what it stored (load_analysis), nothing is computed again
        if worker.analyse(end=end, rebuild=True) is None:
            raise RuntimeError("demo analysis not stored")
        analysis = load_analysis(store, config)
        raised = raised_alarms(store, config, start, end)
        t_ana = time.perf_counter()
        report_path = None
        if not args.no_report:
            from isentrope.daemon.report import write_report

            report_path = write_report(
                store, config, start, end, folder / "report", analysis=analysis, readings=frame
            )
        t_rep = time.perf_counter()
    finally:
        store.close()

    print(summary_text(config, analysis, truth, raised))
    print(f"\nfolder: {folder.resolve()}")
    print(
        f"  configuration {cfg_path.name}, store greywater2.sqlite ({written:,} raw samples), truth.json, "
        f"baseline-<section>.json"
    )
    if report_path is not None:
        print(f"  report: {report_path}")
    print(
        f"time: generate {t_gen - t0:.1f} s, store raw {t_raw - t_gen:.1f} s, backfill {t_back - t_raw:.1f} s, "
        f"analysis {t_ana - t_back:.1f} s, report {t_rep - t_ana:.1f} s, total {t_rep - t0:.1f} s"
    )
    print(
        "Demonstration data of a fictional unit. Advisory performance information only: not a "
        "protective function; the turbine maker's limits, local codes and licensed engineering "
        "practice take precedence."
    )
    return 0


def _fmt(x, spec=".2f", missing="n/a") -> str:
    try:
        return format(float(x), spec) if x is not None and math.isfinite(float(x)) else missing
    except (TypeError, ValueError):
        return missing


def summary_text(config, analysis, truth: dict | None = None, raised: dict | None = None) -> str:
    """The per-section summary printed at the end of the demo.

    ``raised``: section or tag -> [(time, rule), ...] of the alarms raised
    (``isentrope.daemon.analysis.raised_alarms``); None counts the analysis's own only.
    """
    cur = config.economics.currency
    lines = [
        f"{config.unit.plant or config.unit.name}, {config.unit.name}: state at {analysis.end:%Y-%m-%d}",
        f"{'section':8}{'deviation':>14}{'rate /1000 h [95 % interval]':>32}{'steps':>7}"
        f"{'alarms':>8}{'cost to date':>16}{'to outage':>14}",
    ]
    ev = analysis.alarm_events
    for name, s in analysis.sections.items():
        rate = s.rate
        rate_txt = (
            f"{_fmt(rate.slope_per_1000h, '+.2f')} [{_fmt(rate.low, '+.2f')}, {_fmt(rate.high, '+.2f')}]"
            if rate.status == "ok"
            else rate.status
        )
        if raised is not None:
            n_alarm = len(raised.get(name, []))
        else:
            n_alarm = 0 if not len(ev) else int(((ev["section"] == name) & (ev["kind"] == "raised")).sum())
        cost = (
            s.losses["cumulative_fuel_cost"].iloc[-1] if s.losses is not None and len(s.losses) else math.nan
        )
        proj = s.projected_loss.fuel_cost if s.projected_loss is not None else math.nan
        lines.append(
            f"{SUMMARY_NAMES.get(name, name):8}{_fmt(s.current, '+.2f') + ' pt':>14}{rate_txt:>32}{len(s.steps):>7}"
            f"{n_alarm:>8}{_fmt(cost, ',.0f') + ' ' + cur:>16}{_fmt(proj, ',.0f') + ' ' + cur:>14}"
        )
        for st in s.steps:
            lines.append(f"{'':8}step {_fmt(st.size, '+.2f')} pt at {pd.Timestamp(st.time):%Y-%m-%d %H:%M}")
        if name == "lp_dry":
            lines.append(
                f"{'':8}LP dry stage group, crossover to LP extraction; priced: {s.pricing or 'not priced'}"
            )
    tags = {k: v for k, v in (raised or {}).items() if k not in analysis.sections}
    for tag, items in sorted(tags.items()):
        rules = sorted({r for _, r in items})
        lines.append(
            f"data quality: {tag}: {len(items)} alarm(s) raised ({', '.join(rules)}), first at "
            f"{items[0][0]:%Y-%m-%d %H:%M}"
        )
    if analysis.notes:
        lines += [f"note: {n}" for n in analysis.notes]
    if truth:
        hp, ip = truth.get("hp") or {}, truth.get("ip") or {}
        lines.append(
            f"injected truth (fictional): HP {hp.get('rate_points_per_1000h', 'n/a')} pt/1000 h; "
            f"IP step {ip.get('step_points', 'n/a')} pt at {ip.get('step_time', 'n/a')}"
        )
    return "\n".join(lines)
