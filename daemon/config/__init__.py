"""The configuration of one unit: a TOML file read with tomllib, validated before any I/O.

``load_config(path) -> Config`` reads the file, checks every table and key, and raises
``isentrope.daemon.errors.ConfigError`` listing *every* problem at once, each as
``<file>:<line>: <key>: <what is wrong>``. Nothing here opens a store connection.

The package: the model, the reader, the secrets, each table's rules and the loading:

* ``model``: the dataclass tree (``Config``, ``UnitConfig``, ``StoreConfig``, ... one per
  table; these names are stable, other modules build on them) and the defaults.
* ``reader``: ``TableReader``, the generic TOML reader (key lines, value kinds, bounds,
  collected problems).
* ``secrets``: ``Secret`` (never shown in ``repr``/``str``; ``reveal()`` returns it) and
  reading a secret, ``"${ENV_NAME}"`` or a ``*_file`` key naming a file whose first line is
  the secret; a secret written literally in the file is refused.
* ``tables``: what each table holds and its rules. ``[store]`` holds ``kind`` and the options
  that kind's store class declares (``isentrope.daemon.stores.options``): each store owns its
  keys, defaults and rules.
* ``load``: ``load_config`` and ``parse_config``.

Durations are strings ("15m") and times ISO 8601 (naive means UTC), both of the grammar of
``isentrope.daemon.timeutil``. ``deploy/example.toml`` documents every key with its default.
Units of each role are checked against ``isentrope.calc.units.KNOWN_UNITS`` (accepted
spellings are stored under their canonical name, "barg" -> "bar(g)").
"""

from isentrope.daemon.config.load import load_config, parse_config
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
)
from isentrope.daemon.config.reader import TableReader
from isentrope.daemon.config.secrets import Secret
from isentrope.daemon.config.tables import (
    LEASE_SHORTEST,
    ROLE_KEYS,
    SCHEDULE_LONGEST,
    SCHEDULE_WHY,
    store_keys,
)
from isentrope.daemon.errors import ConfigError

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
    "STORE_KINDS",
    "ConfigError",
    "DEFAULT_SENSITIVITY",
    "DEFAULT_UNCERTAINTY",
    "FLATLINE_TOLERANCE_MAX",
    "LEASE_SHORTEST",
    "READ_FILLS",
    "READ_QUANTITIES",
    "ROLE_KEYS",
    "SCHEDULE_LONGEST",
    "SCHEDULE_WHY",
    "TableReader",
    "store_keys",
]
