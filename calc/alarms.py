"""Alarm rules and their state machines: persistence, hysteresis, events.

Each rule watches one observed quantity (deviation of a section, its degradation rate, a step
size, LP exhaust moisture, a tag's data-quality flag) and runs one small state machine per
section (or per role, for data quality). A machine is ``"normal"`` or ``"raised"``:

* ``normal -> raised`` when the value has been beyond ``threshold`` for ``raise_after``
  consecutive observations (and, when ``raise_after_duration`` is set, for at least that
  long since the first of them);
* ``raised -> normal`` when the value has been back past ``clear_at`` (the hysteresis
  level, on the safe side of ``threshold``) for ``clear_after`` consecutive observations.

Every transition is one event. The whole state is a plain JSON-serialisable dict that the
worker stores between runs; each machine remembers the time of the last observation it
consumed and ignores observations at or before it, so re-running a window that was already
processed yields no duplicate events, and processing window A then window B gives exactly
the events of processing A and B at once.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from itertools import pairwise

import numpy as np
import pandas as pd

#: Version of the state dict written by ``evaluate_alarms``.
STATE_VERSION = 1

#: State names of a machine (plain names of this project).
NORMAL = "normal"
RAISED = "raised"

#: Event kinds.
KIND_RAISED = "raised"
KIND_CLEARED = "cleared"

#: Quantities the default rules watch (the ``quantity`` column of the observations).
QUANTITY_DEVIATION = "deviation"  # [percentage points], per steady window
QUANTITY_RATE = "rate_per_1000h"  # [points per 1000 operating hours]
QUANTITY_STEP = "step_size"  # [points], one observation per detected step
QUANTITY_MOISTURE = "lp_exhaust_moisture"  # [fraction]
QUANTITY_TAG_BAD = "tag_bad"  # 1 when a mapped tag is missing, flatlined or out of range, else 0
QUANTITY_NO_DATA = "no_data"  # 1 where no row at all arrived (sample grid), 0 at each row

#: LP exhaust moisture limit [fraction]: 12 % (common practice, no source: exhaust moisture
#: is commonly kept below about 10-12 % to limit last-stage blade erosion).
DEFAULT_MOISTURE_LIMIT = 0.12

EVENT_COLUMNS = ["section", "rule", "kind", "value", "threshold", "message"]


@dataclass(frozen=True)
class Rule:
    """One alarm rule.

    Attributes
    ----------
    name : str
        Rule name, used in events and state keys, e.g. ``"deviation_warning"``.
    quantity : str
        Observed quantity the rule watches (see the ``QUANTITY_*`` constants).
    direction : str
        ``"below"`` (raised when value < threshold) or ``"above"`` (value > threshold).
    threshold : float
        Level that raises [unit of the quantity].
    clear_at : float or None
        Level that clears, on the safe side of ``threshold`` (>= it for "below", <= it for
        "above"); None means ``threshold`` (no hysteresis) [unit of the quantity].
    raise_after : int
        Consecutive observations beyond ``threshold`` needed to raise [-].
    clear_after : int
        Consecutive observations past ``clear_at`` needed to clear [-].
    raise_after_duration : str or None
        The condition must also have held this long since its first observation, e.g.
        ``"30min"`` [duration].
    steady_only : bool
        Skip observations whose ``steady`` column is False.
    sections : tuple of str or None
        Sections (or roles) the rule applies to; None: every section observed.
    unit : str
        Unit shown in messages.
    label : str
        Short human description shown in messages; defaults to ``name``.
    """

    name: str
    quantity: str
    direction: str
    threshold: float
    clear_at: float | None = None
    raise_after: int = 1
    clear_after: int = 1
    raise_after_duration: str | None = None
    steady_only: bool = False
    sections: tuple[str, ...] | None = None
    unit: str = ""
    label: str = ""

    def __post_init__(self):
        if not self.name or "|" in self.name:
            raise ValueError(f"rule name must be non-empty without '|'; found {self.name!r}")
        if self.direction not in ("below", "above"):
            raise ValueError(
                f"rule {self.name}: direction must be 'below' or 'above'; found {self.direction!r}"
            )
        if not math.isfinite(float(self.threshold)):
            raise ValueError(f"rule {self.name}: threshold must be a finite number; found {self.threshold!r}")
        if self.clear_at is not None:
            c = float(self.clear_at)
            if (
                not math.isfinite(c)
                or (self.direction == "below" and c < self.threshold)
                or (self.direction == "above" and c > self.threshold)
            ):
                side = ">=" if self.direction == "below" else "<="
                raise ValueError(
                    f"rule {self.name}: clear_at must be finite and {side} threshold {self.threshold} "
                    f"for direction {self.direction!r}; found {self.clear_at!r}"
                )
        for key in ("raise_after", "clear_after"):
            v = getattr(self, key)
            if not (isinstance(v, int) and v >= 1):
                raise ValueError(f"rule {self.name}: {key} must be an integer >= 1; found {v!r}")
        if self.raise_after_duration is not None:
            try:
                td = pd.Timedelta(self.raise_after_duration)
            except ValueError:
                raise ValueError(
                    f"rule {self.name}: raise_after_duration must be a duration such as '30min'; "
                    f"found {self.raise_after_duration!r}"
                ) from None
            if td < pd.Timedelta(0):
                raise ValueError(f"rule {self.name}: raise_after_duration must be >= 0")
        if self.sections is not None:
            object.__setattr__(self, "sections", tuple(self.sections))

    @property
    def clear_level(self) -> float:
        return float(self.threshold if self.clear_at is None else self.clear_at)

    @classmethod
    def from_dict(cls, d: Mapping) -> Rule:
        """Build a rule from a configuration mapping; unknown keys are an error."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(d) - known)
        if unknown:
            raise ValueError(f"unknown alarm rule key(s) {unknown}; valid keys are {sorted(known)}")
        return cls(**dict(d))

    def _beyond(self, v: float) -> bool:
        return v < self.threshold if self.direction == "below" else v > self.threshold

    def _cleared(self, v: float) -> bool:
        c = self.clear_level
        return v >= c if self.direction == "below" else v <= c


