"""``edgefit fit CONFIG``: fit one sightline described by a TOML file.

Steps: read the config and the spectra; best fit; profile-likelihood
intervals; MCMC; goodness of fit (and a posterior predictive check);
derived quantities; plots.  The output folder is written after the best
fit and again after every later step, so whatever was computed survives a
failure further on (the error is then reported and the exit status is 2).
"""
from __future__ import annotations

import sys
import warnings

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
    from ..config import load_config

    cfg = load_config(args.config)
    fit_pipeline(cfg, args.output, mcmc=not args.no_mcmc, plots=not args.no_plots,
                 steps=args.steps, quiet=args.quiet)
    return 0


def fit_pipeline(cfg, output=None, *, mcmc=True, plots=True, steps=None, quiet=False,
                 command="fit"):
    """Run every step a sightline configuration asks for and write the
    results; returns the :class:`~edgefit.inference.FitResult`.

    This is the whole of ``edgefit fit`` after reading the configuration
    (``edgefit demo`` runs it too).  Steps: best fit; profile-likelihood
    intervals (``[errors]``); MCMC (``[mcmc]``, unless ``mcmc`` is False;
    ``steps`` overrides its length); posterior predictive check; derived
    quantities; figures (unless ``plots`` is False).  The output folder
    (``output``, default the configuration's) is rewritten after every
    step; a failing step records ``failed_<step>`` in the result's meta,
    writes what exists and raises (an EdgefitError naming the file and the
    step's key).  ``quiet`` silences progress messages (warnings still go
    to stderr, prefixed ``edgefit <command>: warning:``).

    Notes
    -----
    * A profile scan that meets a lower statistic than the best fit refits
      from there and records the flag ``refit_after_profile``; that flag is
      informational (the final fit is the better one) and does not mark
      the fit doubtful.
    * With a background spectrum, the C-statistic goodness of fit treats
      the profiled background levels like fitted parameters (their number
      is subtracted from the expectation): an approximation.
    * With ``statistic = "chi2"`` the scaled background is subtracted from
      the counts and its variance added.
    """
    from pathlib import Path

    from ..config import apply_parameter_settings
    from ..errors import ConvergenceWarning, EdgefitError, ShortChainWarning
    from ..inference import (derived_quantities, fit_sightline, posterior_predictive,
                             profile_intervals, run_mcmc)
    from ..inference.likelihood import JointLikelihood
    from ..inference.mcmc import GaussianPrior, LogUniformPrior

    def say(msg):
        if not quiet:
            print(msg, flush=True)

    def warn(w):
        print(f"edgefit {command}: warning: {w.message}", file=sys.stderr)

    out_dir = Path(output) if output else cfg.output
    datasets = cfg.load_datasets()
    fitc = cfg.fit
    like = JointLikelihood(cfg.model, datasets, statistic=fitc.get("statistic", "poisson"),
                           chi2_variance=fitc.get("chi2_variance", "data"))
    params = like.make_params(xnorm_free=fitc.get("xnorm_free", True))
    params = apply_parameter_settings(params, cfg.param_settings, cfg.model, cfg.path)
    say(f"{cfg.name}: {len(datasets)} spectra, {like.n_bins} bins; fitting ...")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        result = fit_sightline(cfg.model, datasets, params=params,
                               statistic=fitc.get("statistic", "poisson"),
                               method=fitc.get("method", "least_squares"),
                               chi2_variance=fitc.get("chi2_variance", "data"))
    for w in caught:
        warn(w)
    result.meta["sightline"] = cfg.name
    result.meta["config"] = str(cfg.path)
    result.write(out_dir)
    say(f"best fit written to {out_dir}")

    def stage(label, func):
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", ShortChainWarning)
                warnings.simplefilter("always", ConvergenceWarning)
                func()
            for w in caught:
                if issubclass(w.category, (ShortChainWarning, ConvergenceWarning)):
                    warn(w)
        except (EdgefitError, ValueError, ArithmeticError) as exc:
            result.meta[f"failed_{label}"] = str(exc)
            result.write(out_dir)
            if isinstance(exc, EdgefitError):
                raise
            raise cfg.error(label, f"{type(exc).__name__}: {exc}") from exc
        result.write(out_dir)

    prof = cfg.errors.get("profile", [])
    levels = cfg.errors.get("levels", [0.6827, 0.90])
    if prof:
        names = result.free_names if prof == "all" else list(prof)
        for n in names:
            if n not in result.free_names:
                raise cfg.error("errors.profile", f"{n!r} is not a free parameter "
                                f"(free: {result.free_names})")
        say(f"profiling {len(names)} parameter(s) ...")
        stage("errors", lambda: profile_intervals(result, names, levels))

    mc = cfg.mcmc
    if mc.get("enabled", False) and mcmc:
        priors = {}
        for name, spec in (mc.get("priors") or {}).items():
            if isinstance(spec, dict) and set(spec) == {"gaussian"} and \
                    isinstance(spec["gaussian"], list) and len(spec["gaussian"]) == 2:
                priors[name] = GaussianPrior(*spec["gaussian"])
            elif spec == "log_uniform":
                priors[name] = LogUniformPrior()
            else:
                raise cfg.error(f"mcmc.priors.{name}", "use { gaussian = [mean, sigma] } "
                                "or \"log_uniform\"")
        steps = steps or int(mc.get("steps", 2000))
        say(f"MCMC: {steps} steps ...")
        stage("mcmc", lambda: run_mcmc(result, nwalkers=mc.get("walkers"), nsteps=steps,
                                       burn=mc.get("burn"), thin=int(mc.get("thin", 1)),
                                       seed=int(mc.get("seed", 1)), priors=priors,
                                       progress=bool(mc.get("progress", False)) and not quiet,
                                       processes=mc.get("processes")))

    ppc_draws = int(cfg.goodness.get("ppc_draws", 200 if result.mcmc is not None else 0))
    if ppc_draws and result.statistic_name == "poisson":
        def do_ppc():
            result.ppc = posterior_predictive(result, n_draws=ppc_draws,
                                              seed=int(cfg.goodness.get("seed", 2)))
        stage("goodness", do_ppc)

    der = cfg.derived
    ref = der.get("reference_energy")
    if ref is not None:
        from astropy import units as u

        ref = float(ref) * u.Unit(der.get("reference_unit", "keV"))
    stage("derived", lambda: derived_quantities(result, reference_energy=ref,
                                                levels=tuple(der.get("levels",
                                                                     (0.683, 0.90)))))
    pl = cfg.plots
    if pl.get("enabled", True) and plots:
        from ..plotting.fit_plots import save_all

        window = pl.get("window")
        stage("plots", lambda: save_all(result, out_dir, unit=pl.get("unit", "keV"),
                                        window=tuple(window) if window else None,
                                        display_min_counts=pl.get("display_min_counts", 20),
                                        fmt=pl.get("format", "png")))
    say(result.summary())
    say(f"results in {out_dir}")
    return result
