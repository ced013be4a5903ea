"""One sightline, every step: the library form of ``edgefit fit``.

:func:`run_sightline` takes a :class:`~edgefit.analysis.config.SightlineConfig`
and runs, in order: the best fit; profile-likelihood intervals
(``[errors]``); MCMC (``[mcmc]``); the posterior predictive check
(``[goodness]``); derived quantities (``[derived]``); figures (``[plots]``).
The output folder is rewritten after every step, so whatever was computed
survives a failure further on.  ``edgefit fit``, ``edgefit batch`` and the
demo all call it.

Figures belong to the outer layer (:mod:`edgefit.plotting`): the caller
hands in the function that draws them (``figures``), so this module never
imports plotting code.
"""
from __future__ import annotations

import os
import sys
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable

if TYPE_CHECKING:
    from ..inference.result import FitResult
    from .config import SightlineConfig

__all__ = ["run_sightline", "SAMPLES_FILE", "write_samples", "read_samples"]

#: File (in a sightline's output folder) holding the posterior samples
#: when MCMC ran, so later steps reuse them without refitting.
SAMPLES_FILE = "posterior_samples.npz"


def write_samples(result, folder):
    """Write the MCMC chain of ``result`` (after burn-in and thinning) to
    ``folder/posterior_samples.npz``: ``samples`` (n, n_free), ``names``,
    ``log_prob`` and ``burn``/``thin``.  Returns the path, or None without
    MCMC."""
    import numpy as np

    mc = result.mcmc
    if mc is None:
        return None
    path = Path(folder) / SAMPLES_FILE
    logp = mc.log_prob[mc.burn::mc.thin].reshape(-1)
    np.savez_compressed(path, samples=mc.flat_samples(), names=np.array(mc.names),
                        log_prob=logp, burn=mc.burn, thin=mc.thin,
                        nwalkers=mc.nwalkers, nsteps=mc.nsteps)
    return path


def read_samples(folder):
    """(names, samples) from :func:`write_samples`' file in ``folder``."""
    import numpy as np

    with np.load(Path(folder) / SAMPLES_FILE) as f:
        return [str(n) for n in f["names"]], np.array(f["samples"])