def default_rules() -> list[Rule]:
    """The rule set used when the configuration names none.

    Levels are project defaults (no source) except the moisture limit (common practice);
    set them per unit from its own history and the turbine maker's guidance.

    Returns
    -------
    list of Rule
        deviation warning (below -1.0 points for 3 steady windows, cleared above -0.7 for 3),
        deviation alarm (below -2.0, cleared above -1.7), degradation rate (faster than
        0.25 points per 1000 operating hours, cleared below 0.20), step (a step down larger
        than 0.5 points; cleared by a step up larger than 0.3 points), LP exhaust moisture
        (above 12 % for 3 observations, cleared at or below 11.5 % for 3), data quality (a tag
        bad for 30 minutes, cleared by one good sample).
    """
    return [
        Rule(
            "deviation_warning",
            QUANTITY_DEVIATION,
            "below",
            -1.0,
            -0.7,
            3,
            3,
            steady_only=True,
            unit="points",
            label="efficiency deviation warning",
        ),
        Rule(
            "deviation_alarm",
            QUANTITY_DEVIATION,
            "below",
            -2.0,
            -1.7,
            3,
            3,
            steady_only=True,
            unit="points",
            label="efficiency deviation alarm",
        ),
        Rule(
            "degradation_rate",
            QUANTITY_RATE,
            "below",
            -0.25,
            -0.20,
            unit="points/1000 h",
            label="degradation rate",
        ),
        Rule("step", QUANTITY_STEP, "below", -0.5, 0.3, unit="points", label="step change"),
        Rule(
            "exhaust_moisture",
            QUANTITY_MOISTURE,
            "above",
            DEFAULT_MOISTURE_LIMIT,
            0.115,
            3,
            3,
            sections=("lp",),
            unit="",
            label="LP exhaust moisture",
        ),
        Rule(
            "data_quality",
            QUANTITY_TAG_BAD,
            "above",
            0.5,
            0.5,
            raise_after_duration="30min",
            label="tag missing, flatlined or out of range",
        ),
    ]


def to_observations(
    frame: pd.DataFrame, columns: Mapping[str, tuple[str, str]], steady_col: str | None = None
) -> pd.DataFrame:
    """Turn a wide result frame into the long observation frame ``evaluate_alarms`` reads.

    Parameters
    ----------
    frame : pandas.DataFrame
        UTC DatetimeIndex; one column per figure.
    columns : mapping
        Column name -> (section, quantity), e.g.
        ``{"hp_deviation": ("hp", "deviation"), "lp_exhaust_moisture": ("lp", "lp_exhaust_moisture")}``.
    steady_col : str or None
        Boolean column copied into ``steady`` for every observation [-].

    Returns
    -------
    pandas.DataFrame
        Columns ``time``, ``section``, ``quantity``, ``value`` [unit of the quantity] and, when
        ``steady_col`` is given, ``steady``. Rows with NaN values are kept (the machines skip
        them).
    """
    if not isinstance(frame.index, pd.DatetimeIndex):
        raise ValueError("to_observations needs a frame indexed by a DatetimeIndex")
    missing = [c for c in list(columns) + ([steady_col] if steady_col else []) if c not in frame.columns]
    if missing:
        raise ValueError(f"to_observations: columns {missing} not in {list(frame.columns)}")
    parts = []
    for col, (section, quantity) in columns.items():
        part = pd.DataFrame(
            {
                "time": frame.index,
                "section": section,
                "quantity": quantity,
                "value": frame[col].to_numpy(dtype=float),
            }
        )
        if steady_col:
            part["steady"] = frame[steady_col].to_numpy(dtype=bool)
        parts.append(part)
    if not parts:
        return pd.DataFrame(columns=["time", "section", "quantity", "value"])
    return pd.concat(parts, ignore_index=True)


def step_observations(steps, section: str) -> pd.DataFrame:
    """Observations of the step rule from ``isentrope.calc.trend.detect_steps``.

    Parameters
    ----------
    steps : sequence of trend.Step
        Steps found on a deviation series with a UTC DatetimeIndex as ``time``.
    section : str
        Section the steps belong to.

    Returns
    -------
    pandas.DataFrame
        One row per step: ``time`` = the step's ``detected_at`` (when it became known, so a
        later run never reports it at an earlier time than one already consumed),
        ``section``, ``quantity`` = ``"step_size"``, ``value`` = its size [points].
    """
    return pd.DataFrame(
        {
            "time": pd.to_datetime([pd.Timestamp(s.detected_at) for s in steps], utc=True),
            "section": section,
            "quantity": QUANTITY_STEP,
            "value": np.array([float(s.size) for s in steps], dtype=float),
        }
    )


def rate_alarm_value(rate) -> float:
    """The value the degradation-rate rule watches: the rate where it is known to be a trend.

    Parameters
    ----------
    rate : trend.RateResult
        The rate with its interval (corrected for serially correlated windows).

    Returns
    -------
    float
        The slope [points per 1000 operating hours] when its interval lies wholly below zero
        or wholly above it; 0.0 when the interval includes zero (the data do not tell a trend
        from the wander of correlated windows); NaN when the status is not "ok". On flat
        series with AR(1) windows (phi 0.9, 400 windows) the bare slope crossed -1 point per
        1000 h in 4.5 % of series and this value in 1.5-2 % (calc/DECISIONS.md).
    """
    if rate.status != "ok" or not math.isfinite(rate.slope_per_1000h):
        return float("nan")
    if rate.high < 0.0 or rate.low > 0.0:
        return float(rate.slope_per_1000h)
    return 0.0


def rate_observation(time, section: str, rate) -> pd.DataFrame:
    """Observation of the degradation-rate rule from a ``trend.RateResult``.

    Parameters
    ----------
    time : timestamp
        Time the rate refers to, e.g. the last point used [UTC].
    section : str
        Section name.
    rate : trend.RateResult
        The rate; a status other than "ok" gives no observation (an empty frame).

    Returns
    -------
    pandas.DataFrame
        Zero or one row with ``quantity`` = ``"rate_per_1000h"`` and ``value`` =
        ``rate_alarm_value(rate)`` [points per 1000 operating hours].
    """
    value = rate_alarm_value(rate)
    ok = math.isfinite(value)
    return pd.DataFrame(
        {
            "time": pd.to_datetime([pd.Timestamp(time)] if ok else [], utc=True),
            "section": section,
            "quantity": QUANTITY_RATE,
            "value": np.array([value] if ok else [], dtype=float),
        }
    )


def _iso(ts: pd.Timestamp) -> str:
    return ts.isoformat()


def _ts(text: str | None) -> pd.Timestamp | None:
    return None if text is None else pd.Timestamp(text)


def _fmt(v: float) -> str:
    return f"{v:.3g}" if abs(v) < 1 else f"{v:.2f}"


def _message(rule: Rule, section: str, kind: str, value: float, level: float, count: int) -> str:
    label = rule.label or rule.name
    unit = f" {rule.unit}" if rule.unit else ""
    if kind == KIND_RAISED:
        persist = f" for {count} observation{'s' if count != 1 else ''}" if count > 1 else ""
        if rule.raise_after_duration:
            persist += f" (at least {rule.raise_after_duration})"
        return f"{section}: {label} raised: {_fmt(value)}{unit} {rule.direction} {_fmt(level)}{unit}{persist}"
    side = "at or above" if rule.direction == "below" else "at or below"
    return f"{section}: {label} cleared: {_fmt(value)}{unit} back {side} {_fmt(level)}{unit}"


def _new_machine() -> dict:
    return {"state": NORMAL, "count": 0, "since": None, "clear_count": 0, "last_time": None}


def _check_state(state: Mapping) -> dict:
    if not state:
        return {"version": STATE_VERSION, "machines": {}}
    if (
        not isinstance(state, Mapping)
        or state.get("version") != STATE_VERSION
        or not isinstance(state.get("machines"), Mapping)
    ):
        raise ValueError(
            f"alarm state must be a dict with version {STATE_VERSION} and a 'machines' dict "
            f"(or empty); found version {state.get('version') if isinstance(state, Mapping) else state!r}"
        )
    out = {"version": STATE_VERSION, "machines": {}}
    for key, m in state["machines"].items():
        if not isinstance(m, Mapping) or m.get("state") not in (NORMAL, RAISED):
            raise ValueError(f"alarm state machine {key!r} is malformed: {m!r}")
        out["machines"][str(key)] = dict(m)
    return out


