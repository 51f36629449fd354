"""Small helpers the store implementations share: times, frame checks, shaping results.

``utc`` is ``isentrope.daemon.timeutil.utc``, here for the stores' ``common.utc``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from isentrope.daemon.roles import RoleMapping
from isentrope.daemon.stores.escape import check_name
from isentrope.daemon.timeutil import utc


def window(start, end) -> tuple[pd.Timestamp, pd.Timestamp]:
    s, e = utc(start, "start"), utc(end, "end")
    if e < s:
        raise ValueError(f"window end {e} is before start {s}")
    return s, e


def utc_index(frame: pd.DataFrame, what: str = "frame") -> pd.DatetimeIndex:
    """The frame's index as a UTC DatetimeIndex (ns); ValueError if it is not tz-aware times."""
    idx = frame.index
    if not isinstance(idx, pd.DatetimeIndex):
        raise ValueError(f"{what} must have a DatetimeIndex, found {type(idx).__name__}")
    if idx.tz is None:
        raise ValueError(f"{what} index has no time zone; localise it to UTC first")
    if idx.hasnans:
        raise ValueError(f"{what} index holds NaT")
    return idx.tz_convert("UTC").as_unit("ns")


def epoch_ns(idx: pd.DatetimeIndex) -> np.ndarray:
    return np.asarray(idx.as_unit("ns").asi8, dtype=np.int64)


def series_groups(mappings: Sequence[RoleMapping]) -> dict[tuple, list[RoleMapping]]:
    """The mappings by the series they read: ``(measurement, sorted (tag, value) pairs)`` ->
    the mappings of that series, in the given order (tags checked)."""
    groups: dict[tuple, list[RoleMapping]] = {}
    for m in mappings:
        groups.setdefault((m.measurement, tuple(sorted(check_tags(m.tags).items()))), []).append(m)
    return groups


def check_mappings(mappings: Sequence[RoleMapping]) -> list[RoleMapping]:
    mappings = list(mappings)
    seen = set()
    for m in mappings:
        if not isinstance(m, RoleMapping):
            raise ValueError(f"expected RoleMapping, found {type(m).__name__} {m!r}")
        if m.role in seen:
            raise ValueError(f"role {m.role!r} is mapped twice")
        seen.add(m.role)
    return mappings


def role_frame(mappings: Sequence[RoleMapping], series: Mapping[str, pd.Series]) -> pd.DataFrame:
    """Assemble per-role series (UTC index) into the contract's raw frame.

    Sorted unique UTC ``time`` index (duplicates keep the last value), one float column per
    mapping in mapping order, NaN where a role has no sample.
    """
    cols = {}
    for m in mappings:
        s = series.get(m.role)
        if s is None or s.empty:
            s = pd.Series(
                [], index=pd.DatetimeIndex([], tz="UTC", name="time").as_unit("ns"), dtype="float64"
            )
        s = pd.to_numeric(s, errors="coerce").astype("float64")
        s.index = pd.DatetimeIndex(s.index).as_unit("ns")
        if not s.index.is_unique:
            s = s[~s.index.duplicated(keep="last")]
        cols[m.role] = s
    if cols:
        frame = pd.concat(cols, axis=1, sort=True)
    else:
        frame = pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC"))
    frame = frame.reindex(columns=[m.role for m in mappings])
    idx = pd.DatetimeIndex(frame.index)
    frame.index = (idx.tz_localize("UTC") if idx.tz is None else idx.tz_convert("UTC")).as_unit("ns")
    frame.index.name = "time"
    frame = frame.sort_index()
    frame.columns.name = None
    return frame.astype("float64")


