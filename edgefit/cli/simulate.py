"""``edgefit simulate CONFIG``: OGIP spectra of a simulated sightline.

Reads a simulation configuration (a sightline configuration without
``[[spectrum]]`` tables, with a ``[simulate]`` table; README "Simulating
and planning") and writes, per response, a PHA spectrum, its RMF, ARF and
background, the simulated truth (``truth.json``) and a configuration
ready for ``edgefit fit``.  The logic is in :mod:`edgefit.analysis.simulate`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = subparsers.add_parser("simulate", help="write simulated OGIP spectra (PHA, ARF, RMF, "
                              "background) of a sightline configuration",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("config", help="simulation configuration (TOML with a [simulate] table)")
    p.add_argument("-o", "--output", help="output folder (default: <config stem>_sim next "
                                          "to the configuration)")
    p.add_argument("--seed", type=int, help="random seed (overrides simulate.seed)")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from pathlib import Path

    from ..analysis.simulate import load_simulation, write_simulation
    from ..errors import EdgefitError

    if args.seed is not None and args.seed < 0:
        raise EdgefitError("--seed: must be a non-negative integer")
    setup = load_simulation(args.config, seed=args.seed)
    cfg_path = Path(args.config)
    out = Path(args.output) if args.output else cfg_path.parent / f"{cfg_path.stem}_sim"
    fit_cfg = write_simulation(setup, out)
    if not args.quiet:
        print(f"{setup.name}: {len(setup.responses)} SIMULATED spectra "
              f"({setup.exposure:g} s, seed {setup.seed}) written to {out}/")
        print(f"fit them with:  edgefit fit {fit_cfg}")
    return 0
