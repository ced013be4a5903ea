"""``edgefit batch MANIFEST``: fit every sightline of a manifest into one sample table.

The manifest (TOML; README, "Many sightlines") is checked whole before any
fit.  Sightlines run on a local process pool, or on a dask.distributed
cluster with ``--scheduler``; each finished sightline's folder and the
sample table (``DIR/sample.ecsv``, ``DIR/sample.fits``) are written at
once, and a rerun skips sightlines whose inputs are unchanged.  The work is
:func:`edgefit.analysis.batch.run_batch`.

Exit status: 0 when every sightline in the table finished (``ok`` or
``doubtful``); :data:`EXIT_FAILED` (1) when the run finished but the table
holds ``failed`` sightlines (one line on stderr says how many and where
their reasons are; the table and the folders are written all the same);
2 for bad input (manifest, options), as for every command; 128 + the
signal number after Ctrl-C (130) or SIGTERM (143).
"""
from __future__ import annotations

import shlex
import sys

__all__ = ["add_parser", "run", "EXIT_FAILED"]

#: Exit status of a batch that finished with failed sightlines.
EXIT_FAILED = 1


def add_parser(subparsers):
    p = subparsers.add_parser("batch", help="fit many sightlines from a manifest into one "
                              "sample table", description=__doc__.split("\n\n")[0])
    p.add_argument("manifest", help="batch manifest (TOML)")
    p.add_argument("-o", "--output", metavar="DIR",
                   help="output folder (default: <manifest stem>_batch beside the manifest)")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes (default: the "
                   "number of CPUs; 0 = run in this process)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on the dask.distributed "
                   "scheduler at ADDRESS (e.g. tcp://host:8786) instead of local processes")
    p.add_argument("--fresh", action="store_true", help="refit every sightline even when "
                   "its inputs are unchanged")
    p.add_argument("--only", nargs="+", metavar="NAME", help="fit only these sightlines")
    p.add_argument("--no-mcmc", action="store_true", help="skip MCMC sampling")
    p.add_argument("--no-plots", action="store_true", help="do not draw figures")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar or summary")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.batch import BatchInterrupted, default_output, run_batch
    from ..analysis.manifest import load_manifest
    from ..plotting.fit_plots import save_configured

    manifest = load_manifest(args.manifest)
    out = args.output or str(default_output(manifest.path))
    again = ["edgefit", "batch", args.manifest, "-o", out]
    if args.only:
        again += ["--only", *args.only]
    if args.scheduler:
        again += ["--scheduler", args.scheduler]
    if args.no_mcmc:
        again.append("--no-mcmc")
    if args.no_plots:
        again.append("--no-plots")
    hint = f"run `{shlex.join(again)}` to resume (finished sightlines are skipped)"
    try:
        table = run_batch(manifest, out, workers=args.workers, scheduler=args.scheduler,
                          fresh=args.fresh, only=args.only, mcmc=not args.no_mcmc,
                          plots=not args.no_plots, figures=save_configured,
                          progress=not args.quiet, resume_hint=hint)
    except BatchInterrupted as exc:
        print(f"edgefit batch: {exc}", file=sys.stderr)
        return 128 + exc.signum
    status = list(table["status"]) if len(table) else []
    if not args.quiet:
        print(f"{len(table)} of {len(manifest)} sightlines in {out}/sample.ecsv: "
              f"{status.count('ok')} ok, {status.count('doubtful')} doubtful, "
              f"{status.count('failed')} failed")
    n_failed = status.count("failed")
    if n_failed:
        names = [str(n) for n, s in zip(table["name"], status) if s == "failed"]
        shown = ", ".join(names[:5]) + (", ..." if len(names) > 5 else "")
        print(f"edgefit batch: {n_failed} of {len(table)} sightlines failed ({shown}); "
              f"their reasons are in the 'reason' column of {out}/sample.ecsv and in "
              f"{out}/sightlines/*/row.json; rerun the same command to retry them",
              file=sys.stderr)
        return EXIT_FAILED
    return 0
