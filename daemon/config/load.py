"""The entry points: ``load_config(path)`` and ``parse_config(text)`` give a ``Config``.

The whole file is read and checked before any I/O (nothing here opens a store connection);
``isentrope.daemon.errors.ConfigError`` lists *every* problem at once, each as
``<file>:<line>: <key>: <what is wrong>``.
"""

from __future__ import annotations

import os
import re
import tomllib
from pathlib import Path

from isentrope.daemon.config.model import Config
from isentrope.daemon.config.reader import TableReader
from isentrope.daemon.config.tables import read_tables
from isentrope.daemon.errors import ConfigError

__all__ = ["load_config", "parse_config"]


def parse_config(
    text: str, source: str = "<config>", base_dir: Path | None = None, environ=None, path: Path | None = None
) -> Config:
    """Validate TOML text and build a ``Config``; raise ``ConfigError`` with every problem.

    ``base_dir`` resolves relative paths (the SQLite file, secret files); default the
    current directory. ``environ`` replaces ``os.environ`` for ``${ENV}`` secrets.
    """
    base_dir = Path(base_dir) if base_dir is not None else Path.cwd()
    environ = os.environ if environ is None else environ
    try:
        top = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column (\d+)\)", str(exc))
        where = f"{source}:{m.group(1)}" if m else source
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise ConfigError([f"{where}: not valid TOML: {msg}"]) from None
    r = TableReader(source, text)
    config = read_tables(r, top, base_dir, environ, path)
    if config is None:
        raise ConfigError(r.problems)
    return config


def load_config(path: str | os.PathLike, environ=None) -> Config:
    """Read and validate the TOML file at ``path``; raise ``ConfigError`` with every problem.

    Relative paths inside the file (SQLite file, secret files) are relative to the file.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise ConfigError([f"{p}: cannot read the configuration: {exc.strerror or exc}"]) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ConfigError([f"{p}: not UTF-8 text ({exc.reason} at byte {exc.start})"]) from None
    return parse_config(text, source=str(p), base_dir=p.resolve().parent, environ=environ, path=p)
