"""``edgefit grains SAMPLE [--tau Q] [--material M] [--element El] [--size A |
--sizes FAMILY] [--nh COLUMN] [-o DIR]``: grain and dust columns of each
sightline from its dust optical depth, through self-shielding.

Adds ``grain_column`` and ``n_<El>_dust`` (with 68 % intervals) to the
sample table (written as ``sample_grains.ecsv``); with ``--nh`` also fits τ
against N_H with the shielded relation (grain radius free) beside a
straight line and reports ΔAIC and ΔBIC (``grains.json``, ``grains.png``).
See :mod:`edgefit.analysis.grains`.
"""
from __future__ import annotations

from ._sample import add_output_options, figures_of, sample_parser

__all__ = ["add_parser", "run"]


def add_parser(subparsers):
    p = sample_parser(subparsers, "grains", __doc__,
                      help="grain and dust columns from dust optical depths; shielded "
                           "tau-N_H relation",
                      sample_help="sample table or batch output folder")
    p.add_argument("--tau", default="dust_tau_above", metavar="Q",
                   help="dust optical depth column (default dust_tau_above)")
    p.add_argument("--material", default="olivine")
    p.add_argument("--element", default="Si")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--size", type=float, metavar="UM", help="single grain radius in µm "
                                                            "(default 0.1)")
    g.add_argument("--sizes", metavar="FAMILY",
                   help="size-distribution family with its default parameters "
                        "(e.g. power_law: MRN)")
    p.add_argument("--nh", metavar="COLUMN", help="hydrogen column for the tau-N_H fit")
    p.add_argument("--absorption", action="store_true",
                   help="the optical depth is absorption only (scattered light kept)")
    p.add_argument("--no-count-once", action="store_true",
                   help="the fits did not subtract the grains' other atoms")
    add_output_options(p)
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.grains import grains_sample
    from ..plotting.grains import save_grains_figure

    sizes = args.sizes if args.sizes else (args.size if args.size is not None else 0.1)
    res = grains_sample(args.sample, args.tau, material=args.material, element=args.element,
                        sizes=sizes, nh=args.nh, count_once=not args.no_count_once,
                        kind="abs" if args.absorption else "ext", output=args.output,
                        figures=figures_of(args, save_grains_figure))
    gc = res["grain_columns"]["default"]
    print(f"optical depth per grain {gc['sigma_grain']:.4g} cm2 at {gc['energy_kev']:.4g} keV "
          f"({gc['sizes']}); {gc['atoms_per_grain']:.4g} {gc['element']} atoms per grain")
    fit = res.get("shielded_fit")
    if fit:
        sh = fit["shielded"]
        print(f"shielded relation: radius {sh['radius_um']:.3g} um (68 %: "
              f"{', '.join(f'{a:.3g}-{b:.3g}' for a, b in sh['radius_68'])} um); "
              f"dAIC {fit['delta_aic']:.2f}, dBIC {fit['delta_bic']:.2f} (shielded - line)")
    print(f"wrote {res['output']}")
    return 0
