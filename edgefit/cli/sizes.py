"""``edgefit sizes MANIFEST --try SPEC --try SPEC ...``: refit a batch under
several grain-size distributions and say which the data prefer.

Each candidate is a batch (``DIR/candidates/<label>``, parallel and
resumable); the comparison (statistic, dC, AIC, BIC, Akaike weights,
likelihood-ratio tests where nested, size parameters with intervals) is
written to ``DIR/sizes.ecsv``, ``DIR/sizes.json`` and ``DIR/sizes.png``.
SPEC is FAMILY[:NAME=VALUE,...] with VALUE a number (fixed) or 'free', e.g.
``mrn``, ``mrn:amax=free``, ``single:size=0.3``,
``lognormal:center=0.1,width=0.4``.  The work is
:func:`edgefit.analysis.sizes_compare.compare_sizes`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("sizes", help="compare grain-size distributions over a batch",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("manifest", help="batch manifest (TOML)")
    p.add_argument("--try", dest="specs", action="append", required=True, metavar="SPEC",
                   help="a candidate size distribution (give two or more), e.g. mrn, "
                        "mrn:amax=free, single:size=0.3, lognormal:center=0.1,width=0.4")
    p.add_argument("-o", "--output", metavar="DIR",
                   help="output folder (default: <manifest stem>_sizes beside the manifest)")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes "
                   "(default: the number of CPUs; 0 = run in this process)")
    p.add_argument("--fresh", action="store_true", help="refit every sightline even when "
                   "its inputs are unchanged")
    p.add_argument("--mcmc", action="store_true", help="also run MCMC for every fit "
                   "(off by default)")
    p.add_argument("--alpha", type=float, default=0.05,
                   help="level of the likelihood-ratio tests (default 0.05)")
    p.add_argument("--no-plots", action="store_true", help="do not draw the figure")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.sizes_compare import compare_sizes
    from ..plotting.sizes import save_sizes_figure

    res = compare_sizes(args.manifest, args.specs, args.output, workers=args.workers,
                        fresh=args.fresh, mcmc=args.mcmc, alpha=args.alpha,
                        figures=None if args.no_plots else save_sizes_figure,
                        progress=not args.quiet)
    if not args.quiet:
        sample = res.summary["sample"]
        print(f"{len(res.sightlines)} sightlines compared; skipped {len(res.skipped)}")
        for s, t in sample["candidates"].items():
            print(f"  {s:32s} C {t['statistic']:10.2f}  dC {t['delta_stat']:8.2f}  "
                  f"dAIC {t['delta_aic']:8.2f}  weight {t['akaike_weight']:.3g}  "
                  f"AIC wins {t['wins']}")
        for c in sample["comparisons"]:
            print("  " + c["sentence"])
        print(f"  wrote {res.output}")
    return 0
