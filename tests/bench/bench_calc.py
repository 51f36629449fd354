"""Calculation speed: a unit-year of one-minute rows through screening, steady tagging and all
section figures (calc/ only, no store), with an iapws point-by-point reference in the same run.

    python tests/bench/bench_calc.py [--days 365] [--sample 200]

Prints the time of each stage, the total against the 10 s target of the section-performance
work, and the ratio of the iapws reference (HP and IP efficiency point by point, extrapolated
per row) to our vectorised figures per row. Nothing here asserts a time.
"""

from __future__ import annotations

import argparse
import time

import pandas as pd


def _iapws_reference(frame: pd.DataFrame, sample: int) -> float:
    """Seconds per row for HP and IP efficiency with iapws.IAPWS97, point by point."""
    from iapws import IAPWS97

    rows = frame.dropna().iloc[:: max(1, len(frame) // sample)].head(sample)
    t0 = time.perf_counter()
    for _, r in rows.iterrows():
        for pi, ti, po, to in (
            ("throttle_p", "throttle_t", "cold_reheat_p", "cold_reheat_t"),
            ("hot_reheat_p", "hot_reheat_t", "crossover_p", "crossover_t"),
        ):
            a = IAPWS97(P=r[pi], T=r[ti])
            b = IAPWS97(P=r[po], T=r[to])
            c = IAPWS97(P=r[po], s=a.s)
            _ = (a.h - b.h) / (a.h - c.h)
    return (time.perf_counter() - t0) / len(rows)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days", type=float, default=365.0)
    ap.add_argument("--sample", type=int, default=200, help="rows for the iapws reference")
    args = ap.parse_args(argv)

    from isentrope.calc import quality, sections, steady
    from isentrope.daemon import synthetic

    frame, _ = synthetic.generate(days=args.days)
    n = len(frame)
    rating = synthetic.SCENARIO["rating_mw"]
    stages = {}
    t = time.perf_counter()
    figures = sections.evaluate(frame).to_frame()
    stages["sections.evaluate (with uncertainty)"] = time.perf_counter() - t
    t = time.perf_counter()
    given = {
        "hp": figures["hp_efficiency"].to_numpy(),
        "ip": figures["ip_efficiency"].to_numpy(),
        "lp_group": figures["lp_dry_efficiency"].to_numpy(),
    }
    screen = quality.screen(frame, efficiencies=given)
    stages["quality.screen"] = time.perf_counter() - t
    t = time.perf_counter()
    st = steady.tag_steady(frame, method="ptc6", ok=screen.ok, rating_mw=rating, offline_mw=0.05 * rating)
    stages["steady.tag_steady (ptc6)"] = time.perf_counter() - t
    t = time.perf_counter()
    sections.evaluate(frame, uncertainty=False)
    no_unc = time.perf_counter() - t
    total = sum(stages.values())
    ref = _iapws_reference(frame, args.sample)

    print(f"{n:,} rows ({args.days:g} days of one-minute readings), {len(frame.columns)} roles")
    for name, sec in stages.items():
        print(f"  {name:40s} {sec:7.2f} s  {sec / n * 1e6:7.2f} us/row")
    print(
        f"  {'total':40s} {total:7.2f} s  (target 10 s for a unit-year: "
        f"{'met' if total <= 10 * args.days / 365 else 'not met'})"
    )
    print(f"  sections.evaluate without uncertainty     {no_unc:7.2f} s  {no_unc / n * 1e6:7.2f} us/row")
    print(
        f"reference, iapws point by point (HP and IP efficiency only, {args.sample} rows): "
        f"{ref * 1e6:,.0f} us/row"
    )
    print(
        f"ratio reference / ours: {ref / (no_unc / n):,.0f}x (figures without uncertainty), "
        f"{ref / (total / n):,.0f}x (whole chain with every uncertainty)"
    )
    print(
        f"steady samples {int(st.steady.sum()):,} ({st.steady.mean():.1%}), windows {len(st.windows):,}; "
        f"flagged samples {int((~screen.ok).sum()):,}"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
