"""The configuration as data: one frozen dataclass per table, built by ``load_config``.

These names are stable; other modules build on them:

* ``Config``: ``path``, ``unit``, ``store``, ``roles`` (role -> ``RoleMapping``),
  ``uncertainties`` (role -> standard uncertainty, see ``RoleUncertainty``), ``screening``,
  ``steady``, ``sections``, ``baseline``, ``alarms``, ``economics``, ``schedule``, ``read``;
  the property ``mappings`` (tuple of ``RoleMapping`` in ``ROLES`` order), ``read_grid``
  (the ``ReadGrid`` of the worker's reads, None for rows as stored) and ``deadbands``.
* ``UnitConfig``: ``name``, ``plant``, ``rating_mw``, ``online_mw``.
* ``StoreConfig``: ``kind`` (one of ``STORE_KINDS``) and ``options``, the kind's settings as
  its store class declares them; ``open_options()`` gives the keyword arguments for
  ``isentrope.daemon.stores.open_store(kind, **options)`` with secrets revealed; ``open()``
  calls it.
* ``RoleUncertainty``: ``value`` and ``basis`` ("percent_of_reading" for pressure, power,
  flow; "kelvin" for temperature; "percent_points" for valve position).
* ``ScreeningConfig``, ``SteadyConfig``, ``SectionsConfig``, ``BaselineConfig``,
  ``AlarmsConfig``, ``SensitivityConfig``, ``OverhaulCase``, ``EconomicsConfig``,
  ``ScheduleConfig``, ``ReadConfig`` (with ``ReadRule`` per quantity and per role): one per
  table, fields and defaults as in ``deploy/example.toml``.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from isentrope.calc import units
from isentrope.daemon.config.secrets import Secret
from isentrope.daemon.roles import ROLES, RoleMapping
from isentrope.daemon.stores import STORE_KINDS as _STORE_CLASSES
from isentrope.daemon.stores import open_store, store_class
from isentrope.daemon.stores.grid import Fill, ReadGrid

#: ``[store] kind`` values: the kinds ``daemon.stores`` implements.
STORE_KINDS = tuple(_STORE_CLASSES)


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
    """Where raw samples are read and results written: ``kind`` and ``options``, the values of
    the kind's ``[store]`` keys (``OPTIONS`` of its class in ``isentrope.daemon.stores``; see
    ``deploy/example.toml``), defaults filled in, secrets as ``Secret``, paths as ``Path``,
    durations as ``timedelta``. Each option also reads as an attribute: ``store.path``,
    ``store.token``, ``store.results_bucket``.
    """

    kind: str
    options: dict[str, Any] = field(default_factory=dict)

    def __getattr__(self, name: str) -> Any:
        options = self.__dict__.get("options", {})
        if name in options:
            return options[name]
        raise AttributeError(f"a {self.__dict__.get('kind')!r} store has no option {name!r}")

    def open(self, create: bool = True):
        """Open the configured store (the first I/O; call only after validation).

        ``create=False`` refuses to create a missing store (``FatalStoreError``, e.g. a
        SQLite file), for commands that only read.
        """
        options = self.open_options()
        if not create:
            store_class(self.kind).refuse_to_create(options)
        return open_store(self.kind, **options)

    def open_options(self) -> dict[str, Any]:
        """Keyword arguments for ``open_store(kind, **options)``: secrets revealed, durations
        in seconds [s], paths as text; options that are None or "" are left out (the
        constructor's default applies)."""
        opts: dict[str, Any] = {}
        for name, value in self.options.items():
            if isinstance(value, Secret):
                value = value.reveal()
            elif isinstance(value, dt.timedelta):
                value = value.total_seconds()
            elif isinstance(value, Path):
                value = str(value)
            if value is not None and value != "":
                opts[name] = value
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
                out[role] = band_internal(band, m.unit)
        return out

    @property
    def mappings(self) -> tuple[RoleMapping, ...]:
        """The mapped roles in ``ROLES`` order."""
        return tuple(self.roles[r] for r in ROLES if r in self.roles)

    @property
    def unit_of(self) -> dict[str, str]:
        """Role -> plant unit."""
        return {r: m.unit for r, m in self.roles.items()}


def band_internal(band: float, unit: str) -> float:
    """A deadband (a difference of readings) in the plant ``unit`` in internal units: only the
    scale of the unit counts (a gauge offset or a zero shift cancels)."""
    internal = units.INTERNAL_UNIT[units.quantity(unit)]
    kpa = units.STANDARD_ATMOSPHERE_KPA
    return float(units.convert(band, unit, internal, kpa) - units.convert(0.0, unit, internal, kpa))
