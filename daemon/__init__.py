"""Everything in isentrope that touches the world: stores, configuration, scheduling, CLI."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("isentrope")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"
