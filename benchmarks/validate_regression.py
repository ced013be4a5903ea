"""Coverage of the Bayesian straight line and timing of ``regress``.

1. Coverage: ``--repeats`` (default 120) simulated samples of 60 points
   (slope 1.5, intercept 0.5, intrinsic scatter 0.3, errors 0.2 in x and
   y, 20 % of the points upper limits in y; all simulated) are fitted with
   :func:`edgefit.analysis.regression.bayes_line`; for each parameter the
   fraction of repeats whose 68 % interval contains the truth is printed
   with the 99 % binomial acceptance band around 0.6827 (scipy.stats.binom).
   The ODR slope's ±1σ coverage (detections only, so biased by the
   censoring) is printed for comparison.
2. Timing: ``regress`` (ODR + Bayesian line + rank correlations) on 1,000
   simulated points, beside the ODR alone on the same points (target:
   the whole regression in 20 s or less on a 2-core machine).

Run: ``python benchmarks/validate_regression.py [--repeats N] [--no-timing]``.

Last run (2-core machine shared with other jobs): regress on 1,000 points
(199 limits) 4.4 s; coverage over 120 repeats 0.708 (slope), 0.700
(intercept), 0.700 (scatter), band [0.575, 0.792] -- inside.
"""
from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.stats import binom

from edgefit.analysis.regression import (bayes_line, odr_line, regress,
                                         simulate_line_table)

TRUTH = {"slope": 1.5, "intercept": 0.5, "scatter": 0.3}
LEVEL = 0.6827


def coverage(repeats, n=60, censored=0.2):
    from tqdm import tqdm

    hits = {k: 0 for k in TRUTH}
    odr_hits = 0
    for seed in tqdm(range(repeats), desc="coverage"):
        t = simulate_line_table(n, TRUTH["slope"], TRUTH["intercept"], TRUTH["scatter"],
                                censored_fraction=censored, seed=10_000 + seed)
        x, y = np.asarray(t["x"]), np.asarray(t["y"])
        sx, sy = np.asarray(t["x_err"]), np.asarray(t["y_err"])
        yu = np.asarray(t["y_upper"])
        b = bayes_line(x, y, sx, sy, None, yu, seed=seed)
        for k, v in TRUTH.items():
            hits[k] += b[k]["lo"] <= v <= b[k]["hi"]
        d = ~yu
        o = odr_line(x[d], y[d], sx[d], sy[d])
        odr_hits += abs(o["slope"] - TRUTH["slope"]) <= o["slope_err"]
    lo = binom.ppf(0.005, repeats, LEVEL) / repeats
    hi = binom.ppf(0.995, repeats, LEVEL) / repeats
    print(f"\n68 % coverage over {repeats} repeats of {n} points ({censored:.0%} censored in y); "
          f"99 % binomial band [{lo:.3f}, {hi:.3f}]")
    ok = True
    for k in TRUTH:
        c = hits[k] / repeats
        inside = lo <= c <= hi
        ok &= inside
        print(f"  bayes {k:9s} {c:.3f}  {'inside' if inside else 'OUTSIDE'}")
    print(f"  odr   slope     {odr_hits / repeats:.3f}  (detections only; for comparison)")
    return ok


def timing(n=1000):
    t = simulate_line_table(n, TRUTH["slope"], TRUTH["intercept"], TRUTH["scatter"],
                            censored_fraction=0.2, seed=7)
    x, y = np.asarray(t["x"]), np.asarray(t["y"])
    sx, sy = np.asarray(t["x_err"]), np.asarray(t["y_err"])
    d = ~np.asarray(t["y_upper"])
    t0 = time.perf_counter()
    odr_line(x[d], y[d], sx[d], sy[d])
    t_odr = time.perf_counter() - t0
    t0 = time.perf_counter()
    r = regress(t, "y", "x", seed=1)
    t_all = time.perf_counter() - t0
    print(f"\nregress on {n} points ({r.n_limits} limits): {t_all:.2f} s "
          f"(target <= 20 s); ODR alone {t_odr * 1e3:.1f} ms; ratio {t_all / t_odr:.0f}; "
          f"chain {r.bayes['n_steps']} steps x {r.bayes['n_walkers']} walkers")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=120)
    ap.add_argument("--no-timing", action="store_true")
    ap.add_argument("--no-coverage", action="store_true")
    args = ap.parse_args()
    if not args.no_timing:
        timing()
    if not args.no_coverage:
        coverage(args.repeats)


if __name__ == "__main__":
    main()
