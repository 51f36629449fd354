"""The `isentrope` command line."""

from __future__ import annotations

import argparse
import sys

from isentrope.daemon import __version__


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="isentrope",
        description=(
            "Turbine section efficiency trending: reads HP/IP/LP boundary pressures and "
            "temperatures from a time-series store, computes IF97 enthalpy-drop efficiencies "
            "and LP exhaust moisture, tags steady periods, trends degradation and writes the "
            "results back. Advisory performance information only, not a protective function."
        ),
    )
    parser.add_argument("--version", action="version", version=f"isentrope {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    parser.add_subparsers(dest="command", metavar="COMMAND")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
