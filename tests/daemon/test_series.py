"""The result-series registry (isentrope.daemon.series) against the documents that describe
the series: the tables of daemon/DECISIONS.md and the queries of deploy/dashboard.json. What a
demo run stores is checked against it in tests/daemon/test_demo_report.py. Project facts: no
outside source."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from isentrope.calc import names, quality, sections
from isentrope.daemon import series

ROOT = Path(__file__).resolve().parents[2]


def test_the_decisions_tables_are_the_ones_the_registry_makes():
    text = (ROOT / "daemon" / "DECISIONS.md").read_text(encoding="utf-8")
    assert series.marked_jobs(text) == ["worker", "analysis"]
    assert series.render_document(text) == text, (
        "daemon/DECISIONS.md result-series tables are stale: run `python -m isentrope.daemon.series --write`"
    )


def test_render_replaces_only_between_the_markers():
    text = "a\n<!-- series-table: analysis -->\nold\n<!-- end series-table -->\nb\n"
    out = series.render_document(text)
    assert out.startswith("a\n<!-- series-table: analysis -->\n| measurement |")
    assert out.endswith("|\n<!-- end series-table -->\nb\n")
    assert "old" not in out and "`degradation`" in out and "`section_samples`" not in out


def test_every_series_is_named_once_with_units_and_meanings():
    measurements = [s.measurement for s in series.SERIES]
    assert len(measurements) == len(set(measurements))
    for s in series.SERIES:
        assert s.job in ("worker", "analysis")
        assert len(s.field_names) == len(set(s.field_names)), s.measurement
        assert not set(s.field_names) & ({"unit", "time"} | {t for t, _ in s.tags}), s.measurement
        for f in s.fields:
            assert f.unit and f.text, (s.measurement, f.name)


def test_the_role_tables_are_one():
    # calc.sections and calc.quality read the role table of calc.names
    assert set(sections.ROLE_QUANTITY) <= set(names.ROLES)
    assert all(sections.ROLE_QUANTITY[r] == names.ROLES[r][0] for r in sections.ROLE_QUANTITY)
    assert quality.NEEDED_ROLES == names.REQUIRED_ROLES
    window_roles = {f.name for f in series.BY_MEASUREMENT["steady_windows"].fields} & set(names.ROLES)
    assert window_roles == set(names.ROLES)


_FROM = re.compile(r'FROM\s+"([^"]+)"')
_SELECT = re.compile(r"SELECT\s+(.*?)\s+FROM", re.S)


def _queries(node):
    if isinstance(node, dict):
        for k, v in node.items():
            if k == "query" and isinstance(v, str) and v.startswith("SELECT"):
                yield v
            else:
                yield from _queries(v)
    elif isinstance(node, list):
        for v in node:
            yield from _queries(v)


def test_the_dashboard_queries_only_registered_series_fields_and_tags():
    dash = json.loads((ROOT / "deploy" / "dashboard.json").read_text(encoding="utf-8"))
    queries = list(_queries(dash))
    assert len(queries) >= 10
    for q in queries:
        (m,) = _FROM.findall(q)
        assert m in series.BY_MEASUREMENT, f"dashboard queries {m!r}, not a result series"
        s = series.BY_MEASUREMENT[m]
        fields = set(re.findall(r'"([^"]+)"', _SELECT.search(q).group(1)))
        assert fields and fields <= set(s.field_names), (q, sorted(fields - set(s.field_names)))
        grouped = re.findall(r"GROUP BY\s+(.*)$", q)
        used = re.findall(r'"(\w+)"\s*(?:=~|=)', q) + (re.findall(r'"(\w+)"', grouped[0]) if grouped else [])
        for name in used:  # a tag, or a field in a condition
            assert name in {"unit"} | {t for t, _ in s.tags} | set(s.field_names), (q, name)


@pytest.mark.parametrize("job", ["worker", "analysis"])
def test_the_printed_table_lists_every_field_with_its_unit(job):
    table = series.markdown_table(job)
    for s in series.SERIES:
        if s.job == job:
            row = next(line for line in table.splitlines() if line.startswith(f"| `{s.measurement}` |"))
            for f in s.fields:
                assert f"`{f.name}` [{f.unit}]" in row
