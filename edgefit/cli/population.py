"""``edgefit population SAMPLE_DIR --quantity NAME``: a population fit of a
batch output folder from its sightlines' saved posterior samples; or
``edgefit population SAMPLE_DIR --shared NAME --grid LO,HI,N``: the summed
profile statistic of a parameter shared exactly by every sightline.

Importance reweighting (Hogg, Myers & Bovy 2010) of each sightline's
samples of one fitted parameter: a normal population, optionally with a
mean linear in a sample-table covariate (e.g. log10 N_H) and an intrinsic
scatter; writes ``population.json``, ``population_sightlines.ecsv`` and
``population.png``.  See :mod:`edgefit.analysis.population`.

With ``--shared``, every sightline of the batch's manifest is refitted with
the parameter fixed at each grid value (in parallel, cached per sightline
and value, resumable), and the sum of the sightlines' statistics gives the
shared value with 68.27 % and 95 % intervals and each sightline's columns
pooled against alone; writes ``shared.json``, ``shared_curve.ecsv``,
``shared_sightlines.ecsv`` and ``shared.png`` into
``SAMPLE_DIR/shared_<NAME>``.  See :mod:`edgefit.analysis.shared_profile`.
"""
from __future__ import annotations

import re

from ._sample import add_output_options, figures_of, middle, sample_parser

__all__ = ["add_parser", "run", "parse_grid"]

