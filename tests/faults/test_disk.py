"""A full disk and a corrupted SQLite file.

Full disk: the command runs with a file size limit (``RLIMIT_FSIZE``, a few tens of kB above
the store's size; writes past it fail with EFBIG as on a full file system). It must stop with a
clear error and exit 3, leave the file a sound database (``PRAGMA integrity_check``) with the
raw samples and the results stored before it untouched, and the same command, run again with
room, must end with the results of a run that never lacked room, bit for bit.

Corrupted file: the header or the schema page overwritten. Every command that opens the store
stops with an error naming the file and what SQLite found, and the file is not changed (the
same bytes) nor replaced; an export writes no file.

Data: a short synthetic history of the fictional Greywater Bend Unit 2
(isentrope.daemon.synthetic), five-minute samples.
"""

from __future__ import annotations

import errno
import hashlib
import io
import os
import resource
import sqlite3
import subprocess
import sys

import pandas as pd
import pytest
import worker_support as ws

from isentrope.daemon.cli import main as cli_main
from isentrope.daemon.stores.sqlite import SqliteStore

from .test_kills import UNIT, compare_exactly, results

TAGS = {"unit": UNIT}
FIRST = ws.START + pd.Timedelta("5h")
MIDDLE = FIRST + pd.Timedelta("5h")
LAST = MIDDLE + pd.Timedelta("8h")


def backfill_args(cfg, start, end) -> list[str]:
    return ["backfill", "-c", str(cfg), "--start", start.isoformat(), "--end", end.isoformat()]


def sqlite_unit(tmp_path, name, raw):
    db = tmp_path / f"{name}.sqlite"
    cfg = ws.write_config(tmp_path / f"{name}.toml", ws.store_toml("sqlite", path=str(db)))
    with SqliteStore(db) as store:
        store.write_raw(ws.mappings(), raw)
    return db, cfg


def digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_full_disk_stops_the_backfill_clearly_and_loses_nothing_stored(tmp_path, fault_report):
    raw = ws.plant_history(1.0, freq="5min")
    chunk = ["--chunk", "1h", "--no-progress"]
    ref_db, ref_cfg = sqlite_unit(tmp_path, "reference", raw)
    for s, e in ((FIRST, MIDDLE), (MIDDLE, LAST)):
        assert cli_main(backfill_args(ref_cfg, s, e) + chunk) == 0

    db, cfg = sqlite_unit(tmp_path, "full", raw)
    cfg.write_text(cfg.read_text().replace("retries = 2", "retries = 0"))  # no waiting for room
    assert cli_main(backfill_args(cfg, FIRST, MIDDLE) + chunk) == 0
    with SqliteStore(db) as store:
        raw_before = store.read_raw(ws.mappings(), ws.START, ws.START + pd.Timedelta(days=1))
        stored_before = results(store, FIRST, MIDDLE)
    assert len(stored_before["section_samples"]) > 0
    limit = db.stat().st_size + 48 * 1024

    def small_disk():  # in the child: files may not grow past `limit` (EFBIG, SIGXFSZ ignored)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, resource.RLIM_INFINITY))

    done = subprocess.run(
        [sys.executable, "-m", "isentrope.daemon.cli", *backfill_args(cfg, MIDDLE, LAST), *chunk],
        capture_output=True,
        text=True,
        timeout=180,
        preexec_fn=small_disk,
    )
    err = done.stderr
    clear = (
        done.returncode == 3
        and "Traceback" not in err
        and str(db) in err
        and "disk I/O error" in err
        and "run the same command to resume" in err
    )
    with sqlite3.connect(db) as con:
        sound = con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    with SqliteStore(db) as store:
        raw_after = store.read_raw(ws.mappings(), ws.START, ws.START + pd.Timedelta(days=1))
        kept, lost, why = compare_exactly(stored_before, results(store, FIRST, MIDDLE))
    lost = lost or not raw_after.equals(raw_before) or not sound
    fault_report.record(
        "disk full",
        "backfill with a file size limit (SQLite)",
        as_expected=clear and kept and sound,
        lost_data=lost,
        detail=f"exit {done.returncode}: {err[-300:]} {why}",
    )
    assert clear, err[-3000:]
    assert sound and kept and not lost, why

    assert cli_main(backfill_args(cfg, MIDDLE, LAST) + chunk) == 0  # room again: resumes
    with SqliteStore(ref_db) as ref, SqliteStore(db) as store:
        same, lost, why = compare_exactly(results(ref, FIRST, LAST), results(store, FIRST, LAST))
    fault_report.record(
        "disk full", "backfill resumed with room", as_expected=same, lost_data=lost, detail=why
    )
    assert same, why


