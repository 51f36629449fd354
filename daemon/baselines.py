"""The unit's baseline models for the worker: the saved ones, or fitted once on the reference
period's steady windows and saved (state ``baseline/<unit>``)."""

from __future__ import annotations

import logging
from collections.abc import Callable

import pandas as pd

from isentrope.calc.baseline import BaselineModel
from isentrope.daemon.series import WINDOWS_MEASUREMENT
from isentrope.daemon.timeutil import utc

logger = logging.getLogger("isentrope.worker")


def reference_period(config) -> tuple[pd.Timestamp, pd.Timestamp] | None:
    """The reference period ``[baseline] start..end`` of ``config`` (UTC), None when not
    configured (or no configuration)."""
    cfg = getattr(config, "baseline", None)
    if cfg is None or cfg.start is None or cfg.end is None:
        return None
    return utc(cfg.start), utc(cfg.end)


class Baselines:
    """The baseline models one worker uses (see ``for_chunk``).

    Parameters
    ----------
    store : isentrope.daemon.stores.base.Store
    pipeline : isentrope.daemon.pipeline.Pipeline
        Fits the models (``fit_baselines``) and says how (``baseline_notes``).
    unit : str
        The unit; the state is ``baseline/<unit>``.
    retry : callable
        ``retry(fn, what)``: the worker's retrying call of a store operation.
    period : callable
        Returns the reference period (``reference_period``) or None.
    """

    def __init__(self, store, pipeline, unit: str, retry: Callable, period: Callable):
        self.store = store
        self.pipeline = pipeline
        self.unit = unit
        self._retry = retry
        self.period = period
        self.models: dict | None = None
        self._change_said = False

    @property
    def state_name(self) -> str:
        return f"baseline/{self.unit}"

    def fit_reads_windows(self, chunk_start: pd.Timestamp) -> bool:
        """Whether ``for_chunk(chunk_start)`` may read the steady windows just written."""
        period = self.period()
        return self.models is None and period is not None and chunk_start >= period[1]

    def for_chunk(self, chunk_start: pd.Timestamp) -> dict:
        """Baseline models for a chunk starting at ``chunk_start`` (section -> model).

        A model saved in the store (state ``baseline/<unit>``) is used as it is. Otherwise,
        once the reference period ``[baseline] start..end`` has been processed (the chunk
        starts at or after its end), the models are fitted on the steady windows written for
        that period and saved. Windows of the reference period itself get no deviation (see
        ``Pipeline``), so the results do not depend on the cycle in which the fit happened.
        """
        if self.models is not None:
            return self.models
        saved = self._retry(
            lambda: self.store.load_state(self.state_name),
            f"loading state {self.state_name!r}",
        )
        period = self.period()
        if saved and saved.get("models"):
            self.models = {
                sec: BaselineModel.from_json(text) for sec, text in sorted(saved["models"].items())
            }
            self._say_if_changed(saved)
            return self.models
        if period is None or chunk_start < period[1]:
            return {}

        ref_start, ref_end = period
        windows = self._retry(
            lambda: self.store.read_results(WINDOWS_MEASUREMENT, ref_start, ref_end, {"unit": self.unit}),
            f"reading {WINDOWS_MEASUREMENT} {ref_start.isoformat()} to {ref_end.isoformat()}",
        )
        models, problems = self.pipeline.fit_baselines(windows)
        for line in self.pipeline.baseline_notes:
            logger.info(
                "unit %s: baseline over %s to %s: %s",
                self.unit,
                ref_start.isoformat(),
                ref_end.isoformat(),
                line,
            )
        if not len(windows):
            logger.warning(
                "unit %s: no steady windows are stored for the reference period %s to %s, so no "
                "baseline is fitted and no deviations are computed; process that period first "
                "(isentrope backfill --start %s --end %s), then run this one again with --refit",
                self.unit,
                ref_start.isoformat(),
                ref_end.isoformat(),
                ref_start.isoformat(),
                ref_end.isoformat(),
            )
        for line in problems:
            logger.warning(
                "unit %s: baseline over %s to %s not fitted for section %s; no deviations "
                "for it until the worker restarts with a usable [baseline] period",
                self.unit,
                ref_start.isoformat(),
                ref_end.isoformat(),
                line,
            )
        if models:
            state = {
                "models": {sec: m.to_json() for sec, m in sorted(models.items())},
                "reference_start": ref_start.isoformat(),
                "reference_end": ref_end.isoformat(),
            }
            self._retry(
                lambda: self.store.save_state(self.state_name, state),
                f"saving state {self.state_name!r}",
            )
            logger.info(
                "unit %s: baseline fitted on %d steady windows (%s to %s) for %s",
                self.unit,
                len(windows),
                ref_start.isoformat(),
                ref_end.isoformat(),
                ", ".join(sorted(models)),
            )
        self.models = models  # also when empty: the reference windows are final, one try is enough
        return models

    def warn_if_changed(self) -> bool:
        """Log a warning when the saved baseline models were fitted on another period than
        the configured ``[baseline]``; True when they were (the saved models are what the
        worker uses). Called by the commands at start, so a resumed backfill with nothing
        left to do says it too."""
        saved = self._retry(
            lambda: self.store.load_state(self.state_name),
            f"loading state {self.state_name!r}",
        )
        return bool(saved and saved.get("models")) and self._say_if_changed(saved)

    def _say_if_changed(self, saved: dict) -> bool:
        period = self.period()
        fitted_on = (saved.get("reference_start"), saved.get("reference_end"))
        if period is None or fitted_on == (period[0].isoformat(), period[1].isoformat()):
            return False
        if not self._change_said:
            logger.warning(
                "unit %s: [baseline] is %s to %s, but the saved models (state %r) were fitted on "
                "%s to %s; the saved models are used. To fit them on the configured period, run "
                "`isentrope backfill --refit` from the reference period's end on",
                self.unit,
                period[0].isoformat(),
                period[1].isoformat(),
                self.state_name,
                fitted_on[0],
                fitted_on[1],
            )
            self._change_said = True
        return True
