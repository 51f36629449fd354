"""The one grammar of durations and times (isentrope.daemon.timeutil), and imports without cycles.

The duration forms are the project's own grammar (documented in deploy/operators-guide.md);
the time forms are ISO 8601 extended format (ISO 8601-1:2019, 5.4.2 and 5.3.4.2).
"""

from __future__ import annotations

import ast
import datetime as dt
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from isentrope.daemon.timeutil import (
    DURATION_UNITS,
    EPOCH,
    LONGEST_DURATION,
    as_timedelta,
    epoch_seconds,
    floor_time,
    format_duration,
    parse_duration,
    parse_time,
    utc,
)

REPO = Path(__file__).resolve().parents[2]

# --- durations ------------------------------------------------------------------------------
ACCEPTED = [
    ("30s", 30),
    ("15m", 900),
    ("15min", 900),
    ("90min", 5400),
    ("2h", 7200),
    ("1d", 86400),
    ("1w", 604800),
    ("1h30m", 5400),
    ("1h30min", 5400),
    ("1d12h", 129600),
    ("0.5h", 1800),
    ("1.5h", 5400),
    ("250ms", 0.25),
    ("1s500ms", 1.5),
    (" 5 m ", 300),
    ("2H", 7200),
    ("0s", 0),
    ("3650d", 3650 * 86400),
]

REFUSED = [
    "",
    "15",  # no unit
    "m",  # no number
    "15x",
    "1y",
    "1mo",
    "-5m",  # negative
    "+5m",  # a sign
    "-1h30m",
    "1h 30",  # a part without unit
    "1.2.3h",
    "1e3s",  # no exponent
    ".5h",  # a decimal needs its leading digit
    "abc",
    "3651d",  # longer than LONGEST_DURATION
    "9" * 30 + "w",  # would overflow a timedelta
]


@pytest.mark.parametrize("text, seconds", ACCEPTED)
def test_accepted_durations(text, seconds):
    assert parse_duration(text) == dt.timedelta(seconds=seconds)
    assert as_timedelta(text) == pd.Timedelta(seconds=seconds)


@pytest.mark.parametrize("text", REFUSED)
def test_refused_durations(text):
    with pytest.raises(ValueError, match="expected a duration"):
        parse_duration(text)
    with pytest.raises(ValueError, match="^lookback: expected a duration"):
        as_timedelta(text, "lookback")


def test_a_negative_duration_is_refused_with_the_reason():
    with pytest.raises(ValueError, match="no sign and is never negative"):
        parse_duration("-5m")
    for value in (dt.timedelta(minutes=-5), pd.Timedelta("-5min"), -300, pd.NaT, float("nan")):
        with pytest.raises(ValueError, match="settle must be a non-negative duration"):
            as_timedelta(value, "settle")


def test_durations_are_exact_to_the_microsecond():
    # decimal arithmetic, not binary floats: 0.1 s is 100000 us exactly
    assert parse_duration("0.1s") == dt.timedelta(microseconds=100_000)
    assert parse_duration("0.000001s") == dt.timedelta(microseconds=1)
    assert parse_duration("3650d") == LONGEST_DURATION


def test_python_callers_may_pass_timedeltas_and_seconds():
    assert as_timedelta(dt.timedelta(hours=2)) == pd.Timedelta(hours=2)
    assert as_timedelta(pd.Timedelta("15min")) == pd.Timedelta(minutes=15)
    assert as_timedelta(90) == pd.Timedelta(seconds=90)
    with pytest.raises(ValueError):
        as_timedelta(True)
    with pytest.raises(ValueError):
        as_timedelta([1, 2])


@settings(max_examples=60, deadline=None)
@given(st.integers(min_value=0, max_value=10**8))
def test_duration_round_trip(seconds):
    delta = dt.timedelta(seconds=seconds)
    assert parse_duration(format_duration(delta)) == delta


def test_the_operators_guide_lists_the_grammar():
    # deploy/operators-guide.md, section 9: its unit table names every unit of the grammar and
    # every example in it parses
    text = (REPO / "deploy" / "operators-guide.md").read_text(encoding="utf-8")
    section = text[text.index("## 9. Writing durations and times") :]
    rows = [line for line in section.splitlines() if line.startswith("| `")]
    units, examples = set(), []
    for row in rows:
        cells = [c.strip() for c in row.strip("|").split("|")]
        units.update(re.findall(r"`([a-z]+)`", cells[0]))
        examples += re.findall(r"`([^`]+)`", cells[2])
    assert units == set(DURATION_UNITS)
    assert len(examples) >= 10
    for example in examples:
        parse_duration(example)
    for refused in re.findall(r"`([^`]+)`", section[section.index("Refused") : section.index("3650 days")]):
        with pytest.raises(ValueError):
            parse_duration(refused)


def test_format_duration_writes_the_shortest_form():
    assert format_duration(parse_duration("90min")) == "1h30m"
    assert format_duration(dt.timedelta(0)) == "0s"
    assert format_duration(LONGEST_DURATION) == "3650d"


# --- times ----------------------------------------------------------------------------------
def test_utc_refuses_naive_and_missing_times():
    assert utc("2025-01-01T02:00+02:00") == pd.Timestamp("2025-01-01T00:00Z")
    assert utc(dt.datetime(2025, 1, 1, tzinfo=dt.UTC)).unit == "ns"
    for value, why in (
        ("2025-01-01T00:00", "no time zone"),
        (dt.datetime(2025, 1, 1), "no time zone"),
        (pd.NaT, "NaT"),
        ("soon", "not a time"),
    ):
        with pytest.raises(ValueError, match=why):
            utc(value, "start")