def run_sightline(cfg: SightlineConfig, output: str | os.PathLike | None = None, *,
                  mcmc: bool = True, plots: bool = True, steps: int | None = None,
                  quiet: bool = False, command: str = "fit", keep_samples: bool = False,
                  warn: Callable[[str], Any] | None = None,
                  figures: Callable[..., Any] | None = None,
                  checkpoints: bool = True, total_profiles: bool = False) -> FitResult:
    """Run every step a sightline configuration asks for and write the
    results; returns the :class:`~edgefit.inference.FitResult`.

    Parameters
    ----------
    cfg : SightlineConfig
    output : path, optional
        Output folder (default ``cfg.output``); rewritten after every step.
    mcmc, plots : bool
        False skips MCMC / figures even when the configuration asks for them.
    steps : int, optional
        Overrides ``mcmc.steps``.
    quiet : bool
        No progress messages on stdout.
    command : str
        Prefix of warning lines (``edgefit <command>: warning: ...``).
    keep_samples : bool
        Also write the posterior samples (:data:`SAMPLES_FILE`) when MCMC ran.
    warn : callable, optional
        Called with each warning message (default: print it to stderr).
    figures : callable, optional
        ``figures(result, folder, plot_settings)`` draws the figures (e.g.
        :func:`edgefit.plotting.fit_plots.save_configured`); without it no
        figures are drawn.
    checkpoints : bool
        Rewrite the output after every step (default).  False writes once
        at the end, or when a step fails -- for callers that keep the
        folder only when the run ends anyway (``edgefit batch`` workers).
    total_profiles : bool
        When MCMC did not run and ``[errors] profile`` asks for profiles,
        also profile each element's total column N_gas + N_dust in the
        total/fraction parametrisation
        (:func:`~edgefit.analysis.sample_table.total_column_profiles`), kept
        in ``result.meta["total_profiles"]`` for the sample table
        (``edgefit batch``).  A failure there is a warning and the total's
        interval comes from the draws.

    A failing step records ``failed_<step>`` in the result's meta, writes
    what exists and raises (an EdgefitError naming the file and the step's
    key).

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
    from ..errors import (ConvergenceWarning, EdgefitError, PriorDominatedWarning,
                          ShortChainWarning)
    from ..inference import (derived_quantities, fit_sightline, posterior_predictive,
                             profile_intervals, run_mcmc)

    def say(msg):
        if not quiet:
            print(msg, flush=True)

    def report_text(text):
        if warn is not None:
            warn(text)
        else:
            print(f"edgefit {command}: warning: {text}", file=sys.stderr)

    def report(w):
        report_text(str(w.message))

    out_dir = Path(output) if output else cfg.output
    datasets = cfg.load_datasets()
    fitc = cfg.fit
    like, params = cfg.likelihood(datasets)
    say(f"{cfg.name}: {len(datasets)} spectra, {like.n_bins} bins; fitting ...")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        result = fit_sightline(cfg.model, datasets, params=params, statistic=fitc.statistic,
                               method=fitc.method, chi2_variance=fitc.chi2_variance)
    for w in caught:
        report(w)
    result.meta["sightline"] = cfg.name
    result.meta["config"] = str(cfg.path)

    def write():
        result.write(out_dir)
        if keep_samples:
            write_samples(result, out_dir)

    if checkpoints:
        write()
        say(f"best fit written to {out_dir}")

    def stage(label, func):
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", ShortChainWarning)
                warnings.simplefilter("always", ConvergenceWarning)
                warnings.simplefilter("always", PriorDominatedWarning)
                func()
            for w in caught:
                if issubclass(w.category, (ShortChainWarning, ConvergenceWarning)):
                    report(w)
                elif issubclass(w.category, PriorDominatedWarning):
                    # a property of the data, not a doubt about the fit: said,
                    # and kept in the sample table's prior_dominated column
                    say(f"note: {w.message}")
        except (EdgefitError, ValueError, ArithmeticError) as exc:
            result.meta[f"failed_{label}"] = str(exc)
            write()
            if isinstance(exc, EdgefitError):
                raise
            raise cfg.error(label, f"{type(exc).__name__}: {exc}") from exc
        if checkpoints:
            write()

    prof = cfg.errors.profile
    if prof:
        names = result.free_names if prof == "all" else list(prof)
        for n in names:
            if n not in result.free_names:
                if not checkpoints:
                    write()   # the best fit survives
                raise cfg.error("errors.profile", f"{n!r} is not a free parameter "
                                f"(free: {result.free_names})")
        say(f"profiling {len(names)} parameter(s) ...")
        stage("errors", lambda: profile_intervals(result, names, list(cfg.errors.levels)))

    mc = cfg.mcmc
    if mc.enabled and mcmc:
        priors = mc.prior_objects()
        n_steps = steps or mc.steps
        say(f"MCMC: {n_steps} steps ...")
        stage("mcmc", lambda: run_mcmc(result, nwalkers=mc.walkers, nsteps=n_steps,
                                       burn=mc.burn, thin=mc.thin, seed=mc.seed,
                                       priors=priors, progress=mc.progress and not quiet,
                                       processes=mc.processes, proposal=mc.proposal))

    if total_profiles and prof and result.mcmc is None:
        from .sample_table import TOTAL_PROFILES_KEY, total_column_profiles

        say("profiling the total columns ...")
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", ConvergenceWarning)
                result.meta[TOTAL_PROFILES_KEY] = total_column_profiles(result)
            for w in caught:
                if issubclass(w.category, ConvergenceWarning):
                    report(w)
        except (EdgefitError, ValueError, ArithmeticError) as exc:
            msg = (str(exc).splitlines() or [type(exc).__name__])[0]
            report_text(f"profile of the total column failed ({msg}); its interval comes "
                        "from the covariance draws")

    ppc_draws = cfg.goodness.draws(result.mcmc is not None)
    if ppc_draws and result.statistic_name == "poisson":
        def do_ppc():
            result.ppc = posterior_predictive(result, n_draws=ppc_draws,
                                              seed=cfg.goodness.seed)
        stage("goodness", do_ppc)

    der = cfg.derived
    stage("derived", lambda: derived_quantities(result, reference_energy=der.reference(),
                                                levels=tuple(der.levels),
                                                max_draws=der.draws))
    pl = cfg.plots
    if pl.enabled and plots and figures is not None:
        stage("plots", lambda: figures(result, out_dir, pl))
    if not checkpoints:
        write()
    say(result.summary())
    say(f"results in {out_dir}")
    return result
