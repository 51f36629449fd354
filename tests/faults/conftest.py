"""The fault suite: the worker, the stores and the command line under hostile conditions, on
real stores (SQLite, InfluxDB servers on 127.0.0.1).

Every test here is marked ``faults``: CI runs them with the rest; a laptop can leave them out
with ``-m "not faults"``. Each case a test tries goes to the session's ``FaultReport``
(``fault_report`` fixture): its category, whether it behaved as expected and whether data
were lost. The table is printed at the end of the session (``pytest_terminal_summary``), and
the session fails if any case lost data, whatever its test asserted.
"""

from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

import pytest

# the shared worker helpers live beside the worker tests
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "daemon"))


@dataclasses.dataclass
class FaultCase:
    category: str
    case: str
    as_expected: bool
    lost_data: bool
    detail: str = ""


class FaultReport:
    """The cases the fault suite tried in this session."""

    def __init__(self) -> None:
        self.cases: list[FaultCase] = []

    def record(
        self, category: str, case: str, *, as_expected: bool, lost_data: bool = False, detail: str = ""
    ) -> FaultCase:
        c = FaultCase(category, case, bool(as_expected), bool(lost_data), detail)
        self.cases.append(c)
        return c

    def table(self) -> list[str]:
        """One row per category: cases tried, as expected, lost data; then the cases that were not
        as expected or lost data."""
        cats: dict[str, list[FaultCase]] = {}
        for c in self.cases:
            cats.setdefault(c.category, []).append(c)
        width = max([len("category"), *(len(k) for k in cats)])
        rows = [f"{'category':<{width}}  {'tried':>5}  {'as expected':>11}  {'lost data':>9}"]
        for k, cs in cats.items():
            ok = sum(c.as_expected for c in cs)
            lost = sum(c.lost_data for c in cs)
            rows.append(f"{k:<{width}}  {len(cs):>5}  {ok:>11}  {lost:>9}")
        total = self.cases
        rows.append(
            f"{'all':<{width}}  {len(total):>5}  {sum(c.as_expected for c in total):>11}  "
            f"{sum(c.lost_data for c in total):>9}"
        )
        bad = [c for c in total if not c.as_expected or c.lost_data]
        for c in bad[:20]:
            flag = "LOST DATA" if c.lost_data else "not as expected"
            rows.append(f"  {flag}: {c.category}: {c.case}: {c.detail}"[:300])
        if len(bad) > 20:
            rows.append(f"  ... and {len(bad) - 20} more")
        return rows

    @property
    def lost_data(self) -> list[FaultCase]:
        return [c for c in self.cases if c.lost_data]


REPORT = FaultReport()
_HERE = Path(__file__).resolve().parent


def pytest_collection_modifyitems(config, items):
    """Every test under tests/faults is marked ``faults`` (so ``-m "not faults"`` leaves the
    whole suite out)."""
    for item in items:
        if _HERE in Path(str(item.fspath)).resolve().parents:
            item.add_marker(pytest.mark.faults)


@pytest.fixture(scope="session")
def fault_report() -> FaultReport:
    return REPORT


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    if not REPORT.cases:
        return
    terminalreporter.section("fault suite")
    for row in REPORT.table():
        terminalreporter.write_line(row)


def pytest_sessionfinish(session, exitstatus):
    if REPORT.lost_data and session.exitstatus == 0:
        session.exitstatus = pytest.ExitCode.TESTS_FAILED
