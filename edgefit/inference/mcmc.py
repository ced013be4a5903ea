"""Posterior sampling with emcee (Foreman-Mackey et al. 2013, PASP 125, 306).

The log-posterior is :class:`LogPosterior`, a plain picklable object
(likelihood + parameter map + priors), so an optional multiprocessing pool
can evaluate it.  Priors are flat within each free parameter's bounds by
default; extra priors (e.g. :class:`GaussianPrior`) multiply in.  Walkers
start in a Gaussian ball around the best fit drawn from the fit covariance
(scaled by ``init_scale``), clipped inside the bounds.  Runs are seeded.

Diagnostics: the integrated autocorrelation time of each parameter from
``emcee``'s ``get_autocorr_time(tol=0)`` (Goodman & Weare 2010; the
estimator of Sokal 1997 with automatic windowing); a
:class:`~edgefit.errors.ShortChainWarning` is issued when the chain is
shorter than 50 times the largest autocorrelation time (the rule of thumb
in emcee's documentation).  The default burn-in discards
max(2 tau_max, nsteps/4) steps (common practice).
"""
from __future__ import annotations

import math
import warnings

import numpy as np

from ..errors import ArgumentError, FitError, ShortChainWarning
from ..stats import ONE_SIGMA
from .likelihood import ParameterVector

__all__ = ["LogPosterior", "GaussianPrior", "LogUniformPrior", "McmcResult", "run_mcmc"]

#: Chains shorter than this many autocorrelation times trigger a warning.
MIN_TAU_MULTIPLE = 50


class GaussianPrior:
    """Normal prior on one parameter: log p = -0.5 ((x - mean)/sigma)^2."""

    def __init__(self, mean, sigma):
        self.mean = float(mean)
        self.sigma = float(sigma)
        if not self.sigma > 0:
            raise ArgumentError("GaussianPrior: sigma must be positive")

    def __call__(self, x):
        return -0.5 * ((x - self.mean) / self.sigma) ** 2

    def __repr__(self):
        return f"GaussianPrior({self.mean}, {self.sigma})"


class LogUniformPrior:
    """Prior uniform in ln x (x > 0): log p = -ln x."""

    def __call__(self, x):
        return -math.log(x) if x > 0 else -math.inf

    def __repr__(self):
        return "LogUniformPrior()"


class LogPosterior:
    """ln posterior of the free-parameter vector: flat within bounds plus
    optional priors {name: callable(x) -> ln p}, plus -statistic/2."""

    def __init__(self, likelihood, params, priors=None):
        self.likelihood = likelihood
        self.pv = ParameterVector(params)
        self.priors = dict(priors or {})
        unknown = set(self.priors) - set(self.pv.free)
        if unknown:
            raise ArgumentError(f"priors given for parameters that are not free: {sorted(unknown)}")
        self._prior_index = [(self.pv.free.index(n), f) for n, f in self.priors.items()]
        self.evaluator = likelihood.compile(params)

    def __call__(self, theta):
        theta = np.asarray(theta, dtype=float)
        if not np.all(np.isfinite(theta)) or not self.pv.in_bounds(theta):
            return -math.inf
        lp = 0.0
        for i, f in self._prior_index:
            lp += float(f(theta[i]))
        if not math.isfinite(lp):
            return -math.inf
        ll = self.evaluator.log_likelihood(theta)
        return lp + ll if math.isfinite(ll) else -math.inf


class McmcResult:
    """Chain, diagnostics and summaries of an emcee run."""

    def __init__(self, chain, log_prob, names, burn, thin, tau, acceptance, seed):
        self.chain = chain          # (nsteps, nwalkers, ndim)
        self.log_prob = log_prob    # (nsteps, nwalkers)
        self.names = list(names)
        self.burn = int(burn)
        self.thin = int(thin)
        self.tau = np.asarray(tau, dtype=float)
        self.acceptance = np.asarray(acceptance, dtype=float)
        self.seed = seed

    @property
    def nsteps(self):
        return self.chain.shape[0]

    @property
    def nwalkers(self):
        return self.chain.shape[1]

    @property
    def short_chain(self):
        tmax = np.nanmax(self.tau) if self.tau.size else 0.0
        return not (self.nsteps >= MIN_TAU_MULTIPLE * tmax)

    def flat_samples(self, names=None):
        """Samples after burn-in and thinning, shape (n, len(names))."""
        s = self.chain[self.burn::self.thin].reshape(-1, self.chain.shape[2])
        if names is None:
            return s
        return s[:, [self.names.index(n) for n in names]]

    def quantiles(self, name, level=ONE_SIGMA):
        """(median, lower, upper) of the central ``level`` interval."""
        x = self.flat_samples([name])[:, 0]
        q = np.quantile(x, [0.5, 0.5 - level / 2, 0.5 + level / 2])
        return float(q[0]), float(q[1]), float(q[2])

    def summary(self):
        lines = [f"MCMC: {self.nwalkers} walkers x {self.nsteps} steps, burn-in {self.burn}, "
                 f"thin {self.thin}, acceptance {np.mean(self.acceptance):.2f}, "
                 f"max tau {np.nanmax(self.tau):.1f} steps"
                 + ("  [SHORT CHAIN: < 50 tau]" if self.short_chain else "")]
        for n in self.names:
            med, lo, hi = self.quantiles(n)
            lines.append(f"  {n:<26} median {med:.5g}  68% [{lo:.5g}, {hi:.5g}]")
        return "\n".join(lines)

    def to_dict(self):
        return {"names": self.names, "nwalkers": self.nwalkers, "nsteps": self.nsteps,
                "burn": self.burn, "thin": self.thin, "tau": self.tau.tolist(),
                "acceptance_mean": float(np.mean(self.acceptance)), "seed": self.seed,
                "short_chain": bool(self.short_chain),
                "posterior": {n: dict(zip(("median", "lo68", "hi68"), self.quantiles(n)))
                              for n in self.names}}