def wide_to_role_columns(mappings: Sequence[RoleMapping], frame: pd.DataFrame) -> dict[str, pd.Series]:
    """The columns of a wide role frame that ``write_raw`` writes, as finite float series."""
    by_role = {m.role: m for m in mappings}
    unknown = [c for c in frame.columns if c not in by_role]
    if unknown:
        raise ValueError(f"frame columns {unknown} are not mapped roles; mapped: {sorted(by_role)}")
    out = {}
    for col in frame.columns:
        s = pd.to_numeric(frame[col], errors="coerce").astype("float64")
        out[col] = s[np.isfinite(s.to_numpy())]
    return out


#: Field names no store accepts: the time columns, and the columns Flux adds to its answers.
RESERVED_FIELDS = (
    "time",
    "time_utc",
    "result",
    "table",
    "_time",
    "_value",
    "_field",
    "_measurement",
    "_start",
    "_stop",
)


def result_columns(frame: pd.DataFrame, reserved: Sequence[str] = RESERVED_FIELDS) -> list[str]:
    """The numeric and bool columns of a results frame (the ones ``write_results`` writes)."""
    cols = []
    lowered = {}
    for c in frame.columns:
        dtype = frame[c].dtype
        if not (pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype)):
            continue
        if not isinstance(c, str):
            raise ValueError(f"result column names must be strings, found {c!r}")
        if c in reserved:
            raise ValueError(f"result column {c!r} clashes with a reserved name {list(reserved)}")
        if c.lower() in lowered:
            raise ValueError(f"result columns {lowered[c.lower()]!r} and {c!r} differ only in case")
        lowered[c.lower()] = c
        cols.append(c)
    return cols


def check_fields_vs_tags(fields: Sequence[str], tags: Mapping[str, str], measurement: str) -> None:
    """A result field may not share its name with a tag key (ambiguous in InfluxQL, a clash in SQLite)."""
    keys = {k.lower() for k in tags}
    clash = [f for f in fields if f.lower() in keys]
    if clash:
        raise ValueError(
            f"{measurement}: result fields {clash} have the same name as tag keys {sorted(tags)}"
        )


def results_matrix(frame: pd.DataFrame, cols: Sequence[str]) -> np.ndarray:
    """Float matrix of the result columns; bools as 0.0/1.0, non-finite as NaN."""
    if not cols:
        return np.empty((len(frame), 0))
    m = np.column_stack([pd.to_numeric(frame[c], errors="coerce").astype("float64").to_numpy() for c in cols])
    m[~np.isfinite(m)] = np.nan
    return m


def results_frame(
    data: dict[str, np.ndarray] | pd.DataFrame, times_ns: np.ndarray | None = None
) -> pd.DataFrame:
    """Shape read-back results: UTC ns index ``time``, sorted float columns, no all-NaN rows or columns."""
    frame = data if isinstance(data, pd.DataFrame) else pd.DataFrame(data)
    if times_ns is not None:
        frame.index = pd.to_datetime(np.asarray(times_ns, dtype=np.int64), unit="ns", utc=True)
    frame = frame.apply(pd.to_numeric, errors="coerce").astype("float64") if len(frame.columns) else frame
    frame = frame.dropna(axis=1, how="all").dropna(axis=0, how="all")
    frame = frame.reindex(columns=sorted(frame.columns))
    frame.index = pd.DatetimeIndex(frame.index).as_unit("ns")
    if frame.index.tz is None:
        frame.index = frame.index.tz_localize("UTC")
    frame.index.name = "time"
    frame.columns.name = None
    frame = frame[~frame.index.duplicated(keep="last")].sort_index()
    return frame.astype("float64")


def check_tags(tags: Mapping[str, str] | None) -> dict[str, str]:
    out = {}
    for k, v in (tags or {}).items():
        check_name(k, "tag key")
        if k in ("time", "_measurement", "_field", "_value", "_time", "_start", "_stop"):
            raise ValueError(f"tag key {k!r} is reserved by InfluxDB; choose another tag key")
        if not isinstance(v, str):
            raise ValueError(f"tag {k!r} value must be a string, found {type(v).__name__} {v!r}")
        check_name(v, f"tag {k!r} value")
        out[k] = v
    return dict(sorted(out.items()))
