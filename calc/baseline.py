"""Expected section efficiency from a reference period, and the deviation from it.

Raw section efficiency moves with load, control valve position and throttle pressure. Trends
therefore use the *deviation* of each steady window from an expected efficiency fitted on a
reference period (typically the weeks after an overhaul), never the raw efficiency.

The model
---------
Expected efficiency ``eta`` [fraction] against load fraction ``x = load / rating`` [-]::

    eta = c0 + c1 * x + c2 * x**2 + sum_j d_j * z_j

a polynomial of degree 1 or 2 in load fraction plus, optionally, one linear term per extra
regressor ``z_j`` (control valve position, throttle pressure), each centred and scaled by
its reference-period mean and span so the coefficients are well conditioned.

Why this fit: the efficiency-versus-load curve of a throttle- or nozzle-governed section is
smooth and bowed over the normal load range, so a quadratic captures it with three
coefficients and cannot wiggle between sparse reference windows the way a spline would. The
reference windows still contain a few outliers (a transient the steady detector let through,
a transmitter spike), so the coefficients come from a Huber-loss fit
(``scipy.optimize.least_squares(loss="huber")``) with its transition scale set to 1.345
robust standard deviations of a first ordinary least-squares pass: that keeps about 95 %
of least squares' efficiency for Gaussian scatter while bounding the pull of any single
window (Huber 1964). Theil-Sen would need one regressor only; a plain least-squares fit
would let one bad window tilt the whole curve.

The model refuses to extrapolate: outside the covered load range plus a margin (and the
covered range of each extra regressor plus a margin) it returns NaN and a flag, never a
number.

References
----------
Huber, P. J. (1964). Robust estimation of a location parameter. Ann. Math. Statist. 35(1),
73-101.
ASME PTC 6-2004, Steam Turbines (enthalpy-drop section efficiency, test corrections).
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

#: Version of the JSON artefact written by ``BaselineModel.to_json``.
SCHEMA_VERSION = 1

#: Significant digits of every float hashed into a model id (``content_id``): six digits of a
#: coefficient resolve 1e-6 of efficiency, far below any deviation worth trending, while
#: noise of 1e-12 relative changes the id only when a figure lies within that noise of a
#: rounding boundary (about 1e-6 odds per figure). Project choice, no source.
MODEL_ID_DIGITS = 6

#: Huber transition point in robust standard deviations; 1.345 gives 95 % asymptotic
#: efficiency under Gaussian errors (Huber 1964; the usual choice, from memory).
HUBER_K = 1.345

#: Scale factor turning a median absolute deviation into a Gaussian standard deviation
#: (1 / Phi^-1(0.75); a standard constant).
MAD_TO_SIGMA = 1.482602218505602

#: Default allowed excursion beyond the covered load range, as load fraction [-]
#: (5 % of rating; common practice, no source: a curve is trusted a little past its data).
DEFAULT_LOAD_MARGIN = 0.05

#: Default allowed excursion beyond the covered range of each extra regressor, as a
#: fraction of that regressor's covered span [-] (project choice, no source).
DEFAULT_EXTRA_MARGIN = 0.10

#: Fewest valid reference windows accepted for a fit (project choice, no source: a
#: quadratic plus scatter estimate needs a comfortable surplus of points).
DEFAULT_MIN_WINDOWS = 10


#: Largest variance inflation factor accepted for an extra regressor by ``select_terms``: an
#: operating-mode term that the load polynomial and the terms already taken explain to
#: R^2 > 0.9 in the reference windows adds variance, not information (rule of thumb of
#: regression practice, e.g. Kutner, Nachtsheim & Neter, Applied Linear Regression Models,
#: 4th ed., section 10.5; from memory).
MAX_VIF = 10.0

#: The columns of the frame ``deviation`` returns, in order.
DEVIATION_COLUMNS = ("expected", "expected_u", "deviation", "deviation_u", "extrapolated", "model_id")


def _iso(t) -> str | None:
    if t is None:
        return None
    ts = pd.Timestamp(t)
    if ts.tzinfo is None:
        ts = ts.tz_localize("UTC")
    return ts.tz_convert("UTC").isoformat()


def _none_if_nan(v: float) -> float | None:
    v = float(v)
    return None if not math.isfinite(v) else v


def _nan_if_none(v) -> float:
    return float("nan") if v is None else float(v)


@dataclass(frozen=True)
class BaselineModel:
    """A fitted expected-efficiency model for one section.

    Attributes
    ----------
    section : str
        Section name, e.g. ``"hp"``, ``"ip"``, ``"lp"``.
    efficiency_col : str
        Column of the window frame the model was fitted to (efficiency [fraction]).
    load_col : str
        Column holding the load [MW].
    rating_mw : float
        Load that defines load fraction 1 [MW].
    degree : int
        Degree of the polynomial in load fraction (1 or 2).
    extra_cols : tuple of str
        Extra regressors, each entering linearly after centring and scaling.
    extra_center, extra_scale : tuple of float
        Reference mean and span used to centre and scale each extra regressor [its unit].
    coefficients : tuple of float
        ``(c0, c1[, c2], d_1, ...)``; efficiency per unit of the scaled regressor [fraction].
    covariance : tuple of tuple of float
        Covariance of the coefficients [fraction^2].
    load_range : tuple of float
        Covered load fraction (min, max) in the reference windows [-].
    extra_ranges : tuple of tuple of float
        Covered (min, max) of each extra regressor [its unit].
    load_margin : float
        Allowed excursion beyond ``load_range`` [load fraction].
    extra_margin : float
        Allowed excursion beyond each extra range [fraction of its span].
    reference_start, reference_end : str or None
        ISO 8601 UTC times of the first and last reference window.
    n_windows : int
        Windows used in the fit.
    residual_std : float
        Robust standard deviation of the fit residuals, MAD x 1.4826 [fraction].
    robust_r2 : float or None
        ``1 - (MAD(residuals) / MAD(efficiency))**2`` [-]; None when the efficiency had no
        spread at all.
    rmse : float
        Root-mean-square residual [fraction].
    creation : dict
        Creation parameters (loss, Huber scale, minimum windows).
    model_id : str
        First 16 hex digits of the SHA-256 of the canonical JSON of everything above, every
        float in it rounded to ``MODEL_ID_DIGITS`` significant digits (``content_id``).
    """

    section: str
    efficiency_col: str
    load_col: str
    rating_mw: float
    degree: int
    extra_cols: tuple[str, ...]
    extra_center: tuple[float, ...]
    extra_scale: tuple[float, ...]
    coefficients: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    load_range: tuple[float, float]
    extra_ranges: tuple[tuple[float, float], ...]
    load_margin: float
    extra_margin: float
    reference_start: str | None
    reference_end: str | None
    n_windows: int
    residual_std: float
    robust_r2: float | None
    rmse: float
    creation: dict = field(default_factory=dict)
    model_id: str = ""

    # --- design matrix --------------------------------------------------------------------
    def _design(self, windows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        missing = [c for c in (self.load_col, *self.extra_cols) if c not in windows.columns]
        if missing:
            raise ValueError(
                f"baseline model {self.model_id} ({self.section}) needs columns {missing}; "
                f"found {list(windows.columns)}"
            )
        x = windows[self.load_col].to_numpy(dtype=float) / self.rating_mw
        z = [
            (windows[c].to_numpy(dtype=float) - m) / s
            for c, m, s in zip(self.extra_cols, self.extra_center, self.extra_scale, strict=True)
        ]
        X = _design_matrix(x, z, self.degree)
        raw = np.column_stack([x] + [windows[c].to_numpy(dtype=float) for c in self.extra_cols])
        return X, x, raw

    def predict(self, windows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Expected efficiency of each window.

        Parameters
        ----------
        windows : pandas.DataFrame
            One row per steady window with ``load_col`` [MW] and every column of
            ``extra_cols`` [their units].

        Returns
        -------
        expected : numpy.ndarray
            Expected efficiency [fraction]; NaN where extrapolated or an input is NaN.
        expected_u : numpy.ndarray
            Standard uncertainty of ``expected`` from the coefficient covariance
            [fraction]; NaN where ``expected`` is NaN.
        extrapolated : numpy.ndarray of bool
            True where a regressor lies outside its covered range plus the margin.
        """
        X, x, raw = self._design(windows)
        lo, hi = self.load_range
        extrap = (x < lo - self.load_margin) | (x > hi + self.load_margin)
        for j, (zlo, zhi) in enumerate(self.extra_ranges):
            v = raw[:, 1 + j]
            m = self.extra_margin * (zhi - zlo)
            extrap |= (v < zlo - m) | (v > zhi + m)
        invalid = ~np.isfinite(X).all(axis=1)
        extrap &= ~invalid
        beta = np.asarray(self.coefficients, dtype=float)
        cov = np.asarray(self.covariance, dtype=float)
        with np.errstate(invalid="ignore"):
            expected, var = _row_products(X, beta, cov)
        expected_u = np.sqrt(np.clip(var, 0.0, None))
        bad = invalid | extrap
        expected[bad] = np.nan
        expected_u[bad] = np.nan
        return expected, expected_u, extrap

    # --- artefact ---------------------------------------------------------------------------
    def _content(self) -> dict:
        return {
            "schema_version": SCHEMA_VERSION,
            "kind": "isentrope.baseline",
            "section": self.section,
            "efficiency_col": self.efficiency_col,
            "load_col": self.load_col,
            "rating_mw": self.rating_mw,
            "degree": self.degree,
            "extra_cols": list(self.extra_cols),
            "extra_center": list(self.extra_center),
            "extra_scale": list(self.extra_scale),
            "coefficients": list(self.coefficients),
            "covariance": [list(r) for r in self.covariance],
            "load_range": list(self.load_range),
            "extra_ranges": [list(r) for r in self.extra_ranges],
            "load_margin": self.load_margin,
            "extra_margin": self.extra_margin,
            "reference_period": [self.reference_start, self.reference_end],
            "fit": {
                "n_windows": self.n_windows,
                "residual_std": _none_if_nan(self.residual_std),
                "robust_r2": self.robust_r2,
                "rmse": _none_if_nan(self.rmse),
            },
            "creation": dict(self.creation),
        }

    def to_json(self) -> str:
        """The versioned JSON artefact (sorted keys; floats written in shortest round-trip form).

        Returns
        -------
        str
            JSON text; ``BaselineModel.from_json(model.to_json()) == model``.
        """
        content = self._content()
        content["model_id"] = self.model_id
        return json.dumps(content, sort_keys=True, indent=1, allow_nan=False)

    @classmethod
    def from_json(cls, text: str) -> BaselineModel:
        """Read an artefact written by ``to_json``.

        Raises
        ------
        ValueError
            On an unknown schema version, a missing key, or a model id that does not match
            the content (the artefact was edited or corrupted).
        """
        try:
            d = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ValueError(f"baseline artefact is not valid JSON: {exc}") from None
        if not isinstance(d, dict) or d.get("kind") != "isentrope.baseline":
            raise ValueError("not a baseline artefact: expected kind 'isentrope.baseline'")
        if d.get("schema_version") != SCHEMA_VERSION:
            raise ValueError(
                f"baseline artefact schema version {d.get('schema_version')!r}; "
                f"this version reads {SCHEMA_VERSION}"
            )
        try:
            fit = d["fit"]
            model = cls(
                section=d["section"],
                efficiency_col=d["efficiency_col"],
                load_col=d["load_col"],
                rating_mw=float(d["rating_mw"]),
                degree=int(d["degree"]),
                extra_cols=tuple(d["extra_cols"]),
                extra_center=tuple(float(v) for v in d["extra_center"]),
                extra_scale=tuple(float(v) for v in d["extra_scale"]),
                coefficients=tuple(float(v) for v in d["coefficients"]),
                covariance=tuple(tuple(float(v) for v in r) for r in d["covariance"]),
                load_range=(float(d["load_range"][0]), float(d["load_range"][1])),
                extra_ranges=tuple((float(a), float(b)) for a, b in d["extra_ranges"]),
                load_margin=float(d["load_margin"]),
                extra_margin=float(d["extra_margin"]),
                reference_start=d["reference_period"][0],
                reference_end=d["reference_period"][1],
                n_windows=int(fit["n_windows"]),
                residual_std=_nan_if_none(fit["residual_std"]),
                robust_r2=fit["robust_r2"],
                rmse=_nan_if_none(fit["rmse"]),
                creation=dict(d["creation"]),
                model_id=d["model_id"],
            )
        except (KeyError, TypeError, IndexError) as exc:
            raise ValueError(f"baseline artefact is missing or malformed at {exc!r}") from None
        expected_id = content_id(model._content())
        if model.model_id not in (expected_id, content_id(model._content(), digits=None)):
            raise ValueError(
                f"baseline artefact model id {model.model_id!r} does not match its content "
                f"(expected {expected_id!r}); the file was edited or corrupted"
            )
        return model


