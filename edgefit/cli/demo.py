"""``edgefit demo``: simulate an invented sample of sightlines, fit it in
batch, relate it to hydrogen and write a report.

Writes the SIMULATED spectra of eight invented sightlines through the
"Brindle Cloud" (two grating arms each, OGIP files with responses and
backgrounds), their batch manifest, the batch fits and sample table, the
regressions against N_H, grain columns, the self-shielding curve, a
comparison with the simulated truth and ``report.html`` into the output
folder.  The logic is in :mod:`edgefit.demo.sample`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("demo", help="simulate an invented sample of sightlines, fit "
                              "it in batch and write an HTML report",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("-o", "--output", default="edgefit-demo",
                   help="output folder (default: edgefit-demo)")
    p.add_argument("--quick", action="store_true",
                   help="no MCMC: best fits with profile-likelihood intervals, the size "
                        "comparison on three sightlines (about a minute on two cores "
                        "instead of several)")
    p.add_argument("--workers", type=int, default=None,
                   help="worker processes for the batch (default: CPU count)")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..demo.sample import run_sample_demo
    from ..errors import ArgumentError

    if args.workers is not None and args.workers < 0:
        raise ArgumentError("--workers: must be >= 0")
    run_sample_demo(args.output, quick=args.quick, quiet=args.quiet, workers=args.workers)
    return 0
