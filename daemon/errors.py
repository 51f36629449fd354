"""Exceptions that the command line maps onto exit codes."""

from __future__ import annotations

from isentrope.daemon.stores.base import (
    AuthorizationError,
    CertificateError,
    FatalStoreError,
    StoreError,
    TemporaryStoreError,
    UnitBusyError,
)

__all__ = [
    "ConfigError",
    "AuthorizationError",
    "StoreError",
    "TemporaryStoreError",
    "FatalStoreError",
    "CertificateError",
    "EXIT_OK",
    "EXIT_OTHER",
    "EXIT_CONFIG",
    "EXIT_UNREACHABLE",
    "EXIT_BUSY",
    "UnitBusyError",
]

EXIT_OK = 0
EXIT_OTHER = 1
EXIT_CONFIG = 2
EXIT_UNREACHABLE = 3
#: Another worker holds the unit on this store (isentrope.daemon.lease); 4 and 5 are
#: ``isentrope status``'s lagging and never-ran.
EXIT_BUSY = 6


class ConfigError(Exception):
    """The configuration is invalid. ``problems`` lists every problem found, one line each."""

    def __init__(self, problems: list[str] | str):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("; ".join(self.problems))

    def __str__(self) -> str:
        if len(self.problems) == 1:
            return self.problems[0]
        return f"{len(self.problems)} configuration problems:\n" + "\n".join(f"  {p}" for p in self.problems)
