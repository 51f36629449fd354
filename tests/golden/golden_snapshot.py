"""Golden results: a fixed, fast run whose every stored series must not change in a refactor.

Two runs are recorded in this folder:

* ``demo35.json``: ``isentrope demo --days 35 --no-report`` (default seed) in the SQLite
  store, the shortest demo that still yields a baseline, deviations, a confirmed IP step,
  degradation rates, losses, an outlook and alarms (the synthetic unit is invented demo
  data). Every result table, the checkpoint and the saved states, read back with plain SQL.
* ``sections_reheat_unit.json``: every output column of ``calc.sections.evaluate`` on the
  section fixture ``fixtures/cases/sections_reheat_unit`` (with its ``config.toml``), and the
  same with uncertainty propagation on.

Comparison (``tests/golden/test_golden.py``) is bit for bit: floats are written with
``repr``, which round-trips a float64 exactly, and compared with ``==`` (NULL/NaN only equal to
NULL/NaN). Tables of more than ``FULL_CELLS`` cells (the per-minute ``section_samples`` and
the steady windows) are stored as a SHA-256 digest of each column's values in row order (the
``repr`` text, so a change in the last bit of one value changes the digest), with count, NULL
count, exact sum (``math.fsum``), min and max, and every ``SAMPLE_EVERY``-th row in full, so a
failure shows where and by how much things moved.

When a change reorders floating-point operations on purpose (a new summation order, a library
upgrade), run the test with ``ISENTROPE_GOLDEN_RTOL=1e-12``: digests are then skipped and every
stored value, sum, min and max is compared to that relative tolerance (absolute 1e-12 near
zero); then regenerate deliberately and say why in the commit message.

Columns that hold wall-clock readings (when the worker ran, how long it took, its lag behind
the clock) are left out; they are listed in ``WALL_CLOCK``.

Regenerate (deliberately, after checking a difference is intended)::

    python tests/golden/golden_snapshot.py --write
"""

from __future__ import annotations

import argparse
import hashlib
import json
import math
import sqlite3
import sys
import tempfile
import tomllib
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
DEMO_DAYS = 35
DEMO_FILE = HERE / "demo35.json"
SECTIONS_FILE = HERE / "sections_reheat_unit.json"
SECTIONS_CASE = ROOT / "fixtures" / "cases" / "sections_reheat_unit"

#: Tables with more cells than this are stored as digests plus a sample of rows.
FULL_CELLS = 12_000
#: Sample rows kept of a digested table: about this many.
SAMPLE_ROWS = 60
#: measurement -> columns holding wall-clock readings, not results.
WALL_CLOCK = {
    "worker_status": {"time", "time_utc", "lag_s", "cycle_duration_s", "duration_s"},
}
#: Keys of saved state objects that hold wall-clock readings (none today; listed if they appear).
STATE_WALL_CLOCK: set[str] = set()


def run_demo(folder: Path) -> Path:
    """Run the demo in-process into ``folder``; the path of its SQLite store."""
    from isentrope.daemon import cli

    rc = cli.main(["demo", "-d", str(folder), "--days", str(DEMO_DAYS), "--no-progress", "--no-report"])
    if rc != 0:
        raise RuntimeError(f"isentrope demo exited {rc}")
    return folder / "greywater2.sqlite"


def _digest(values: list) -> str:
    return hashlib.sha256(json.dumps(values).encode()).hexdigest()


def _column_summary(values: list) -> dict:
    nums = [v for v in values if isinstance(v, (int, float)) and not isinstance(v, bool)]
    out = {"sha256": _digest(values), "n": len(values), "n_null": sum(v is None for v in values)}
    if nums and len(nums) == len(values) - out["n_null"]:
        finite = [float(v) for v in nums if math.isfinite(v)]
        out["fsum"] = math.fsum(finite)
        out["min"] = min(finite) if finite else None
        out["max"] = max(finite) if finite else None
    return out


