"""Who may read what isentrope writes: stores, state, reports and exports hold plant data.

The command line sets the process umask before any command runs: ``DEFAULT_UMASK`` (0027)
unless ``--umask`` says otherwise, so that every file it creates (the SQLite store and its
``-wal``/``-shm`` files, which SQLite gives the store's mode, reports, figures, exports, the
demo folder) is 0640 and every folder 0750: the owner reads and writes, the service's group
reads, nobody else. A file made by ``tempfile`` (0600) is given the same mode with
``chmod_created``.
"""

from __future__ import annotations

import os
import threading
from pathlib import Path

#: The command line's umask unless ``--umask`` is given: files 0640, folders 0750 [-].
DEFAULT_UMASK = 0o027

_lock = threading.Lock()


def parse_umask(text: str) -> int:
    """An octal umask ("0027", "027", "77") as an int; ValueError otherwise."""
    try:
        value = int(str(text), 8)
    except ValueError:
        value = -1
    if not 0 <= value <= 0o777:
        raise ValueError(f"--umask: expected an octal mask such as 0027, found {text!r}")
    return value


def current_umask() -> int:
    """The process umask (read by setting it and setting it back, under a lock)."""
    with _lock:
        value = os.umask(0o077)
        os.umask(value)
    return value


def file_mode() -> int:
    """The mode a new file gets under the current umask (0640 under 0027) [-]."""
    return 0o666 & ~current_umask()


def chmod_created(path: str | os.PathLike) -> None:
    """Give a file made with a fixed mode (``tempfile``: 0600) the mode of the umask."""
    os.chmod(Path(path), file_mode())
