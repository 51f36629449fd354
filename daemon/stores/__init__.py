"""Stores: where raw plant samples are read and results, checkpoints and alarm state written."""

from isentrope.daemon.stores.base import (
    AuthorizationError,
    FatalStoreError,
    LeaseHolder,
    Store,
    TemporaryStoreError,
    UnitBusyError,
)

#: ``[store] kind`` -> "module:class" of the implementation (imported on first use).
STORE_KINDS = {
    "sqlite": "isentrope.daemon.stores.sqlite:SqliteStore",
    "influx2": "isentrope.daemon.stores.influx2:Influx2Store",
    "influx1": "isentrope.daemon.stores.influx1:Influx1Store",
}


def store_class(kind: str) -> type[Store]:
    """The class of a store kind ("sqlite", "influx2", "influx1")."""
    import importlib

    if kind not in STORE_KINDS:
        raise ValueError(f"unknown store kind {kind!r}; valid kinds: {', '.join(STORE_KINDS)}")
    module, cls = STORE_KINDS[kind].split(":")
    return getattr(importlib.import_module(module), cls)


def open_store(kind: str, **options) -> Store:
    """Open a store by kind ("sqlite", "influx2", "influx1") with its constructor's options."""
    return store_class(kind)(**options)


__all__ = [
    "AuthorizationError",
    "LeaseHolder",
    "UnitBusyError",
    "Store",
    "TemporaryStoreError",
    "FatalStoreError",
    "open_store",
    "store_class",
    "STORE_KINDS",
]
