"""``edgefit population SAMPLE_DIR --quantity NAME``: a population fit of a
batch output folder from its sightlines' saved posterior samples.

Importance reweighting (Hogg, Myers & Bovy 2010) of each sightline's
samples of one fitted parameter: a normal population, optionally with a
mean linear in a sample-table covariate (e.g. log10 N_H) and an intrinsic
scatter; writes ``population.json``, ``population_sightlines.ecsv`` and
``population.png``.  See :mod:`edgefit.analysis.population`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("population", help="population fit of a batch output folder "
                                                 "from its saved posterior samples",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("sample_dir", metavar="SAMPLE_DIR", help="output folder of 'edgefit batch'")
    p.add_argument("--quantity", required=True, metavar="NAME",
                   help="sampled (free) parameter, e.g. dust_col")
    p.add_argument("--covariate", metavar="COLUMN",
                   help="sample-table column for a population mean linear in it")
    p.add_argument("--linear-covariate", action="store_true",
                   help="use the covariate itself, not its log10")
    p.add_argument("--log", action="store_true", help="model the logarithm of the quantity")
    p.add_argument("--interim", choices=("flat", "log-uniform"), default="flat",
                   help="prior the sightlines were sampled under (default flat)")
    p.add_argument("-o", "--output", metavar="DIR", help="output folder (default SAMPLE_DIR)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--no-plots", action="store_true")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.population import population_from_batch
    from ..plotting.population import save_population_figure

    res = population_from_batch(args.sample_dir, args.quantity, covariate=args.covariate,
                                log_covariate=not args.linear_covariate, log=args.log,
                                interim=args.interim, output=args.output,
                                figures=None if args.no_plots else save_population_figure,
                                seed=args.seed)
    print(f"{len(res.sightlines)} sightlines; skipped {len(res.skipped)}")
    for k, v in res.hyper.items():
        print(f"  {k:3s} {v['median']:.5g} [{v['lo']:.5g}, {v['hi']:.5g}]")
    shrink = [e["columns"][res.quantity]["shrink"] for e in res.sightlines]
    print(f"  median interval shrink of {res.quantity}: {sorted(shrink)[len(shrink) // 2]:.2f}")
    print(f"  wrote {res.output}")
    return 0
