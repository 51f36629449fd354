"""Stores: where raw plant samples are read and results, checkpoints and alarm state written."""

from isentrope.daemon.stores.base import FatalStoreError, Store, TemporaryStoreError

__all__ = ["Store", "TemporaryStoreError", "FatalStoreError"]
