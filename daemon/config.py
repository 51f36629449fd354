"""The configuration of one unit: a TOML file read with tomllib, validated before any I/O.

``load_config(path) -> Config`` reads the file, checks every table and key, and raises
``isentrope.daemon.errors.ConfigError`` listing *every* problem at once, each as
``<file>:<line>: <key>: <what is wrong>``. Nothing here opens a store connection.

The dataclass tree (these names are stable; other modules build on them):

* ``Config``: ``path``, ``unit``, ``store``, ``roles`` (role -> ``RoleMapping``),
  ``uncertainties`` (role -> standard uncertainty, see ``RoleUncertainty``), ``screening``,
  ``steady``, ``sections``, ``baseline``, ``alarms``, ``economics``, ``schedule``, ``read``;
  the property ``mappings`` (tuple of ``RoleMapping`` in ``ROLES`` order), ``read_grid``
  (the ``ReadGrid`` of the worker's reads, None for rows as stored) and ``deadbands``.
* ``UnitConfig``: ``name``, ``plant``, ``rating_mw``, ``online_mw``.
* ``StoreConfig``: ``kind`` ("sqlite", "influx2", "influx1") and the per-kind settings;
  ``open_options()`` gives the keyword arguments for
  ``isentrope.daemon.stores.open_store(kind, **options)`` with secrets revealed; ``open()``
  calls it.
* ``Secret``: a value that never shows in ``repr``/``str``; ``reveal()`` returns it.
* ``RoleUncertainty``: ``value`` and ``basis`` ("percent_of_reading" for pressure, power,
  flow; "kelvin" for temperature; "percent_points" for valve position).
* ``ScreeningConfig``, ``SteadyConfig``, ``SectionsConfig``, ``BaselineConfig``,
  ``AlarmsConfig``, ``SensitivityConfig``, ``OverhaulCase``, ``EconomicsConfig``,
  ``ScheduleConfig``, ``ReadConfig`` (with ``ReadRule`` per quantity and per role): one per
  table, fields as in ``deploy/example.toml``.
Durations are strings ("15m") and times ISO 8601 (naive means UTC), both of the grammar of
``isentrope.daemon.timeutil``; secrets are
``"${ENV_NAME}"`` or a ``*_file`` key naming a file whose first line is the secret; a secret
written literally in the file is refused. ``deploy/example.toml`` documents every key with its
default. Units of each role are checked against ``isentrope.calc.units.KNOWN_UNITS`` (accepted
spellings are stored under their canonical name, "barg" -> "bar(g)").
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from itertools import pairwise
from pathlib import Path
from typing import Any

import pandas as pd

from isentrope.calc.names import TRENDED_SECTIONS
from isentrope.daemon.errors import ConfigError
from isentrope.daemon.redact import remember
from isentrope.daemon.roles import REQUIRED_ROLES, ROLES, RoleMapping
from isentrope.daemon.stores import STORE_KINDS as _STORE_CLASSES
from isentrope.daemon.stores import escape
from isentrope.daemon.stores.base import DEFAULT_TIMEOUT_S
from isentrope.daemon.timeutil import format_duration, parse_duration, parse_time

__all__ = [
    "Config",
    "UnitConfig",
    "StoreConfig",
    "Secret",
    "RoleUncertainty",
    "ScreeningConfig",
    "SteadyConfig",
    "SectionsConfig",
    "BaselineConfig",
    "AlarmsConfig",
    "SensitivityConfig",
    "OverhaulCase",
    "EconomicsConfig",
    "ScheduleConfig",
    "ReadConfig",
    "ReadRule",
    "load_config",
    "parse_config",
    "SECTIONS",
    "STORE_KINDS",
]

#: Sections trended and priced (``calc.names.TRENDED_SECTIONS``).
SECTIONS = TRENDED_SECTIONS
#: ``[store] kind`` values: the kinds ``daemon.stores`` implements.
STORE_KINDS = tuple(_STORE_CLASSES)


# --------------------------------------------------------------------------------------
# values
# --------------------------------------------------------------------------------------
class Secret:
    """A credential. Shown as ``'***'`` in repr/str so that it never reaches a log line."""

    __slots__ = ("_value", "source")

    def __init__(self, value: str, source: str = ""):
        self._value = value
        self.source = source  # "env:NAME" or "file:/path", safe to show
        remember(value)  # redacted from every message from now on

    def reveal(self) -> str:
        return self._value

    def __repr__(self) -> str:
        return f"Secret(***{', from ' + self.source if self.source else ''})"

    __str__ = __repr__

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Secret) and other._value == self._value

    def __hash__(self) -> int:
        return hash(self._value)


# --------------------------------------------------------------------------------------
# the dataclass tree
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UnitConfig:
    """The unit. ``online_mw``: below this gross output the unit counts as offline [MW]."""

    name: str
    plant: str = ""
    rating_mw: float = 0.0
    online_mw: float = 0.0


@dataclass(frozen=True)
class StoreConfig:
    """Where raw samples are read and results written.

    sqlite: ``path``. influx2: ``url``, ``org``, ``bucket`` (raw samples), ``results_bucket``
    (results, checkpoints and state; empty: ``bucket``), ``token``. influx1: ``url``,
    ``database``, ``retention_policy``, ``username``/``password`` or ``token``. Both InfluxDB
    kinds: ``verify_ssl``, ``ca_bundle`` (PEM file of the CAs to trust; the environment's CA
    settings are never read), ``timeout``, ``batch_size``.
    """

    kind: str
    path: Path | None = None
    url: str = ""
    org: str = ""
    bucket: str = ""
    results_bucket: str = ""
    database: str = ""
    retention_policy: str = ""
    username: str = ""
    token: Secret | None = None
    password: Secret | None = None
    verify_ssl: bool = True
    ca_bundle: Path | None = None
    timeout: dt.timedelta = dt.timedelta(seconds=DEFAULT_TIMEOUT_S)
    batch_size: int = 5000

    def open(self, create: bool = True):
        """Open the configured store (the first I/O; call only after validation).

        ``create=False`` refuses to create a missing SQLite file (``FatalStoreError``), for
        commands that only read.
        """
        from isentrope.daemon.stores import FatalStoreError, open_store

        if self.kind == "sqlite" and not create and not Path(self.path).is_file():
            raise FatalStoreError(
                f"no SQLite store at {self.path} (check [store] path; "
                "the file is created by import-csv, run, backfill or demo)"
            )
        return open_store(self.kind, **self.open_options())

    def open_options(self) -> dict[str, Any]:
        """Keyword arguments for ``open_store(kind, **options)``; secrets revealed, timeout
        in seconds [s]."""
        if self.kind == "sqlite":
            return {"path": self.path}
        opts: dict[str, Any] = {
            "url": self.url,
            "verify_ssl": self.verify_ssl,
            "ca_bundle": str(self.ca_bundle) if self.ca_bundle else "",
            "timeout": self.timeout.total_seconds(),
            "batch_size": self.batch_size,
        }
        if self.kind == "influx2":
            opts.update(org=self.org, bucket=self.bucket, token=self.token.reveal() if self.token else "")
            if self.results_bucket:
                opts["results_bucket"] = self.results_bucket
        else:
            opts.update(database=self.database, retention_policy=self.retention_policy)
            if self.token is not None:
                opts["token"] = self.token.reveal()
            else:
                opts["username"] = self.username
                opts["password"] = self.password.reveal() if self.password else ""
        return opts


@dataclass(frozen=True)
class RoleUncertainty:
    """Standard uncertainty (k = 1) of one role's readings.

    ``basis``: "percent_of_reading" (pressure, power, flow) [%], "kelvin" (temperature) [K],
    "percent_points" (valve position) [% points].
    """

    value: float
    basis: str


#: Quantity -> (default standard uncertainty, basis). Instrument-like levels for a plant
#: with calibrated station transmitters: common practice, no source.
DEFAULT_UNCERTAINTY = {
    "pressure": (0.25, "percent_of_reading"),
    "temperature": (1.0, "kelvin"),
    "power": (0.5, "percent_of_reading"),
    "flow": (2.0, "percent_of_reading"),
    "percent": (1.0, "percent_points"),
}


#: Largest accepted ``[screening] flatline_tolerance`` [-] (project choice, no source). A
#: two-hour stretch of steady running spans a few noise standard deviations, and the band
#: must stay inside that: on the synthetic unit (``isentrope.daemon.synthetic``, temperature
#: noise 0.4 K) FLATLINE starts on throttle_t at 3e-3 (2.4 K at 811 K), and at 0.01 (8.1 K)
#: almost every sample of steady running is flagged, while up to 1e-3 only the injected stuck
#: transmitter is. 3e-3 is still inside the PTC 6 steady limits of ``[steady]`` (4 K), so
#: those limits are no test for this; a fixed cap three times below that onset is.
FLATLINE_TOLERANCE_MAX = 1e-3


@dataclass(frozen=True)
class ScreeningConfig:
    """Per-sample screening.

    ``flatline``: a reading unchanged for this long is flagged; unchanged means the readings
    of the stretch span no more than max(the role's absolute tolerance
    ``calc.quality.FLATLINE_TOLERANCE``, ``flatline_tolerance`` [-] times the largest reading of
    the stretch). The worker's screening and ``isentrope check`` use the same test.
    ``spike_window``/``spike_threshold``: a sample more
    than ``spike_threshold`` robust standard deviations (MAD) from the rolling median over
    ``spike_window`` is flagged [-]. ``efficiency_band``: section efficiencies outside are
    flagged [-]. ``barometric_kpa``: constant barometric pressure for gauge transmitters when
    no ``barometric_p`` role is mapped [kPa].
    """

    flatline: dt.timedelta = dt.timedelta(hours=2)
    flatline_tolerance: float = 1e-6
    spike_window: dt.timedelta = dt.timedelta(minutes=15)
    spike_threshold: float = 6.0
    efficiency_band: tuple[float, float] = (0.5, 1.0)
    barometric_kpa: float | None = None


@dataclass(frozen=True)
class SteadyConfig:
    """Steady-state tagging.

    ``method`` "ptc6": the fluctuation limits of ASME PTC 6-2004 Table 3-1 over a moving
    ``window``; "r_statistic": Cao & Rhinehart (1995) with ``r_filter`` factors and
    ``r_critical``. A steady window lasts at least ``min_length``, at most ``max_length``,
    and bridges gaps up to ``max_gap``. Limits: load [% of rating], throttle pressure
    [% of absolute] or [kPa] whichever larger, temperatures [K], exhaust pressure
    [% of absolute] or [kPa] whichever larger.
    """

    method: str = "ptc6"
    window: dt.timedelta = dt.timedelta(minutes=30)
    min_length: dt.timedelta = dt.timedelta(minutes=20)
    max_gap: dt.timedelta = dt.timedelta(minutes=5)
    max_length: dt.timedelta = dt.timedelta(hours=1)
    load_band_percent: float = 1.0
    throttle_p_percent: float = 0.25
    throttle_p_kpa: float = 34.5
    temperature_k: float = 4.0
    exhaust_p_percent: float = 1.0
    exhaust_p_kpa: float = 0.14
    r_critical: float = 2.0
    r_filter: tuple[float, float, float] = (0.2, 0.1, 0.1)


@dataclass(frozen=True)
class SectionsConfig:
    """Section evaluation.

    ``lp_mode``: "expansion" (ELEP from an LP efficiency with the Baumann correction),
    "energy_balance" (ELEP from generator output and flows), "auto" (energy balance when the
    flow role and fractions are there, else expansion). ``lp_dry_efficiency_source``: the LP
    efficiency the expansion uses, "design" (``eta_lp_design``) or "measured" (the LP dry
    stage-group efficiency of the same sample, from the LP extraction roles).
    ``eta_lp_design`` [-], ``eta_lp_band_points`` half-width of the band around the LP
    efficiency the expansion assumes in which the true one may lie [points] (enters the
    uncertainty of the estimated LP figures), ``baumann``
    factor a [-], ``annulus_area_m2`` LP last-stage annulus area, all exhaust flows
    together [m2], ``lp_exhaust_flow_fraction`` LP exhaust flow / main steam flow [-],
    ``exhaust_loss_curve`` pairs (annulus velocity [m/s], exhaust loss [kJ/kg]) with rising
    velocity, ``reheat_flow_fraction`` hot reheat flow / main steam flow [-],
    ``crossover_flow_fraction`` LP inlet flow / main steam flow [-],
    ``mechanical_losses_mw`` [MW], ``generator_efficiency`` [-].
    """

    lp_mode: str = "auto"
    lp_dry_efficiency_source: str = "design"
    eta_lp_design: float = 0.88
    eta_lp_band_points: float = 2.0
    baumann: float = 1.0
    annulus_area_m2: float | None = None
    lp_exhaust_flow_fraction: float | None = None
    exhaust_loss_curve: tuple[tuple[float, float], ...] | None = None
    reheat_flow_fraction: float | None = None
    crossover_flow_fraction: float | None = None
    mechanical_losses_mw: float = 0.0
    generator_efficiency: float = 0.985


@dataclass(frozen=True)
class BaselineConfig:
    """Reference period for the expected-efficiency model (UTC); both None: not set yet.

    ``margin_percent``: how far outside the fitted load range a prediction is still given
    [% of rating]; ``degree``: polynomial degree of the fit in load fraction [-].
    """

    start: pd.Timestamp | None = None
    end: pd.Timestamp | None = None
    margin_percent: float = 5.0
    degree: int = 2


@dataclass(frozen=True)
class AlarmsConfig:
    """Alarm rules. Deviations in percentage points (negative = worse than baseline).

    ``persistence`` [steady windows], ``hysteresis`` [points], ``rate_limit_per_1000h``
    magnitude of a degradation rate that raises an alarm [points per 1000 h],
    ``moisture_limit_percent`` [%], ``data_quality_limit`` how long a mapped tag may be
    missing/flat/out of range, ``no_data_limit`` how long no row at all may arrive from the
    historian (0 switches that alarm off, e.g. for historians that store exceptions only),
    ``step_method`` "scan" (the GLS step scan of ``calc.trend.detect_steps``) or "cusum",
    ``step_threshold`` the scan's decision threshold [standard errors of the step],
    ``cusum_k`` / ``cusum_h`` CUSUM reference value and decision interval (method "cusum"
    only) [multiples of the prewhitened noise's standard deviation], ``min_step_points``
    smallest step change reported [points].
    """

    deviation_warning: float = -1.0
    deviation_alarm: float = -2.0
    persistence: int = 3
    hysteresis: float = 0.3
    rate_limit_per_1000h: float = 1.0
    moisture_limit_percent: float = 12.0
    data_quality_limit: dt.timedelta = dt.timedelta(hours=1)
    no_data_limit: dt.timedelta = dt.timedelta(hours=1)
    # the GLS step scan holds its false-step rate under correlated windows (calc/DECISIONS.md)
    step_method: str = "scan"
    step_threshold: float = 4.25
    cusum_k: float = 0.5
    cusum_h: float = 8.0  # about 7.5 % false steps per 500 windows of pure noise (calc.trend tests)
    # A CUSUM on low-scatter deviations also finds steps of hundredths of a point: real, but
    # not what a planner acts on. 0.25 point is well below the 0.5-2 points of a rub or a trip
    # (calc/REFERENCES.md, from memory); project choice, no source.
    min_step_points: float = 0.25


@dataclass(frozen=True)
class SensitivityConfig:
    """Per point of section efficiency: turbine heat rate change [%], output change [%]."""

    heat_rate_percent_per_point: float
    output_percent_per_point: float


#: Mid-range values of calc/REFERENCES.md "Degradation and its cost" (from memory; the unit's
#: own heat balance replaces them). The LP ones are per point of the whole LP; the LP dry stage
#: group has no default: without ``[economics.sensitivity.lp_dry]`` it is priced by its share
#: of the LP's isentropic drop (``calc.economics.stage_group_coefficient``).
DEFAULT_SENSITIVITY = {
    "hp": SensitivityConfig(0.20, 0.28),
    "ip": SensitivityConfig(0.15, 0.25),
    "lp": SensitivityConfig(0.45, 0.50),
}


@dataclass(frozen=True)
class OverhaulCase:
    """What an overhaul of one section is expected to recover [points] and cost [currency]."""

    recoverable_points: float
    cost: float


@dataclass(frozen=True)
class EconomicsConfig:
    """Pricing of lost efficiency. ``enabled`` when a fuel price is given.

    ``fuel_price_per_gj`` [currency/GJ], ``heat_rate_kj_per_kwh`` turbine heat rate basis
    [kJ/kWh], ``boiler_efficiency`` [-], ``capacity_factor`` [-] (None: use the measured
    output), ``planned_outage`` date of the next planned outage.
    """

    currency: str = "USD"
    fuel_price_per_gj: float | None = None
    heat_rate_kj_per_kwh: float | None = None
    boiler_efficiency: float = 0.88
    capacity_factor: float | None = None
    planned_outage: dt.date | None = None
    sensitivity: dict[str, SensitivityConfig] = field(default_factory=lambda: dict(DEFAULT_SENSITIVITY))
    overhaul: dict[str, OverhaulCase] = field(default_factory=dict)

    @property
    def enabled(self) -> bool:
        return self.fuel_price_per_gj is not None


@dataclass(frozen=True)
class ScheduleConfig:
    """Worker timing: run every ``interval``; process up to now - ``settle``; start each
    cycle ``lookback`` before the checkpoint; catch up in ``chunk`` pieces; retry a store
    call ``retries`` times with exponential backoff from ``backoff`` up to ``backoff_max``.
    Every ``analysis_interval`` the worker also brings the degradation analysis up to its
    checkpoint (``isentrope.daemon.analysis.run_analysis``); "0s" switches that job off."""

    interval: dt.timedelta = dt.timedelta(minutes=5)
    #: Hourly: the analysis finalises whole UTC days, so the step and rate alarms come at the
    #: end of the day at the latest whatever the interval; an hourly run shows a new step or
    #: rate on the dashboards within the hour (provisional rows, replaced by the next run) at
    #: about a second a run on ten years of history (tests/bench/bench_analysis.py), which
    #: a five-minute cycle would spend twelve times over for little (project choice).
    analysis_interval: dt.timedelta = dt.timedelta(hours=1)
    settle: dt.timedelta = dt.timedelta(minutes=2)
    lookback: dt.timedelta = dt.timedelta(minutes=30)
    chunk: dt.timedelta = dt.timedelta(days=1)
    retries: int = 4
    backoff: dt.timedelta = dt.timedelta(seconds=2)
    backoff_max: dt.timedelta = dt.timedelta(seconds=60)
    #: One worker per unit and store (isentrope.daemon.lease): how long the InfluxDB stores
    #: keep a worker's lease after its last renewal (renewed every third of it), i.e. how
    #: soon another worker may start after one crashed. SQLite's lock ends with its process.
    lease: dt.timedelta = dt.timedelta(minutes=3)


#: Fills of ``[read]``: see isentrope.daemon.stores.grid.
READ_FILLS = ("hold", "linear")
#: Quantities a ``[read.quantity.<name>]`` table may name (isentrope.daemon.roles.ROLES).
READ_QUANTITIES = ("pressure", "temperature", "flow", "power", "percent")


@dataclass(frozen=True)
class ReadRule:
    """``[read.quantity.<quantity>]`` or ``[read.roles.<role>]``: what differs from ``[read]``.

    ``fill`` "hold" or "linear" (None: inherit), ``max_age`` (None: inherit) [duration],
    ``deadband`` the historian's exception deadband in the plant unit of the role(s) (None:
    inherit; 0 when nowhere given) [plant unit].
    """

    fill: str | None = None
    max_age: dt.timedelta | None = None
    deadband: float | None = None


@dataclass(frozen=True)
class ReadConfig:
    """How the worker reads raw samples.

    ``interval``: the grid [duration]; 0 reads the rows as stored (regular exports).
    ``fill`` and ``max_age``: how a value between stored points is obtained on the grid: "hold"
    the last stored value while younger than ``max_age`` (a whole number of grid intervals),
    "linear" interpolation between stored points at most ``max_age`` apart
    (isentrope.daemon.stores.grid). ``quantity`` and ``roles``: per quantity, then per role,
    overrides, with the historian's ``deadband`` in the role's plant unit.
    """

    interval: dt.timedelta = dt.timedelta(0)
    fill: str = "hold"
    max_age: dt.timedelta = dt.timedelta(hours=1, minutes=30)
    quantity: dict[str, ReadRule] = field(default_factory=dict)
    roles: dict[str, ReadRule] = field(default_factory=dict)

    def rule_of(self, role: str) -> tuple[str, dt.timedelta, float]:
        """(fill, max_age, deadband [plant unit]) of one role: the role's table, else its
        quantity's, else ``[read]``."""
        fill, age, band = self.fill, self.max_age, 0.0
        for rule in (self.quantity.get(ROLES[role][0]), self.roles.get(role)):
            if rule is None:
                continue
            fill = rule.fill if rule.fill is not None else fill
            age = rule.max_age if rule.max_age is not None else age
            band = rule.deadband if rule.deadband is not None else band
        return fill, age, band


