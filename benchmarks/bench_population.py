"""Population fit by importance reweighting: timing and coverage.

1. Timing: :func:`edgefit.analysis.population.population_fit` on 50
   simulated sightlines x 2,000 posterior samples each, with a covariate
   (population mean c0 + c1 x, scatter s), beside one evaluation of the
   hyper-likelihood (target: the whole fit in 60 s or less on 2 cores).
2. Coverage (``--repeats N``, default 100): simulated samples of 30
   sightlines (true q_i = 0.5 + 0.8 x_i + N(0, 0.1^2), each measured with
   an error of 0.05-0.15, posterior samples drawn under a flat prior; all
   simulated); the fraction of repeats whose 68 % interval holds each
   hyper-parameter's truth, with the 99 % binomial band around 0.6827.

Run: ``python benchmarks/bench_population.py [--repeats N] [--no-timing]``.

Last run (2-core machine shared with other jobs): 29 s for 50 x 2,000;
coverage over 100 repeats 0.670 (c0), 0.790 (c1), 0.570 (s), band
[0.560, 0.800] -- inside, but s (flat prior, equal-tailed interval of a
skewed posterior) sits at the low edge and c1 at the high one.
"""
from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from scipy.stats import binom

from edgefit.analysis.population import _HyperPosterior, population_fit

TRUTH = {"c0": 0.5, "c1": 0.8, "s": 0.1}


def simulate(n, k, seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    theta = TRUTH["c0"] + TRUTH["c1"] * x + TRUTH["s"] * rng.standard_normal(n)
    err = rng.uniform(0.05, 0.15, n)
    y = theta + err * rng.standard_normal(n)
    samples = {f"sim-{i:03d}": (["q"], (y[i] + err[i] * rng.standard_normal(k))[:, None])
               for i in range(n)}
    cov = {f"sim-{i:03d}": float(x[i]) for i in range(n)}
    # the population mean is c0 + c1 (x - mean x): shift the truth of c0 accordingly
    return samples, cov, float(np.mean(x))


def timing():
    samples, cov, _ = simulate(50, 2000, 5)
    q = np.array([v[1][:, 0] for v in samples.values()])
    post = _HyperPosterior(q, np.zeros_like(q), np.zeros(50), True)
    theta = np.tile([0.5, 0.8, 0.1], (16, 1))
    t0 = time.perf_counter()
    for _ in range(20):
        post(theta)
    t_eval = (time.perf_counter() - t0) / 20
    t0 = time.perf_counter()
    res = population_fit(samples, "q", covariate=cov, seed=1)
    t_fit = time.perf_counter() - t0
    print(f"population on 50 sightlines x 2000 samples: {t_fit:.1f} s (target <= 60 s); "
          f"one vectorised hyper-likelihood call (16 walkers) {t_eval * 1e3:.1f} ms; "
          f"ratio {t_fit / t_eval:.0f}; chain {res.n_steps} steps")


def coverage(repeats):
    from tqdm import tqdm

    hits = {k: 0 for k in TRUTH}
    for r in tqdm(range(repeats), desc="coverage"):
        samples, cov, xbar = simulate(30, 500, 1000 + r)
        truth = dict(TRUTH)
        truth["c0"] = TRUTH["c0"] + TRUTH["c1"] * xbar
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = population_fit(samples, "q", covariate=cov, seed=r)
        for k in TRUTH:
            h = res.hyper[k]
            hits[k] += h["lo"] <= truth[k] <= h["hi"]
    lo = binom.ppf(0.005, repeats, 0.6827) / repeats
    hi = binom.ppf(0.995, repeats, 0.6827) / repeats
    print(f"\n68 % coverage over {repeats} repeats of 30 sightlines x 500 samples; "
          f"99 % binomial band [{lo:.3f}, {hi:.3f}]")
    for k in TRUTH:
        c = hits[k] / repeats
        print(f"  {k:3s} {c:.3f}  {'inside' if lo <= c <= hi else 'OUTSIDE'}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=100)
    ap.add_argument("--no-timing", action="store_true")
    ap.add_argument("--no-coverage", action="store_true")
    args = ap.parse_args()
    if not args.no_timing:
        timing()
    if not args.no_coverage:
        coverage(args.repeats)


if __name__ == "__main__":
    main()
