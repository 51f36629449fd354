"""One worker per unit and store: the lease a writing command holds while it runs.

``run``, ``backfill`` (``--refit`` included) and ``fleet-backfill`` write results, alarm
events, checkpoints and state; two of them on one unit and store would both evaluate the
alarm machines and write their events twice. Each takes the unit's lease on its store
(``Store.acquire_lease``) before it writes anything, renews it from a background thread every
third of ``[schedule] lease`` and releases it at the end. A second one is refused with
``UnitBusyError`` (exit code 6) naming the holder. ``import-csv`` takes none: it writes raw
samples only, which a worker reads as it reads a historian that is being written, and writing
the same file twice writes the same samples. A holder that finds on renewal that another has
taken the unit (its own lease had expired, e.g. the process was frozen for longer than the
lease) stops its worker after the chunk in progress and exits 6 as well.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable

import pandas as pd

from isentrope.daemon.stores.base import LeaseHolder, StoreError, UnitBusyError

logger = logging.getLogger("isentrope.lease")


class UnitLease:
    """Hold ``unit`` on ``store`` for ``command`` (a context manager).

    ``on_lost`` is called (from the renewal thread) when the unit was taken over, or at once
    when it is set after that; ``lost`` then holds the ``UnitBusyError`` to raise once the
    worker has stopped (``check``).
    """

    def __init__(
        self,
        store,
        unit: str,
        command: str,
        lease: pd.Timedelta,
        on_lost: Callable[[UnitBusyError], None] | None = None,
    ):
        self.store, self.unit, self.lease = store, unit, pd.Timedelta(lease)
        self.holder = LeaseHolder.this_process(command)
        self.lost: UnitBusyError | None = None
        self._guard = threading.Lock()
        self._on_lost = on_lost
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    @property
    def on_lost(self) -> Callable[[UnitBusyError], None] | None:
        return self._on_lost

    @on_lost.setter
    def on_lost(self, fn: Callable[[UnitBusyError], None] | None) -> None:
        with self._guard:
            self._on_lost = fn
            lost = self.lost
        if lost is not None and fn is not None:
            fn(lost)

    def __enter__(self) -> UnitLease:
        self.store.acquire_lease(self.unit, self.holder, self.lease)
        self._thread = threading.Thread(target=self._keep, name=f"lease/{self.unit}", daemon=True)
        self._thread.start()
        return self

    def _keep(self) -> None:
        every = max(self.lease.total_seconds() / 3.0, 0.05)
        while not self._stop.wait(every):
            try:
                self.store.renew_lease(self.unit, self.holder, self.lease)
            except UnitBusyError as exc:
                logger.error("unit %s: %s", self.unit, exc)
                with self._guard:
                    self.lost = exc
                    fn = self._on_lost
                if fn is not None:
                    fn(exc)
                return
            except (StoreError, OSError) as exc:  # the store is away: the worker sees it too
                logger.warning("unit %s: could not renew the lease (will retry): %s", self.unit, exc)

    def check(self) -> None:
        """Raise the ``UnitBusyError`` of a lost lease, if it was lost."""
        if self.lost is not None:
            raise self.lost

    def __exit__(self, *exc) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if self.lost is None:
            try:
                self.store.release_lease(self.unit, self.holder)
            except (StoreError, OSError) as err:  # it expires by itself
                logger.warning("unit %s: could not release the lease: %s", self.unit, err)