@dataclass(frozen=True)
class Config:
    """One unit's whole configuration."""

    path: Path | None
    unit: UnitConfig
    store: StoreConfig
    roles: dict[str, RoleMapping]
    uncertainties: dict[str, RoleUncertainty]
    screening: ScreeningConfig = ScreeningConfig()
    steady: SteadyConfig = SteadyConfig()
    sections: SectionsConfig = SectionsConfig()
    baseline: BaselineConfig = BaselineConfig()
    alarms: AlarmsConfig = AlarmsConfig()
    economics: EconomicsConfig = field(default_factory=EconomicsConfig)
    schedule: ScheduleConfig = ScheduleConfig()
    read: ReadConfig = field(default_factory=ReadConfig)

    @property
    def read_grid(self):
        """The ``isentrope.daemon.stores.grid.ReadGrid`` of ``[read]`` for the mapped roles, or
        None when ``[read] interval`` is 0 (rows as stored)."""
        from isentrope.daemon.stores.grid import Fill, ReadGrid

        if self.read.interval <= dt.timedelta(0):
            return None
        fills = {}
        for role in self.roles:
            fill, age, _ = self.read.rule_of(role)
            fills[role] = Fill(fill, pd.Timedelta(age))
        return ReadGrid(
            pd.Timedelta(self.read.interval), fills, Fill(self.read.fill, pd.Timedelta(self.read.max_age))
        )

    @property
    def deadbands(self) -> dict[str, float]:
        """Role -> the historian's deadband in internal units (MPa, K, MW, kg/s, %), for the
        roles with a deadband above 0."""
        out = {}
        for role, m in self.roles.items():
            band = self.read.rule_of(role)[2]
            if band > 0:
                out[role] = _band_internal(band, m.unit)
        return out

    @property
    def mappings(self) -> tuple[RoleMapping, ...]:
        """The mapped roles in ``ROLES`` order."""
        return tuple(self.roles[r] for r in ROLES if r in self.roles)

    @property
    def unit_of(self) -> dict[str, str]:
        """Role -> plant unit."""
        return {r: m.unit for r, m in self.roles.items()}


