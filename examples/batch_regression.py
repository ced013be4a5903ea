"""A batch of SIMULATED sightlines (the demo's invented Brindle Cloud),
fitted together, then the total Si column regressed on the hydrogen
column of the (invented) 21-cm and H2 tracers.

Run:  python examples/batch_regression.py [--quick] [-o OUT]
(--quick: four of the eight sightlines).
"""
import argparse

from edgefit.analysis import regress, run_batch
from edgefit.demo.region import SIGHTLINES, si_abundance
from edgefit.demo.sample import write_sample


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="four sightlines only")
    ap.add_argument("-o", "--output", default="batch_regression")
    ap.add_argument("--workers", type=int, default=None)
    args = ap.parse_args(argv)

    manifest, truths = write_sample(args.output, quick=True)   # spectra + sample.toml
    only = [row[0] for row in SIGHTLINES[::2]] if args.quick else None
    table = run_batch(manifest, f"{args.output}/batch", workers=args.workers, mcmc=False,
                      only=only)
    print(table["name", "status", "total_Si_cm2", "total_Si_cm2_lo", "total_Si_cm2_hi"])
    fit = regress(table, y="total_Si_cm2", x="nh_hi_2h2", seed=1, bayes=not args.quick)
    d = fit.to_dict()
    print(f"\ntotal Si per H (ODR slope): {d['odr']['slope']:.4g} +/- "
          f"{d['odr']['slope_err']:.2g}  (simulated truth {si_abundance():.4g})")
    if d["bayes"]:
        b = d["bayes"]["slope"]
        print(f"Bayesian slope: {b['median']:.4g} [{b['lo']:.4g}, {b['hi']:.4g}] (68 %)")
    print(f"Spearman rho {d['spearman']['rho']:.2f} (p = {d['spearman']['p']:.2g})")


if __name__ == "__main__":
    main()
