"""The tables of the configuration file and the rules of each, beside the field it checks.

``read_tables`` reads every table through a ``TableReader`` into the dataclasses of
``isentrope.daemon.config.model``, reporting every problem. ``[store]`` is read from its kind's
store class (``OPTIONS``, ``check_options`` and ``NAME_CHECKS``, see
``isentrope.daemon.stores.options``); every other table's keys, defaults, bounds and rules are
here, one ``_read_<table>`` each, followed by the checks that span tables.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import math
import re
from itertools import pairwise
from pathlib import Path
from typing import Any

from isentrope.calc import units
from isentrope.calc.names import TRENDED_SECTIONS
from isentrope.daemon.config.model import (
    DEFAULT_SENSITIVITY,
    DEFAULT_UNCERTAINTY,
    FLATLINE_TOLERANCE_MAX,
    READ_FILLS,
    READ_QUANTITIES,
    STORE_KINDS,
    AlarmsConfig,
    BaselineConfig,
    Config,
    EconomicsConfig,
    OverhaulCase,
    ReadConfig,
    ReadRule,
    RoleUncertainty,
    ScheduleConfig,
    ScreeningConfig,
    SectionsConfig,
    SensitivityConfig,
    SteadyConfig,
    StoreConfig,
    UnitConfig,
    band_internal,
)
from isentrope.daemon.config.reader import MISSING, TableReader, describe, resolve
from isentrope.daemon.config.secrets import read_secret
from isentrope.daemon.roles import REQUIRED_ROLES, ROLES, RoleMapping
from isentrope.daemon.stores import escape, store_class
from isentrope.daemon.stores.options import Option
from isentrope.daemon.timeutil import format_duration

__all__ = ["ROLE_KEYS", "SCHEDULE_LONGEST", "LEASE_SHORTEST", "SCHEDULE_WHY", "read_tables", "store_keys"]


def _fields(cls) -> list[str]:
    return [f.name for f in dataclasses.fields(cls)]


def _open_table(r: TableReader, top: dict, name: str, cls) -> tuple[tuple[str, ...], dict, Any]:
    """The key path, the table and the defaults (``cls()``) of the optional table ``[name]``
    whose keys are the fields of ``cls``; unknown keys are reported."""
    p = (name,)
    d = r.table(top, p)
    r.unknown(d, p, _fields(cls))
    return p, d, cls()


def _read_unit(r: TableReader, top: dict) -> UnitConfig:
    p = ("unit",)
    d = r.table(top, p, required=True)
    r.unknown(d, p, _fields(UnitConfig))
    name = r.value(d, p + ("name",), "str")
    if name is not None and not name.strip():
        r.problem(p + ("name",), "must not be empty")
    rating = r.value(d, p + ("rating_mw",), "float", low=0, low_open=True)
    online = r.value(d, p + ("online_mw",), "float", default=None, low=0)
    if online is None:
        online = 0.1 * rating if rating else 0.0  # 10 % of rating: common practice, no source
    elif rating and online >= rating:
        r.problem(p + ("online_mw",), f"must be below rating_mw ({rating:g}), found {online:g}")
    return UnitConfig(
        name=name or "",
        plant=r.value(d, p + ("plant",), "str", default=""),
        rating_mw=rating or 0.0,
        online_mw=online,
    )


def store_keys(kind: str) -> set[str]:
    """The keys of ``[store]`` for a store ``kind``: ``kind`` and its class's options (a secret
    also as ``<name>_file``)."""
    return {"kind", *(key for option in store_class(kind).OPTIONS for key in option.keys)}


def _read_option(r: TableReader, d: dict, p: tuple[str, ...], option: Option, base_dir: Path, environ):
    """One ``[store]`` option as its store class declares it (``stores.options.Option``)."""
    path = p + (option.name,)
    if option.secret:
        secret = read_secret(r, d, path, base_dir, environ)
        if option.required and not any(k in d for k in option.keys):
            r.problem(path, f"missing required key '{option.name}' (or '{option.name}_file')")
        return secret
    reported = len(r.problems)
    value = r.value(
        d,
        path,
        option.kind,
        MISSING if option.required else option.default,
        low=option.low,
        high=option.high,
        low_open=option.low_open,
        high_open=option.high_open,
    )
    if option.name not in d or len(r.problems) > reported:
        return value
    if option.path:
        value = resolve(value, base_dir)
    if option.check is not None:
        try:
            option.check(value)
        except ValueError as exc:
            r.problem(path, str(exc))
    return value


def _read_store(r: TableReader, top: dict, base_dir: Path, environ) -> StoreConfig:
    """``[store]``: ``kind``, then the options its store class declares, then the class's rules
    between them (``Store.check_options``)."""
    p = ("store",)
    d = r.table(top, p, required=True)
    kind = r.value(d, p + ("kind",), "str", choices=STORE_KINDS) if d or "store" in top else None
    if kind is None:
        return StoreConfig(kind="sqlite")
    cls = store_class(kind)
    r.unknown(d, p, sorted(store_keys(kind)))
    values = {o.name: _read_option(r, d, p, o, base_dir, environ) for o in cls.OPTIONS}
    given = {o.name for o in cls.OPTIONS if any(k in d for k in o.keys)}
    cls.check_options(values, given, lambda name, message: r.problem(p + (name,), message))
    return StoreConfig(kind=kind, options=values)


def _check_unit_name(r: TableReader, name: str, kind: str) -> None:
    """The unit name is a tag value of every result and part of the checkpoint and state
    names: refuse at load what the store would refuse at its first write."""
    if not name or r.problems_for(("unit", "name")):
        return
    try:
        escape.check_name(name, "the unit name")
        for check in store_class(kind).NAME_CHECKS["unit"]:
            check(name)
    except ValueError as exc:
        r.problem(("unit", "name"), f"the {kind} store cannot write it: {exc}")


def _check_role_names(r: TableReader, roles: dict[str, RoleMapping], kind: str) -> None:
    """Refuse at load a role's measurement, field or tag name that the store cannot write as it
    is read, naming the key: the checks of the kind's ``Store.NAME_CHECKS``
    (``isentrope.daemon.stores.escape``), after the tag's own ``escape.check_name``."""
    checks_of = store_class(kind).NAME_CHECKS
    for role, m in roles.items():
        p = ("roles", role)
        field_key = p + ("field",) if m.field else p + ("tag",)
        checks = [(p + ("tag",), m.tag, escape.check_name)]
        checks += [(p + ("measurement",), m.measurement, c) for c in checks_of["measurement"]]
        checks += [(field_key, m.field_name, c) for c in checks_of["field"]]
        for k, v in m.tags.items():
            checks += [(p + ("tags",), k, c) for c in checks_of["tag_key"]]
            checks += [(p + ("tags",), v, c) for c in checks_of["tag_value"]]
        for key, name, check in checks:
            if r.problems_for(key):
                continue
            try:
                check(name)
            except ValueError as exc:
                r.problem(key, f"the {kind} store cannot write it: {exc}")


