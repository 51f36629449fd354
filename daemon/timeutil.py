"""Durations and times: the one grammar of the configuration, the command line and the worker.

Durations (``parse_duration``, ``as_timedelta``)
    One or more ``<number><unit>`` parts written together, the number a decimal without sign
    or exponent, the unit one of ``ms``, ``s``, ``m`` or ``min`` (minutes), ``h``, ``d``,
    ``w`` (7 days); case and spaces are ignored: "30s", "15m", "15min", "2h", "1.5h", "1d",
    "1w", "1h30m", "250ms". Refused: a bare number ("15"), a sign ("-5m", "+5m"), an unknown
    unit ("15x", "1y", "1mo"), a duration longer than ``LONGEST_DURATION`` (3650 days).
    ``format_duration`` writes the shortest form back ("90m" -> "1h30m").

Times (``parse_time``, ``utc``)
    A time given as text (command line, configuration) is ISO 8601 in its extended form
    (``ISO_8601``): a date, optionally a time of day after "T" or a space, optionally a UTC
    offset; without an offset the text means UTC. Other forms are refused, with both readings
    of a day/month date in the message. A time handed over in code (``utc``) must carry a
    time zone: a naive ``datetime`` or ``Timestamp`` is refused, since the plant's zone cannot
    be guessed.

``EPOCH`` (1970-01-01 UTC) is the origin against which chunk boundaries are floored and from
which the stores count times.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from fractions import Fraction

import pandas as pd

#: 1970-01-01T00:00Z: chunk boundaries are multiples of the chunk from here; stored times and
#: ``*_s`` fields are counted from here.
EPOCH = pd.Timestamp("1970-01-01", tz="UTC")

#: No duration is longer (ten years of 365 days): a longer one is a typing error, and beyond
#: about 2.7 million years a timedelta overflows.
LONGEST_DURATION = dt.timedelta(days=3650)

_DURATION_PART = re.compile(r"(\d+(?:\.\d+)?)(ms|min|s|m|h|d|w)")
#: Units of the duration grammar -> microseconds.
DURATION_UNITS = {
    "ms": 1_000,
    "s": 1_000_000,
    "m": 60_000_000,
    "min": 60_000_000,
    "h": 3_600_000_000,
    "d": 86_400_000_000,
    "w": 604_800_000_000,
}
_DURATION_FORMS = '"30s", "15m", "15min", "2h", "1d", "1w" or "1h30m"'

#: ISO 8601 in its extended form: a calendar date, optionally a time of day after "T" or a space
#: (seconds and a decimal fraction optional) and a UTC offset (Z, +HH, +HHMM or +HH:MM). The
#: command-line times, the configuration's times and the unambiguous times of import-csv are of
#: this form.
ISO_8601 = r"\d{4}-\d\d-\d\d(?:[T ]\d\d:\d\d(?::\d\d(?:\.\d+)?)?(?:Z|[+-]\d\d(?::?\d\d)?)?)?"

#: The forms parse_time accepts, for its error messages.
ISO_FORMS = (
    "ISO 8601: 2025-05-02, 2025-05-02T10:00, 2025-05-02T10:00Z or 2025-05-02T10:00+02:00; "
    "without an offset the time is UTC"
)


def parse_duration(text: str) -> dt.timedelta:
    """A duration string of the grammar above as a ``datetime.timedelta``.

    Exact to the microsecond (the number is read as a decimal, not a float). Raises
    ValueError naming what was found and the accepted forms.
    """
    if not isinstance(text, str):
        raise ValueError(f"expected a duration string such as {_DURATION_FORMS}, found {text!r}")
    s = text.strip().lower().replace(" ", "")
    pos, micro = 0, Fraction(0)
    for m in _DURATION_PART.finditer(s):
        if m.start() != pos:
            break
        micro += Fraction(m.group(1)) * DURATION_UNITS[m.group(2)]
        pos = m.end()
    if not s or pos != len(s):
        sign = "; a duration has no sign and is never negative" if s[:1] in ("-", "+") else ""
        raise ValueError(f"expected a duration such as {_DURATION_FORMS}, found {text!r}{sign}")
    if micro > LONGEST_DURATION / dt.timedelta(microseconds=1):
        raise ValueError(
            f"expected a duration of at most {format_duration(LONGEST_DURATION)}, found {text!r}"
        )
    return dt.timedelta(microseconds=round(micro))


def as_timedelta(value, what: str | None = None) -> pd.Timedelta:
    """A non-negative duration as a ``pandas.Timedelta``.

    ``value``: a duration string (``parse_duration``), a ``timedelta`` or ``Timedelta``, or a
    number of seconds (Python callers only; the configuration and the command line take
    strings). Negative, NaT, NaN and infinite durations are refused; ``what`` names the setting
    in the ValueError.
    """
    prefix = f"{what}: " if what else ""
    try:
        if isinstance(value, str):
            td = pd.Timedelta(parse_duration(value))
        elif isinstance(value, bool):
            raise ValueError(f"expected a duration, found {value!r}")
        elif isinstance(value, (int, float)):
            td = pd.Timedelta(seconds=float(value)) if math.isfinite(value) else pd.NaT
        elif value is pd.NaT or isinstance(value, dt.timedelta):
            td = pd.Timedelta(value)
        else:
            raise ValueError(f"expected a duration such as {_DURATION_FORMS}, found {value!r}")
    except (ValueError, OverflowError) as exc:
        raise ValueError(f"{prefix}{exc}") from None
    if pd.isna(td) or td < pd.Timedelta(0):
        name = what or "a duration"
        raise ValueError(f"{name} must be a non-negative duration, found {value!r}")
    return td


def format_duration(value: dt.timedelta) -> str:
    """The shortest duration string for a timedelta, to the second ("90m" -> "1h30m")."""
    total = int(round(value.total_seconds()))
    if total == 0:
        return "0s"
    out = []
    for unit, size in (("d", 86400), ("h", 3600), ("m", 60), ("s", 1)):
        n, total = divmod(total, size)
        if n:
            out.append(f"{n}{unit}")
    return "".join(out)


def utc(t, what: str = "time") -> pd.Timestamp:
    """A time zone-aware time (``Timestamp``, ``datetime`` or ISO text with an offset) as a
    UTC ``pandas.Timestamp`` in nanoseconds.

    A naive time is refused (a store or the worker cannot guess the plant's time zone), as
    are NaT and text that is no time.
    """
    try:
        ts = pd.Timestamp(t)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{what} {t!r} is not a time: {exc}") from None
    if ts is pd.NaT:
        raise ValueError(f"{what} is NaT; give a UTC time")
    if ts.tzinfo is None:
        raise ValueError(f"{what} {t!r} has no time zone; give a UTC time (e.g. '2026-01-01T00:00Z')")
    return ts.tz_convert("UTC").as_unit("ns")


def parse_time(text: str, what: str | None = None) -> pd.Timestamp:
    """A time written as text (ISO 8601; naive means UTC) as a UTC ``pandas.Timestamp``.

    Only the forms of ``ISO_8601`` are accepted: a date such as 05/02/2025 could be 5 February
    or 2 May, and words such as "now" depend on the clock. Raises ValueError naming the text and
    the ISO form (both readings of a day/month date); ``what`` (an option or key) leads the
    message.
    """
    prefix = f"{what}: " if what else ""
    text = str(text).strip()
    if re.fullmatch(ISO_8601, text):
        try:
            t = pd.Timestamp(text)
        except ValueError:  # a month 13, a 30 February, an hour 25
            t = None
        if t is not None and t is not pd.NaT:
            return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
    raise ValueError(
        f"{prefix}time {text!r} is not an ISO 8601 date or time; {_iso_hint(text)} ({ISO_FORMS})"
    )


def _iso_hint(text: str) -> str:
    """How to write ``text`` in ISO 8601: both readings of a day/month/year date, else the rule."""
    m = re.fullmatch(r"(\d{1,2})[/.-](\d{1,2})[/.-](\d{4})(?:[T ]+(\d\d?:\d\d(?::\d\d)?))?", text)
    if m:
        a, b, year = int(m[1]), int(m[2]), int(m[3])
        clock = m[4] or ""
        if clock:
            clock = "T" + ("0" + clock if clock.index(":") == 1 else clock)  # 9:05 -> T09:05
        readings = []
        for day, month in ((a, b), (b, a)):  # day first, then month first
            try:
                date = dt.date(year, month, day)
            except ValueError:
                continue
            reading = f"{date.isoformat()}{clock} ({date.day} {date:%B})"
            if reading not in readings:
                readings.append(reading)
        if readings:
            return "write " + " or ".join(readings)
    return "write the date year first"


def floor_time(t: pd.Timestamp, step: pd.Timedelta) -> pd.Timestamp:
    """Floor ``t`` to a multiple of ``step`` counted from ``EPOCH``."""
    n = (t - EPOCH) // step
    return EPOCH + n * step


def epoch_seconds(t) -> float:
    """Seconds from ``EPOCH`` to ``t`` (a UTC time), as the ``*_s`` result fields store times."""
    return float((pd.Timestamp(t) - EPOCH).total_seconds())


#: Window boundaries and heartbeat times are floored to this resolution (stable keys; common
#: practice, no source).
DEFAULT_RESOLUTION = pd.Timedelta("1s")
