"""`isentrope status -c FILE`: is the unit's worker keeping up? One screen for a person, an
exit code for a monitoring system or a systemd timer.

Reads the scheduled worker's checkpoint and its last heartbeat (``worker_status``, tag
``worker`` = ``run/<unit>``), the analysis job's last heartbeat (``analysis/<unit>``) and
saved state, the last stored ``degradation`` row of each section and the alarms raised now
(the saved alarm machines of the cycles and of the analysis). Nothing is written.

Exit codes (also in deploy/operators-guide.md):

* 0: the worker keeps up: its checkpoint is within ``--max-lag`` of now and its last cycle
  ended well; the analysis (when on) reaches within ``--max-analysis-lag`` of the checkpoint.
* 2: the configuration is invalid (nothing was read).
* 3: the store is unreachable, or refused a read.
* 4: the worker lags: checkpoint older than ``--max-lag``, its last cycle failed, or the
  analysis is older than ``--max-analysis-lag`` behind the checkpoint.
* 5: the worker never ran for this unit (no checkpoint).
"""

from __future__ import annotations

import math
import sys

import pandas as pd

NAME = "status"
HELP = "show whether the unit's worker keeps up and its latest results; exit code for monitoring"

EXIT_LAGGING = 4
EXIT_NEVER_RAN = 5

#: How far back the last heartbeat is looked for (project choice).
_HEARTBEAT_SEARCH = pd.Timedelta(days=7)


def add_arguments(parser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="the unit's TOML configuration")
    parser.add_argument(
        "--max-lag",
        metavar="DURATION",
        default=None,
        help="longest acceptable time from the worker's checkpoint to now (default: settle + "
        "look-back + 3 cycle intervals, 47m with the default [schedule])",
    )
    parser.add_argument(
        "--max-analysis-lag",
        metavar="DURATION",
        default=None,
        help="longest acceptable time from the analysis's end to the checkpoint (default: 2 "
        "analysis intervals + 1 cycle interval, 2h05m with the default [schedule])",
    )


def _fmt_td(td) -> str:
    if td is None or pd.isna(td):
        return "n/a"
    s = int(abs(td.total_seconds()))
    d, s = divmod(s, 86400)
    h, s = divmod(s, 3600)
    m, _ = divmod(s, 60)
    text = (f"{d}d " if d else "") + (f"{h}h " if h or d else "") + f"{m}m"
    return ("-" if td.total_seconds() < 0 else "") + text


def _num(x, spec: str) -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "n/a"
    return format(v, spec) if math.isfinite(v) else "n/a"


def _last_row(store, measurement, tags, now) -> pd.Series | None:
    rows = store.read_results(measurement, now - _HEARTBEAT_SEARCH, now + pd.Timedelta(days=1), tags)
    return rows.iloc[-1] if len(rows) else None


def gather(store, config, now: pd.Timestamp) -> dict:
    """What ``status`` shows, read from ``store`` (``now``: the clock, UTC)."""
    from isentrope.calc import alarms
    from isentrope.calc.names import TRENDED_SECTIONS
    from isentrope.daemon import analysis
    from isentrope.daemon.worker import STATUS_MEASUREMENT

    unit = config.unit.name
    run_name = f"run/{unit}"
    out = {"unit": unit, "now": now}
    out["checkpoint"] = store.get_checkpoint(run_name)
    out["cycle"] = _last_row(store, STATUS_MEASUREMENT, {"unit": unit, "worker": run_name}, now)
    out["cycle_time"] = None
    if out["cycle"] is not None:
        out["cycle_time"] = out["cycle"].name
    out["analysis_beat"] = _last_row(
        store, STATUS_MEASUREMENT, {"unit": unit, "worker": f"analysis/{unit}"}, now
    )
    state = store.load_state(analysis.state_name(config)) or {}
    out["analysis_end"] = pd.Timestamp(state["end"]) if state.get("end") else None
    out["analysis_final"] = pd.Timestamp(state["final"]) if state.get("final") else None
    sections = {}
    if out["analysis_end"] is not None:
        for sec in TRENDED_SECTIONS:
            row = _last_row(
                store, analysis.DEGRADATION_MEASUREMENT, {"unit": unit, "section": sec}, out["analysis_end"]
            )
            if row is not None:
                sections[sec] = row
    out["sections"] = sections
    raised = alarms.active(store.load_state(f"alarms/{run_name}") or {})
    raised += alarms.active(state.get("alarm_state") or {})
    out["alarms"] = sorted(set(raised))
    return out


def verdict(
    info: dict, max_lag: pd.Timedelta, max_analysis_lag: pd.Timedelta | None
) -> tuple[int, list[str]]:
    """The exit code and the reasons for it."""
    from isentrope.daemon.errors import EXIT_OK

    if info["checkpoint"] is None:
        return EXIT_NEVER_RAN, [
            f"the worker never ran for unit {info['unit']} (no checkpoint run/{info['unit']})"
        ]
    reasons = []
    lag = info["now"] - info["checkpoint"]
    if lag > max_lag:
        reasons.append(f"checkpoint {_fmt_td(lag)} behind now, more than {_fmt_td(max_lag)}")
    beat = info["cycle"]
    if beat is not None and not (float(beat.get("ok", 1.0)) > 0.5):
        reasons.append(f"the last cycle ({info['cycle_time']:%Y-%m-%d %H:%M} UTC) did not end well")
    if max_analysis_lag is not None:
        end = info["analysis_end"]
        if end is None:
            reasons.append("no analysis stored yet")
        elif info["checkpoint"] - end > max_analysis_lag:
            reasons.append(
                f"analysis {_fmt_td(info['checkpoint'] - end)} behind the checkpoint, more than "
                f"{_fmt_td(max_analysis_lag)}"
            )
    return (EXIT_LAGGING if reasons else EXIT_OK), reasons


