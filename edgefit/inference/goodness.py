"""Goodness of fit for Poisson fits.

Two checks:

1. :func:`c_statistic_goodness` -- the C statistic of the best fit against its
   expected value and variance for Poisson data drawn from the best-fit
   model (Kaastra 2017, A&A 605, A51; exact per-bin Poisson sums from
   :func:`edgefit.stats.c_statistic_expectation`).  The expectation is
   reduced by the number of free parameters, as for chi-square degrees of
   freedom (common practice; Kaastra 2017 sect. 6 discusses it).  The
   z-score z = (C - E) / sqrt(Var) and the one-sided p-value
   P(Z >= z) of a normal distribution (valid for many bins) are reported.
   With a background spectrum the check is approximate: the expectation
   and variance are summed over source and background bins at the
   profiled background levels (:func:`edgefit.stats.profiled_background_level`),
   and one degree of freedom per profiled level is subtracted as if it
   were a fitted parameter.
2. :func:`posterior_predictive` -- posterior predictive check with the
   realised discrepancy of Gelman, Meng & Stern (1996, Stat. Sinica 6,
   733): for posterior draws theta_k, simulate counts from the model at
   theta_k, and compare C(sim | theta_k) with C(observed | theta_k); the
   p-value is the fraction of draws with C_sim >= C_obs.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import stats as sps

from .. import stats
from ..stats import profiled_background_level
from ..errors import ArgumentError

if TYPE_CHECKING:
    from .result import FitResult

__all__ = ["c_statistic_goodness", "posterior_predictive"]


def _means(likelihood, mus):
    """Per dataset: (source-region means, background-region means or None),
    from the expected source counts ``mus`` of
    :meth:`~edgefit.inference.likelihood.JointLikelihood.source_counts`."""
    out = []
    for ds, mu in zip(likelihood.datasets, mus):
        mu = np.maximum(mu, stats.MODEL_FLOOR)
        if ds.has_background:
            b = profiled_background_level(mu, ds.counts, ds.bkg_counts, ds.bkg_ratio)
            out.append((mu + ds.bkg_ratio * b, b))
        else:
            out.append((mu, None))
    return out


def c_statistic_goodness(result: FitResult) -> dict[str, Any]:
    """Goodness of fit of a C-statistic fit (see module docstring).

    Returns a dict: ``expected``, ``variance``, ``z``, ``p_value``,
    ``n_free_subtracted``.
    """
    mean = 0.0
    var = 0.0
    like = result.likelihood
    for src, bkg in _means(like, like.source_counts(result.values)):
        for m in (src, bkg):
            if m is None:
                continue
            e, v = stats.c_statistic_expectation(m)
            mean += float(np.sum(e))
            var += float(np.sum(v))
    n_bkg = sum(ds.n_groups for ds in result.datasets if ds.has_background)
    mean -= result.n_free + n_bkg
    z = (result.statistic - mean) / math.sqrt(var) if var > 0 else math.nan
    return {"expected": mean, "variance": var, "z": z,
            "p_value": float(sps.norm.sf(z)) if math.isfinite(z) else math.nan,
            "n_free_subtracted": result.n_free, "n_background_profiled": n_bkg}


def posterior_predictive(result: FitResult, samples: np.ndarray | None = None,
                         n_draws: int = 200, seed: int | None = None) -> dict[str, Any]:
    """Posterior predictive p-value of the C statistic.

    Parameters
    ----------
    result : FitResult
    samples : ndarray (n, n_free), optional
        Posterior draws of the free parameters (default: the result's MCMC
        samples; without MCMC, draws from the covariance Gaussian clipped
        to the bounds).
    n_draws : int
    seed : int or numpy Generator

    Returns
    -------
    dict with ``p_value``, ``n_draws``, ``c_observed`` and ``c_simulated``
    (arrays).
    """
    from .likelihood import ParameterVector

    rng = np.random.default_rng(seed)
    pv = ParameterVector(result.params)
    if samples is None:
        if result.mcmc is not None:
            samples = result.mcmc.flat_samples(pv.free)
        elif (cov := result.covariance_of(pv.free)) is not None:
            samples = rng.multivariate_normal(pv.vector(), cov, size=4 * n_draws)
            samples = np.clip(samples, pv.lower, pv.upper)
        else:
            raise ArgumentError("posterior predictive check needs MCMC samples or a covariance")
    samples = np.asarray(samples, dtype=float)
    pick = rng.choice(len(samples), size=min(n_draws, len(samples)), replace=False)
    like = result.likelihood
    c_obs = np.empty(pick.size)
    c_sim = np.empty(pick.size)
    for k, i in enumerate(pick):
        mus = like.source_counts(pv.values(samples[i]))
        obs = 0.0
        sim = 0.0
        for ds, (src, bkg), mu in zip(like.datasets, _means(like, mus), mus):
            n_sim = rng.poisson(src).astype(float)
            if bkg is None:
                obs += stats.c_statistic(src, ds.counts)
                sim += stats.c_statistic(src, n_sim)
            else:
                nb_sim = rng.poisson(bkg).astype(float)
                obs += stats.profiled_background_statistic(mu, ds.counts, ds.bkg_counts,
                                                           ds.bkg_ratio)
                sim += stats.profiled_background_statistic(mu, n_sim, nb_sim, ds.bkg_ratio)
        c_obs[k] = obs
        c_sim[k] = sim
    p = float(np.mean(c_sim >= c_obs))
    return {"p_value": p, "n_draws": int(pick.size), "c_observed": c_obs,
            "c_simulated": c_sim}