# --------------------------------------------------------------------------------------
# where each key is written (for messages only)
# --------------------------------------------------------------------------------------
_HEADER = re.compile(r"^\s*\[\[?\s*([A-Za-z0-9_\-\"'][^\]]*?)\s*\]\]?\s*(#.*)?$")
_KEYLINE = re.compile(
    r"^\s*((?:[A-Za-z0-9_\-]+|\"[^\"]*\"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|\"[^\"]*\"|'[^']*'))*)\s*="
)
_STRINGS = re.compile(r"\"(?:[^\"\\]|\\.)*\"|'[^']*'")


def _split_key(text: str) -> tuple[str, ...]:
    parts = re.findall(r"\"((?:[^\"\\]|\\.)*)\"|'([^']*)'|([A-Za-z0-9_\-]+)", text)
    return tuple(a or b or c for a, b, c in parts)


def _key_lines(text: str) -> dict[tuple[str, ...], int]:
    """Key path -> first line number (1-based), from table headers and ``key =`` lines.

    A small scan, not a parser: good enough for error messages."""
    lines: dict[tuple[str, ...], int] = {}
    table: tuple[str, ...] = ()
    depth = 0  # open brackets/braces of a value spanning lines
    for number, raw in enumerate(text.splitlines(), start=1):
        line = _STRINGS.sub('""', raw).split("#", 1)[0]
        if depth > 0:
            depth += line.count("[") + line.count("{") - line.count("]") - line.count("}")
            continue
        m = _HEADER.match(raw)
        if m:
            table = _split_key(m.group(1))
            lines.setdefault(table, number)
            continue
        m = _KEYLINE.match(raw)
        if m:
            path = table + _split_key(m.group(1))
            lines.setdefault(path, number)
            rest = _STRINGS.sub('""', raw[m.end() :])
            rest = rest.split("#", 1)[0]
            depth = max(0, rest.count("[") + rest.count("{") - rest.count("]") - rest.count("}"))
    return lines


