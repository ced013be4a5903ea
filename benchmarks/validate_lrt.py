"""Coverage of the likelihood-ratio-test p-values that ``edgefit sizes``
reports for nested candidates, on SIMULATED sightlines where the smaller
candidate is true.

Every sightline is tests/_batch_sim.py's (invented: Si gas edge x olivine
dust edge with the MRN size distribution, upper size 0.25 um, x power law,
two grating-like arms, edgefit's own simulator), so ``mrn`` (every size
fixed at the MRN values) is the truth and it is nested in
``mrn:amax=free``.  :func:`edgefit.analysis.sizes_compare.compare_sizes`
refits the sample under both (through the batch, parallel and resumable in
``--out``) and reports, per sightline, ΔC = C(mrn) − C(mrn:amax=free) and
p = P(χ²₁ ≥ ΔC) (Wilks 1938, Ann. Math. Stat. 9, 60).  Under the null the
p-values are uniform: the fraction below α should be α within the binomial
spread.  Printed per α: the fraction, the 99 % binomial band of the
fraction (``scipy.stats.binom.interval``), and whether it lies inside; and
the mean ΔC (1 for χ²₁, standard error √(2/n)) and a Kolmogorov–Smirnov
test of the p-values against the uniform distribution.  Printed, not
asserted.

    python benchmarks/validate_lrt.py [--sims 200] [--exposure 4e4] [--workers 2] [--out DIR]
"""
import argparse
import math
import time

import numpy as np

from _sim_sample import add_sample_options, simulated_sample


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sims", type=int, default=200)
    add_sample_options(ap, exposure=4e4, seed=7)
    a = ap.parse_args()

    from scipy import stats

    from edgefit.analysis.sizes_compare import compare_sizes

    out, manifest = simulated_sample(a, a.sims, "edgefit-lrt-", profile="[]", draws=100,
                                     hydrogen=False)
    t0 = time.perf_counter()
    res = compare_sizes(manifest, ["mrn", "mrn:amax=free"], out / "sizes",
                        workers=a.workers, progress=True)
    wall = time.perf_counter() - t0
    dc, p = [], []
    for name in res.sightlines:
        for c in res.summary["sightlines"][name]["comparisons"]:
            if c.get("nested"):
                dc.append(c["delta_stat"])
                p.append(c["p_value"])
    dc_a, p_a = np.array(dc), np.array(p)
    n = p_a.size
    print(f"{n} SIMULATED sightlines (truth: mrn, upper size 0.25 um; exposure "
          f"{a.exposure:g} s), {len(res.skipped)} skipped; {wall:.0f} s wall on "
          f"{a.workers} workers")
    print(f"dC < 0 (the free fit stopped above the fixed one; p set to 1): "
          f"{int(np.sum(dc_a < 0))}")
    print(f"mean dC {dc_a.mean():.3f} (chi2_1: 1, standard error {math.sqrt(2.0 / n):.3f})")
    print(f"{'alpha':>6s} {'expected':>9s} {'observed':>9s}   99 % binomial band   inside")
    for alpha in (0.01, 0.05, 0.10, 0.32, 0.50):
        frac = float(np.mean(p_a < alpha))
        lo, hi = stats.binom.interval(0.99, n, alpha)
        inside = lo / n <= frac <= hi / n
        print(f"{alpha:6.2f} {alpha:9.3f} {frac:9.3f}   [{lo / n:.3f}, {hi / n:.3f}]"
              f"        {'yes' if inside else 'NO'}")
    ks = stats.kstest(p_a, "uniform")
    print(f"Kolmogorov-Smirnov against uniform: D = {ks.statistic:.3f}, p = {ks.pvalue:.3g}")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
