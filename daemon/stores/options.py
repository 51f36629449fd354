"""The ``[store]`` options of a store kind, declared by its class.

Each ``Store`` subclass lists its options in ``OPTIONS`` (a tuple of ``Option``, in the order
they are read and reported) and may check rules between them in the classmethod
``check_options(values, given, problem)``. ``isentrope.daemon.config`` reads any kind from
that declaration: the type, default and bounds of each key, secrets (``"${ENV}"`` or a
``<name>_file`` key), paths (relative to the configuration's directory) and the per-value
``check``; ``StoreConfig.open_options()`` then gives the values to the class's constructor
under the option's name (secrets revealed, durations in seconds, paths as text, None and ""
left out so that the constructor's default applies). This module imports nothing of the
configuration: the configuration depends on the stores, never the reverse.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["Option", "REQUIRED", "http_url", "pem_file"]


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


#: ``Option.default`` of a key that must be given.
REQUIRED: Any = _Required()


@dataclass(frozen=True)
class Option:
    """One key of ``[store]``.

    ``kind``: "str", "bool", "int", "float" or "duration" (a duration string such as "10s";
    bounds then in seconds). ``default``: the value when the key is left out, ``REQUIRED``
    when it must be given. ``low``/``high`` (``low_open``/``high_open``: the bound itself is
    refused). ``secret``: written as ``"${ENV_NAME}"`` or as the file named by ``<name>_file``,
    never literally. ``path``: a file path, relative to the configuration's directory.
    ``check``: called with a value given in the file; raises ``ValueError`` whose text is the
    problem reported at the key.
    """

    name: str
    kind: str = "str"
    default: Any = REQUIRED
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    secret: bool = False
    path: bool = False
    check: Callable[[Any], object] | None = None

    @property
    def required(self) -> bool:
        return self.default is REQUIRED

    @property
    def keys(self) -> tuple[str, ...]:
        """The keys this option may be written as."""
        return (self.name, self.name + "_file") if self.secret else (self.name,)


def http_url(url: str) -> None:
    """``check`` of a server URL: http:// or https:// and a host."""
    if not re.match(r"^https?://[^/\s]+", url):
        raise ValueError(f"expected an http:// or https:// URL, found {url!r}")


def pem_file(path: Path) -> None:
    """``check`` of a CA bundle: a readable PEM file of certificates."""
    try:
        with path.open("rb") as fh:
            head = fh.read(16 << 20)
    except OSError as exc:
        raise ValueError(f"cannot read {path}: {exc.strerror or exc}") from None
    if b"-----BEGIN CERTIFICATE-----" not in head:
        raise ValueError(f"{path} is not a PEM file of CA certificates (no BEGIN CERTIFICATE line)")
