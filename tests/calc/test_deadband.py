"""Readings held by an exception-reporting historian (isentrope.daemon.stores.grid): the
deadband is the noise floor of the PTC 6 steadiness test (calc.steady) and raises the spike
floor of screening (calc.quality). The histories are invented (a fictional 600 MW unit); the
limits are ASME PTC 6-2004 Table 3-1 as listed in REFERENCES.md (4 K for throttle
temperature); the spike floor of a temperature, 2 K, is calc.quality.SPIKE_FLOOR (common
practice, no source).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from isentrope.calc import quality, steady

RATING = 600.0  # [MW], invented


def _held(n=120, seed=5):
    """Two hours at one minute, every role with live noise except the throttle temperature,
    which the historian held at one value the whole time (it never left its deadband)."""
    rng = np.random.default_rng(seed)
    idx = pd.date_range("2031-06-01", periods=n, freq="1min", tz="UTC", name="time")
    return pd.DataFrame(
        {
            "throttle_p": 16.55 + rng.normal(0, 0.01, n),
            "throttle_t": np.full(n, 811.15),
            "hot_reheat_t": 811.15 + rng.normal(0, 0.5, n),
            "condenser_p": 0.005 + rng.normal(0, 0.00001, n),
            "gross_output": 450.0 + rng.normal(0, 0.4, n),
        },
        index=idx,
    )


def _tag(frame, **kw):
    return steady.tag_steady(frame, rating_mw=RATING, return_details=True, **kw)


def test_a_held_value_fluctuates_by_its_deadband_not_by_nothing():
    frame = _held()
    plain = _tag(frame)
    dev = plain.details["throttle_t_deviation"].dropna()
    assert (dev < 1e-9).all()  # held: no fluctuation seen at all (round-off of the running mean)
    held = _tag(frame, deadband={"throttle_t": 1.5})
    dev = held.details["throttle_t_deviation"].dropna()
    assert (dev == 1.5).all()  # counted as moving by its deadband [K]
    assert held.steady.sum() == plain.steady.sum() > 0  # 1.5 K is inside the 4 K limit
    # a deadband as wide as the limit leaves nothing steady: the reading could have moved by the
    # whole permissible fluctuation unseen
    wide = _tag(frame, deadband={"throttle_t": 4.5})
    assert wide.steady.sum() == 0


def test_the_deadband_does_not_narrow_a_reading_that_moves_more():
    frame = _held()
    frame["throttle_t"] = 811.15 + np.random.default_rng(9).normal(0, 0.8, len(frame))
    plain = _tag(frame)
    held = _tag(frame, deadband={"throttle_t": 0.3})
    a = plain.details["throttle_t_deviation"].dropna()
    b = held.details["throttle_t_deviation"].dropna()
    assert (b == np.maximum(a, 0.3)).all() and (a > 0.3).mean() > 0.9
    assert held.steady.equals(plain.steady)


def test_the_spike_floor_rises_to_two_deadbands():
    frame = _held()
    frame.iloc[60, frame.columns.get_loc("throttle_t")] = 811.15 + 2.2  # one stored excursion [K]
    plain = quality.screen(frame, flatline=None)
    assert plain.flags["throttle_t"].iloc[60] & quality.Reason.SPIKE  # 2.2 K over the 2 K floor
    held = quality.screen(frame, flatline=None, deadband={"throttle_t": 1.2})
    assert not held.flags["throttle_t"].iloc[60] & quality.Reason.SPIKE  # floor 2.4 K
    bigger = frame.copy()
    bigger.iloc[60, bigger.columns.get_loc("throttle_t")] = 811.15 + 3.0
    assert quality.screen(bigger, flatline=None, deadband={"throttle_t": 1.2}).flags["throttle_t"].iloc[
        60
    ] & (quality.Reason.SPIKE)
    with pytest.raises(ValueError, match="deadband of throttle_t"):
        quality.screen(frame, deadband={"throttle_t": -1.0})
