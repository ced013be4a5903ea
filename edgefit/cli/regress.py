"""``edgefit regress SAMPLE --y Q --x Q``: a straight line through two
columns of a sample table.

Orthogonal distance regression, a Bayesian line with intrinsic scatter and
upper limits, rank correlations (with censored Kendall's tau when limits
are present); writes ``regression.json``, ``regression.png`` and
``regression_corner.png``.  See :mod:`edgefit.analysis.regression`.
"""
from __future__ import annotations

from ._sample import add_output_options, figures_of, sample_parser

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = sample_parser(subparsers, "regress", __doc__,
                      help="straight-line regression between two columns of a sample table",
                      sample_help="sample table (ECSV or FITS), or a folder holding "
                                  "sample.ecsv")
    p.add_argument("--y", required=True, metavar="Q", help="quantity on the vertical axis")
    p.add_argument("--x", required=True, metavar="Q", help="quantity on the horizontal axis")
    p.add_argument("--through-origin", action="store_true", help="fit y = slope * x")
    add_output_options(p, output_help="output folder (default: the table's folder)")
    p.add_argument("--seed", type=int, default=0, help="sampler seed (default 0)")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.regression import regress_sample
    from ..plotting.regression import save_regression_figures

    res = regress_sample(args.sample, args.y, args.x, through_origin=args.through_origin,
                         output=args.output, seed=args.seed,
                         figures=figures_of(args, save_regression_figures))
    d = res.to_dict()
    print(f"{d['n_points']} points ({d['n_limits']} limits), slope in {d['units']['slope']}")
    if d["odr"] is not None:
        print(f"  ODR       slope {d['odr']['slope']:.5g} +- {d['odr']['slope_err']:.3g}, "
              f"intercept {d['odr']['intercept']:.5g} +- {d['odr']['intercept_err']:.3g}")
    b = d["bayes"]
    print(f"  Bayesian  slope {b['slope']['median']:.5g} [{b['slope']['lo']:.5g}, "
          f"{b['slope']['hi']:.5g}], scatter {b['scatter']['median']:.3g}")
    k = d["kendall_censored"]
    print(f"  Kendall tau {k['tau']:.3f} (p = {k['p']:.3g}), Spearman rho "
          f"{d['spearman']['rho']:.3f} (p = {d['spearman']['p']:.3g})")
    print(f"  wrote {res.output}")
    return 0