# --------------------------------------------------------------------------------------
# the reader: collects problems instead of stopping at the first
# --------------------------------------------------------------------------------------
_MISSING = object()


class _Reader:
    def __init__(self, source: str, text: str):
        self.source = source
        self.lines = _key_lines(text)
        self.problems: list[str] = []

    # -- messages ------------------------------------------------------------------------
    def line_of(self, path: tuple[str, ...]) -> int | None:
        """Line of ``path``, else of the first key under it, else of its nearest parent."""
        if path in self.lines:
            return self.lines[path]
        below = [n for k, n in self.lines.items() if k[: len(path)] == path]
        if below:
            return min(below)
        for n in range(len(path) - 1, 0, -1):
            if path[:n] in self.lines:
                return self.lines[path[:n]]
        return None

    def problem(self, path: tuple[str, ...], message: str) -> None:
        line = self.line_of(path)
        where = f"{self.source}:{line}" if line else self.source
        key = ".".join(path) if path else "(top level)"
        self.problems.append(f"{where}: {key}: {message}")

    def problems_for(self, path: tuple[str, ...]) -> bool:
        """Whether a problem was already reported at or under ``path``."""
        prefix = ": " + ".".join(path)
        return any(prefix in p for p in self.problems)

    # -- structure -----------------------------------------------------------------------
    def table(self, parent: dict, path: tuple[str, ...], required: bool = False) -> dict:
        value = parent.get(path[-1], _MISSING)
        if value is _MISSING:
            if required:
                self.problem(path, f"missing table [{'.'.join(path)}]")
            return {}
        if not isinstance(value, dict):
            self.problem(path, f"expected a table, found {_kind(value)}")
            return {}
        return value

    def unknown(self, data: dict, path: tuple[str, ...], allowed) -> None:
        allowed = list(allowed)
        for key in data:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
                hint = (
                    f"; did you mean '{close[0]}'?"
                    if close
                    else f"; known keys: {', '.join(sorted(allowed))}"
                )
                self.problem(path + (key,), f"unknown key{hint}")

    # -- values --------------------------------------------------------------------------
    def value(
        self,
        data: dict,
        path: tuple[str, ...],
        kind: str,
        default: Any = _MISSING,
        choices=None,
        low=None,
        high=None,
        low_open=False,
        high_open=False,
    ) -> Any:
        key = path[-1]
        raw = data.get(key, _MISSING)
        if raw is _MISSING:
            if default is _MISSING:
                self.problem(path, f"missing required key '{key}'")
                return None
            return default
        try:
            value = _convert(raw, kind)
        except ValueError as exc:
            self.problem(path, str(exc))
            return None if default is _MISSING else default
        if choices is not None and value not in choices:
            close = difflib.get_close_matches(str(value), [str(c) for c in choices], n=1, cutoff=0.6)
            hint = f"; did you mean '{close[0]}'?" if close else ""
            self.problem(path, f"expected one of {', '.join(repr(c) for c in choices)}, found {raw!r}{hint}")
            return None if default is _MISSING else default
        if low is not None or high is not None:
            number = value.total_seconds() if isinstance(value, dt.timedelta) else value
            bad_low = low is not None and (number <= low if low_open else number < low)
            bad_high = high is not None and (number >= high if high_open else number > high)
            if bad_low or bad_high:
                lo = "" if low is None else (f"> {low}" if low_open else f">= {low}")
                hi = "" if high is None else (f"< {high}" if high_open else f"<= {high}")
                self.problem(
                    path, f"expected a value {' and '.join(p for p in (lo, hi) if p)}, found {raw!r}"
                )
                return None if default is _MISSING else default
        return value


