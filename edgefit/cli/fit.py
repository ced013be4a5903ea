"""``edgefit fit CONFIG``: fit one sightline described by a TOML file.

Steps: read the config and the spectra; best fit; profile-likelihood
intervals; MCMC; goodness of fit (and a posterior predictive check);
derived quantities; plots.  The output folder is written after the best
fit and again after every later step, so whatever was computed survives a
failure further on (the error is then reported and the exit status is 2).
The steps are :func:`edgefit.analysis.pipeline.run_sightline`.
"""
from __future__ import annotations

__all__ = ["add_parser", "run", "fit_pipeline"]


def add_parser(subparsers):
    p = subparsers.add_parser("fit", help="fit one sightline from a TOML configuration",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("config", help="sightline configuration file (TOML)")
    p.add_argument("-o", "--output", help="output folder (default: from the config)")
    p.add_argument("--no-mcmc", action="store_true", help="skip MCMC sampling")
    p.add_argument("--no-plots", action="store_true", help="do not draw figures")
    p.add_argument("--steps", type=int, help="override mcmc.steps")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..analysis.config import load_config

    cfg = load_config(args.config)
    fit_pipeline(cfg, args.output, mcmc=not args.no_mcmc, plots=not args.no_plots,
                 steps=args.steps, quiet=args.quiet)
    return 0


def fit_pipeline(cfg, output=None, *, mcmc=True, plots=True, steps=None, quiet=False,
                 command="fit"):
    """:func:`edgefit.analysis.pipeline.run_sightline` with the figures of
    :mod:`edgefit.plotting.fit_plots`; returns the FitResult."""
    from ..analysis.pipeline import run_sightline
    from ..plotting.fit_plots import save_configured

    return run_sightline(cfg, output, mcmc=mcmc, plots=plots, steps=steps, quiet=quiet,
                         command=command, figures=save_configured)
