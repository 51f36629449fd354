"""Speed of isentrope.calc.steam against the iapws package and CoolProp's IF97 backend.

Run as ``python tests/bench/bench_steam.py [--n 1000000] [--sample 2000] [--repeat 3]``.

Everything is measured in one run on the same machine, so the ratios are fair even on a busy
machine (absolute times are not). The arrays are turbine duty, in IF97 regions 1, 2 and 4:

* (p, T): p log-uniform 0.002-30 MPa, T uniform 273.16-1073.15 K, region 3 points redrawn
  (they go to iapws point by point and would measure iapws, not this module);
* (p, s): expansion end points: s of a superheated inlet state (0.5-16 MPa, 20-300 K of
  superheat, at most 873.15 K) at an outlet pressure log-uniform 0.003 MPa to the inlet
  pressure: superheated and wet end points.

iapws is timed point by point on a sample of ``--sample`` points and extrapolated per point.
CoolProp (an optional extra) is timed with array input to ``PropsSI`` on the full (p, T)
arrays and on a sample of the (p, s) arrays (its h(p, s) is slower), when it is installed.

Targets: at least 200x faster than iapws for h_pt and s_pt and 500x for h_ps; no
slower than CoolProp's array call for h_pt and at least 10x faster than it for h_ps.
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np

from isentrope.calc import steam

TARGETS = {  # function: (x iapws, x CoolProp)
    "h_pt": (200.0, 1.0),
    "s_pt": (200.0, None),
    "h_ps": (500.0, 10.0),
}


def make_pt(n, rng):
    """n (p, T) points in regions 1 and 2 [MPa, K]."""
    p = np.empty(0)
    t = np.empty(0)
    while p.size < n:
        pp = np.exp(rng.uniform(np.log(0.002), np.log(30.0), n))
        tt = rng.uniform(273.16, 1073.15, n)
        reg = steam.region(pp, tt)
        keep = (reg == 1) | (reg == 2)
        p = np.concatenate([p, pp[keep]])
        t = np.concatenate([t, tt[keep]])
    return p[:n], t[:n]


def make_ps(n, rng):
    """n (p, s) expansion end points [MPa, kJ/(kg K)]."""
    p_in = rng.uniform(0.5, 16.0, n)
    t_in = np.minimum(steam.t_sat(p_in) + rng.uniform(20.0, 300.0, n), 873.15)
    s = steam.s_pt(p_in, t_in)
    p_out = np.exp(rng.uniform(np.log(0.003), np.log(p_in)))
    return p_out, s


def best_time(fn, repeat):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def time_iapws(kind, a, b):
    from iapws import IAPWS97

    t0 = time.perf_counter()
    if kind == "pt":
        for x, y in zip(a, b, strict=True):
            IAPWS97(P=float(x), T=float(y))
    else:
        for x, y in zip(a, b, strict=True):
            IAPWS97(P=float(x), s=float(y))
    return (time.perf_counter() - t0) / a.size


def coolprop():
    try:
        from CoolProp.CoolProp import PropsSI
    except ImportError:
        return None
    return PropsSI


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python tests/bench/bench_steam.py", description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=1_000_000, help="points per array (default 1e6)")
    ap.add_argument("--sample", type=int, default=2000, help="points timed with iapws (default 2000)")
    ap.add_argument(
        "--coolprop-ps-sample",
        type=int,
        default=50_000,
        help="(p, s) points timed with CoolProp (default 50000)",
    )
    ap.add_argument("--repeat", type=int, default=3, help="repeats of each timing, best kept")
    ap.add_argument("--seed", type=int, default=97)
    ap.add_argument("--no-coolprop", action="store_true", help="skip CoolProp (its import is slow)")
    args = ap.parse_args(argv)
    if args.n < 1 or args.sample < 1 or args.repeat < 1:
        ap.error("--n, --sample and --repeat must be positive")

    rng = np.random.default_rng(args.seed)
    p, t = make_pt(args.n, rng)
    p_o, s_o = make_ps(args.n, rng)
    _, d = steam.h_ps(p_o, s_o, return_details=True)
    wet = float(np.mean(d.region == 4))

    ours = {
        "h_pt": best_time(lambda: steam.h_pt(p, t), args.repeat) / args.n,
        "s_pt": best_time(lambda: steam.s_pt(p, t), args.repeat) / args.n,
        "h_ps": best_time(lambda: steam.h_ps(p_o, s_o), args.repeat) / args.n,
    }
    k = min(args.sample, args.n)
    ip_pt = time_iapws("pt", p[:k], t[:k])
    ip_ps = time_iapws("ps", p_o[:k], s_o[:k])
    ref_iapws = {"h_pt": ip_pt, "s_pt": ip_pt, "h_ps": ip_ps}

    ref_cp = {}
    agree = {}
    props = None if args.no_coolprop else coolprop()
    if props is not None:
        bk = "IF97::Water"
        ref_cp["h_pt"] = best_time(lambda: props("H", "P", p * 1e6, "T", t, bk), 1) / args.n
        ref_cp["s_pt"] = best_time(lambda: props("S", "P", p * 1e6, "T", t, bk), 1) / args.n
        m = min(args.coolprop_ps_sample, args.n)
        ref_cp["h_ps"] = best_time(lambda: props("H", "P", p_o[:m] * 1e6, "S", s_o[:m] * 1e3, bk), 1) / m
        h_cp = props("H", "P", p[:k] * 1e6, "T", t[:k], bk) / 1e3
        agree["h_pt"] = float(np.max(np.abs(h_cp - steam.h_pt(p[:k], t[:k]))))
        hs_cp = props("H", "P", p_o[:k] * 1e6, "S", s_o[:k] * 1e3, bk) / 1e3
        agree["h_ps"] = float(np.nanmax(np.abs(hs_cp - steam.h_ps(p_o[:k], s_o[:k]))))

    out = sys.stdout
    out.write(
        f"isentrope.calc.steam benchmark: {args.n} points per array, iapws on {k} points, "
        f"best of {args.repeat}\n"
    )
    out.write(f"(p, s) end points: {100 * wet:.1f} % wet\n")
    head = f"{'function':8s} {'this us/pt':>11s} {'iapws us/pt':>12s} {'x iapws':>9s} {'target':>7s}"
    if props is not None:
        head += f" {'CoolProp us/pt':>15s} {'x CoolProp':>11s} {'target':>7s}"
    out.write(head + "\n")
    missed = []
    for name, ours_t in ours.items():
        r_ip = ref_iapws[name] / ours_t
        want_ip, want_cp = TARGETS[name]
        line = f"{name:8s} {ours_t * 1e6:11.3f} {ref_iapws[name] * 1e6:12.1f} {r_ip:9.0f} {want_ip:7.0f}"
        if r_ip < want_ip:
            missed.append(f"{name} vs iapws {r_ip:.0f}x < {want_ip:.0f}x")
        if props is not None:
            r_cp = ref_cp[name] / ours_t
            tgt = "-" if want_cp is None else f"{want_cp:.0f}"
            line += f" {ref_cp[name] * 1e6:15.3f} {r_cp:11.2f} {tgt:>7s}"
            if want_cp is not None and r_cp < want_cp:
                missed.append(f"{name} vs CoolProp {r_cp:.2f}x < {want_cp:.0f}x")
        out.write(line + "\n")
    if args.no_coolprop:
        out.write("CoolProp skipped (--no-coolprop)\n")
    elif props is None:
        out.write("CoolProp not installed (pip install 'isentrope[bench]'): no CoolProp column\n")
    else:
        out.write(
            f"CoolProp h(p, s) timed on {min(args.coolprop_ps_sample, args.n)} points; "
            f"max |this - CoolProp| on the iapws sample: h_pt {agree['h_pt']:.2e} kJ/kg, "
            f"h_ps {agree['h_ps']:.2e} kJ/kg\n"
        )
    out.write("targets met\n" if not missed else "targets missed: " + "; ".join(missed) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