def _kind(value: Any) -> str:
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, (int, float)):
        return f"a number ({value!r})"
    if isinstance(value, str):
        return f"a string ({value!r})"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def _convert(raw: Any, kind: str) -> Any:
    if kind == "str":
        if not isinstance(raw, str):
            raise ValueError(f"expected a string, found {_kind(raw)}")
        return raw
    if kind == "bool":
        if not isinstance(raw, bool):
            raise ValueError(f"expected true or false, found {_kind(raw)}")
        return raw
    if kind == "int":
        if isinstance(raw, bool) or not isinstance(raw, int):
            raise ValueError(f"expected an integer, found {_kind(raw)}")
        return raw
    if kind == "float":
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            raise ValueError(f"expected a number, found {_kind(raw)}")
        if not math.isfinite(raw):
            raise ValueError(f"expected a finite number, found {raw!r}")
        return float(raw)
    if kind == "duration":
        if not isinstance(raw, str):
            raise ValueError(f'expected a duration string such as "15m", found {_kind(raw)}')
        return parse_duration(raw)
    if kind == "time":
        if isinstance(raw, (dt.datetime, dt.date)):
            ts = pd.Timestamp(raw)
        elif isinstance(raw, str):
            ts = parse_time(raw)
        else:
            raise ValueError(f"expected an ISO 8601 time, found {_kind(raw)}")
        if ts is pd.NaT or pd.isna(ts):
            raise ValueError(f"expected an ISO 8601 time, found {raw!r}")
        return ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    if kind == "date":
        if isinstance(raw, dt.datetime):
            return raw.date()
        if isinstance(raw, dt.date):
            return raw
        if isinstance(raw, str):
            try:
                return dt.date.fromisoformat(raw)
            except ValueError:
                raise ValueError(f"expected a date such as 2027-04-15, found {raw!r}") from None
        raise ValueError(f"expected a date, found {_kind(raw)}")
    if kind == "pair":
        if (
            not isinstance(raw, list)
            or len(raw) != 2
            or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in raw)
        ):
            raise ValueError(f"expected [low, high] (two numbers), found {raw!r}")
        lo, hi = float(raw[0]), float(raw[1])
        if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
            raise ValueError(f"expected [low, high] with low < high, found {raw!r}")
        return (lo, hi)
    if kind == "str_table":
        if not isinstance(raw, dict) or any(not isinstance(v, str) for v in raw.values()):
            raise ValueError(f'expected a table of strings such as {{ unit = "7" }}, found {raw!r}')
        return dict(raw)
    raise AssertionError(kind)


