"""The golden results (tests/golden/golden_snapshot.py): a refactor must not change one of them.

Bit for bit by default; ``ISENTROPE_GOLDEN_RTOL=1e-12`` compares to a relative tolerance when a
change reorders floating-point operations on purpose (see golden_snapshot.py). Regenerate with
``python tests/golden/golden_snapshot.py --write``, deliberately.
"""

from __future__ import annotations

import json
import math
import os

import pytest
from golden_snapshot import DEMO_FILE, SECTIONS_FILE, compare, run_demo, sections_snapshot, store_snapshot

RTOL = float(os.environ.get("ISENTROPE_GOLDEN_RTOL", "0"))


def _check(expected_file, actual) -> None:
    expected = json.loads(expected_file.read_text(encoding="utf-8"))
    # through JSON as the golden file was, so that both sides hold the same Python types
    actual = json.loads(json.dumps(actual))
    diff = compare(expected, actual, rtol=RTOL)
    assert not diff, f"{expected_file.name} differs (rtol {RTOL:g}):\n" + "\n".join(diff)


@pytest.mark.slow
def test_demo_results_are_unchanged(tmp_path):
    _check(DEMO_FILE, store_snapshot(run_demo(tmp_path)))


def test_section_fixture_results_are_unchanged():
    _check(SECTIONS_FILE, sections_snapshot())


def test_the_comparison_sees_one_bit():
    # the comparison itself: a change in the last bit of one value, a NULL that appears, a
    # row that goes, and -0.0 for 0.0 are all differences; the tolerance mode accepts the first
    x = 0.1 + 0.2
    y = math.nextafter(x, 1.0)
    base = {"m": {"data": {"v": [x, 0.0, 1.0]}}}
    assert compare(base, base) == []
    assert compare(base, {"m": {"data": {"v": [y, 0.0, 1.0]}}})
    assert compare(base, {"m": {"data": {"v": [x, -0.0, 1.0]}}})
    assert compare(base, {"m": {"data": {"v": [x, None, 1.0]}}})
    assert compare(base, {"m": {"data": {"v": [x, 0.0]}}})
    assert compare(base, {"m": {"data": {"v": [y, 0.0, 1.0]}}}, rtol=1e-12) == []
    assert compare(base, {"m": {"data": {"v": [x * (1 + 1e-9), 0.0, 1.0]}}}, rtol=1e-12)
