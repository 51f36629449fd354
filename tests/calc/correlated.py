"""Deviation series with correlated window-to-window noise, for the trend and step checks.

Invented for the checks (no source): windows 1-5 h apart (uniform), AR(1) deviations between
successive windows with lag-1 correlation ``phi`` and marginal standard deviation ``sd``
[points], optionally plus a daily wave of amplitude ``daily`` [points] at a random phase
(cooling water, ambient), a slope [points per 1000 h] and a step [points] at a window.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

#: The correlation structures of the checks: (label, phi, daily wave amplitude [points]).
SETTINGS = [
    ("iid", 0.0, 0.0),
    ("ar1 0.5", 0.5, 0.0),
    ("ar1 0.9", 0.9, 0.0),
    ("ar1 0.9 + daily", 0.9, 0.3),
]

#: Marginal standard deviation of the AR(1) part [points] (the middle of 0.3-0.4).
SD = 0.35


def correlated_series(seeds, n, phi, *, sd=SD, daily=0.0, slope=0.0, step=0.0, step_at=None):
    """Hours [h] and deviations [points], one row per seed (arrays of shape (seeds, n))."""
    rng = np.random.default_rng([int(seeds), int(n), int(round(phi * 1000)), int(round(daily * 1000))])
    hours = np.cumsum(rng.uniform(1.0, 5.0, (seeds, n)), axis=1)
    e = rng.standard_normal((seeds, n))
    e[:, 1:] *= np.sqrt(1.0 - phi * phi)  # stationary from the first window
    u = lfilter([1.0], [1.0, -phi], e, axis=1)
    d = sd * u + slope * hours / 1000.0
    if daily:
        d += daily * np.sin(2.0 * np.pi * hours / 24.0 + rng.uniform(0.0, 2.0 * np.pi, (seeds, 1)))
    if step_at is not None:
        d[:, step_at:] += step
    return hours, d
