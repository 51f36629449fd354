"""Cost of the fixed-order sums (issue 13 item 7): steam properties, section figures and
baseline predictions with the fixed-order sums of ``calc.steam`` (``_rows_sum`` and the
in-place weighting of ``_PowerSum.derivatives``) and ``calc.baseline._row_products``, against
the numpy reductions they replaced (``b.sum(axis=0)``, ``einsum``, ``X @ beta``), both timed in
the same run, interleaved.

    python tests/bench/bench_row_sums.py [--n 100000] [--repeat 9]

The reference is put in place by patching ``_PowerSum.value``, ``_PowerSum.derivatives`` and
``baseline._row_products`` with their former code (below), so everything else is the same.
Prints the best time of each variant and their ratio (fixed order / reference); nothing here
asserts a time.
"""

from __future__ import annotations

import argparse
import time
from contextlib import contextmanager

import numpy as np


def _reference_value(self, x, y):
    # _PowerSum.value before the fixed-order sums
    from isentrope.calc.steam import _BLOCK

    out = np.empty(x.shape[0])
    for lo in range(0, x.shape[0], _BLOCK):
        sl = slice(lo, lo + _BLOCK)
        m = x[sl].shape[0]
        b = self._accumulate(self.rows, self.xplan.build(x[sl]), m)
        b *= self.yplan.build(y[sl])
        out[sl] = b.sum(axis=0)
    return out


def _reference_derivatives(self, x, y, order_y=2, with_x=False, with_xy=False):
    # _PowerSum.derivatives before the fixed-order sums (its weights J and J (J - 1) rebuilt
    # from the factors kept now)
    from isentrope.calc.steam import _BLOCK

    jf = self.w_steps[0][:, 0]
    w = np.vstack([np.ones_like(jf), jf, jf * (jf - 1.0)])
    m_all = x.shape[0]
    rows = order_y + 1
    out = np.empty((rows + int(with_x) + int(with_xy), m_all))
    for lo in range(0, m_all, _BLOCK):
        sl = slice(lo, lo + _BLOCK)
        m = x[sl].shape[0]
        xp = self.xplan.build(x[sl])
        yp = self.yplan.build(y[sl])
        b = self._accumulate(self.rows, xp, m)
        b *= yp
        out[0, sl] = b.sum(axis=0)
        for r in range(1, rows):
            out[r, sl] = np.einsum("j,jm->m", w[r], b)
        if with_x:
            bx = self._accumulate(self.rows_di, xp, m)
            bx *= yp
            out[rows, sl] = bx.sum(axis=0)
            if with_xy:
                out[rows + 1, sl] = np.einsum("j,jm->m", w[1], bx)
    if order_y >= 1:
        out[1] /= y
    if order_y >= 2:
        out[2] /= y * y
    if with_x:
        out[rows] /= x
    if with_xy:
        out[rows + 1] /= x * y
    return out


def _reference_row_products(X, beta, cov):
    # calc.baseline before the fixed-order sums
    return X @ beta, np.einsum("ij,jk,ik->i", X, cov, X)


@contextmanager
def _variant(name):
    from isentrope.calc import baseline, steam

    cls = steam._PowerSum
    saved = cls.value, cls.derivatives, baseline._row_products
    if name == "reference":
        cls.value, cls.derivatives = _reference_value, _reference_derivatives
        baseline._row_products = _reference_row_products
    try:
        yield
    finally:
        cls.value, cls.derivatives, baseline._row_products = saved


def _best(cases, repeat):
    """Best time of every (case, variant), the variants interleaved in each round."""
    best = {}
    for _ in range(repeat):
        for case, fn in cases.items():
            for variant in ("fixed order", "reference"):
                with _variant(variant):
                    t0 = time.perf_counter()
                    fn()
                    dt = time.perf_counter() - t0
                key = (case, variant)
                best[key] = min(best.get(key, float("inf")), dt)
    return best


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000, help="points of the property evaluation")
    ap.add_argument("--repeat", type=int, default=9)
    args = ap.parse_args(argv)

    from isentrope.calc import sections, steam
    from isentrope.calc.baseline import fit_baseline
    from isentrope.calc.bench import make_ps, make_pt
    from isentrope.daemon import synthetic

    rng = np.random.default_rng(7)
    p, t = make_pt(args.n, rng)
    p2, s2 = make_ps(args.n, rng)
    day, _ = synthetic.generate(days=1.0)  # one day of one-minute samples (fictional unit)

    # a baseline model and 10,000 windows to predict (fictional figures)
    import pandas as pd

    def windows(k):
        load = rng.uniform(300.0, 600.0, k)
        temp = rng.uniform(-1.0, 1.0, k)
        eff = 0.88 - 0.02 * (load / 600.0 - 0.8) ** 2 + 0.003 * temp + rng.normal(0.0, 0.002, k)
        return pd.DataFrame({"gross_output": load, "temp": temp, "eff": eff})

    model = fit_baseline(windows(2000), "hp", efficiency_col="eff", rating_mw=600.0, extra_cols=("temp",))
    to_predict = windows(10_000)

    cases = {
        f"h_pt, {args.n:,} points": lambda: steam.h_pt(p, t),
        f"s_pt, {args.n:,} points": lambda: steam.s_pt(p, t),
        f"h_ps, {args.n:,} points": lambda: steam.h_ps(p2, s2),
        f"sections.evaluate, 1 day x 1 min ({len(day):,} rows)": lambda: sections.evaluate(day),
        "baseline predict, 10,000 points": lambda: model.predict(to_predict),
    }
    best = _best(cases, args.repeat)
    print(f"best of {args.repeat}, variants interleaved; ratio = fixed order / reference")
    for case in cases:
        a, b = best[(case, "fixed order")], best[(case, "reference")]
        print(f"  {case:48s} fixed {a * 1e3:8.2f} ms  reference {b * 1e3:8.2f} ms  ratio {a / b:5.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
