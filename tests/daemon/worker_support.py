"""Shared helpers of the pipeline, worker and fault tests: a unit configuration written as TOML
for a store, and short synthetic histories (isentrope.daemon.synthetic, fictional unit)."""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pandas as pd

from isentrope.daemon import synthetic

START = pd.Timestamp("2025-03-03", tz="UTC")


@functools.lru_cache(maxsize=8)
def history(days: float = 1.0, faults: bool = False, seed: int = 11, freq: str = "2min") -> pd.DataFrame:
    """A short synthetic history in internal units (cached; callers must not modify it)."""
    frame, _ = synthetic.generate(start=START, days=days, seed=seed, faults=faults, freq=freq)
    return frame


def plant_history(days: float = 1.0, faults: bool = False, seed: int = 11, freq: str = "2min") -> pd.DataFrame:
    """The same history in the plant units of the synthetic tag mapping."""
    return synthetic.to_plant_units(history(days, faults, seed, freq))


def mappings():
    return synthetic.role_mappings()


def store_toml(kind: str, **options) -> str:
    lines = ["[store]", f'kind = "{kind}"']
    for k, v in options.items():
        lines.append(f"{k} = {v!r}" if not isinstance(v, str) else f'{k} = "{v}"')
    return "\n".join(lines)


def write_config(path: Path, store: str, *, schedule: str = "", extra: str = "") -> Path:
    """A complete configuration of the fictional unit, with the given [store] table."""
    text = f"""
[unit]
name = "Greywater Bend 2"
rating_mw = 520.0
online_mw = 60.0

{store}

{synthetic.tag_map_toml()}

[steady]
window = "30m"
min_length = "20m"
max_gap = "5m"
max_length = "1h"

[schedule]
interval = "5m"
settle = "2m"
lookback = "30m"
chunk = "6h"
retries = 2
backoff = "1s"
backoff_max = "2s"
{schedule}

{extra}
"""
    path.write_text(text)
    return path


def assert_same_results(a: pd.DataFrame, b: pd.DataFrame) -> None:
    """Two result frames read back from stores hold the same rows and values."""
    a = a.sort_index().sort_index(axis=1)
    b = b.sort_index().sort_index(axis=1)
    assert list(a.columns) == list(b.columns)
    assert a.index.equals(b.index), (a.index.difference(b.index), b.index.difference(a.index))
    for c in a.columns:
        x, y = a[c].to_numpy(), b[c].to_numpy()
        if x.dtype.kind in "fc" or y.dtype.kind in "fc":
            np.testing.assert_array_equal(x.astype(float), y.astype(float), err_msg=c)
        else:
            assert (x == y).all(), c