def _prepare(observations: pd.DataFrame):
    """Checked plain arrays of the observations and their stable time order.

    Returns ``(obs, ns, values, order)``: the frame (with a ``time`` column), times as int64 ns
    (UTC), values as float (non-numbers and NaT times become NaN: skipped), and the indices
    that sort them by time, equal times keeping their input order. The frame itself is neither
    copied nor sorted (sorting it with its text columns cost more than the machines;
    calc/DECISIONS.md, "Speed of the kernels").
    """
    obs = observations
    if "time" not in obs.columns:
        if isinstance(obs.index, pd.DatetimeIndex):
            obs = obs.reset_index(names="time")
        else:
            raise ValueError("observations need a 'time' column or a DatetimeIndex")
    missing = [c for c in ("section", "quantity", "value") if c not in obs.columns]
    if missing:
        raise ValueError(f"observations lack columns {missing}; found {list(obs.columns)}")
    values = pd.to_numeric(obs["value"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    if len(obs) == 0:
        return obs, np.empty(0, dtype=np.int64), values, np.empty(0, dtype=np.int64)
    t = pd.DatetimeIndex(pd.to_datetime(obs["time"]))
    if t.tz is None:
        raise ValueError("observation times must be timezone-aware (UTC)")
    t = t.tz_convert("UTC").as_unit("ns")
    values = np.where(t.isna(), np.nan, values)
    ns = t.asi8
    return obs, ns, values, np.argsort(ns, kind="stable")


def _stamp(ns: int) -> pd.Timestamp:
    return pd.Timestamp(int(ns), unit="ns", tz="UTC")


def _event(
    rule: Rule, r_i: int, section: str, kind: str, t_ns: int, value, level: float, count: int
) -> tuple:
    """The record of one event (see ``_run_machine``): at the deciding observation's time
    ``t_ns`` [ns] and value, with the level crossed and ``count``, the observations counted."""
    val = float(value)
    return (_stamp(t_ns), r_i, section, kind, val, level, _message(rule, section, kind, val, level, count))


def _run_machine(
    m: dict,
    rule: Rule,
    r_i: int,
    section: str,
    t: np.ndarray,
    v: np.ndarray,
    duration_ns: int | None,
    records: list,
) -> None:
    """Advance one machine ``m`` (in place) over time-ordered observations ``t`` [ns], ``v``.

    Exactly the observation-by-observation machine of the module docstring, taken a run at a
    time: the observations are classed as beyond ``threshold`` (B), past ``clear_at`` (C) or
    in the hysteresis band (N), and each run of one class is decided at once. In a B run of a
    normal machine the streak count and the time since its first B grow together, so the
    raising observation is the first one where both the count and (when set) the duration
    are reached (a search in the run); a C run of a raised machine clears at the observation
    where the clear count is reached; every other run only resets a counter (a loop over every
    observation was the slow part: calc/DECISIONS.md, "Speed of the kernels").
    """
    if rule.direction == "below":
        beyond, cleared = v < rule.threshold, v >= rule.clear_level
    else:
        beyond, cleared = v > rule.threshold, v <= rule.clear_level
    cls = np.where(beyond, 0, np.where(cleared, 1, 2)).astype(np.int8)  # 0 = B, 1 = C, 2 = N
    bounds = np.concatenate(([0], np.flatnonzero(np.diff(cls)) + 1, [len(cls)]))
    for a, b in pairwise(bounds.tolist()):
        c = int(cls[a])
        while a < b:
            if m["state"] == NORMAL:
                if c != 0:
                    m.update(count=0, since=None)
                    break
                since = _ts(m["since"]).value if m["since"] is not None else int(t[a])
                if m["since"] is None:
                    m["since"] = _iso(_stamp(t[a]))
                # first j in [a, b) with count_before + (j - a + 1) >= raise_after and held
                j = a + max(0, rule.raise_after - m["count"] - 1)
                if duration_ns is not None:
                    j = max(j, a + int(np.searchsorted(t[a:b], since + duration_ns, side="left")))
                if j >= b:
                    m["count"] += b - a
                    break
                count = m["count"] + (j - a + 1)
                records.append(
                    _event(rule, r_i, section, KIND_RAISED, t[j], v[j], float(rule.threshold), count)
                )
                m.update(state=RAISED, count=0, since=None, clear_count=0)
                a = j + 1  # the rest of this B run keeps the clear count at 0
            else:
                if c != 1:
                    m["clear_count"] = 0
                    break
                j = a + max(0, rule.clear_after - m["clear_count"] - 1)
                if j >= b:
                    m["clear_count"] += b - a
                    break
                count = m["clear_count"] + (j - a + 1)
                records.append(_event(rule, r_i, section, KIND_CLEARED, t[j], v[j], rule.clear_level, count))
                m.update(state=NORMAL, count=0, since=None, clear_count=0)
                a = j + 1  # the rest of this C run keeps the streak count at 0
    m["last_time"] = _iso(_stamp(t[-1]))


def evaluate_alarms(
    state: Mapping | None,
    observations: pd.DataFrame,
    rules: Sequence[Rule] | None = None,
) -> tuple[dict, pd.DataFrame]:
    """Run the alarm state machines over a batch of observations.

    Parameters
    ----------
    state : dict or None
        The dict returned by the previous call (loaded from the store), or None/{} to start
        with every machine normal.
    observations : pandas.DataFrame
        Long frame with columns ``time`` (tz-aware; or a DatetimeIndex), ``section``,
        ``quantity``, ``value`` [unit of the quantity], optionally ``steady`` (bool). See
        ``to_observations``. NaN values are skipped: they neither extend nor break a streak.
    rules : sequence of Rule or None
        None: ``default_rules()``.

    Returns
    -------
    new_state : dict
        JSON-serialisable state to save; machines not touched are carried over unchanged.
    events : pandas.DataFrame
        One row per transition, DatetimeIndex ``time`` (UTC), columns ``section``, ``rule``,
        ``kind`` ("raised"/"cleared"), ``value`` (the observation that made the transition),
        ``threshold`` (the raising level, or the clearing level for "cleared") and
        ``message`` (one line). Ordered by time, then rule order.

    Raises
    ------
    ValueError
        Malformed state, observations without the needed columns or with naive times, or
        two rules with the same name.
    """
    rules = list(default_rules() if rules is None else rules)
    names = [r.name for r in rules]
    if len(set(names)) != len(names):
        raise ValueError(f"alarm rule names must be unique; found {names}")
    new_state = _check_state(state or {})
    machines = new_state["machines"]
    obs, ns, values, order = _prepare(observations)
    has_steady = "steady" in obs.columns

    # Plain arrays in time order: pandas selection per rule and section costs far more than
    # the machines. Times as int64 ns; a Timestamp is built only for the few observations
    # that make an event or end up in the state (measured: a list of Timestamps for 16 roles x
    # 1440 samples a day cost more than the machines themselves).
    o_ns = ns[order]
    sec_codes, sec_names = pd.factorize(obs["section"].astype(str), sort=True)
    sec_codes = np.asarray(sec_codes)[order]
    qty_codes, qty_names = pd.factorize(obs["quantity"].astype(str))
    qty_codes = np.asarray(qty_codes)[order]
    qty_index = {str(q): k for k, q in enumerate(qty_names)}
    o_val = values[order]
    o_steady = obs["steady"].to_numpy(dtype=bool)[order] if has_steady else np.ones(len(obs), dtype=bool)
    finite = np.isfinite(o_val)

    records = []  # (time, rule index, section, kind, value, level, message)
    for r_i, rule in enumerate(rules):
        sel = finite & (qty_codes == qty_index.get(rule.quantity, -1))
        if rule.sections is not None:
            allowed = [k for k, name in enumerate(sec_names) if name in rule.sections]
            sel &= np.isin(sec_codes, allowed)
        if rule.steady_only:
            sel &= o_steady
        idx = np.flatnonzero(sel)
        if not len(idx):
            continue
        duration_ns = pd.Timedelta(rule.raise_after_duration).value if rule.raise_after_duration else None
        # group by section, keeping time order inside each group (stable sort of the codes)
        codes = sec_codes[idx]
        order = np.argsort(codes, kind="stable")
        idx, codes = idx[order], codes[order]
        cuts = np.flatnonzero(np.diff(codes)) + 1
        for part in np.split(idx, cuts):
            section = str(sec_names[sec_codes[part[0]]])
            key = f"{rule.name}|{section}"
            m = machines.get(key) or _new_machine()
            last = _ts(m.get("last_time"))
            if last is not None:
                part = part[o_ns[part] > last.value]
            if len(part):
                _run_machine(m, rule, r_i, section, o_ns[part], o_val[part], duration_ns, records)
            machines[key] = m

    records.sort(key=lambda r: (r[0], r[1], r[2]))
    events = pd.DataFrame(
        {
            # text columns as object dtype, so empty and full frames concatenate alike
            "section": np.array([r[2] for r in records], dtype=object),
            "rule": np.array([rules[r[1]].name for r in records], dtype=object),
            "kind": np.array([r[3] for r in records], dtype=object),
            "value": np.array([r[4] for r in records], dtype=float),
            "threshold": np.array([r[5] for r in records], dtype=float),
            "message": np.array([r[6] for r in records], dtype=object),
        },
        index=pd.DatetimeIndex([r[0] for r in records], tz="UTC", name="time"),
        columns=EVENT_COLUMNS,
    )
    text = ["section", "rule", "kind", "message"]
    events[text] = events[text].astype(object)
    return new_state, events


def active(state: Mapping) -> list[tuple[str, str]]:
    """The (rule, section) pairs currently raised in a state dict."""
    out = []
    for key, m in _check_state(state or {})["machines"].items():
        if m["state"] == RAISED:
            rule, _, section = key.partition("|")
            out.append((rule, section))
    return sorted(out)


__all__ = [
    "Rule",
    "default_rules",
    "evaluate_alarms",
    "to_observations",
    "step_observations",
    "rate_observation",
    "rate_alarm_value",
    "active",
    "DEFAULT_MOISTURE_LIMIT",
    "NORMAL",
    "RAISED",
]
