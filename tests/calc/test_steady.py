"""Checks of isentrope.calc.steady: PTC 6 fluctuation windows and the Cao & Rhinehart R statistic.

The load histories are invented (a fictional 600 MW unit); the limits are those of ASME PTC 6-2004
Table 3-1 as listed in REFERENCES.md; the R statistic is checked against its defining recursion
(Cao & Rhinehart 1995) written out as a plain loop, and against its expected value of about 1 on
white noise (Cao & Rhinehart 1995: R near 1 when steady).
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from isentrope.calc import steady
from isentrope.calc.steady import r_statistic, tag_steady

RATING = 600.0  # invented rating of the fictional unit [MW]


def _index(n, start="2031-06-01 00:00"):
    return pd.date_range(start, periods=n, freq="1min", tz="UTC", name="time")


def _history(load, seed=3):
    """Frame with the given load [MW] per minute and steady-looking other roles (invented noise)."""
    load = np.asarray(load, dtype=float)
    n = len(load)
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "throttle_p": 16.55 + rng.normal(0, 0.01, n),
            "throttle_t": 811.15 + rng.normal(0, 0.5, n),
            "hot_reheat_t": 811.15 + rng.normal(0, 0.5, n),
            "condenser_p": 0.005 + rng.normal(0, 0.00001, n),
            "gross_output": load + rng.normal(0, 0.4, n),
        },
        index=_index(n),
    )


def _ramp_then_plateau():
    """2 h at 300 MW, 40 min ramp at 5 MW/min to 500 MW, 4 h at 500 MW (invented)."""
    return np.concatenate([np.full(120, 300.0), np.linspace(300.0, 500.0, 41)[1:], np.full(240, 500.0)])


RAMP = slice(120, 160)  # ramp samples


def _windows_overlap(windows, start, end):
    return ((windows["start"] <= end) & (windows["end"] >= start)).any()


@pytest.mark.parametrize("method", ["ptc6", "r_statistic"])
def test_ramp_then_plateau(method):
    f = _history(_ramp_then_plateau())
    res = tag_steady(f, method=method, rating_mw=RATING, return_details=True)
    s = res.steady.to_numpy()
    idx = f.index
    # With a +/-1 % of rating band (6 MW) a 5 MW/min ramp leaves the band within about two
    # minutes; keep 3 minutes at either end of the ramp out of the check.
    inner_start, inner_end = idx[RAMP.start + 3], idx[RAMP.stop - 3]
    assert not s[RAMP.start + 3 : RAMP.stop - 3].any()
    assert not _windows_overlap(res.windows, inner_start, inner_end)
    # most of each plateau is steady, and each plateau gives windows. The R statistic's
    # variance filters (lambda2 = 0.1) remember the ramp for a while: its lag of about
    # 20 MW against 0.4 MW of noise takes some 70-100 samples to decay below R = 2.
    settle = 200 if method == "ptc6" else 260
    assert s[40:115].mean() > 0.9
    assert s[settle:].mean() > 0.9
    assert _windows_overlap(res.windows, idx[0], idx[119])
    assert _windows_overlap(res.windows, idx[200], idx[-1])
    # windows are at most 1 h and at least 30 min long, sorted, not overlapping
    w = res.windows
    assert ((w["end"] - w["start"]) <= pd.Timedelta("1h")).all()
    assert ((w["end"] - w["start"]) >= pd.Timedelta("30min")).all()
    assert (w["start"].iloc[1:].to_numpy() > w["end"].iloc[:-1].to_numpy()).all()
    assert res.details is not None and "usable" in res.details


def test_plateau_gives_several_windows_with_their_means():
    f = _history(np.full(300, 450.0))
    res = tag_steady(f, rating_mw=RATING)
    w = res.windows
    assert len(w) == 5  # 5 h cut at 1 h
    for k, row in w.iterrows():
        members = f[res.window_id == k]
        assert row["n_samples"] == len(members)
        assert row["start"] == members.index[0] and row["end"] == members.index[-1]
        for col in f.columns:
            assert row[col] == pytest.approx(members[col].mean(), rel=1e-12)
    assert list(w.columns[:3]) == ["start", "end", "n_samples"]
    assert set(f.columns) <= set(w.columns)
    # a longer max_length keeps it as fewer windows
    assert len(tag_steady(f, rating_mw=RATING, max_length="3h").windows) == 2


def test_offline_unit_is_never_steady():
    f = _history(np.full(240, 0.3))  # breaker open: a few hundred kW of noise, invented
    f["gross_output"] = np.abs(f["gross_output"])
    for method in ("ptc6", "r_statistic"):
        res = tag_steady(f, method=method, rating_mw=RATING)
        assert not res.steady.any() and res.windows.empty
    # perfectly constant readings while offline: still never steady
    g = pd.DataFrame({"gross_output": np.zeros(240), "throttle_p": np.full(240, 0.1)}, index=_index(240))
    assert not tag_steady(g, offline_mw=5.0).steady.any()
    assert not tag_steady(g, method="r_statistic", offline_mw=5.0).steady.any()


def test_flagged_samples_never_count():
    f = _history(np.full(180, 450.0))
    ok = pd.Series(True, index=f.index)
    ok.iloc[[50, 51, 120]] = False
    res = tag_steady(f, rating_mw=RATING, ok=ok)
    assert not res.steady.iloc[[50, 51, 120]].any()
    assert res.steady.sum() == 177
    for method in ("ptc6", "r_statistic"):
        res = tag_steady(f, method=method, rating_mw=RATING, ok=ok)
        assert (res.window_id.iloc[[50, 51, 120]] == -1).all()
        assert res.windows["n_samples"].sum() <= 177
    # a long flagged stretch splits the plateau: no window spans it
    ok.iloc[60:80] = False
    res = tag_steady(f, rating_mw=RATING, ok=ok)
    assert not _windows_overlap(res.windows, f.index[60], f.index[79])


def test_gap_longer_than_max_gap_splits_windows():
    f = _history(np.full(240, 450.0)).drop(_index(240)[100:110])  # 10 min with no data
    res = tag_steady(f, rating_mw=RATING)  # default max_gap 5 min
    w = res.windows
    gap_start, gap_end = (
        pd.Timestamp("2031-06-01 01:39", tz="UTC"),
        pd.Timestamp("2031-06-01 01:50", tz="UTC"),
    )
    assert not ((w["start"] <= gap_start) & (w["end"] >= gap_end)).any()
    # a larger tolerated gap bridges it
    res = tag_steady(f, rating_mw=RATING, max_gap="15m")
    assert ((res.windows["start"] <= gap_start) & (res.windows["end"] >= gap_end)).any()


@pytest.mark.parametrize("amplitude,is_steady", [(3.8, True), (4.2, False)])
def test_temperature_fluctuation_limit_4k(amplitude, is_steady):
    # ASME PTC 6-2004 Table 3-1 (REFERENCES.md): throttle temperature +/-4 K about the average.
    n = 120
    f = pd.DataFrame(
        {
            "gross_output": np.full(n, 450.0),
            "throttle_t": 811.15 + amplitude * np.where(np.arange(n) % 2 == 0, 1.0, -1.0),
        },
        index=_index(n),
    )
    res = tag_steady(f, rating_mw=RATING, return_details=True)
    assert res.steady.iloc[31:].all() == is_steady
    assert res.details["throttle_t_limit"].iloc[-1] == pytest.approx(4.0)


def test_pressure_limits_follow_ptc6_table_3_1():
    f = _history(np.full(60, 450.0))
    res = tag_steady(f, rating_mw=RATING, return_details=True)
    d = res.details.iloc[-1]
    # throttle: max(0.25 % of 16.55 MPa, 34.5 kPa) = 41.4 kPa; condenser: max(1 % of 5 kPa, 0.14 kPa)
    # = 0.14 kPa (ASME PTC 6-2004 Table 3-1, REFERENCES.md)
    assert d["throttle_p_limit"] == pytest.approx(0.0025 * 16.55, rel=1e-3)
    assert d["condenser_p_limit"] == pytest.approx(0.00014, rel=1e-12)
    # load: +/-1 % of rating (common practice, no source)
    assert d["gross_output_limit"] == pytest.approx(6.0, rel=1e-12)
    assert steady.PTC6_LIMITS["throttle_p"] == (0.0025, 0.0345)


def test_custom_limits_and_roles_absent():
    f = _history(np.full(90, 450.0))[["gross_output", "throttle_t"]]
    res = tag_steady(f, rating_mw=RATING, limits={"throttle_t": (0.0, 0.5)}, return_details=True)
    assert not res.steady.any()  # 0.5 K noise breaks a 0.5 K band
    res = tag_steady(f, rating_mw=RATING, limits={"throttle_t": None}, return_details=True)
    assert res.steady.iloc[30:].all()
    assert "throttle_t_within" not in res.details


def _r_loop(x, l1=0.2, l2=0.1, l3=0.1, warmup=30):
    """Cao & Rhinehart (1995) filters written out sample by sample (test oracle)."""
    x = np.asarray(x, dtype=float)
    d0 = np.mean(np.diff(x[: max(warmup, 2)]) ** 2)
    xf, v2, d2 = x[0], d0 / (2 - l1), d0
    out = np.empty(len(x))
    prev = x[0]
    for i, xi in enumerate(x):
        v2 = l2 * (xi - xf) ** 2 + (1 - l2) * v2
        xf = l1 * xi + (1 - l1) * xf
        d2 = l3 * (xi - prev) ** 2 + (1 - l3) * d2
        prev = xi
        out[i] = (2 - l1) * v2 / d2
    out[:warmup] = np.nan
    return out


def test_r_statistic_matches_its_recursion():
    x = np.random.default_rng(11).normal(0, 1, 500) + np.linspace(0, 5, 500)
    np.testing.assert_allclose(r_statistic(x), _r_loop(x), rtol=1e-10, equal_nan=True)
    np.testing.assert_allclose(
        r_statistic(x, 0.3, 0.05, 0.15, warmup=10),
        _r_loop(x, 0.3, 0.05, 0.15, warmup=10),
        rtol=1e-10,
        equal_nan=True,
    )


def test_r_statistic_near_one_on_white_noise():
    # Cao & Rhinehart (1995): R is near 1 at steady state with uncorrelated noise.
    x = 450.0 + np.random.default_rng(5).normal(0, 0.8, 20000)
    r = r_statistic(x)
    assert 0.8 < np.nanmean(r) < 1.25
    assert 0.8 < np.nanmedian(r) < 1.25


def test_r_statistic_large_on_a_trend():
    x = np.linspace(300, 500, 400) + np.random.default_rng(5).normal(0, 0.4, 400)
    assert np.nanmedian(r_statistic(x)) > 5.0


def test_r_statistic_shapes_nan_and_constants():
    s = pd.Series([1.0, 2.0, np.nan, 1.5, 1.2] * 20, index=_index(100), name="x")
    r = r_statistic(s, warmup=3)
    assert isinstance(r, pd.Series) and r.index.equals(s.index) and r.name == "x"
    assert r.isna().to_numpy()[2::5].all()
    assert np.isfinite(r.to_numpy()[10:][~np.isnan(s.to_numpy()[10:])]).all()
    assert (r_statistic(np.full(50, 3.0), warmup=0) == 1.0).all()
    with pytest.raises(ValueError, match="lambda1"):
        r_statistic([1.0, 2.0], lambda1=0.0)
    with pytest.raises(ValueError, match="one-dimensional"):
        r_statistic(np.zeros((3, 3)))


def test_bad_arguments():
    f = _history(np.full(60, 450.0))
    with pytest.raises(ValueError, match="method"):
        tag_steady(f, method="eyeball")
    with pytest.raises(ValueError, match="gross_output"):
        tag_steady(f.drop(columns="gross_output"))
    with pytest.raises(ValueError, match="same index"):
        tag_steady(f, ok=pd.Series(True, index=f.index[:-1]))
    with pytest.raises(ValueError, match="duration"):
        tag_steady(f, window="half an hour")
    with pytest.raises(ValueError, match="rating_mw"):
        tag_steady(f, rating_mw=-1.0)
    with pytest.raises(ValueError, match="not both zero"):
        tag_steady(f, limits={"throttle_t": (0.0, 0.0)})
    with pytest.raises(ValueError, match="max_length"):
        tag_steady(f, min_length="2h")
    with pytest.raises(ValueError, match="DatetimeIndex"):
        tag_steady(f.reset_index(drop=True))


def test_empty_result_has_the_columns():
    f = _history(np.linspace(100, 500, 120))  # ramping all the time
    res = tag_steady(f, rating_mw=RATING)
    assert res.windows.empty
    assert list(res.windows.columns) == ["start", "end", "n_samples"] + list(f.columns)
    assert (res.window_id == -1).all()


@settings(max_examples=25, deadline=None)
@given(
    levels=st.lists(st.floats(50.0, 600.0), min_size=1, max_size=4),
    lengths=st.lists(st.integers(5, 120), min_size=4, max_size=4),
    holes=st.lists(st.integers(0, 399), max_size=20),
    method=st.sampled_from(["ptc6", "r_statistic"]),
)
def test_window_invariants(levels, lengths, holes, method):
    load = np.concatenate([np.full(k, lv) for lv, k in zip(levels, lengths, strict=False)])
    f = _history(load, seed=len(load))
    ok = pd.Series(True, index=f.index)
    ok.iloc[[h for h in holes if h < len(f)]] = False
    res = tag_steady(f, method=method, rating_mw=RATING, ok=ok)
    s = res.steady.to_numpy()
    assert not (s & ~ok.to_numpy()).any()
    wid = res.window_id.to_numpy()
    assert ((wid >= 0) <= s).all()  # only steady samples are averaged
    w = res.windows
    assert w["n_samples"].sum() == (wid >= 0).sum()
    assert ((w["end"] - w["start"]) >= pd.Timedelta("30min")).all()
    assert ((w["end"] - w["start"]) < pd.Timedelta("1h")).all()
    assert (w["start"].iloc[1:].to_numpy() > w["end"].iloc[:-1].to_numpy()).all()
    if method == "ptc6":
        # every ptc6 window keeps each reading within its PTC 6 limit of the window mean
        # (ASME PTC 6-2004 Table 3-1 via PTC6_LIMITS; load +/-1 % of rating, common practice)
        for k in range(len(w)):
            members = f[res.window_id == k]
            dev = (members - members.mean()).abs().max()
            assert dev["gross_output"] <= 0.01 * RATING + 1e-9
            assert dev["throttle_t"] <= 4.0 + 1e-9
            assert dev["throttle_p"] <= max(0.0025 * members["throttle_p"].mean(), 0.0345) + 1e-12


@pytest.mark.parametrize("method", ["ptc6", "r_statistic"])
def test_empty_and_single_row_frames(method):
    empty = _history(np.zeros(0))
    res = tag_steady(empty, method=method)
    assert res.steady.empty and res.windows.empty
    one = _history(np.full(1, 450.0))
    assert tag_steady(one, method=method).steady.tolist() == [False]


def test_two_plateaus_at_different_loads_never_merge():
    # 40 min at 463 MW then 60 min at 450 MW (invented): each level is steady on its own,
    # and a 13 MW step exceeds the +/-6 MW band (1 % of 600 MW, common practice).
    f = _history(np.concatenate([np.full(40, 463.0), np.full(60, 450.0)]))
    res = tag_steady(f, rating_mw=RATING)
    step_time = f.index[40]
    w = res.windows
    assert len(w) >= 2
    assert not ((w["start"] < step_time) & (w["end"] >= step_time)).any()
    assert (w.loc[w["end"] < step_time, "gross_output"].sub(463.0).abs() < 1.0).all()
    assert (w.loc[w["start"] >= step_time, "gross_output"].sub(450.0).abs() < 1.0).all()


@settings(max_examples=15, deadline=None)
@given(cut=st.integers(1, 200))
def test_ptc6_flags_do_not_depend_on_where_the_frame_starts(cut):
    f = _history(_ramp_then_plateau())
    ok = pd.Series(True, index=f.index)
    ok.iloc[[30, 31, 250, 251, 252]] = False
    whole = tag_steady(f, rating_mw=RATING, ok=ok).steady
    part = tag_steady(f.iloc[cut:], rating_mw=RATING, ok=ok.iloc[cut:]).steady
    safe = f.index >= f.index[cut] + pd.Timedelta("1h")
    assert (whole[safe] == part[safe[cut:]]).all()


def test_r_statistic_watches_every_ptc6_quantity():
    # ASME PTC 6-2004 Table 3-1 limits throttle pressure and temperature, reheat temperature
    # and exhaust pressure, and the load band; the R method watches the same quantities
    assert set(steady.R_ROLES) == set(steady.PTC6_LIMITS) | {"gross_output"}


def _steady_ar1_frame(phi, n=20_000, seed=1):
    """Steady one-minute samples of the five roles with AR(1) noise (invented levels)."""
    from scipy.signal import lfilter

    rng = np.random.default_rng(seed)
    levels = {
        "gross_output": (450.0, 0.7),
        "throttle_p": (16.5, 0.012),
        "throttle_t": (811.0, 0.4),
        "hot_reheat_t": (811.0, 0.4),
        "condenser_p": (0.006, 3e-5),
    }
    cols = {}
    for role, (level, sd) in levels.items():
        e = rng.standard_normal(n)
        e[1:] *= np.sqrt(1.0 - phi * phi)
        cols[role] = level + sd * lfilter([1.0], [1.0, -phi], e)
    return pd.DataFrame(cols, index=pd.date_range("2026-01-01", periods=n, freq="1min", tz="UTC"))


@pytest.mark.parametrize(
    ("phi", "low", "high"),
    # measured when written (20 000 samples, seed 1): 1.3 %, 25 %, 74 %, 100 %
    [(0.0, 0.0, 0.03), (0.3, 0.15, 0.35), (0.5, 0.6, 0.85), (0.8, 0.97, 1.0)],
)
def test_r_statistic_false_transient_rate_on_steady_autocorrelated_samples(phi, low, high):
    """The false "transient" rate of the R method on steady samples, as stated in
    ``calc.steady`` and calc/DECISIONS.md: low on independent noise, most samples once the
    sample-to-sample correlation reaches 0.5."""
    res = tag_steady(_steady_ar1_frame(phi), method="r_statistic")
    transient = 1.0 - float(res.steady.iloc[200:].mean())
    assert low <= transient <= high