def _id_figures(value, digits: int):
    """``value`` with every float written as text rounded to ``digits`` significant digits
    (``-0.0`` as ``0.0``), for the canonical JSON of a model id."""
    if isinstance(value, float):
        return f"{(value if value != 0.0 else 0.0):.{digits - 1}e}"
    if isinstance(value, dict):
        return {k: _id_figures(v, digits) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_id_figures(v, digits) for v in value]
    return value


def content_id(content: dict, digits: int | None = MODEL_ID_DIGITS) -> str:
    """First 16 hex digits of the SHA-256 of the canonical JSON (sorted keys, no spaces) of a
    model's content, its floats rounded to ``digits`` significant digits.

    The rounding makes the id a name of the model rather than of its last bits: a refit on
    windows whose figures differ by rounding noise (1e-12 relative) gives the same id, so its
    deviations stay under one series key. ``digits=None`` hashes the floats in full (how ids
    were made before; such ids are still accepted by ``BaselineModel.from_json``).
    """
    if digits is not None:
        content = _id_figures(content, int(digits))
    canonical = json.dumps(content, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(canonical.encode("utf-8")).hexdigest()[:16]


def _row_products(X: np.ndarray, beta: np.ndarray, cov: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``X @ beta`` and the quadratic form ``x_i' cov x_i`` of each row, summed term by term in
    a fixed order: each row's figures are then the same whatever rows come with it (a BLAS
    product or ``einsum`` picks its summation order by the array's shape, so a window's
    deviation moved in the last bits with the number of windows of its chunk)."""
    k = X.shape[1]
    expected = X[:, 0] * beta[0]
    var = np.zeros(X.shape[0])
    for j in range(k):
        if j:
            expected = expected + X[:, j] * beta[j]
        for m in range(k):
            var = var + X[:, j] * cov[j, m] * X[:, m]
    return expected, var


def _design_matrix(x: np.ndarray, z: Sequence[np.ndarray], degree: int) -> np.ndarray:
    cols = [np.ones_like(x), x]
    if degree == 2:
        cols.append(x * x)
    cols.extend(z)
    return np.column_stack(cols)


def _mad(v: np.ndarray) -> float:
    return float(np.median(np.abs(v - np.median(v))))


def fit_baseline(
    windows: pd.DataFrame,
    section: str,
    *,
    efficiency_col: str,
    load_col: str = "gross_output",
    rating_mw: float,
    extra_cols: Sequence[str] = (),
    degree: int = 2,
    reference_period: tuple | None = None,
    load_margin: float = DEFAULT_LOAD_MARGIN,
    extra_margin: float = DEFAULT_EXTRA_MARGIN,
    min_windows: int = DEFAULT_MIN_WINDOWS,
    huber_k: float = HUBER_K,
) -> BaselineModel:
    """Fit the expected efficiency of one section on the steady windows of a reference period.

    Parameters
    ----------
    windows : pandas.DataFrame
        One row per steady window (window-averaged readings and figures). When
        ``reference_period`` is given the index must be a DatetimeIndex.
    section : str
        Section name stored in the model, e.g. ``"hp"`` [-].
    efficiency_col : str
        Column with the section efficiency [fraction].
    load_col : str
        Column with the load [MW].
    rating_mw : float
        Load defining load fraction 1, normally the unit rating [MW].
    extra_cols : sequence of str
        Optional extra regressors entering linearly, e.g. ``"valve_position"`` [%] or
        ``"throttle_p"`` [MPa].
    degree : int
        1 (straight line) or 2 (quadratic, default) in load fraction [-].
    reference_period : (start, end) or None
        Keep only windows with ``start <= time <= end`` [UTC timestamps]; None uses all,
        and a None end leaves that side open.
    load_margin : float
        Allowed excursion beyond the covered load fraction range when predicting
        [load fraction].
    extra_margin : float
        Allowed excursion beyond each extra regressor's covered range [fraction of span].
    min_windows : int
        Fewest valid windows accepted [-].
    huber_k : float
        Huber transition point in robust standard deviations [-].

    Returns
    -------
    BaselineModel

    Raises
    ------
    ValueError
        Missing columns, a non-positive rating, an unsupported degree, or too few valid
        windows (rows with NaN in any used column are dropped first).
    """
    try:
        rating_ok = math.isfinite(float(rating_mw)) and float(rating_mw) > 0
    except (TypeError, ValueError):
        rating_ok = False
    if not rating_ok:
        raise ValueError(f"rating_mw must be a positive number of MW; found {rating_mw!r}")
    if degree not in (1, 2):
        raise ValueError(f"degree must be 1 or 2; found {degree!r}")
    if not (load_margin >= 0 and extra_margin >= 0):
        raise ValueError(f"margins must be >= 0; found load {load_margin!r}, extra {extra_margin!r}")
    extra_cols = tuple(extra_cols)
    needed = [efficiency_col, load_col, *extra_cols]
    missing = [c for c in needed if c not in windows.columns]
    if missing:
        raise ValueError(f"fit_baseline({section}) needs columns {missing}; found {list(windows.columns)}")

    frame = windows
    if reference_period is not None:
        if not isinstance(frame.index, pd.DatetimeIndex):
            raise ValueError("reference_period needs windows indexed by a DatetimeIndex")
        start, end = reference_period
        keep = np.ones(len(frame), dtype=bool)
        tz = frame.index.tz

        def _bound(t):
            ts = pd.Timestamp(t)
            if tz is not None and ts.tzinfo is None:
                ts = ts.tz_localize("UTC")  # naive bounds are UTC
            return ts

        if start is not None:
            keep &= frame.index >= _bound(start)
        if end is not None:
            keep &= frame.index <= _bound(end)
        frame = frame[keep]
    data = frame[needed].astype(float)
    data = data[np.isfinite(data.to_numpy()).all(axis=1)]
    n_params = 1 + degree + len(extra_cols)
    need = max(int(min_windows), n_params + 2)
    if len(data) < need:
        raise ValueError(
            f"fit_baseline({section}): {len(data)} valid reference windows; at least {need} needed"
        )

    y = data[efficiency_col].to_numpy()
    if not 0.0 < float(np.median(y)) <= 1.5:
        raise ValueError(
            f"fit_baseline({section}): {efficiency_col!r} has median {float(np.median(y)):.4g}; "
            "efficiencies are fractions (0.86, not 86)"
        )
    rating_mw = float(rating_mw)
    x = data[load_col].to_numpy() / rating_mw
    raw_z = [data[c].to_numpy() for c in extra_cols]
    center = tuple(float(np.mean(v)) for v in raw_z)
    scale = []
    for c, v in zip(extra_cols, raw_z, strict=True):
        span = float(np.max(v) - np.min(v))
        if not span > 0:
            raise ValueError(
                f"fit_baseline({section}): extra regressor {c!r} does not vary in the reference windows"
            )
        scale.append(span)
    z = [(v - m) / s for v, m, s in zip(raw_z, center, scale, strict=True)]
    X = _design_matrix(x, z, degree)
    if np.linalg.matrix_rank(X) < n_params:
        raise ValueError(
            f"fit_baseline({section}): the reference windows do not span enough distinct loads "
            f"for a degree-{degree} fit (covered {x.min():.3f}-{x.max():.3f} of rating)"
        )

    # First pass: ordinary least squares, for a starting point and a robust scale.
    beta0, *_ = np.linalg.lstsq(X, y, rcond=None)
    s0 = MAD_TO_SIGMA * _mad(y - X @ beta0)
    f_scale = huber_k * s0 if s0 > 0 else 1e-12
    sol = least_squares(lambda b: X @ b - y, beta0, loss="huber", f_scale=f_scale, method="trf")
    beta = sol.x
    resid = y - X @ beta
    n = len(y)
    s = MAD_TO_SIGMA * _mad(resid)
    # Covariance of the Huber estimate, sandwich-free approximation: s^2 (X' W X)^-1 with the
    # Huber weights at the solution, inflated by n / (n - p) for the fitted parameters.
    if s > 0:
        u = np.abs(resid) / (huber_k * s)
        w = np.where(u <= 1.0, 1.0, 1.0 / np.maximum(u, 1e-300))
    else:
        w = np.ones(n)
    xtwx = X.T @ (X * w[:, None])
    cov = (s * s) * np.linalg.inv(xtwx) * n / (n - n_params)
    cov = 0.5 * (cov + cov.T)
    mad_y = _mad(y)
    robust_r2 = None if mad_y == 0 else float(1.0 - (_mad(resid) / mad_y) ** 2)
    if isinstance(data.index, pd.DatetimeIndex) and len(data):
        ref_start, ref_end = _iso(data.index.min()), _iso(data.index.max())
    else:
        ref_start = ref_end = None

    fields = dict(
        section=str(section),
        efficiency_col=str(efficiency_col),
        load_col=str(load_col),
        rating_mw=float(rating_mw),
        degree=int(degree),
        extra_cols=extra_cols,
        extra_center=center,
        extra_scale=tuple(scale),
        coefficients=tuple(float(b) for b in beta),
        covariance=tuple(tuple(float(v) for v in r) for r in cov),
        load_range=(float(x.min()), float(x.max())),
        extra_ranges=tuple((float(v.min()), float(v.max())) for v in raw_z),
        load_margin=float(load_margin),
        extra_margin=float(extra_margin),
        reference_start=ref_start,
        reference_end=ref_end,
        n_windows=int(n),
        residual_std=float(s),
        robust_r2=robust_r2,
        rmse=float(np.sqrt(np.mean(resid**2))),
        creation={
            "method": "polynomial in load fraction, Huber loss (scipy.optimize.least_squares)",
            "huber_k": float(huber_k),
            "f_scale": float(f_scale),
            "min_windows": int(min_windows),
        },
    )
    model = BaselineModel(**fields)
    return BaselineModel(**fields, model_id=content_id(model._content()))


def variance_inflation(z: np.ndarray, others: np.ndarray) -> float:
    """Variance inflation factor of regressor ``z`` given the columns ``others``.

    Parameters
    ----------
    z : numpy.ndarray
        One regressor over the reference windows [its unit].
    others : numpy.ndarray
        The other columns of the design, shape (n, k), a constant column among them [-].

    Returns
    -------
    float
        ``1 / (1 - R^2)`` of the least-squares fit of ``z`` on ``others`` [-]; inf where
        ``others`` explain ``z`` exactly or ``z`` does not vary.

    References
    ----------
    Kutner, Nachtsheim & Neter, Applied Linear Regression Models, 4th ed. (2004), section 10.5.
    """
    z = np.asarray(z, dtype=float)
    beta, *_ = np.linalg.lstsq(others, z, rcond=None)
    resid = z - others @ beta
    total = float(np.sum((z - z.mean()) ** 2))
    left = float(np.sum(resid**2))
    if total <= 0 or left <= 1e-12 * total:
        return math.inf
    return total / left


def select_terms(
    windows: pd.DataFrame,
    candidates: Sequence[str],
    *,
    load_col: str = "gross_output",
    rating_mw: float,
    degree: int = 2,
    max_vif: float = MAX_VIF,
) -> tuple[list[str], dict[str, float]]:
    """The extra regressors the reference windows can tell apart from load and each other.

    Greedy, in the order given: a candidate is taken when its variance inflation factor
    against the polynomial in load fraction and the candidates already taken is at most
    ``max_vif``. A reference period run in one operating mode has valve position, throttle
    pressure and first-stage pressure ratio all fixed by load: such a term would get an
    arbitrary coefficient and read any later change of it (a degrading section draws more
    steam at the same output, which moves them) as operating mode, so it is left out.

    Parameters
    ----------
    windows : pandas.DataFrame
        The reference windows with ``load_col`` [MW] and the candidate columns.
    candidates : sequence of str
        Extra regressor columns in order of preference.
    load_col : str
        Column with the load [MW].
    rating_mw : float
        Load defining load fraction 1 [MW].
    degree : int
        Degree of the load polynomial of the fit (1 or 2) [-].
    max_vif : float
        Largest variance inflation factor accepted [-].

    Returns
    -------
    (list of str, dict)
        The terms taken, and the variance inflation factor of every candidate examined
        (column -> factor [-]; candidates absent or all NaN are not in it).
    """
    present = [c for c in candidates if c in windows.columns]
    data = windows[[load_col, *present]].astype(float)
    x = data[load_col].to_numpy() / float(rating_mw)
    fin = np.isfinite(x)
    base = [np.ones_like(x), x] + ([x * x] if degree == 2 else [])
    taken: list[str] = []
    vifs: dict[str, float] = {}
    for c in present:
        cols = [c, *taken]
        ok = fin & np.isfinite(data[cols].to_numpy()).all(axis=1)
        if ok.sum() < 3 + len(base) + len(taken):
            continue
        others = np.column_stack([b[ok] for b in base] + [data[t].to_numpy()[ok] for t in taken])
        vifs[c] = variance_inflation(data[c].to_numpy()[ok], others)
        if vifs[c] <= max_vif:
            taken.append(c)
    return taken, vifs


def deviation(
    model: BaselineModel,
    windows: pd.DataFrame,
    efficiency_col: str | None = None,
    efficiency_u_col: str | None = None,
) -> pd.DataFrame:
    """Actual minus expected efficiency of each window, in percentage points.

    Parameters
    ----------
    model : BaselineModel
        The section's baseline.
    windows : pandas.DataFrame
        One row per steady window with the efficiency, the load and the extra regressors.
    efficiency_col : str or None
        Column with the actual efficiency [fraction]; None uses ``model.efficiency_col``.
    efficiency_u_col : str or None
        Column with its standard uncertainty [fraction]; None means the measurement
        uncertainty is unknown and ``deviation_u`` carries the model part only.

    Returns
    -------
    pandas.DataFrame
        Same index as ``windows``, columns ``expected`` [fraction], ``expected_u``
        [fraction], ``deviation`` [percentage points], ``deviation_u`` [percentage points;
        root-sum-square of measurement and model standard uncertainties], ``extrapolated``
        [bool; deviation is NaN there] and ``model_id`` [str].
    """
    col = efficiency_col or model.efficiency_col
    if col not in windows.columns:
        raise ValueError(f"deviation: efficiency column {col!r} not in {list(windows.columns)}")
    if efficiency_u_col is not None and efficiency_u_col not in windows.columns:
        raise ValueError(f"deviation: uncertainty column {efficiency_u_col!r} not in {list(windows.columns)}")
    expected, expected_u, extrap = model.predict(windows)
    actual = windows[col].to_numpy(dtype=float)
    meas_u = windows[efficiency_u_col].to_numpy(dtype=float) if efficiency_u_col else np.zeros(len(actual))
    dev = 100.0 * (actual - expected)
    dev_u = 100.0 * np.sqrt(meas_u**2 + expected_u**2)
    dev_u[~np.isfinite(dev)] = np.nan
    return pd.DataFrame(
        {
            "expected": expected,
            "expected_u": expected_u,
            "deviation": dev,
            "deviation_u": dev_u,
            "extrapolated": extrap.astype(bool),
            "model_id": model.model_id,
        },
        index=windows.index,
    )
