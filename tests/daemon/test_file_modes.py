"""Files and folders the command line creates are the owner's and the group's only (0640 files,
0750 folders, by the umask 0027 it sets), whatever umask it was started with; ``--umask``
changes that. They hold plant data (common practice, no source)."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pandas as pd
import pytest
from test_cli_tools import END, plant_frame, write_config

from isentrope.daemon import cli
from isentrope.daemon.config import load_config
from isentrope.daemon.stores.sqlite import SqliteStore


def mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


@pytest.fixture
def loose_umask():
    """The process starts with the usual 0022 (files 0644): the command line must tighten it."""
    previous = os.umask(0o022)
    try:
        yield
    finally:
        os.umask(previous)


def wide_csv(tmp_path: Path, config_path: Path) -> Path:
    config = load_config(config_path)
    frame = plant_frame(END - pd.Timedelta("6h"), 360)
    frame.columns = [config.roles[r].tag for r in frame.columns]
    path = tmp_path / "history.csv"
    frame.to_csv(path, date_format="%Y-%m-%dT%H:%M:%SZ")
    return path


# six hours give no baseline: the report's deviation plot has nothing to label (not the point here)
@pytest.mark.filterwarnings("ignore:No artists with labels found")
def test_store_export_and_report_are_group_readable_only(tmp_path, capsys, loose_umask):
    config = write_config(tmp_path)
    store_path = tmp_path / "unit7.sqlite"
    assert cli.main(["import-csv", "-c", str(config), str(wide_csv(tmp_path, config))]) == 0
    assert mode(store_path) == 0o640
    start, end = (END - pd.Timedelta("6h")).isoformat(), END.isoformat()
    assert cli.main(["backfill", "-c", str(config), "--start", start, "--end", end, "--no-progress"]) == 0
    for p in tmp_path.glob("unit7.sqlite*"):  # the store, and its -wal/-shm if still there
        assert mode(p) == 0o640, p
    out = tmp_path / "out.csv"
    assert cli.main(["export", "-c", str(config), "--start", start, "--end", end, "-o", str(out)]) == 0
    assert mode(out) == 0o640
    report = tmp_path / "reports" / "u7"
    assert cli.main(["report", "-c", str(config), "--start", start, "--end", end, "-o", str(report)]) == 0
    assert mode(report) == 0o750 and mode(report.parent) == 0o750
    files = [p for p in report.rglob("*") if p.is_file()]
    assert files and all(mode(p) == 0o640 for p in files), {p.name: oct(mode(p)) for p in files}
    assert (
        cli.main(
            ["--umask", "0077", "export", "-c", str(config), "--start", start, "--end", end, "-o", str(out)]
        )
        == 0
    )
    assert mode(out) == 0o600
    capsys.readouterr()
    assert os.umask(0o022) == 0o022  # the command gave the process its umask back


def test_a_new_sqlite_store_and_its_wal_are_0640_outside_the_command_line(tmp_path, loose_umask):
    path = tmp_path / "lib.sqlite"
    store = SqliteStore(path)
    try:
        store.save_state("x", {"a": 1})
        made = [p for p in tmp_path.iterdir() if p.name.startswith("lib.sqlite")]
        assert {p.name for p in made} >= {"lib.sqlite", "lib.sqlite-wal"}
        assert all(mode(p) == 0o640 for p in made), {p.name: oct(mode(p)) for p in made}
    finally:
        store.close()


def test_a_bad_umask_is_refused(capsys):
    with pytest.raises(SystemExit) as exit_:
        cli.main(["--umask", "0999", "check", "-c", "x.toml"])
    assert exit_.value.code == 2
    assert "--umask: expected an octal mask such as 0027, found '0999'" in capsys.readouterr().err