def test_parse_time_names_the_option():
    assert parse_time("2025-05-02") == pd.Timestamp("2025-05-02T00:00Z")
    with pytest.raises(ValueError, match=r"^--end: time '05/02/2025' is not an ISO 8601"):
        parse_time("05/02/2025", "--end")


def test_the_configuration_reads_times_with_the_same_grammar(tmp_path):
    from test_config import minimal, problems

    from isentrope.daemon.config import parse_config

    text = minimal('[baseline]\nstart = "2025-05-02T10:00+02:00"\nend = "2025-06-01"\n')
    cfg = parse_config(text, base_dir=tmp_path)
    assert cfg.baseline.start == pd.Timestamp("2025-05-02T08:00Z")
    assert cfg.baseline.end == pd.Timestamp("2025-06-01T00:00Z")
    found = problems(minimal('[baseline]\nstart = "05/02/2025"\nend = "2025-06-01"\n'), base_dir=tmp_path)
    assert len(found) == 1 and "baseline.start: time '05/02/2025' is not an ISO 8601" in found[0], found
    assert "write 2025-02-05 (5 February) or 2025-05-02 (2 May)" in found[0]


def test_epoch_and_floor():
    assert EPOCH == pd.Timestamp("1970-01-01T00:00Z")
    assert epoch_seconds("1970-01-02T00:00Z") == 86400.0
    assert floor_time(pd.Timestamp("2025-03-01 10:47:13Z"), pd.Timedelta("1h")) == pd.Timestamp(
        "2025-03-01 10:00Z"
    )


# --- imports --------------------------------------------------------------------------------
def _modules() -> dict[str, Path]:
    out = {}
    for pkg in ("calc", "daemon"):
        for path in sorted((REPO / pkg).rglob("*.py")):
            parts = list(path.relative_to(REPO).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(["isentrope", *parts])] = path
    return out


def _module_level_imports(path: Path, known: set[str]) -> set[str]:
    """isentrope modules imported at module level (not inside functions or TYPE_CHECKING)."""
    found = set()
    for node in ast.parse(path.read_text(encoding="utf-8")).body:
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name in known)
        elif isinstance(node, ast.ImportFrom) and (node.module or "").startswith("isentrope"):
            for a in node.names:
                sub = f"{node.module}.{a.name}"
                found.add(sub if sub in known else node.module)
    return found & known


def test_no_import_cycle_between_modules():
    # A cycle among module-level imports (a package's __init__ left aside: importing a
    # submodule runs its package first by design) is what made pipeline fetch worker's
    # duration parser inside a function.
    mods = _modules()
    graph = {
        m: {d for d in _module_level_imports(p, set(mods)) if not m.startswith(d + ".")}
        for m, p in mods.items()
    }
    state: dict[str, int] = {}
    cycles = []

    def visit(m, stack):
        state[m] = 1
        for d in sorted(graph[m]):
            if state.get(d) == 1:
                cycles.append(stack[stack.index(d) :] + [d])
            elif d not in state:
                visit(d, [*stack, d])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert not cycles, "import cycles: " + "; ".join(" -> ".join(c) for c in cycles)
    assert "isentrope.daemon.worker" not in graph["isentrope.daemon.pipeline"]
    assert "isentrope.daemon.pipeline" in graph["isentrope.daemon.worker"]


def test_no_function_level_import_of_project_modules_in_the_core():
    # lazy imports stay only for heavy optional libraries (matplotlib, dask, ...) and in the
    # command modules, whose run() loads what one command needs
    core = [REPO / "daemon" / f for f in ("worker.py", "pipeline.py", "analysis.py", "fleet.py")]
    core += [REPO / "daemon" / f for f in ("synthetic.py", "baselines.py", "writer.py", "series.py")]
    core += sorted((REPO / "daemon" / "report").glob("*.py"))
    core += sorted((REPO / "daemon" / "stores").glob("*.py"))
    core += sorted((REPO / "daemon" / "config").glob("*.py"))
    core += sorted((REPO / "calc").rglob("*.py"))
    lazy = []
    for path in core:
        for fn in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)):
                for n in ast.walk(fn):
                    if isinstance(n, ast.ImportFrom) and (n.module or "").startswith("isentrope"):
                        lazy.append(f"{path.name}:{n.lineno}: {n.module}")
    assert not lazy, lazy


def test_every_module_imports_alone():
    # each module in a fresh interpreter state of the project (third-party libraries stay
    # loaded, so this takes seconds): an import cycle or a missing import fails here
    code = (
        "import importlib, sys\n"
        f"mods = {sorted(m for m in _modules() if not m.endswith('__main__'))!r}\n"
        "bad = []\n"
        "for m in mods:\n"
        "    for k in [k for k in sys.modules if k.startswith('isentrope')]:\n"
        "        del sys.modules[k]\n"
        "    try:\n"
        "        importlib.import_module(m)\n"
        "    except Exception as exc:\n"
        "        bad.append(f'{m}: {exc!r}')\n"
        "print('\\n'.join(bad))\n"
        "sys.exit(1 if bad else 0)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr
