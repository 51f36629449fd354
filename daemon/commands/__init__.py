"""Subcommands of the `isentrope` command line.

Each module here defines ``NAME`` (the subcommand), ``HELP`` (one line), ``add_arguments(parser)``
and ``run(args) -> int`` (the exit code). Register a new module in ``COMMAND_MODULES``.
"""

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
    "isentrope.daemon.commands.routine_eval",
]