_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def add_parser(subparsers):
    p = sample_parser(subparsers, "population", __doc__,
                      help="population fit of a batch output folder (saved posterior "
                           "samples, or a shared parameter on a grid)",
                      sample_help="output folder of 'edgefit batch'", metavar="SAMPLE_DIR")
    p.add_argument("--quantity", metavar="NAME",
                   help="sampled (free) parameter, e.g. dust_col")
    p.add_argument("--covariate", metavar="COLUMN",
                   help="sample-table column for a population mean linear in it")
    p.add_argument("--linear-covariate", action="store_true",
                   help="use the covariate itself, not its log10")
    p.add_argument("--log", action="store_true", help="model the logarithm of the quantity")
    p.add_argument("--interim", choices=("flat", "log-uniform"), default="flat",
                   help="prior the sightlines were sampled under (default flat)")
    g = p.add_argument_group("a parameter shared by every sightline")
    g.add_argument("--shared", metavar="NAME",
                   help="full parameter name shared exactly by all sightlines, e.g. dust_amax "
                        "(instead of --quantity)")
    g.add_argument("--grid", metavar="LO,HI,N",
                   help="N grid values from LO to HI in the parameter's unit (logarithmic "
                        "spacing unless --linear-grid)")
    g.add_argument("--linear-grid", action="store_true", help="evenly spaced grid values")
    g.add_argument("--manifest", metavar="TOML",
                   help="the batch manifest (default: the one named in SAMPLE_DIR/sample.ecsv, "
                        "looked up beside SAMPLE_DIR)")
    g.add_argument("--columns", nargs="+", metavar="NAME",
                   help="parameters reported per sightline (default every free *_col)")
    g.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (default: the number of CPUs; 0 = in this "
                        "process)")
    g.add_argument("--refine", type=int, default=2, metavar="N",
                   help="rounds of added grid values near the minimum and the interval ends "
                        "(default 2; 0 = the grid alone)")
    g.add_argument("--fresh", action="store_true", help="refit every grid point even when "
                                                        "cached")
    add_output_options(p, output_help="output folder (default SAMPLE_DIR, or "
                                      "SAMPLE_DIR/shared_<NAME> with --shared)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
    return p


def parse_grid(text):
    """(lo, hi, n) from ``LO,HI,N``; a bad text is an ArgumentError naming
    --grid.  Nothing is evaluated."""
    from ..errors import ArgumentError

    parts = [s.strip() for s in str(text).split(",")]
    if len(parts) != 3 or not all(_NUMBER.match(s) for s in parts[:2]) \
            or not parts[2].isdigit():
        raise ArgumentError(f"--grid {text!r}: give LO,HI,N (two numbers and a count), "
                            "e.g. 0.05,2,12")
    return float(parts[0]), float(parts[1]), int(parts[2])


def _find_manifest(sample_dir, given):
    from pathlib import Path

    from ..analysis.sample_table import open_sample_table
    from ..errors import InputFileError

    if given:
        return Path(given)
    table, sample = open_sample_table(sample_dir, missing="no sample table (run 'edgefit "
                                                         "batch' first, or give --manifest)")
    folder = table.parent
    name = sample.meta.get("manifest")
    if not name:
        raise InputFileError(table, "names no manifest; give --manifest")
    for cand in (folder.parent / name, folder / name):
        if cand.is_file():
            return cand
    raise InputFileError(table, f"its manifest {name!r} is not beside {folder}; give "
                                "--manifest")


def _run_shared(args) -> int:
    from pathlib import Path

    from ..analysis.shared_profile import make_grid, shared_parameter_profile
    from ..errors import ArgumentError
    from ..plotting.shared_profile import save_shared_figure

    if args.quantity or args.covariate:
        raise ArgumentError("--shared: give either --shared or --quantity (with "
                            "--covariate), not both")
    if not args.grid:
        raise ArgumentError("--shared: give the grid, --grid LO,HI,N")
    lo, hi, n = parse_grid(args.grid)
    grid = make_grid(lo, hi, n, log=not args.linear_grid)
    manifest = _find_manifest(args.sample, args.manifest)
    out = Path(args.output) if args.output else Path(args.sample) / f"shared_{args.shared}"
    res = shared_parameter_profile(manifest, args.shared, grid, output=out,
                                   columns=args.columns, log=not args.linear_grid,
                                   workers=args.workers, fresh=args.fresh,
                                   refine=args.refine,
                                   figures=figures_of(args, save_shared_figure),
                                   progress=not args.quiet)
    s = res.summary
    unit = f" {res.unit}" if res.unit else ""
    print(f"{len(res.names)} sightlines; skipped {len(res.skipped)}")
    print(f"  shared {res.parameter}: best {res.best:.5g}{unit} (summed C {s['statistic_at_best']:.2f})")
    for lv, iv in res.intervals.items():
        pieces = " or ".join(f"[{lo_:.4g}, {hi_:.4g}]" for lo_, hi_ in iv["pieces"])
        ends = [w for w, f in (("lower", iv["lower_at_bound"]), ("upper", iv["upper_at_bound"]))
                if f]
        print(f"  {100 * float(lv):.4g} % (dS <= {s['thresholds'][lv]:.3f}): {pieces}"
              + (f"  ({' and '.join(ends)} end at the grid's edge)" if ends else ""))
    for c in s["columns"]:
        shrink = [s["sightlines"][n_]["columns"][c]["shrink"] for n_ in res.names]
        print(f"  median 68 % width pooled / alone of {c}: {middle(shrink):.2f}")
    for note in s["notes"]:
        print(f"  note: {note}")
    print(f"  wrote {res.output}")
    return 0


def run(args) -> int:
    from ..errors import ArgumentError

    if args.shared:
        return _run_shared(args)
    if not args.quantity:
        raise ArgumentError("give --quantity NAME (a sampled parameter) or --shared NAME "
                            "--grid LO,HI,N")
    from ..analysis.population import population_from_batch
    from ..plotting.population import save_population_figure

    res = population_from_batch(args.sample, args.quantity, covariate=args.covariate,
                                log_covariate=not args.linear_covariate, log=args.log,
                                interim=args.interim, output=args.output,
                                figures=figures_of(args, save_population_figure),
                                seed=args.seed)
    print(f"{len(res.sightlines)} sightlines; skipped {len(res.skipped)}")
    for k, v in res.hyper.items():
        print(f"  {k:3s} {v['median']:.5g} [{v['lo']:.5g}, {v['hi']:.5g}]")
    shrink = [e["columns"][res.quantity]["shrink"] for e in res.sightlines]
    print(f"  median interval shrink of {res.quantity}: {middle(shrink):.2f}")
    print(f"  wrote {res.output}")
    return 0
