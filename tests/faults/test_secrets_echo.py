"""No configured secret in any text that leaves the process, against a hostile server.

The server (``local_http.LocalServer("echo")``, on 127.0.0.1) answers 401 or 500 with a body
that repeats the request's headers three ways and the decoded basic-auth pair, as a
misconfigured proxy may. Every command that talks to the store runs against it, with and
without --debug, in-process (its log records too) and as a process (the interpreter's own
output); the token, the password and their encoded forms must appear in none of stdout,
stderr, the log records and the files the command leaves behind (an export's CSV, anything
else in its directory).
"""

from __future__ import annotations

import logging
import os
import subprocess
import sys

import pytest
from local_http import LocalServer
from test_secrets import CLI_STORES, SECRET_ENV, cli_config, leaks

from isentrope.daemon import cli

COMMANDS = {
    "check": ["check", "--end", "2026-05-04T12:00Z", "--since", "2h"],
    "run": ["run", "--once"],
    "backfill": ["backfill", "--start", "2026-05-03", "--end", "2026-05-04", "--no-progress"],
    "export": ["export", "--start", "2026-05-03", "--end", "2026-05-04", "-o", "{dir}/export.csv"],
    "status": ["status"],
}


def expected_exit(command: str, status: int) -> tuple[int, ...]:
    """A refused credential (401) is a configuration error (exit 2), a server error is not;
    ``status`` says 3 for a store that is unreachable or refused a read (its documented codes)."""
    if command == "status":
        return (3,)
    return (2,) if status == 401 else (1, 3)


def argv_of(command: str, config, debug: bool) -> list[str]:
    argv = [a.replace("{dir}", str(config.parent)) for a in COMMANDS[command]]
    return (["--debug"] if debug else []) + argv[:1] + ["-c", str(config)] + argv[1:]


def files_text(folder, config) -> str:
    """Everything the command left in its directory but the configuration it was given."""
    return "".join(
        p.read_text(errors="replace") for p in sorted(folder.rglob("*")) if p.is_file() and p != config
    )


@pytest.mark.parametrize("debug", [False, True], ids=["plain", "debug"])
@pytest.mark.parametrize("status", [401, 500])
@pytest.mark.parametrize("store", list(CLI_STORES))
def test_command_line_never_shows_a_secret(
    tmp_path, capsys, caplog, monkeypatch, store, status, debug, fault_report
):
    for k, v in SECRET_ENV.items():
        monkeypatch.setenv(k, v)
    caplog.set_level(logging.DEBUG)
    with LocalServer("echo", status=status) as server:
        path = cli_config(tmp_path, server.url, CLI_STORES[store])
        for name in COMMANDS:
            rc = cli.main(argv_of(name, path, debug))
            out = capsys.readouterr()
            text = out.out + out.err + caplog.text
            found = leaks(text + files_text(tmp_path, path))
            ok = rc in expected_exit(name, status) and not found
            ok = ok and "***" in text  # the echo reached a message, redacted
            if debug and "isentrope: " in out.err:  # an error line: its traceback before it
                ok = ok and "Traceback" in out.err
            fault_report.record(
                "secrets (echoing server)",
                f"{store} HTTP {status} {name}{' --debug' if debug else ''}",
                as_expected=ok,
                detail=f"exit {rc}, shown {found}: {out.err[-200:]}",
            )
            assert ok, (name, rc, found, text[-3000:])
            caplog.clear()
        assert server.server.requests  # asked, and echoed


@pytest.mark.parametrize(
    "store, status, debug, command",
    [
        ("influx2-pair", 500, True, "run"),
        ("influx1-basic", 401, True, "backfill"),
        ("influx1-token", 500, False, "check"),
        ("influx1-token", 500, True, "export"),
    ],
)
def test_command_line_process_never_shows_a_secret(tmp_path, store, status, debug, command, fault_report):
    """The real process: its own stderr log handler, the interpreter's output."""
    with LocalServer("echo", status=status) as server:
        path = cli_config(tmp_path, server.url, CLI_STORES[store])
        cmd = [sys.executable, "-m", "isentrope.daemon.cli", *argv_of(command, path, debug)]
        done = subprocess.run(
            cmd, capture_output=True, text=True, timeout=120, env={**os.environ, **SECRET_ENV}, check=False
        )
    text = done.stdout + done.stderr
    found = leaks(text + files_text(tmp_path, path))
    ok = done.returncode in expected_exit(command, status) and "***" in text and not found
    fault_report.record(
        "secrets (echoing server)",
        f"process: {store} HTTP {status} {command}{' --debug' if debug else ''}",
        as_expected=ok,
        detail=f"exit {done.returncode}, shown {found}: {done.stderr[-200:]}",
    )
    assert ok, (done.returncode, found, text[-3000:])
