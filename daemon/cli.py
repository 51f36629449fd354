"""The `isentrope` command line.

Exit codes: 0 ok, 2 configuration error (the store refusing the credentials or their rights,
401/403, counts as one), 3 store unreachable, 1 anything else. Errors are one
clear line on stderr, not a traceback, unless ``--debug`` is given.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from isentrope.daemon import __version__
from isentrope.daemon.commands import COMMAND_MODULES
from isentrope.daemon.errors import (
    EXIT_CONFIG,
    EXIT_OTHER,
    EXIT_UNREACHABLE,
    AuthorizationError,
    ConfigError,
    FatalStoreError,
    TemporaryStoreError,
)

DESCRIPTION = (
    "Turbine section efficiency trending: reads HP/IP/LP boundary pressures and temperatures "
    "from a time-series store, computes IF97 enthalpy-drop efficiencies and LP exhaust moisture, "
    "tags steady periods, trends degradation and writes the results back. Advisory performance "
    "information only: not a protective function; the turbine maker's limits, local codes and "
    "licensed engineering practice take precedence."
)


def build_parser() -> tuple[argparse.ArgumentParser, dict]:
    parser = argparse.ArgumentParser(prog="isentrope", description=DESCRIPTION)
    parser.add_argument("--version", action="version", version=f"isentrope {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks and debug logging")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    modules = {}
    for name in COMMAND_MODULES:
        module = importlib.import_module(name)
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        p.add_argument(
            "--debug",
            action="store_true",
            default=argparse.SUPPRESS,
            help="show tracebacks and debug logging",
        )
        module.add_arguments(p)
        modules[module.NAME] = module
    return parser, modules


def main(argv: list[str] | None = None) -> int:
    parser, modules = build_parser()
    args = parser.parse_args(argv)
    debug = getattr(args, "debug", False)
    logging.basicConfig(
        level=logging.DEBUG if debug else logging.INFO,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )
    if args.command is None:
        parser.print_help()
        return 0
    try:
        return int(modules[args.command].run(args) or 0)
    except ConfigError as exc:
        if debug:
            raise
        print(f"isentrope: configuration error: {exc}", file=sys.stderr)
        return EXIT_CONFIG
    except AuthorizationError as exc:
        if debug:
            raise
        print(f"isentrope: configuration error: {exc}", file=sys.stderr)
        return EXIT_CONFIG
    except TemporaryStoreError as exc:
        if debug:
            raise
        print(f"isentrope: store unreachable: {exc}", file=sys.stderr)
        return EXIT_UNREACHABLE
    except (FatalStoreError, OSError, ValueError, RuntimeError) as exc:
        if debug:
            raise
        print(f"isentrope: error: {exc}", file=sys.stderr)
        return EXIT_OTHER
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