# --------------------------------------------------------------------------------------
# secrets
# --------------------------------------------------------------------------------------
_ENV_REF = re.compile(r"^\$\{([A-Za-z_][A-Za-z0-9_]*)\}$")


def _secret(r: _Reader, data: dict, path: tuple[str, ...], base_dir: Path, environ) -> Secret | None:
    """``key = "${ENV}"`` or ``key_file = "/path"``; a literal secret is refused."""
    key = path[-1]
    file_key = key + "_file"
    has_value, has_file = key in data, file_key in data
    if has_value and has_file:
        r.problem(path, f"give either '{key}' or '{file_key}', not both")
        return None
    if has_value:
        raw = data[key]
        if not isinstance(raw, str):
            r.problem(path, f'expected "${{ENV_NAME}}", found {_kind(raw)}')
            return None
        m = _ENV_REF.match(raw.strip())
        if not m:
            r.problem(
                path,
                'write secrets as "${ENV_NAME}" or use '
                f"'{file_key}'; a secret written in the file is refused",
            )
            return None
        name = m.group(1)
        if name not in environ:
            r.problem(path, f"environment variable {name} is not set")
            return None
        value = environ[name]
        if not value:
            r.problem(path, f"environment variable {name} is empty")
            return None
        return Secret(value, f"env:{name}")
    if has_file:
        raw = data[file_key]
        if not isinstance(raw, str):
            r.problem(path[:-1] + (file_key,), f"expected a file path, found {_kind(raw)}")
            return None
        p = Path(raw).expanduser()
        if not p.is_absolute():
            p = base_dir / p
        try:
            text = p.read_text(encoding="utf-8")
        except OSError as exc:
            r.problem(path[:-1] + (file_key,), f"cannot read {p}: {exc.strerror or exc}")
            return None
        value = text.splitlines()[0].strip() if text.strip() else ""
        if not value:
            r.problem(path[:-1] + (file_key,), f"{p} is empty")
            return None
        return Secret(value, f"file:{p}")
    return None


# --------------------------------------------------------------------------------------
# tables
# --------------------------------------------------------------------------------------
def _fields(cls) -> list[str]:
    return [f.name for f in dataclasses.fields(cls)]


def _read_unit(r: _Reader, top: dict) -> UnitConfig:
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


_STORE_KEYS = {
    "sqlite": {"kind", "path"},
    "influx2": {
        "kind",
        "url",
        "org",
        "bucket",
        "results_bucket",
        "token",
        "token_file",
        "verify_ssl",
        "ca_bundle",
        "timeout",
        "batch_size",
    },
    "influx1": {
        "kind",
        "url",
        "database",
        "retention_policy",
        "username",
        "password",
        "password_file",
        "token",
        "token_file",
        "verify_ssl",
        "ca_bundle",
        "timeout",
        "batch_size",
    },
}


def _read_ca_bundle(r: _Reader, d: dict, p: tuple[str, ...], base_dir: Path, verify: bool) -> Path | None:
    """``[store] ca_bundle``: a readable file, relative to the configuration's directory."""
    raw = r.value(d, p + ("ca_bundle",), "str", default=None)
    if raw is None:
        return None
    path = Path(raw).expanduser()
    if not path.is_absolute():
        path = base_dir / path
    if not verify:
        r.problem(p + ("ca_bundle",), "verify_ssl = false checks no certificate: give one of the two")
    try:
        with path.open("rb") as fh:
            head = fh.read(16 << 20)
    except OSError as exc:
        r.problem(p + ("ca_bundle",), f"cannot read {path}: {exc.strerror or exc}")
        return None
    if b"-----BEGIN CERTIFICATE-----" not in head:
        r.problem(
            p + ("ca_bundle",), f"{path} is not a PEM file of CA certificates (no BEGIN CERTIFICATE line)"
        )
    return path


