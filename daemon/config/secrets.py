"""Secrets of the configuration: ``Secret`` and reading one from the environment or a file.

A secret key ``key`` is written as ``key = "${ENV_NAME}"`` (the value of that environment
variable) or ``key_file = "/path"`` (the first line of that file, relative to the
configuration's directory); a secret written literally in the file is refused. Every secret
read is remembered by ``isentrope.daemon.redact`` and so never reaches a message.
"""

from __future__ import annotations

import re
from pathlib import Path

from isentrope.daemon.config.reader import TableReader, describe, resolve
from isentrope.daemon.redact import remember

__all__ = ["Secret", "read_secret"]


class Secret:
    """A credential. Shown as ``'***'`` in repr/str so that it never reaches a log line."""

    __slots__ = ("_value", "source")

    def __init__(self, value: str, source: str = ""):
        self._value = value
        self.source = source  # "env:NAME" or "file:/path", safe to show
        remember(value)  # redacted from every message from now on

    def reveal(self) -> str:
        return self._value

    def __repr__(self) -> str:
        return f"Secret(***{', from ' + self.source if self.source else ''})"

    __str__ = __repr__

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Secret) and other._value == self._value

    def __hash__(self) -> int:
        return hash(self._value)


_ENV_REF = re.compile(r"^\$\{([A-Za-z_][A-Za-z0-9_]*)\}$")


def read_secret(r: TableReader, data: dict, path: tuple[str, ...], base_dir: Path, environ) -> Secret | None:
    """``key = "${ENV}"`` or ``key_file = "/path"`` of the table ``data`` at ``path`` (ending
    in ``key``); None when neither is given or after reporting the problem to ``r``."""
    key = path[-1]
    file_key = key + "_file"
    has_value, has_file = key in data, file_key in data
    if has_value and has_file:
        r.problem(path, f"give either '{key}' or '{file_key}', not both")
        return None
    if has_value:
        raw = data[key]
        if not isinstance(raw, str):
            r.problem(path, f'expected "${{ENV_NAME}}", found {describe(raw)}')
            return None
        m = _ENV_REF.match(raw.strip())
        if not m:
            r.problem(
                path,
                'write secrets as "${ENV_NAME}" or use '
                f"'{file_key}'; a secret written in the file is refused",
            )
            return None
        name = m.group(1)
        if name not in environ:
            r.problem(path, f"environment variable {name} is not set")
            return None
        value = environ[name]
        if not value:
            r.problem(path, f"environment variable {name} is empty")
            return None
        return Secret(value, f"env:{name}")
    if has_file:
        raw = data[file_key]
        if not isinstance(raw, str):
            r.problem(path[:-1] + (file_key,), f"expected a file path, found {describe(raw)}")
            return None
        p = resolve(raw, base_dir)
        try:
            text = p.read_text(encoding="utf-8")
        except OSError as exc:
            r.problem(path[:-1] + (file_key,), f"cannot read {p}: {exc.strerror or exc}")
            return None
        value = text.splitlines()[0].strip() if text.strip() else ""
        if not value:
            r.problem(path[:-1] + (file_key,), f"{p} is empty")
            return None
        return Secret(value, f"file:{p}")
    return None