def summary(info: dict, code: int, reasons: list[str]) -> str:
    """The one-screen text."""
    now = info["now"]
    lines = [f"isentrope status: unit {info['unit']} at {now:%Y-%m-%d %H:%M} UTC"]
    cp = info["checkpoint"]
    lines.append(
        f"  processed up to   {cp:%Y-%m-%d %H:%M} UTC ({_fmt_td(now - cp)} ago)"
        if cp is not None
        else "  processed up to   never"
    )
    beat = info["cycle"]
    if beat is not None:
        lines.append(
            f"  last cycle        {info['cycle_time']:%Y-%m-%d %H:%M} UTC, {'ok' if float(beat.get('ok', 0)) > 0.5 else 'FAILED'}, "
            f"{_num(beat.get('rows_read'), '.0f')} rows read, {_num(beat.get('rows_flagged'), '.0f')} flagged, "
            f"{_num(beat.get('pending_writes'), '.0f')} writes pending, {_num(beat.get('cycle_duration_s'), '.1f')} s"
        )
    else:
        lines.append("  last cycle        no heartbeat in the last 7 days")
    end = info["analysis_end"]
    ab = info["analysis_beat"]
    if end is not None:
        took = f", {_num(ab.get('duration_s'), '.1f')} s" if ab is not None else ""
        final = info["analysis_final"]
        lines.append(
            f"  analysis          up to {end:%Y-%m-%d %H:%M} UTC{took}"
            + (f" (final to {final:%Y-%m-%d})" if final is not None else "")
        )
    else:
        lines.append("  analysis          none stored yet")
    if info["sections"]:
        lines.append(
            f"  {'section':8}{'deviation [pt]':>16}{'rate [pt/1000 h] (95 %)':>30}{'net steps [pt]':>16}"
        )
        for sec, row in info["sections"].items():
            rate = (
                f"{_num(row.get('rate_per_1000h'), '+.2f')} ({_num(row.get('rate_low'), '+.2f')} to "
                f"{_num(row.get('rate_high'), '+.2f')})"
                if float(row.get("rate_ok", 0) or 0) > 0.5
                else "not enough data"
            )
            lines.append(
                f"  {sec.upper():8}{_num(row.get('deviation_now'), '+.2f'):>16}{rate:>30}"
                f"{_num(row.get('step_offset'), '+.2f'):>16}"
            )
    if info["alarms"]:
        shown = ", ".join(f"{rule} ({where})" for rule, where in info["alarms"][:8])
        more = f" and {len(info['alarms']) - 8} more" if len(info["alarms"]) > 8 else ""
        lines.append(f"  alarms raised now {shown}{more}")
    else:
        lines.append("  alarms raised now none")
    word = {0: "OK", EXIT_LAGGING: "LAGGING", EXIT_NEVER_RAN: "NEVER RAN"}.get(code, str(code))
    lines.append(f"  verdict           {word} (exit {code})" + ("".join(f"\n    - {r}" for r in reasons)))
    lines.append("  Advisory performance information, not a protective function.")
    return "\n".join(lines)


def run(args) -> int:
    from isentrope.daemon.config import load_config
    from isentrope.daemon.errors import EXIT_UNREACHABLE
    from isentrope.daemon.stores import open_store
    from isentrope.daemon.stores.base import StoreError
    from isentrope.daemon.timeutil import parse_duration

    config = load_config(args.config)  # ConfigError (exit 2) before any connection
    sch = config.schedule
    max_lag = (
        pd.Timedelta(parse_duration(args.max_lag))
        if args.max_lag
        else pd.Timedelta(sch.settle + sch.lookback) + 3 * pd.Timedelta(sch.interval)
    )
    if sch.analysis_interval.total_seconds() > 0:
        max_analysis_lag = (
            pd.Timedelta(parse_duration(args.max_analysis_lag))
            if args.max_analysis_lag
            else 2 * pd.Timedelta(sch.analysis_interval) + pd.Timedelta(sch.interval)
        )
    else:
        max_analysis_lag = None
    now = pd.Timestamp.now(tz="UTC")
    try:
        store = open_store(config.store.kind, **config.store.open_options())
        try:
            info = gather(store, config, now)
        finally:
            store.close()
    except StoreError as exc:
        print(f"isentrope status: unit {config.unit.name}: store unreachable: {exc}")
        print(f"  verdict           STORE UNREACHABLE (exit {EXIT_UNREACHABLE})")
        return EXIT_UNREACHABLE
    code, reasons = verdict(info, max_lag, max_analysis_lag)
    print(summary(info, code, reasons))
    sys.stdout.flush()
    return code