def _read_store(r: _Reader, top: dict, base_dir: Path, environ) -> StoreConfig:
    p = ("store",)
    d = r.table(top, p, required=True)
    kind = r.value(d, p + ("kind",), "str", choices=STORE_KINDS) if d or "store" in top else None
    if kind is None:
        return StoreConfig(kind="sqlite")
    r.unknown(d, p, sorted(_STORE_KEYS[kind]))
    if kind == "sqlite":
        raw = r.value(d, p + ("path",), "str")
        path = None
        if raw is not None:
            path = Path(raw).expanduser()
            if not path.is_absolute():
                path = base_dir / path
            if not path.parent.is_dir():
                r.problem(p + ("path",), f"the directory {path.parent} does not exist (create it first)")
            elif path.is_dir():
                r.problem(p + ("path",), f"{path} is a directory; give the SQLite file in it")
        return StoreConfig(kind=kind, path=path)
    url = r.value(d, p + ("url",), "str")
    if url is not None and not re.match(r"^https?://[^/\s]+", url):
        r.problem(p + ("url",), f"expected an http:// or https:// URL, found {url!r}")
    verify = r.value(d, p + ("verify_ssl",), "bool", default=True)
    common = dict(
        url=url or "",
        verify_ssl=verify,
        ca_bundle=_read_ca_bundle(r, d, p, base_dir, verify),
        timeout=r.value(
            d,
            p + ("timeout",),
            "duration",
            default=dt.timedelta(seconds=DEFAULT_TIMEOUT_S),
            low=0,
            low_open=True,
        ),
        batch_size=r.value(d, p + ("batch_size",), "int", default=5000, low=1),
    )
    if kind == "influx2":
        org = r.value(d, p + ("org",), "str")
        bucket = r.value(d, p + ("bucket",), "str")
        results_bucket = r.value(d, p + ("results_bucket",), "str", default="")
        key_given = "results_bucket" in d  # given empty is a mistake; left out means 'bucket'
        for key, name in (("bucket", bucket), ("results_bucket", results_bucket if key_given else None)):
            if name is not None:
                try:
                    escape.check_name(name, key)
                except ValueError as exc:
                    r.problem(p + (key,), str(exc))
        token = _secret(r, d, p + ("token",), base_dir, environ)
        if token is None and "token" not in d and "token_file" not in d:
            r.problem(p + ("token",), "missing required key 'token' (or 'token_file')")
        return StoreConfig(
            kind=kind,
            org=org or "",
            bucket=bucket or "",
            results_bucket=results_bucket or "",
            token=token,
            **common,
        )
    database = r.value(d, p + ("database",), "str")
    token = _secret(r, d, p + ("token",), base_dir, environ)
    password = _secret(r, d, p + ("password",), base_dir, environ)
    username = r.value(d, p + ("username",), "str", default="")
    has_token = "token" in d or "token_file" in d
    has_password = "password" in d or "password_file" in d
    if has_token and (has_password or username):
        r.problem(p + ("token",), "give either 'token' or 'username'/'password', not both")
    if has_password and not username:
        r.problem(p + ("username",), "missing required key 'username' (a password is given)")
    return StoreConfig(
        kind=kind,
        database=database or "",
        retention_policy=r.value(d, p + ("retention_policy",), "str", default=""),
        username=username,
        token=token,
        password=password,
        **common,
    )


def _check_unit_name(r: _Reader, name: str, kind: str) -> None:
    """The unit name is a tag value of every result and part of the checkpoint and state
    names: refuse at load what the store would refuse at its first write."""
    from isentrope.daemon.stores import escape

    if not name or r.problems_for(("unit", "name")):
        return
    try:
        escape.check_name(name, "the unit name")
        if kind in ("influx1", "influx2"):
            escape.lp_tag_value(name)
            escape.influxql_string(name)
            escape.flux_string(name)
    except ValueError as exc:
        r.problem(("unit", "name"), f"the {kind} store cannot write it: {exc}")


def _check_role_names(r: _Reader, roles: dict[str, RoleMapping], kind: str) -> None:
    """Refuse at load a role's measurement, field or tag name that the store cannot write as it
    is read, naming the key (``isentrope.daemon.stores.escape``): on every store a control
    character (newline, tab, ...); on the InfluxDB stores also a backslash at the end or right
    before a comma, a space, an equals sign or (measurements) a double quote, which line
    protocol cannot write; on the Flux store a tag key ``$`` (``escape.flux_tag_key``).
    SQLite holds any other name (its SQL takes names as parameters or quoted identifiers)."""
    from isentrope.daemon.stores import escape

    influx = kind in ("influx1", "influx2")
    for role, m in roles.items():
        p = ("roles", role)
        field_key = p + ("field",) if m.field else p + ("tag",)
        checks = [
            (p + ("tag",), m.tag, escape.check_name),
            (p + ("measurement",), m.measurement, escape.lp_measurement if influx else escape.check_name),
            (field_key, m.field_name, escape.lp_field_key if influx else escape.check_name),
        ]
        for k, v in m.tags.items():
            checks += [
                (p + ("tags",), k, escape.lp_tag_key if influx else escape.check_name),
                (p + ("tags",), k, escape.flux_tag_key if kind == "influx2" else escape.check_name),
                (p + ("tags",), v, escape.lp_tag_value if influx else escape.check_name),
            ]
        for key, name, check in checks:
            if r.problems_for(key):
                continue
            try:
                check(name)
            except ValueError as exc:
                r.problem(key, f"the {kind} store cannot write it: {exc}")


def _units_module():
    """isentrope.calc.units, imported on first use."""
    from isentrope.calc import units

    return units


def _check_unit(r: _Reader, path: tuple[str, ...], role: str, unit: str) -> str | None:
    """The canonical unit name, or None after reporting why the unit does not fit the role."""
    units = _units_module()
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


_ROLE_KEYS = ["tag", "unit", "measurement", "field", "tags", "range", "uncertainty"]


def _read_roles(r: _Reader, top: dict) -> tuple[dict[str, RoleMapping], dict[str, RoleUncertainty]]:
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
            r.problem(rp, f"expected a table [roles.{role}], found {_kind(body)}")
            continue
        quantity = ROLES[role][0]
        r.unknown(body, rp, _ROLE_KEYS)
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


