"""`isentrope check -c FILE`: validate the configuration, connect, and look at every mapped tag.

For each mapped role it reads the last ``--since`` (default 24 h) of raw samples and prints one
table row: role, tag, unit, samples, last time, min, max, verdict. A verdict is a problem when
the tag has no data, is stale (no sample within ``alarms.data_quality_limit`` of the end),
has a gap longer than that limit, stays flat for ``screening.flatline`` or longer, has samples
outside its instrument range, or has values that are implausible in the declared unit while
another unit of the same quantity would make them plausible (a pressure declared psig whose
values look like kPa). "Flat" is the worker's own flatline test (``calc.quality.flatline_samples``
on the readings in internal units): readings spanning no more than max(the role's absolute
tolerance ``calc.quality.FLATLINE_TOLERANCE``, ``screening.flatline_tolerance`` times the
reading); roles without a flatline test there (valve position, barometric pressure) are not
judged flat here either. A role the store refuses to read (``FatalStoreError``, such as a
field holding text on the v2 API) gets the error as its verdict, printed in full below the table,
and the other roles are still judged; an error that every role gets alike (credentials, a
missing database) ends the command as before. ``--config-only`` validates without connecting.
Exit 0 when every tag is fine, 1 on any problem, 2 for an invalid file, 3 when the store cannot
be reached.
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys

import numpy as np
import pandas as pd

from isentrope.daemon.config import Config, load_config
from isentrope.daemon.stores.base import AuthorizationError, CertificateError, FatalStoreError
from isentrope.daemon.timeutil import parse_duration, parse_time

NAME = "check"
HELP = "validate a configuration, connect to its store and check every mapped tag's recent data"

#: Plausible internal values [MPa abs, K, MW, kg/s, %] of each role while the unit is online,
#: broad enough for any large steam unit, narrow enough to catch a wrong unit (a factor of
#: 6.9 between psi and kPa, 10 between bar and MPa...). Common practice, no source.
PLAUSIBLE: dict[str, tuple[float, float]] = {
    "throttle_p": (2.0, 35.0),
    "throttle_t": (550.0, 900.0),
    "cold_reheat_p": (0.4, 9.0),
    "cold_reheat_t": (450.0, 750.0),
    "hot_reheat_p": (0.4, 9.0),
    "hot_reheat_t": (550.0, 900.0),
    "crossover_p": (0.05, 2.5),
    "crossover_t": (400.0, 720.0),
    "lp_extraction_p": (0.004, 1.0),
    "lp_extraction_t": (290.0, 620.0),
    "condenser_p": (0.001, 0.035),
    "first_stage_p": (0.5, 30.0),
    "valve_position": (-5.0, 105.0),
    "barometric_p": (0.050, 0.110),
}
#: Gross output and main steam flow scale with the rating: [MW per MW], [kg/s per MW].
#: Common practice, no source (about 0.8 kg/s per MW at full load for a reheat unit).
PLAUSIBLE_PER_RATING: dict[str, tuple[float, float]] = {
    "gross_output": (0.0, 1.3),
    "main_steam_flow": (0.03, 2.0),
}
#: Roles judged whether or not the unit is online.
ALWAYS_ONLINE = ("barometric_p", "valve_position", "gross_output")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-c", "--config", required=True, metavar="FILE", help="configuration file (TOML)")
    parser.add_argument(
        "--since", default="24h", metavar="DURATION", help="how far back to look, e.g. 6h, 2d (default: 24h)"
    )
    parser.add_argument(
        "--end", default=None, metavar="TIME", help="end of the look (ISO 8601, naive = UTC; default: now)"
    )
    parser.add_argument(
        "--config-only", action="store_true", help="only validate the file; do not connect to the store"
    )


def _end_time(text: str | None) -> pd.Timestamp:
    if text is None:
        return pd.Timestamp.now(tz="UTC")
    return parse_time(text, "--end")


def _barometric_kpa(config: Config, raw: pd.DataFrame) -> float:
    """The barometric pressure used to judge gauge readings [kPa]."""
    from isentrope.calc import units

    if "barometric_p" in raw.columns:
        vals = pd.to_numeric(raw["barometric_p"], errors="coerce").dropna()
        if len(vals):
            kpa = float(units.convert(float(vals.median()), config.roles["barometric_p"].unit, "kPa(a)"))
            low, high = units.BAROMETRIC_KPA_RANGE
            if low <= kpa <= high:
                return kpa
    if config.screening.barometric_kpa is not None:
        return config.screening.barometric_kpa
    return units.STANDARD_ATMOSPHERE_KPA


def _plausible(config: Config, role: str) -> tuple[float, float]:
    if role in PLAUSIBLE_PER_RATING:
        lo, hi = PLAUSIBLE_PER_RATING[role]
        return lo * config.unit.rating_mw, hi * config.unit.rating_mw
    return PLAUSIBLE[role]


def _other_units(
    role: str, declared: str, median: float, plausible: tuple[float, float], baro_kpa: float
) -> list[str]:
    """At most two units of the role's quantity under which ``median`` would be plausible,
    the one putting it nearest the middle of the plausible range first."""
    from isentrope.calc import units
    from isentrope.daemon.roles import ROLES

    quantity = ROLES[role][0]
    internal = units.INTERNAL_UNIT[quantity]
    lo, hi = plausible
    fits = []
    for name in units.KNOWN_UNITS:
        u = units.UNITS[name]
        if u.quantity != quantity or name == declared or (role == "barometric_p" and u.gauge):
            continue
        value = float(units.convert(median, name, internal, barometric_kpa=baro_kpa))
        if lo <= value <= hi:
            if lo > 0:  # ranges of absolute quantities: distance on a log scale
                distance = abs(np.log(value / np.sqrt(lo * hi)))
            else:
                distance = abs(value - (lo + hi) / 2) / (hi - lo)
            fits.append((distance, name))
    return [name for _, name in sorted(fits)[:2]]


def read_roles(
    store, mappings, start: pd.Timestamp, end: pd.Timestamp
) -> tuple[pd.DataFrame, dict[str, str]]:
    """Raw samples of ``mappings`` in [start, end) and the store errors of the roles it refused.

    One read of all roles first; when the store refuses it (``FatalStoreError``), each role is
    read on its own, so one bad field spoils only its own role. When every role is refused
    with the same message the problem is the store's, not a role's, and that error is raised.
    """
    try:
        return store.read_raw(list(mappings), start, end), {}
    except (CertificateError, AuthorizationError):
        raise  # the store's configuration (its certificate, its credentials), no role's
    except FatalStoreError:
        pass
    frames, errors, first = [], {}, None
    for m in mappings:
        try:
            frames.append(store.read_raw([m], start, end))
        except FatalStoreError as exc:
            errors[m.role] = str(exc)
            first = first or exc
    if len(errors) == len(mappings) and len(set(errors.values())) == 1:
        raise first
    raw = (
        pd.concat(frames, axis=1, sort=True) if frames else pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC"))
    )
    return raw, errors


def judge(
    config: Config, raw: pd.DataFrame, end: pd.Timestamp, errors: dict[str, str] | None = None
) -> list[dict]:
    """One row per mapped role: what was found and a verdict (``ok`` True/False).

    ``errors``: role -> the store's error for a role it refused to read (``read_roles``); the
    row's verdict says so and ``row["error"]`` holds the message.
    """
    from isentrope.calc import units
    from isentrope.daemon.roles import ROLES

    baro_kpa = _barometric_kpa(config, raw)
    online = None
    if "gross_output" in raw.columns:
        mw = pd.to_numeric(raw["gross_output"], errors="coerce")
        mw_internal = units.convert(mw.to_numpy(dtype=float), config.roles["gross_output"].unit, "MW")
        online = mw_internal >= config.unit.online_mw
    stale_after = config.alarms.data_quality_limit
    rows = []
    for m in config.mappings:
        col = pd.to_numeric(raw[m.role], errors="coerce") if m.role in raw.columns else pd.Series(dtype=float)
        valid = col.dropna()
        row = {
            "role": m.role,
            "tag": m.tag,
            "unit": m.unit,
            "samples": int(len(valid)),
            "last": valid.index[-1] if len(valid) else None,
            "min": float(valid.min()) if len(valid) else float("nan"),
            "max": float(valid.max()) if len(valid) else float("nan"),
        }
        problems, notes = [], []
        if errors and m.role in errors:
            row["error"] = errors[m.role]
            problems.append("the store refused to read it (error below)")
        elif not len(valid):
            problems.append("no data")
        else:
            if end - row["last"] > stale_after:
                problems.append(f"stale: last sample {_age(end - row['last'])} before the end")
            flat = longest_flat(config, m, valid, baro_kpa)
            if flat is not None:
                problems.append(f"flat for {_age(flat[1] - flat[0])} from {flat[0]:%Y-%m-%d %H:%M}")
            gap = longest_gap(valid)
            if gap is not None and gap[1] - gap[0] > stale_after:
                problems.append(f"gap of {_age(gap[1] - gap[0])} from {gap[0]:%Y-%m-%d %H:%M}")
            if m.range is not None:
                outside = int(((valid < m.range[0]) | (valid > m.range[1])).sum())
                if outside:
                    problems.append(f"{outside} outside range [{m.range[0]:g}, {m.range[1]:g}]")
            judged = valid
            if online is not None and m.role not in ALWAYS_ONLINE:
                judged = valid[pd.Series(online, index=col.index).loc[valid.index].to_numpy(dtype=bool)]
            if not len(judged):
                notes.append("unit offline: unit not judged")
            else:
                quantity = ROLES[m.role][0]
                internal = units.INTERNAL_UNIT[quantity]
                median = float(judged.median())
                value = float(units.convert(median, m.unit, internal, barometric_kpa=baro_kpa))
                lo, hi = _plausible(config, m.role)
                if not lo <= value <= hi:
                    others = _other_units(m.role, m.unit, median, (lo, hi), baro_kpa)
                    hint = f"; looks like {' or '.join(others)}" if others else ""
                    problems.append(
                        f"median {median:.6g} {m.unit} = {value:.4g} {internal}, "
                        f"implausible (expected {lo:g}-{hi:g} {internal}){hint}"
                    )
        row["ok"] = not problems
        row["verdict"] = "; ".join(problems + notes) if (problems or notes) else "ok"
        if problems:
            row["verdict"] = "PROBLEM: " + row["verdict"]
        rows.append(row)
    return rows


def longest_flat(
    config: Config, mapping, values: pd.Series, baro_kpa: float
) -> tuple[pd.Timestamp, pd.Timestamp] | None:
    """(first, last) time of the longest stretch of ``values`` (one role's finite readings in
    its plant unit) that the worker's screening would flag FLATLINE; None when there is none.

    The readings are converted to internal units (gauge pressures with ``baro_kpa`` [kPa])
    and tested with ``calc.quality.flatline_samples``: the role's absolute tolerance from
    ``calc.quality.FLATLINE_TOLERANCE``, ``[screening] flatline_tolerance`` as the relative
    one, ``[screening] flatline`` as the duration. A step beyond the tolerance between two
    flagged samples (held at one value, then at another) starts a new stretch.
    """
    from isentrope.calc import quality, units
    from isentrope.daemon.roles import ROLES

    sc = config.screening
    tolerance = quality.FLATLINE_TOLERANCE.get(mapping.role)
    if tolerance is None or len(values) < 2:
        return None
    internal = units.INTERNAL_UNIT[ROLES[mapping.role][0]]
    v = np.asarray(
        units.convert(values.to_numpy(dtype=float), mapping.unit, internal, barometric_kpa=baro_kpa),
        dtype=float,
    )
    series = pd.Series(v, index=values.index)
    flat = quality.flatline_samples(
        series, pd.Timedelta(sc.flatline), tolerance, sc.flatline_tolerance
    ).to_numpy()
    if not flat.any():
        return None
    limit = quality.flatline_limit(
        np.maximum(v[1:], v[:-1]), np.minimum(v[1:], v[:-1]), tolerance, sc.flatline_tolerance
    )
    joined = flat[1:] & flat[:-1] & (np.abs(np.diff(v)) <= limit)
    # stretches of flagged samples, split where two neighbours are not joined
    opens, closes = flat.copy(), flat.copy()
    opens[1:] &= ~joined
    closes[:-1] &= ~joined
    first, last = np.flatnonzero(opens), np.flatnonzero(closes)
    t = values.index.asi8
    k = int(np.argmax(t[last] - t[first]))
    return values.index[first[k]], values.index[last[k]]


def longest_gap(values: pd.Series) -> tuple[pd.Timestamp, pd.Timestamp] | None:
    """(last sample before, first sample after) the longest gap between samples."""
    if len(values) < 2:
        return None
    steps = np.diff(values.index.asi8)
    i = int(np.argmax(steps))
    return values.index[i], values.index[i + 1]


def _age(delta: pd.Timedelta | dt.timedelta) -> str:
    seconds = int(pd.Timedelta(delta).total_seconds())
    if seconds >= 86400:
        return f"{seconds / 86400:.1f} d"
    if seconds >= 3600:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds // 60} min"


def format_table(rows: list[dict]) -> str:
    """A plain fixed-width table."""
    head = ["role", "tag", "unit", "samples", "last time (UTC)", "min", "max", "verdict"]
    body = []
    for r in rows:
        body.append(
            [
                r["role"],
                r["tag"],
                r["unit"],
                str(r["samples"]),
                r["last"].strftime("%Y-%m-%d %H:%M:%S") if r["last"] is not None else "-",
                f"{r['min']:.6g}" if np.isfinite(r["min"]) else "-",
                f"{r['max']:.6g}" if np.isfinite(r["max"]) else "-",
                r["verdict"],
            ]
        )
    widths = [max(len(h), *(len(b[i]) for b in body)) if body else len(h) for i, h in enumerate(head)]
    lines = [
        "  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)).rstrip(),
        "  ".join("-" * w for w in widths),
    ]
    for b in body:
        lines.append("  ".join(c.ljust(w) for c, w in zip(b, widths, strict=True)).rstrip())
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config)
    if args.config_only:
        print(
            f"{args.config}: valid configuration of {config.unit.name} ({config.store.kind} store, "
            f"{len(config.roles)} mapped roles: {', '.join(config.roles)})"
        )
        return 0
    try:
        since = parse_duration(args.since)
    except ValueError as exc:
        raise ValueError(f"--since: {exc}") from None
    if since.total_seconds() <= 0:
        raise ValueError(f"--since: expected a positive duration, found {args.since!r}")
    end = _end_time(args.end)
    start = end - pd.Timedelta(since)
    with config.store.open(create=False) as store:
        raw, errors = read_roles(store, config.mappings, start, end)
    rows = judge(config, raw, end, errors)
    print(
        f"{config.unit.name}: {config.store.kind} store, {len(rows)} mapped roles, "
        f"{start.isoformat()} to {end.isoformat()}"
    )
    print(format_table(rows))
    for r in rows:
        if "error" in r:
            print(f"{r['role']} ({r['tag']}): store error: {r['error']}")
    bad = [r for r in rows if not r["ok"]]
    if bad:
        print(f"{len(bad)} of {len(rows)} roles have problems.", file=sys.stderr)
        return 1
    print(f"all {len(rows)} roles ok. (Advisory check of data availability only.)")
    return 0
