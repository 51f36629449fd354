"""The `isentrope` command line.

Exit codes: 0 ok, 2 configuration error (a refused TLS certificate, and the store refusing the
credentials or their rights, 401/403, included), 3 store unreachable, 6 another worker holds the
unit on this store (``isentrope.daemon.lease``), 1 anything else. Errors
are one clear line on stderr, not a traceback, unless ``--debug`` is given. Every error line, log line and traceback goes through
``isentrope.daemon.redact`` first: no configured secret leaves the process.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys
import traceback

from isentrope.daemon import __version__
from isentrope.daemon.commands import COMMAND_MODULES
from isentrope.daemon.errors import (
    EXIT_BUSY,
    EXIT_CONFIG,
    EXIT_OK,
    EXIT_OTHER,
    EXIT_UNREACHABLE,
    AuthorizationError,
    CertificateError,
    ConfigError,
    FatalStoreError,
    TemporaryStoreError,
    UnitBusyError,
)
from isentrope.daemon.files import DEFAULT_UMASK, parse_umask
from isentrope.daemon.redact import format_exception, install_log_filter, redact

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
    parser.add_argument(
        "--umask",
        default=f"{DEFAULT_UMASK:04o}",
        metavar="OCTAL",
        help="umask of the files and folders created (stores, reports, exports); default "
        f"{DEFAULT_UMASK:04o}: files 0640, folders 0750, readable by the owner and the group only",
    )
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
    install_log_filter()
    if args.command is None:
        parser.print_help()
        return EXIT_OK
    try:
        umask = parse_umask(args.umask)
    except ValueError as exc:
        parser.error(str(exc))
    previous = os.umask(umask)
    try:
        return int(modules[args.command].run(args) or 0)
    except KeyboardInterrupt:
        return 130
    except Exception as exc:  # every error leaves through _fail, redacted
        return _fail(exc, debug)
    finally:
        os.umask(previous)  # for callers in the same process (tests)


#: Exception class -> (exit code, what the error line calls it); the first that matches wins.
_EXITS = (
    (UnitBusyError, EXIT_BUSY, "refused"),
    (ConfigError, EXIT_CONFIG, "configuration error"),
    (CertificateError, EXIT_CONFIG, "configuration error"),
    (AuthorizationError, EXIT_CONFIG, "configuration error"),
    (TemporaryStoreError, EXIT_UNREACHABLE, "store unreachable"),
    ((FatalStoreError, OSError, ValueError, RuntimeError), EXIT_OTHER, "error"),
)


def _fail(exc: Exception, debug: bool) -> int:
    """The exit code of ``exc``; its error line (with ``--debug`` its traceback) on stderr,
    redacted. An unexpected exception shows its traceback always."""
    for kind, code, label in _EXITS:
        if isinstance(exc, kind):
            if debug:
                sys.stderr.write(format_exception(exc))
            print(f"isentrope: {label}: {redact(exc)}", file=sys.stderr)
            return code
    sys.stderr.write(redact(traceback.format_exc()))
    return EXIT_OTHER


if __name__ == "__main__":
    sys.exit(main())
