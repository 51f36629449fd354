"""The distribution: a wheel holds every subpackage under isentrope.*, imports from where it is
unpacked, and the console script answers --version and --help."""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(out),
            str(ROOT),
        ],
        capture_output=True,
        text=True,
        timeout=300,
    )
    if proc.returncode != 0:
        pytest.fail(f"building the wheel failed:\n{proc.stdout}\n{proc.stderr}")
    (path,) = out.glob("isentrope-*.whl")
    return path


def test_wheel_holds_every_subpackage_and_no_top_level_calc_or_daemon(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    for folder in ("calc", "daemon"):
        for init in (ROOT / folder).rglob("__init__.py"):
            rel = init.relative_to(ROOT).as_posix()
            assert f"isentrope/{rel}" in names, f"{rel} is not in the wheel: list it in pyproject.toml"
    assert "isentrope/calc/steam.py" in names and "isentrope/daemon/cli.py" in names
    assert not any(n.startswith(("calc/", "daemon/")) for n in names)
    entry = next(n for n in names if n.endswith("entry_points.txt"))
    assert "isentrope = isentrope.daemon.cli:main" in zipfile.ZipFile(wheel).read(entry).decode()


def test_wheel_imports_from_where_it_is_unpacked(wheel, tmp_path):
    target = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(target)
    code = (
        "import sys\n"
        # leave out the editable install's finder, so that only the unpacked wheel can answer
        "sys.meta_path = [f for f in sys.meta_path if 'editable' not in type(f).__name__.lower()]\n"
        f"sys.path.insert(0, {str(target)!r})\n"
        "import isentrope.calc.steam as s, isentrope.daemon.cli as c, isentrope.daemon.stores.sqlite\n"
        "import isentrope.daemon.commands.demo\n"
        f"assert c.__file__.startswith({str(target)!r}), c.__file__\n"
        "print(round(float(s.h_pt(3.0, 300.0)), 6))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    # IAPWS R7-97(2012) Table 5: h(300 K, 3 MPa) = 115.331273 kJ/kg
    assert proc.stdout.strip() == "115.331273"


def test_console_script_version_and_help():
    from isentrope.daemon import __version__

    out = subprocess.run(
        [sys.executable, "-m", "isentrope.daemon.cli", "--version"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert out.returncode == 0 and out.stdout.strip() == f"isentrope {__version__}"
    helptext = subprocess.run(
        [sys.executable, "-m", "isentrope.daemon.cli", "--help"], capture_output=True, text=True, timeout=120
    ).stdout
    for command in ("run", "backfill", "check", "import-csv", "export", "demo", "report", "test-eval"):
        assert command in helptext
    # once, in the description (argparse wraps it at the terminal width)
    assert "not a protective function" in " ".join(helptext.split())