def _check_unit(r: TableReader, path: tuple[str, ...], role: str, unit: str) -> str | None:
    """The canonical unit name, or None after reporting why the unit does not fit the role."""
    quantity = ROLES[role][0]
    try:
        name = units.canonical_unit(unit)
    except ValueError as exc:
        same = [u for u in units.KNOWN_UNITS if units.UNITS[u].quantity == quantity]
        close = difflib.get_close_matches(unit, same, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        reason = str(exc).split("; known units:")[0]
        r.problem(path, f"{reason}; units for a {quantity}: {', '.join(same)}{hint}")
        return None
    found = units.UNITS[name].quantity
    if found != quantity:
        r.problem(path, f"{unit!r} is a unit of {found}, but {role} is a {quantity}")
        return None
    if role == "barometric_p" and units.UNITS[name].gauge:
        r.problem(path, f"the barometric pressure must be absolute, found the gauge unit {unit!r}")
        return None
    return name


#: The keys of each ``[roles.<role>]`` table.
ROLE_KEYS = ["tag", "unit", "measurement", "field", "tags", "range", "uncertainty"]


def _read_roles(r: TableReader, top: dict) -> tuple[dict[str, RoleMapping], dict[str, RoleUncertainty]]:
    p = ("roles",)
    d = r.table(top, p, required=True)
    roles: dict[str, RoleMapping] = {}
    unc: dict[str, RoleUncertainty] = {}
    for role, body in d.items():
        rp = p + (role,)
        if role not in ROLES:
            close = difflib.get_close_matches(role, list(ROLES), n=1, cutoff=0.6)
            hint = f"; did you mean '{close[0]}'?" if close else f"; known roles: {', '.join(ROLES)}"
            r.problem(rp, f"unknown role{hint}")
            continue
        if not isinstance(body, dict):
            r.problem(rp, f"expected a table [roles.{role}], found {describe(body)}")
            continue
        quantity = ROLES[role][0]
        r.unknown(body, rp, ROLE_KEYS)
        tag = r.value(body, rp + ("tag",), "str")
        if tag is not None and not tag.strip():
            r.problem(rp + ("tag",), "must not be empty")
        unit = r.value(body, rp + ("unit",), "str")
        if unit is not None:
            unit = _check_unit(r, rp + ("unit",), role, unit)
        measurement = r.value(body, rp + ("measurement",), "str", default="plant")
        fld = r.value(body, rp + ("field",), "str", default="")
        tags = r.value(body, rp + ("tags",), "str_table", default={})
        rng = r.value(body, rp + ("range",), "pair", default=None)
        basis_default, basis = DEFAULT_UNCERTAINTY[quantity]
        u = r.value(body, rp + ("uncertainty",), "float", default=basis_default, low=0)
        if tag and unit:
            roles[role] = RoleMapping(
                role=role, tag=tag, unit=unit, measurement=measurement, field=fld, tags=tags, range=rng
            )
            unc[role] = RoleUncertainty(value=u, basis=basis)
    if isinstance(d, dict):
        missing = [role for role in REQUIRED_ROLES if role not in d]
        if missing:
            r.problem(p, f"required roles not mapped: {', '.join(missing)}")
    if "lp_extraction_p" in d and "lp_extraction_t" not in d:
        r.problem(p + ("lp_extraction_p",), "lp_extraction_p needs lp_extraction_t mapped too")
    if "lp_extraction_t" in d and "lp_extraction_p" not in d:
        r.problem(p + ("lp_extraction_t",), "lp_extraction_t needs lp_extraction_p mapped too")
    seen: dict[tuple, str] = {}
    for role, m in roles.items():
        key = (m.tag, m.measurement, m.field_name, tuple(sorted(m.tags.items())))
        if key in seen:
            r.problem(p + (role, "tag"), f"the same series as role {seen[key]} ({m.tag!r})")
        seen[key] = role
    return roles, unc


def _read_screening(r: TableReader, top: dict) -> ScreeningConfig:
    p, d, D = _open_table(r, top, "screening", ScreeningConfig)
    band = r.value(d, p + ("efficiency_band",), "pair", default=D.efficiency_band)
    if band is not None and (band[0] < 0 or band[1] > 1.2):
        r.problem(p + ("efficiency_band",), f"expected fractions within [0, 1.2], found {list(band)}")
    return ScreeningConfig(
        flatline=r.value(d, p + ("flatline",), "duration", D.flatline, low=0, low_open=True),
        flatline_tolerance=r.value(
            d, p + ("flatline_tolerance",), "float", D.flatline_tolerance, low=0, high=FLATLINE_TOLERANCE_MAX
        ),
        spike_window=r.value(d, p + ("spike_window",), "duration", D.spike_window, low=0, low_open=True),
        spike_threshold=r.value(
            d, p + ("spike_threshold",), "float", D.spike_threshold, low=0, low_open=True
        ),
        efficiency_band=band or D.efficiency_band,
        barometric_kpa=r.value(d, p + ("barometric_kpa",), "float", None, low=50.0, high=110.0),
    )


def _read_steady(r: TableReader, top: dict) -> SteadyConfig:
    p, d, D = _open_table(r, top, "steady", SteadyConfig)
    v = {}
    v["method"] = r.value(d, p + ("method",), "str", D.method, choices=("ptc6", "r_statistic"))
    for k in ("window", "min_length", "max_length"):
        v[k] = r.value(d, p + (k,), "duration", getattr(D, k), low=0, low_open=True)
    v["max_gap"] = r.value(d, p + ("max_gap",), "duration", D.max_gap, low=0)
    for k in (
        "load_band_percent",
        "throttle_p_percent",
        "throttle_p_kpa",
        "temperature_k",
        "exhaust_p_percent",
        "exhaust_p_kpa",
    ):
        v[k] = r.value(d, p + (k,), "float", getattr(D, k), low=0, low_open=True)
    v["r_critical"] = r.value(d, p + ("r_critical",), "float", D.r_critical, low=1.0, low_open=True)
    raw = d.get("r_filter", MISSING)
    if raw is MISSING:
        v["r_filter"] = D.r_filter
    elif (
        isinstance(raw, list)
        and len(raw) == 3
        and all(not isinstance(x, bool) and isinstance(x, (int, float)) and 0 < x <= 1 for x in raw)
    ):
        v["r_filter"] = tuple(float(x) for x in raw)
    else:
        r.problem(p + ("r_filter",), f"expected three filter factors in (0, 1], found {raw!r}")
        v["r_filter"] = D.r_filter
    if v["min_length"] > v["max_length"]:
        r.problem(
            p + ("min_length",),
            f"must not exceed max_length ({format_duration(v['max_length'])}), "
            f"found {format_duration(v['min_length'])}",
        )
    return SteadyConfig(**v)


def _read_sections(r: TableReader, top: dict, roles: dict) -> SectionsConfig:
    p, d, D = _open_table(r, top, "sections", SectionsConfig)
    v = {}
    v["lp_mode"] = r.value(
        d, p + ("lp_mode",), "str", D.lp_mode, choices=("auto", "expansion", "energy_balance")
    )
    v["lp_dry_efficiency_source"] = r.value(
        d,
        p + ("lp_dry_efficiency_source",),
        "str",
        D.lp_dry_efficiency_source,
        choices=("design", "measured"),
    )
    v["eta_lp_design"] = r.value(d, p + ("eta_lp_design",), "float", D.eta_lp_design, low=0.5, high=1.0)
    v["eta_lp_band_points"] = r.value(
        d, p + ("eta_lp_band_points",), "float", D.eta_lp_band_points, low=0.0, high=10.0
    )
    v["baumann"] = r.value(d, p + ("baumann",), "float", D.baumann, low=0.0, high=2.0)
    v["annulus_area_m2"] = r.value(d, p + ("annulus_area_m2",), "float", None, low=0, low_open=True)
    for k in ("lp_exhaust_flow_fraction", "reheat_flow_fraction", "crossover_flow_fraction"):
        v[k] = r.value(d, p + (k,), "float", None, low=0, high=1.0, low_open=True)
    v["mechanical_losses_mw"] = r.value(
        d, p + ("mechanical_losses_mw",), "float", D.mechanical_losses_mw, low=0
    )
    v["generator_efficiency"] = r.value(
        d, p + ("generator_efficiency",), "float", D.generator_efficiency, low=0.5, high=1.0
    )
    raw = d.get("exhaust_loss_curve", MISSING)
    curve = None
    if raw is not MISSING:
        ok = (
            isinstance(raw, list)
            and len(raw) >= 2
            and all(
                isinstance(pt, list)
                and len(pt) == 2
                and all(
                    not isinstance(x, bool) and isinstance(x, (int, float)) and math.isfinite(x) for x in pt
                )
                for pt in raw
            )
        )
        if not ok:
            r.problem(
                p + ("exhaust_loss_curve",),
                "expected at least two [velocity_m_s, loss_kj_kg] pairs, e.g. [[120.0, 30.0], [200.0, 25.0]]",
            )
        else:
            curve = tuple((float(a), float(b)) for a, b in raw)
            vel = [a for a, _ in curve]
            if any(b <= a for a, b in pairwise(vel)):
                r.problem(p + ("exhaust_loss_curve",), f"velocities must rise strictly, found {vel}")
            if any(a < 0 or b < 0 for a, b in curve):
                r.problem(p + ("exhaust_loss_curve",), "velocities and losses must not be negative")
    v["exhaust_loss_curve"] = curve
    if curve is not None and v["annulus_area_m2"] is None:
        r.problem(p + ("annulus_area_m2",), "an exhaust_loss_curve needs annulus_area_m2")
    if curve is not None and v["lp_exhaust_flow_fraction"] is None:
        r.problem(p + ("lp_exhaust_flow_fraction",), "an exhaust_loss_curve needs lp_exhaust_flow_fraction")
    if v["lp_mode"] == "energy_balance":
        if "main_steam_flow" not in roles:
            r.problem(p + ("lp_mode",), '"energy_balance" needs the main_steam_flow role mapped')
        for k in ("reheat_flow_fraction", "crossover_flow_fraction", "lp_exhaust_flow_fraction"):
            if v[k] is None:
                r.problem(p + (k,), f'lp_mode "energy_balance" needs {k}')
    if v["lp_dry_efficiency_source"] == "measured":
        key = p + ("lp_dry_efficiency_source",)
        absent = [role for role in ("lp_extraction_p", "lp_extraction_t") if role not in roles]
        if absent:
            r.problem(
                key,
                '"measured" needs the LP dry stage group: map the roles lp_extraction_p and '
                f"lp_extraction_t (not mapped: {', '.join(absent)})",
            )
        # The pipeline gives calc.sections the flow fractions only when both are set; "auto" then
        # takes the energy balance whenever main_steam_flow is mapped as well.
        balance = v["lp_mode"] == "energy_balance" or (
            v["lp_mode"] == "auto"
            and "main_steam_flow" in roles
            and v["reheat_flow_fraction"] is not None
            and v["crossover_flow_fraction"] is not None
        )
        if balance:
            why = (
                'lp_mode is "energy_balance"'
                if v["lp_mode"] == "energy_balance"
                else 'lp_mode "auto" takes the energy balance here (main_steam_flow mapped, '
                "reheat_flow_fraction and crossover_flow_fraction given)"
            )
            r.problem(
                key,
                f'"measured" is used only by the expansion, but {why}: the LP end point '
                'comes from the energy balance; set lp_mode = "expansion" or leave the key out',
            )
    return SectionsConfig(**v)


def _read_baseline(r: TableReader, top: dict) -> BaselineConfig:
    p, d, D = _open_table(r, top, "baseline", BaselineConfig)
    start = r.value(d, p + ("start",), "time", None)
    end = r.value(d, p + ("end",), "time", None)
    if (start is None) != (end is None) and not r.problems_for(p):
        r.problem(p, "give both start and end of the reference period, or neither")
    if start is not None and end is not None and end <= start:
        r.problem(p + ("end",), f"must be after start ({start.isoformat()}), found {end.isoformat()}")
    return BaselineConfig(
        start=start,
        end=end,
        margin_percent=r.value(d, p + ("margin_percent",), "float", D.margin_percent, low=0, high=100),
        degree=r.value(d, p + ("degree",), "int", D.degree, low=1, high=2),
    )


def _read_alarms(r: TableReader, top: dict) -> AlarmsConfig:
    p, d, D = _open_table(r, top, "alarms", AlarmsConfig)
    v = {}
    v["deviation_warning"] = r.value(
        d, p + ("deviation_warning",), "float", D.deviation_warning, high=0, high_open=True
    )
    v["deviation_alarm"] = r.value(
        d, p + ("deviation_alarm",), "float", D.deviation_alarm, high=0, high_open=True
    )
    v["persistence"] = r.value(d, p + ("persistence",), "int", D.persistence, low=1)
    v["hysteresis"] = r.value(d, p + ("hysteresis",), "float", D.hysteresis, low=0)
    v["rate_limit_per_1000h"] = r.value(
        d, p + ("rate_limit_per_1000h",), "float", D.rate_limit_per_1000h, low=0, low_open=True
    )
    v["moisture_limit_percent"] = r.value(
        d, p + ("moisture_limit_percent",), "float", D.moisture_limit_percent, low=0, high=30, low_open=True
    )
    v["data_quality_limit"] = r.value(
        d, p + ("data_quality_limit",), "duration", D.data_quality_limit, low=0, low_open=True
    )
    v["no_data_limit"] = r.value(d, p + ("no_data_limit",), "duration", D.no_data_limit, low=0)
    v["step_method"] = r.value(d, p + ("step_method",), "str", D.step_method, choices=("scan", "cusum"))
    v["step_threshold"] = r.value(d, p + ("step_threshold",), "float", D.step_threshold, low=0, low_open=True)
    v["cusum_k"] = r.value(d, p + ("cusum_k",), "float", D.cusum_k, low=0)
    v["cusum_h"] = r.value(d, p + ("cusum_h",), "float", D.cusum_h, low=0, low_open=True)
    v["min_step_points"] = r.value(d, p + ("min_step_points",), "float", D.min_step_points, low=0)
    if v["deviation_alarm"] > v["deviation_warning"]:
        r.problem(
            p + ("deviation_alarm",),
            f"must be at or below deviation_warning "
            f"({v['deviation_warning']:g}), found {v['deviation_alarm']:g}",
        )
    if v["hysteresis"] >= abs(v["deviation_warning"]):
        r.problem(
            p + ("hysteresis",),
            f"must be smaller than |deviation_warning| "
            f"({abs(v['deviation_warning']):g}), found {v['hysteresis']:g}",
        )
    return AlarmsConfig(**v)


def _section_tables(r: TableReader, d: dict, p: tuple[str, ...], cls):
    """``(section, key path, table)`` of each trended section's table under ``p`` that is given
    and not empty, in ``TRENDED_SECTIONS`` order; unknown sections and keys (the fields of
    ``cls``) are reported as the tables are reached."""
    sub = r.table(d, p)
    r.unknown(sub, p, TRENDED_SECTIONS)
    for sec in TRENDED_SECTIONS:
        sp = p + (sec,)
        body = r.table(sub, sp)
        r.unknown(body, sp, _fields(cls))
        if body:
            yield sec, sp, body


def _read_economics(r: TableReader, top: dict) -> EconomicsConfig:
    p, d, D = _open_table(r, top, "economics", EconomicsConfig)
    currency = r.value(d, p + ("currency",), "str", D.currency)
    if currency is not None and not re.fullmatch(r"[A-Z]{3}", currency):
        r.problem(
            p + ("currency",), f'expected a three-letter ISO 4217 code such as "EUR", found {currency!r}'
        )
    fuel = r.value(d, p + ("fuel_price_per_gj",), "float", None, low=0, low_open=True)
    heat_rate = r.value(
        d, p + ("heat_rate_kj_per_kwh",), "float", None, low=3600.0, high=20000.0, low_open=True
    )
    if fuel is not None and heat_rate is None and "heat_rate_kj_per_kwh" not in d:
        r.problem(
            p + ("heat_rate_kj_per_kwh",), "fuel_price_per_gj is given: heat_rate_kj_per_kwh is needed too"
        )
    sens = dict(DEFAULT_SENSITIVITY)
    for sec, sp, body in _section_tables(r, d, p + ("sensitivity",), SensitivityConfig):
        base = DEFAULT_SENSITIVITY.get(sec)
        values = [
            r.value(
                body, sp + (key,), "float", getattr(base, key) if base is not None else None, low=0, high=5
            )
            for key in ("heat_rate_percent_per_point", "output_percent_per_point")
        ]
        if None in values:
            if not r.problems_for(sp):
                r.problem(sp, "no default for this section: give both coefficients (with their source)")
            continue
        sens[sec] = SensitivityConfig(*values)
    overhaul: dict[str, OverhaulCase] = {}
    for sec, op, body in _section_tables(r, d, p + ("overhaul",), OverhaulCase):
        pts = r.value(body, op + ("recoverable_points",), "float", low=0, high=20, low_open=True)
        cost = r.value(body, op + ("cost",), "float", low=0)
        if pts is not None and cost is not None:
            overhaul[sec] = OverhaulCase(pts, cost)
    return EconomicsConfig(
        currency=currency or D.currency,
        fuel_price_per_gj=fuel,
        heat_rate_kj_per_kwh=heat_rate,
        boiler_efficiency=r.value(
            d, p + ("boiler_efficiency",), "float", D.boiler_efficiency, low=0.5, high=1.0
        ),
        capacity_factor=r.value(d, p + ("capacity_factor",), "float", None, low=0, high=1, low_open=True),
        planned_outage=r.value(d, p + ("planned_outage",), "date", None),
        sensitivity=sens,
        overhaul=overhaul,
    )


#: Longest ``[schedule] settle`` and ``lookback`` (project choice, no source).
SCHEDULE_LONGEST = {
    "settle": dt.timedelta(days=1),
    "lookback": dt.timedelta(days=31),
    "analysis_interval": dt.timedelta(days=1),
    "lease": dt.timedelta(days=1),
}
#: Shortest ``[schedule] lease``: a lease is renewed every third of it, and taking one on an
#: InfluxDB store pauses a second (influx_common.LEASE_CONFIRM_DELAY); project choice.
LEASE_SHORTEST = dt.timedelta(seconds=30)
SCHEDULE_WHY = {
    "settle": "results come this late; data arriving later is reprocessed by the look-back",
    "lookback": "every cycle reads and computes this much again",
    "analysis_interval": "a step alarm must come within a day of the step",
    "lease": "another worker may start this long after one crashed",
}


def _read_schedule(r: TableReader, top: dict) -> ScheduleConfig:
    p, d, D = _open_table(r, top, "schedule", ScheduleConfig)
    v = {}
    for k in ("interval", "chunk", "backoff", "backoff_max"):
        v[k] = r.value(d, p + (k,), "duration", getattr(D, k), low=0, low_open=True)
    for k in ("settle", "lookback", "analysis_interval", "lease"):
        v[k] = r.value(d, p + (k,), "duration", getattr(D, k), low=0)
        longest = SCHEDULE_LONGEST[k]
        if v[k] is not None and v[k] > longest:
            r.problem(
                p + (k,),
                f"expected at most {format_duration(longest)} ({SCHEDULE_WHY[k]}), found {format_duration(v[k])}",
            )
            v[k] = getattr(D, k)
    if v["lease"] is not None and v["lease"] < LEASE_SHORTEST:
        r.problem(
            p + ("lease",),
            f"expected at least {format_duration(LEASE_SHORTEST)} (it is renewed every third of it), "
            f"found {format_duration(v['lease'])}",
        )
        v["lease"] = D.lease
    v["retries"] = r.value(d, p + ("retries",), "int", D.retries, low=0, high=20)
    if v["backoff"] > v["backoff_max"]:
        r.problem(
            p + ("backoff",),
            f"must not exceed backoff_max ({format_duration(v['backoff_max'])}), "
            f"found {format_duration(v['backoff'])}",
        )
    if v["chunk"] < v["interval"]:
        r.problem(
            p + ("chunk",),
            f"must be at least interval ({format_duration(v['interval'])}), "
            f"found {format_duration(v['chunk'])}",
        )
    return ScheduleConfig(**v)


def _read_rule(r: TableReader, d: dict, p: tuple[str, ...]) -> ReadRule:
    r.unknown(d, p, _fields(ReadRule))
    return ReadRule(
        fill=r.value(d, p + ("fill",), "str", None, choices=READ_FILLS),
        max_age=r.value(d, p + ("max_age",), "duration", None, low=0, low_open=True),
        deadband=r.value(d, p + ("deadband",), "float", None, low=0),
    )


def _read_read(r: TableReader, top: dict, roles: dict) -> ReadConfig:
    p, d, D = _open_table(r, top, "read", ReadConfig)
    interval = r.value(d, p + ("interval",), "duration", D.interval, low=0)
    if interval and (interval.total_seconds() < 1 or interval.total_seconds() % 1):
        r.problem(p + ("interval",), f"expected 0 or a whole number of seconds, found {d.get('interval')!r}")
        interval = D.interval
    quantity: dict[str, ReadRule] = {}
    qd = r.table(d, p + ("quantity",))
    r.unknown(qd, p + ("quantity",), READ_QUANTITIES)
    for name in READ_QUANTITIES:
        body = r.table(qd, p + ("quantity", name))
        if body:
            quantity[name] = _read_rule(r, body, p + ("quantity", name))
    rules: dict[str, ReadRule] = {}
    rd = r.table(d, p + ("roles",))
    r.unknown(rd, p + ("roles",), list(ROLES))
    for role in ROLES:
        body = r.table(rd, p + ("roles", role))
        if body:
            rules[role] = _read_rule(r, body, p + ("roles", role))
    cfg = ReadConfig(
        interval=interval,
        fill=r.value(d, p + ("fill",), "str", D.fill, choices=READ_FILLS),
        max_age=r.value(d, p + ("max_age",), "duration", D.max_age, low=0, low_open=True),
        quantity=quantity,
        roles=rules,
    )
    if interval:
        for role in [*roles, None]:
            fill, age, _ = cfg.rule_of(role) if role else (cfg.fill, cfg.max_age, 0.0)
            if fill == "hold" and age and age.total_seconds() % interval.total_seconds():
                r.problem(
                    _read_key(cfg, role, "max_age"),
                    f"a hold's max_age must be a whole number of grid intervals "
                    f"({format_duration(interval)}), found {format_duration(age)}"
                    + (f" (for role {role})" if role else ""),
                )
    return cfg


def _read_key(cfg: ReadConfig, role: str | None, key: str) -> tuple[str, ...]:
    """Where a role's ``key`` of ``[read]`` is written: its role table, its quantity's, or [read]."""
    if role is not None:
        rule = cfg.roles.get(role)
        if rule is not None and getattr(rule, key) is not None:
            return ("read", "roles", role, key)
        q = ROLES[role][0]
        rule = cfg.quantity.get(q)
        if rule is not None and getattr(rule, key) is not None:
            return ("read", "quantity", q, key)
    return ("read", key)


def _check_read_against(r: TableReader, cfg: ReadConfig, roles: dict, screening, steady, unit) -> None:
    """What a grid read needs of the other tables: a held value must not look like a stuck
    transmitter (``[screening] flatline`` longer than every held role's max_age, so that a
    flat stretch holds two stored values), and a deadband must leave room for the steadiness
    limits (it is added to each limited role's fluctuation, see ``Pipeline``)."""
    if not cfg.interval:
        return
    for role in roles:
        fill, age, band = cfg.rule_of(role)
        if fill == "hold" and screening.flatline <= age:
            r.problem(
                ("screening", "flatline"),
                f"must be longer than the max_age of every held role ({format_duration(age)} for {role}, "
                f"from {'.'.join(_read_key(cfg, role, 'max_age'))}): a held value is unchanged by "
                f"construction, found {format_duration(screening.flatline)}",
            )
            break
    limits = {
        "throttle_p": steady.throttle_p_kpa / 1000.0,  # [MPa]
        "throttle_t": steady.temperature_k,  # [K]
        "hot_reheat_t": steady.temperature_k,
        "condenser_p": steady.exhaust_p_kpa / 1000.0,
        "gross_output": steady.load_band_percent / 100.0 * unit.rating_mw,  # [MW]
    }
    for role, m in roles.items():
        band = cfg.rule_of(role)[2]
        if band <= 0 or role not in limits or not limits[role]:
            continue
        internal = band_internal(band, m.unit)
        if internal >= limits[role]:
            r.problem(
                _read_key(cfg, role, "deadband"),
                f"the deadband of {role} ({band:g} {m.unit}) is not below its permissible fluctuation in "
                f"[steady] ({limits[role]:g} in internal units, {internal:g} found): a reading that may "
                "move by its deadband unseen could never be judged steady",
            )


def _is_gauge(unit: str) -> bool:
    """Whether a (canonical) pressure unit is a gauge unit, needing the barometric pressure."""
    return bool(units.UNITS[unit].gauge)


_TOP = [
    "unit",
    "store",
    "roles",
    "screening",
    "steady",
    "sections",
    "baseline",
    "alarms",
    "economics",
    "schedule",
    "read",
]


def read_tables(
    r: TableReader, top: dict, base_dir: Path, environ, path: Path | None = None
) -> Config | None:
    """Every table of ``top`` (as tomllib gave it) in turn, each problem reported to ``r``; the
    ``Config``, or None when a problem was found."""
    r.unknown(top, (), _TOP)
    unit = _read_unit(r, top)
    store = _read_store(r, top, base_dir, environ)
    _check_unit_name(r, unit.name, store.kind)
    roles, unc = _read_roles(r, top)
    _check_role_names(r, roles, store.kind)
    screening = _read_screening(r, top)
    steady = _read_steady(r, top)
    sections = _read_sections(r, top, roles)
    baseline = _read_baseline(r, top)
    alarms = _read_alarms(r, top)
    economics = _read_economics(r, top)
    schedule = _read_schedule(r, top)
    read = _read_read(r, top, roles)
    _check_read_against(r, read, roles, screening, steady, unit)
    gauge = [m.role for m in roles.values() if ROLES[m.role][0] == "pressure" and _is_gauge(m.unit)]
    if gauge and "barometric_p" not in roles and screening.barometric_kpa is None:
        r.problem(
            ("screening", "barometric_kpa"),
            f"gauge pressures are mapped ({', '.join(gauge)}): map the barometric_p role "
            "or set screening.barometric_kpa",
        )
    if r.problems:
        return None
    return Config(
        path=path,
        unit=unit,
        store=store,
        roles=roles,
        uncertainties=unc,
        screening=screening,
        steady=steady,
        sections=sections,
        baseline=baseline,
        alarms=alarms,
        economics=economics,
        schedule=schedule,
        read=read,
    )
