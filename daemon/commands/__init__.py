"""Subcommands of the `isentrope` command line.

Each module here defines ``NAME`` (the subcommand), ``HELP`` (one line), ``add_arguments(parser)``
and ``run(args) -> int`` (the exit code). Register a new module in ``COMMAND_MODULES``.
"""

COMMAND_MODULES: list[str] = [
    "isentrope.daemon.commands.run",
    "isentrope.daemon.commands.backfill",
    "isentrope.daemon.commands.fleet",
    "isentrope.daemon.commands.check",
    "isentrope.daemon.commands.import_csv",
    "isentrope.daemon.commands.export",
    "isentrope.daemon.commands.demo",
    "isentrope.daemon.commands.report",
    "isentrope.daemon.commands.test_eval",
]


def parse_time(text: str):
    """A command-line time (ISO 8601; naive means UTC) as a UTC ``pandas.Timestamp``.

    Raises ValueError naming the text and the expected form.
    """
    import pandas as pd

    try:
        t = pd.Timestamp(text)
    except (ValueError, TypeError):
        raise ValueError(f"time {text!r} not understood; expected ISO 8601 such as 2025-01-01T00:00Z") from None
    if t is pd.NaT:
        raise ValueError(f"time {text!r} not understood; expected ISO 8601 such as 2025-01-01T00:00Z")
    return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
