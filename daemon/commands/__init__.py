"""Subcommands of the `isentrope` command line.

Each module here defines ``NAME`` (the subcommand), ``HELP`` (one line), ``add_arguments(parser)``
and ``run(args) -> int`` (the exit code). Register a new module in ``COMMAND_MODULES``.
"""

import datetime as dt
import re

COMMAND_MODULES: list[str] = [
    "isentrope.daemon.commands.run",
    "isentrope.daemon.commands.backfill",
    "isentrope.daemon.commands.status",
    "isentrope.daemon.commands.fleet",
    "isentrope.daemon.commands.check",
    "isentrope.daemon.commands.import_csv",
    "isentrope.daemon.commands.export",
    "isentrope.daemon.commands.demo",
    "isentrope.daemon.commands.report",
    "isentrope.daemon.commands.test_eval",
]


#: ISO 8601 in its extended form: a calendar date, optionally a time of day after "T" or a space
#: (seconds and a decimal fraction optional) and a UTC offset (Z, +HH, +HHMM or +HH:MM). The
#: command-line times and the unambiguous times of import-csv are of this form.
ISO_8601 = r"\d{4}-\d\d-\d\d(?:[T ]\d\d:\d\d(?::\d\d(?:\.\d+)?)?(?:Z|[+-]\d\d(?::?\d\d)?)?)?"

#: The forms parse_time accepts, for its error messages.
ISO_FORMS = (
    "ISO 8601: 2025-05-02, 2025-05-02T10:00, 2025-05-02T10:00Z or 2025-05-02T10:00+02:00; "
    "without an offset the time is UTC"
)


def parse_time(text: str):
    """A command-line time (ISO 8601; naive means UTC) as a UTC ``pandas.Timestamp``.

    Only the forms of ``ISO_8601`` are accepted: a date such as 05/02/2025 could be 5 February
    or 2 May, and words such as "now" depend on the clock. Raises ValueError naming the text and
    the ISO form (both readings of a day/month date).
    """
    import pandas as pd

    text = str(text).strip()
    if re.fullmatch(ISO_8601, text):
        try:
            t = pd.Timestamp(text)
        except ValueError:  # a month 13, a 30 February, an hour 25
            t = None
        if t is not None and t is not pd.NaT:
            return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
    raise ValueError(f"time {text!r} is not an ISO 8601 date or time; {_iso_hint(text)} ({ISO_FORMS})")


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