def _read_screening(r: _Reader, top: dict) -> ScreeningConfig:
    p = ("screening",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(ScreeningConfig))
    D = ScreeningConfig()
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


def _read_steady(r: _Reader, top: dict) -> SteadyConfig:
    p = ("steady",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(SteadyConfig))
    D = SteadyConfig()
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
    raw = d.get("r_filter", _MISSING)
    if raw is _MISSING:
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


def _read_sections(r: _Reader, top: dict, roles: dict) -> SectionsConfig:
    p = ("sections",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(SectionsConfig))
    D = SectionsConfig()
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
    raw = d.get("exhaust_loss_curve", _MISSING)
    curve = None
    if raw is not _MISSING:
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


def _read_baseline(r: _Reader, top: dict) -> BaselineConfig:
    p = ("baseline",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(BaselineConfig))
    D = BaselineConfig()
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


def _read_alarms(r: _Reader, top: dict) -> AlarmsConfig:
    p = ("alarms",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(AlarmsConfig))
    D = AlarmsConfig()
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


def _read_economics(r: _Reader, top: dict) -> EconomicsConfig:
    p = ("economics",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(EconomicsConfig))
    D = EconomicsConfig()
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
    sd = r.table(d, p + ("sensitivity",))
    r.unknown(sd, p + ("sensitivity",), SECTIONS)
    for sec in SECTIONS:
        sp = p + ("sensitivity", sec)
        body = r.table(sd, sp)
        r.unknown(body, sp, _fields(SensitivityConfig))
        if body:
            base = DEFAULT_SENSITIVITY.get(sec)
            values = [
                r.value(
                    body,
                    sp + (key,),
                    "float",
                    getattr(base, key) if base is not None else None,
                    low=0,
                    high=5,
                )
                for key in ("heat_rate_percent_per_point", "output_percent_per_point")
            ]
            if None in values:
                if not r.problems_for(sp):
                    r.problem(sp, "no default for this section: give both coefficients (with their source)")
                continue
            sens[sec] = SensitivityConfig(*values)
    overhaul: dict[str, OverhaulCase] = {}
    od = r.table(d, p + ("overhaul",))
    r.unknown(od, p + ("overhaul",), SECTIONS)
    for sec in SECTIONS:
        op = p + ("overhaul", sec)
        body = r.table(od, op)
        r.unknown(body, op, _fields(OverhaulCase))
        if body:
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


def _read_schedule(r: _Reader, top: dict) -> ScheduleConfig:
    p = ("schedule",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(ScheduleConfig))
    D = ScheduleConfig()
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


def _band_internal(band: float, unit: str) -> float:
    """A deadband (a difference of readings) in the plant ``unit`` in internal units: only the
    scale of the unit counts (a gauge offset or a zero shift cancels)."""
    units = _units_module()
    internal = units.INTERNAL_UNIT[units.quantity(unit)]
    kpa = units.STANDARD_ATMOSPHERE_KPA
    return float(units.convert(band, unit, internal, kpa) - units.convert(0.0, unit, internal, kpa))


def _read_rule(r: _Reader, d: dict, p: tuple[str, ...]) -> ReadRule:
    r.unknown(d, p, _fields(ReadRule))
    return ReadRule(
        fill=r.value(d, p + ("fill",), "str", None, choices=READ_FILLS),
        max_age=r.value(d, p + ("max_age",), "duration", None, low=0, low_open=True),
        deadband=r.value(d, p + ("deadband",), "float", None, low=0),
    )


def _read_read(r: _Reader, top: dict, roles: dict) -> ReadConfig:
    p = ("read",)
    d = r.table(top, p)
    r.unknown(d, p, _fields(ReadConfig))
    D = ReadConfig()
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


def _check_read_against(r: _Reader, cfg: ReadConfig, roles: dict, screening, steady, unit) -> None:
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
        internal = _band_internal(band, m.unit)
        if internal >= limits[role]:
            r.problem(
                _read_key(cfg, role, "deadband"),
                f"the deadband of {role} ({band:g} {m.unit}) is not below its permissible fluctuation in "
                f"[steady] ({limits[role]:g} in internal units, {internal:g} found): a reading that may "
                "move by its deadband unseen could never be judged steady",
            )


def _is_gauge(unit: str) -> bool:
    """Whether a (canonical) pressure unit is a gauge unit, needing the barometric pressure."""
    return bool(_units_module().UNITS[unit].gauge)


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


# --------------------------------------------------------------------------------------
# entry points
# --------------------------------------------------------------------------------------
def parse_config(
    text: str, source: str = "<config>", base_dir: Path | None = None, environ=None, path: Path | None = None
) -> Config:
    """Validate TOML text and build a ``Config``; raise ``ConfigError`` with every problem.

    ``base_dir`` resolves relative paths (the SQLite file, secret files); default the
    current directory. ``environ`` replaces ``os.environ`` for ``${ENV}`` secrets.
    """
    base_dir = Path(base_dir) if base_dir is not None else Path.cwd()
    environ = os.environ if environ is None else environ
    try:
        top = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column (\d+)\)", str(exc))
        where = f"{source}:{m.group(1)}" if m else source
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise ConfigError([f"{where}: not valid TOML: {msg}"]) from None
    r = _Reader(source, text)
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
        raise ConfigError(r.problems)
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


def load_config(path: str | os.PathLike, environ=None) -> Config:
    """Read and validate the TOML file at ``path``; raise ``ConfigError`` with every problem.

    Relative paths inside the file (SQLite file, secret files) are relative to the file.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise ConfigError([f"{p}: cannot read the configuration: {exc.strerror or exc}"]) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ConfigError([f"{p}: not UTF-8 text ({exc.reason} at byte {exc.start})"]) from None
    return parse_config(text, source=str(p), base_dir=p.resolve().parent, environ=environ, path=p)
