"""``edgefit demo``: simulate an invented sightline, fit it, compare with the truth.

Writes the SIMULATED spectra of "SIM-J1746" (four grating spectra with
responses and backgrounds) and their configuration into the output
folder, runs the same pipeline as ``edgefit fit`` on them (best fit,
profile intervals of the gas and dust Si columns, MCMC, derived
quantities, plots) and prints the result beside the simulated truth.
The logic is in :mod:`edgefit.demo`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("demo", help="simulate a sightline (invented source), fit it "
                              "and compare with the truth",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("-o", "--output", default="edgefit-demo",
                   help="output folder (default: edgefit-demo)")
    p.add_argument("--quick", action="store_true",
                   help="a short MCMC (a smoke test taking seconds, not a converged "
                        "posterior)")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..demo import run_demo

    run_demo(args.output, quick=args.quick, quiet=args.quiet)
    return 0
