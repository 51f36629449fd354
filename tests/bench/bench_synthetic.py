"""Speed of the synthetic unit's generator against its own floor, measured in the same run.

Run as ``python tests/bench/bench_synthetic.py [--days 365] [--freq 1min] [--seed N]``.

The reference repeats the eleven ``isentrope.calc.steam`` calls of the expansion on the
generated online rows (what any IF97-consistent generator must pay); ``ratio`` is the
generator's time over the reference. It prints one line of ``key=value`` figures [s] and row
counts. No figure is asserted anywhere: the ratio is the number to compare between commits.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Sequence

from isentrope.calc import steam
from isentrope.calc.names import ROLES
from isentrope.daemon.synthetic import DEFAULT_SEED, generate_with_state


def bench(days: float = 365, freq: str = "1min", seed: int = DEFAULT_SEED) -> dict:
    """Time ``generate_with_state`` and the same IF97 calls alone; returns the figures."""
    t0 = time.perf_counter()
    _, _, state = generate_with_state(start="2025-01-01", days=days, freq=freq, seed=seed)
    t_gen = time.perf_counter() - t0
    on = state["online"].to_numpy()
    st = {role: state[f"true_{role}"].to_numpy()[on] for role in ROLES}
    t0 = time.perf_counter()
    for p_in, t_in, p_out in (
        ("throttle_p", "throttle_t", "cold_reheat_p"),
        ("hot_reheat_p", "hot_reheat_t", "crossover_p"),
    ):
        h = steam.h_pt(st[p_in], st[t_in])
        s = steam.s_pt(st[p_in], st[t_in])
        steam.h_ps(st[p_out], s)
        steam.t_ph(st[p_out], h - 264.0)  # an outlet enthalpy [kJ/kg]; only the call's cost counts
    s = steam.s_pt(st["crossover_p"], st["crossover_t"])
    h = steam.h_ps(st["lp_extraction_p"], s)
    steam.t_ph(st["lp_extraction_p"], h + 30.0)
    t_ref = time.perf_counter() - t0
    return {
        "days": days,
        "rows": int(len(state)),
        "online_rows": int(on.sum()),
        "generate_s": round(t_gen, 3),
        "steam_reference_s": round(t_ref, 3),
        "ratio": round(t_gen / t_ref, 3),
        "rest_s": round(t_gen - t_ref, 3),
    }


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=float, default=365.0)
    parser.add_argument("--freq", default="1min")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    args = parser.parse_args(argv)
    figures = bench(args.days, args.freq, args.seed)
    print(" ".join(f"{k}={v}" for k, v in figures.items()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