_WORKER_LOGP = None


def _init_worker(logp):
    global _WORKER_LOGP
    _WORKER_LOGP = logp


class _WorkerLogPosterior:
    """Picklable stand-in evaluated in pool workers with their own copy of
    the posterior (set by :func:`_init_worker`)."""

    def __call__(self, theta):
        return _WORKER_LOGP(theta)


def _tqdm_available():
    try:
        import tqdm  # noqa: F401
    except ImportError:
        return False
    return True


def run_mcmc(result, nwalkers=None, nsteps=2000, burn=None, thin=1, seed=None,
             priors=None, progress=False, processes=None, init_scale=1.0, store=True):
    """Sample the posterior around a best fit with emcee.

    Parameters
    ----------
    result : FitResult
        Best fit (its Parameters define free parameters, bounds and ties).
    nwalkers : int, optional
        Default max(32, 4 * n_free) (made even).
    nsteps : int
    burn : int, optional
        Steps discarded; default max(2 tau_max, nsteps/4).
    thin : int
    seed : int
        Seeds both the initial ball and emcee's random state.
    priors : dict name -> callable, optional
    progress : bool
        tqdm progress bar (silently off when tqdm is absent).
    processes : int, optional
        Run a multiprocessing pool of this many processes.
    init_scale : float
        Initial ball = init_scale x covariance (1e-3 x |value| without one).

    Returns
    -------
    McmcResult (also stored as ``result.mcmc`` when ``store``).
    """
    import emcee

    logp = LogPosterior(result.likelihood, result.params, priors)
    pv = logp.pv
    ndim = len(pv)
    if ndim == 0:
        raise FitError("no free parameters to sample")
    nwalkers = int(nwalkers or max(32, 4 * ndim))
    nwalkers += nwalkers % 2
    rng = np.random.default_rng(seed)
    x0 = pv.vector(result.params)
    cov = result.covariance_of(pv.free)
    if cov is not None:
        start = rng.multivariate_normal(x0, cov * init_scale ** 2, size=nwalkers)
    else:
        scale = 1e-3 * np.where(x0 != 0, np.abs(x0), 1.0)
        start = x0 + scale * rng.standard_normal((nwalkers, ndim))
    # keep walkers strictly inside bounds and at finite posterior
    span = np.where(np.isfinite(pv.upper - pv.lower), pv.upper - pv.lower, np.inf)
    margin = np.minimum(1e-9 * span, 1e-9 * np.maximum(np.abs(x0), 1.0))
    start = np.clip(start, pv.lower + margin, pv.upper - margin)
    for k in range(nwalkers):
        tries = 0
        while not math.isfinite(logp(start[k])) and tries < 100:
            start[k] = x0 + 0.5 ** tries * (start[k] - x0)
            tries += 1
    pool = None
    fn = logp
    if processes and processes > 1:
        import multiprocessing

        # each worker receives the posterior once (initializer); emcee then
        # ships only the small _WorkerLogPosterior proxy with each batch
        pool = multiprocessing.Pool(processes, initializer=_init_worker, initargs=(logp,))
        fn = _WorkerLogPosterior()
    try:
        sampler = emcee.EnsembleSampler(nwalkers, ndim, fn, pool=pool)
        sampler.random_state = np.random.RandomState(
            int(rng.integers(2 ** 31 - 1))).get_state()
        sampler.run_mcmc(start, nsteps, progress=bool(progress and _tqdm_available()))
    finally:
        if pool is not None:
            pool.close()
            pool.join()
    chain = sampler.get_chain()
    lp = sampler.get_log_prob()
    with np.errstate(invalid="ignore", divide="ignore"):  # constant chains give NaN tau
        tau = sampler.get_autocorr_time(tol=0)
    tmax = float(np.nanmax(tau))
    if burn is None:
        burn = int(min(max(2 * tmax, nsteps / 4), nsteps - 1))
    res = McmcResult(chain, lp, pv.free, burn, thin, tau, sampler.acceptance_fraction, seed)
    if res.short_chain:
        warnings.warn(f"MCMC chain of {nsteps} steps is shorter than {MIN_TAU_MULTIPLE} "
                      f"autocorrelation times (max tau = {tmax:.1f} steps); posterior "
                      "summaries may be unreliable", ShortChainWarning, stacklevel=2)
    if store:
        result.mcmc = res
    return res
