"""The progress bar of the commands that run the worker over a span of history (``backfill``,
``demo``): on stderr, in hours of history done."""

from __future__ import annotations

import sys

import pandas as pd
from tqdm import tqdm


def hours_bar(start: pd.Timestamp, end: pd.Timestamp, done: pd.Timestamp | None, desc: str, disable: bool):
    """A progress bar on stderr over ``[start, end]`` in hours, already at the checkpoint ``done``
    (None: at the start). Returns the bar (to close) and ``progress(s, e)`` for
    ``Worker.run_cycle``, which moves it on by the hours of the chunk ``[s, e)``."""
    total_h = (end - start).total_seconds() / 3600.0
    done_h = 0.0 if done is None else min(total_h, max(0.0, (done - start).total_seconds() / 3600.0))
    bar = tqdm(
        total=round(total_h, 3),
        initial=round(done_h, 3),
        unit="h",
        file=sys.stderr,
        disable=disable,
        desc=desc,
        dynamic_ncols=True,
    )

    def progress(s, e):
        bar.update(round((e - s).total_seconds() / 3600.0, 3))

    return bar, progress