def table_snapshot(con: sqlite3.Connection, name: str, tag_keys: list[str]) -> dict:
    """One result table: columns in table order (wall-clock ones dropped), rows by key."""
    cols = [r[1] for r in con.execute(f'PRAGMA table_xinfo("{name}")')]
    cols = [c for c in cols if c not in WALL_CLOCK.get(name, set())]
    order = ", ".join([f'"{k}"' for k in tag_keys] + ["time"])
    sel = ", ".join(f'"{c}"' for c in cols)
    rows = con.execute(f'SELECT {sel} FROM "{name}" ORDER BY {order}').fetchall()
    data = {c: [r[i] for r in rows] for i, c in enumerate(cols)}
    snap = {"tag_keys": tag_keys, "columns": cols, "rows": len(rows)}
    if len(rows) * len(cols) <= FULL_CELLS:
        snap["data"] = data
    else:
        every = max(1, len(rows) // SAMPLE_ROWS)
        snap["digest"] = {c: _column_summary(v) for c, v in data.items()}
        snap["sample_every"] = every
        snap["sample"] = {c: v[::every] for c, v in data.items()}
    return snap


def store_snapshot(db: Path) -> dict:
    """Every stored result series, the checkpoints and the saved states of a SQLite store."""
    con = sqlite3.connect(db)
    try:
        results = dict(
            con.execute("SELECT measurement, tag_keys FROM isentrope_results ORDER BY measurement")
        )
        out = {"measurements": {m: table_snapshot(con, m, json.loads(k)) for m, k in results.items()}}
        out["checkpoints"] = dict(con.execute("SELECT name, time_ns FROM isentrope_checkpoint ORDER BY name"))
        states = {}
        for name, text in con.execute("SELECT name, state FROM isentrope_state ORDER BY name"):
            state = json.loads(text)
            states[name] = {k: v for k, v in state.items() if k not in STATE_WALL_CLOCK}
        out["states"] = states
        n_raw = con.execute("SELECT count(*), min(time), max(time) FROM samples").fetchone()
        out["raw_samples"] = {"count": n_raw[0], "first_ms": n_raw[1], "last_ms": n_raw[2]}
        return out
    finally:
        con.close()


def _plain(v):
    """A stored value as JSON holds it: NaN as None, numpy scalars as Python ones."""
    if v is None:
        return None
    if hasattr(v, "item"):
        v = v.item()
    if isinstance(v, float) and math.isnan(v):
        return None
    return v


def sections_snapshot() -> dict:
    """Every output column of ``calc.sections.evaluate`` on the section fixture."""
    import pandas as pd

    from isentrope.calc import sections as S

    with open(SECTIONS_CASE / "config.toml", "rb") as fh:
        kw = tomllib.load(fh)["evaluate"]
    frame = pd.read_csv(SECTIONS_CASE / "input.csv", index_col="row")
    out = {}
    for label, extra in (("as_configured", {}), ("with_uncertainty", {"uncertainty": None})):
        res = S.evaluate(frame, **{**kw, **extra}).to_frame()
        out[label] = {
            "index": [str(i) for i in res.index],
            "columns": list(res.columns),
            "data": {c: [_plain(v) for v in res[c].tolist()] for c in res.columns},
        }
    return out


def write_all() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        db = run_demo(Path(tmp))
        snap = store_snapshot(db)
    DEMO_FILE.write_text(json.dumps(snap, indent=0, sort_keys=False) + "\n", encoding="utf-8")
    SECTIONS_FILE.write_text(json.dumps(sections_snapshot(), indent=0) + "\n", encoding="utf-8")
    for f in (DEMO_FILE, SECTIONS_FILE):
        print(f"wrote {f.relative_to(ROOT)} ({f.stat().st_size / 1024:.0f} kB)")


# --- comparison --------------------------------------------------------------------------------
def _same(a, b, rtol: float) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    if rtol > 0 and isinstance(a, (int, float)) and isinstance(b, (int, float)):
        if not (math.isfinite(a) and math.isfinite(b)):
            return a == b
        return abs(a - b) <= rtol * max(abs(a), abs(b), 1.0)
    if isinstance(a, float) and isinstance(b, float):
        return repr(a) == repr(b)  # bit for bit, -0.0 included
    return a == b


def compare(expected, actual, rtol: float = 0.0, path: str = "", limit: int = 20) -> list[str]:
    """Differences between two snapshots (nested dicts and lists), at most ``limit`` lines."""
    out: list[str] = []

    def walk(e, a, p):
        if len(out) >= limit:
            return
        if isinstance(e, dict) and isinstance(a, dict):
            for k in list(e) + [k for k in a if k not in e]:
                if k not in a:
                    out.append(f"{p}/{k}: missing now")
                elif k not in e:
                    out.append(f"{p}/{k}: new (not in the golden file)")
                elif rtol > 0 and k == "sha256":
                    continue
                else:
                    walk(e[k], a[k], f"{p}/{k}")
        elif isinstance(e, list) and isinstance(a, list):
            if len(e) != len(a):
                out.append(f"{p}: {len(e)} values in the golden file, {len(a)} now")
                return
            for i, (x, y) in enumerate(zip(e, a, strict=True)):
                if isinstance(x, (dict, list)):
                    walk(x, y, f"{p}[{i}]")
                elif not _same(x, y, rtol):
                    out.append(f"{p}[{i}]: golden {x!r}, now {y!r}")
                    if len(out) >= limit:
                        return
        elif not _same(e, a, rtol):
            out.append(f"{p}: golden {e!r}, now {a!r}")

    walk(expected, actual, path)
    return out


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--write", action="store_true", help="run and overwrite the golden files")
    args = p.parse_args(argv)
    if not args.write:
        p.print_help()
        return 2
    write_all()
    return 0


if __name__ == "__main__":
    sys.exit(main())
