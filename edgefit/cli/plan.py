"""``edgefit plan CONFIG``: how well would an observation separate gas from dust?

Reads a simulation configuration (the format of ``edgefit simulate``: the
model's parameter values are the assumed truth, ``[simulate]`` gives the
response and exposure, and the source level either as the emission
norms or as ``counts_per_channel`` near the edge) and reports the Fisher 68 % uncertainties of the
gas, dust and total columns and their correlation against exposure, the
68 % widths of many simulated fits, the exposure needed to tell gas from
dust at a chosen significance and, in words, what would help when the
setup cannot.  Writes plan.ecsv, plan_sims.ecsv, plan.json, plan.txt and
plan.png.  The logic is in :mod:`edgefit.analysis.plan`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("plan", help="forecast gas and dust column uncertainties "
                              "(Fisher matrix and simulated fits) for an observation",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("config", help="simulation configuration (TOML with a [simulate] table)")
    p.add_argument("-o", "--output", help="output folder (default: <config stem>_plan)")
    p.add_argument("--exposure", type=float, help="exposure in s (overrides "
                                                  "simulate.exposure)")
    p.add_argument("--sims", type=int, default=100,
                   help="number of simulated fits (default 100; 0 for Fisher only)")
    p.add_argument("--seed", type=int, help="random seed of the simulations "
                                            "(default simulate.seed)")
    p.add_argument("--workers", type=int, default=None,
                   help="worker processes for the simulations (default: CPU count)")
    p.add_argument("--significance", type=float, default=3.0,
                   help="significance (sigma) at which gas and dust must both be "
                        "detected (default 3)")
    p.add_argument("--no-plots", action="store_true", help="do not draw plan.png")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    import os
    from pathlib import Path

    from ..analysis.plan import plan_observation, write_plan
    from ..analysis.simulate import load_simulation
    from ..errors import ArgumentError

    if args.sims < 0 or args.sims == 1:
        raise ArgumentError("--sims: 0 (Fisher only) or at least 2")
    if args.exposure is not None and not args.exposure > 0:
        raise ArgumentError("--exposure: must be positive (seconds)")
    if not args.significance > 0:
        raise ArgumentError("--significance: must be positive")
    if args.seed is not None and args.seed < 0:
        raise ArgumentError("--seed: must be a non-negative integer")
    setup = load_simulation(args.config, seed=args.seed)
    if args.exposure is not None:
        setup.exposure = float(args.exposure)
    workers = args.workers or os.cpu_count() or 1
    plan = plan_observation(setup, n_sims=args.sims, seed=setup.seed, workers=workers,
                            significance=args.significance, progress=not args.quiet)
    cfg = Path(args.config)
    out = Path(args.output) if args.output else cfg.parent / f"{cfg.stem}_plan"
    write_plan(plan, out)
    if not args.no_plots:
        import matplotlib.pyplot as plt

        from ..plotting.plan import plot_plan

        fig = plot_plan(plan)
        fig.savefig(out / "plan.png", dpi=120)
        plt.close(fig)
    if not args.quiet:
        print(plan.summary())
        print(f"\ntables, verdict and figure in {out}/")
    return 0