def test_an_export_to_a_full_disk_fails_clearly_and_leaves_no_partial_file(
    tmp_path, capsys, monkeypatch, fault_report
):
    """The export's file write fails with ENOSPC (injected: the SQLite file itself is larger
    than any size limit that would stop a CSV of a few kB)."""
    raw = ws.plant_history(1.0, freq="5min")
    db, cfg = sqlite_unit(tmp_path, "export", raw)
    assert cli_main(backfill_args(cfg, FIRST, MIDDLE) + ["--no-progress"]) == 0
    out = tmp_path / "out.csv"
    out.write_text("the previous export\n")
    argv = ["export", "-c", str(cfg), "--start", "2025-03-03", "--end", "2025-03-04", "-o", str(out)]
    before = digest(db)
    real_fdopen = os.fdopen

    class FullDisk(io.TextIOWrapper):
        def write(self, text):
            super().write(text[:100])
            self.flush()
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def fdopen(fd, mode="r", *args, **kwargs):
        if "w" not in mode:
            return real_fdopen(fd, mode, *args, **kwargs)
        return FullDisk(real_fdopen(fd, "wb"), encoding=kwargs.get("encoding"), newline=kwargs.get("newline"))

    capsys.readouterr()
    monkeypatch.setattr(os, "fdopen", fdopen)
    rc = cli_main(argv)
    monkeypatch.undo()
    err = capsys.readouterr().err
    leftovers = sorted(
        p.name
        for p in tmp_path.iterdir()
        if p.name not in {"export.sqlite", "export.toml"}
        and not p.name.endswith(".lock")  # the backfill's lease
    )
    kept = out.read_text() == "the previous export\n" and digest(db) == before
    ok = rc != 0 and "Traceback" not in err and "No space left on device" in err and leftovers == ["out.csv"]
    fault_report.record(
        "disk full",
        "export, ENOSPC injected",
        as_expected=ok and kept,
        lost_data=not kept,
        detail=f"exit {rc}: {err[-300:]} files {leftovers}",
    )
    assert ok and kept, (rc, err[-3000:], leftovers)


CORRUPTIONS = {
    "header": (0, b"not a database!!", "file is not a database"),
    "schema page": (100, os.urandom(3996), "malformed"),
}


@pytest.mark.parametrize("where", list(CORRUPTIONS))
def test_a_corrupted_sqlite_file_is_reported_and_never_overwritten(tmp_path, capsys, fault_report, where):
    raw = ws.plant_history(1.0, freq="5min")
    db, cfg = sqlite_unit(tmp_path, "corrupt", raw)
    assert cli_main(backfill_args(cfg, FIRST, MIDDLE) + ["--no-progress"]) == 0
    offset, garbage, what = CORRUPTIONS[where]
    data = bytearray(db.read_bytes())
    data[offset : offset + len(garbage)] = garbage
    db.write_bytes(bytes(data))
    for extra in ("-wal", "-shm"):
        (tmp_path / f"corrupt.sqlite{extra}").unlink(missing_ok=True)
    before = digest(db)
    capsys.readouterr()
    out = tmp_path / "out.csv"
    commands = {
        "backfill": backfill_args(cfg, MIDDLE, LAST) + ["--no-progress"],
        "run --once": ["run", "-c", str(cfg), "--once"],
        "export": ["export", "-c", str(cfg), "--start", "2025-03-03", "--end", "2025-03-04", "-o", str(out)],
        "status": ["status", "-c", str(cfg)],
    }
    for name, argv in commands.items():
        rc = cli_main(argv)
        said = capsys.readouterr()
        err = said.err + said.out  # status reports on stdout
        unchanged = digest(db) == before
        ok = rc != 0 and str(db) in err and what in err and "Traceback" not in err and unchanged
        ok = ok and not out.exists()
        fault_report.record(
            "corrupt SQLite",
            f"{where}: {name}",
            as_expected=ok,
            lost_data=not unchanged,
            detail=f"exit {rc}: {err[-300:]}",
        )
        assert ok, (name, rc, err)
    wal = tmp_path / "corrupt.sqlite-wal"  # SQLite may open its log beside it: nothing in it
    assert not wal.exists() or wal.stat().st_size == 0
