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
max(2 tau_max, nsteps/4) steps (common practice).  Besides tau, each
parameter's rank-normalised split-R-hat and bulk effective sample size
are computed with arviz (Vehtari et al. 2021, Bayesian Analysis 16, 667),
treating each walker as a chain; R-hat > :data:`RHAT_MAX` or a bulk ESS
below :data:`ESS_MIN` triggers a :class:`~edgefit.errors.ModeMixingWarning`
(a ShortChainWarning).

Proposals
---------
``proposal="auto"`` (the default) is ``"valley"`` (below) when one grain-size
parameter is free and ``"stretch"`` otherwise; the result records which.
``proposal="stretch"`` is emcee's affine-invariant stretch
move (Goodman & Weare 2010).  ``proposal="differential"`` mixes emcee's
differential-evolution move (ter Braak 2006; Nelson et al. 2013, ApJS 210,
11) with probability 0.8 and its snooker variant (ter Braak & Vrugt 2008,
Statistics and Computing 18, 435) with probability 0.2, the mixture
emcee's documentation shows for it.  Both are exact Markov chain moves
(the snooker move carries its Hastings factor); on the demo's
six-parameter edge fits the mixture's autocorrelation times are shorter
(``benchmarks/bench_mcmc_moves.py``).

``proposal="valley"`` is for fits with the grain size free: with
probability 0.5 each walker makes an independence Metropolis-Hastings
jump drawn from a mixture density laid along the gas/dust/size valley
(:mod:`edgefit.inference.valley`: fits on a grid of fixed sizes and, in
the total/fraction form, fixed dust fractions), otherwise the
differential moves above (0.4 and 0.1).  Its walkers start as draws from
that mixture, and the continuum normalisations are sampled in their
logarithm with their prior kept flat in the normalisation itself (the
Jacobian is added).  Building the mixture costs a few tens of
fixed-parameter fits.  The run adapts once: after the first quarter of
the steps (:data:`VALLEY_STAGE_FRACTION`) the mixture gains Student-t
kernels on the later half of that stage's samples (half the weight) and
stays fixed from then on, so the second stage is an ordinary Markov
chain with the same target; the default burn-in covers the first stage.

Across the grain-size valley
----------------------------
Sampler coordinates (``coordinates="auto"``, the default): the logarithm
of every free grain-size parameter (unit µm), and, for a gas/dust column
pair of one element that are both free, the total column and the dust
fraction (N_tot = N_gas + N_dust, f = N_dust / N_tot) in place of the two
columns; the chain is stored in the fit's own parameters.  ``prior``:
``"sampled"`` (default) is flat in the sampler coordinates (log-uniform
in the sizes, uniform in the total column and in the dust fraction);
``"parameters"`` is flat in the fit parameters (the Jacobian of the
coordinate change is added).  Extra ``priors`` are densities in the fit
parameters and multiply in.

Walkers start across the distinct minima of the multi-start fit
(``init="minima"``, the default: ``result.minima`` within the fit's
``multimodal_delta``, walkers shared equally), each group in a Gaussian
ball from the best fit's covariance mapped to the sampler coordinates.
Every post-burn-in sample is assigned to the nearest known minimum in the
log sizes; when no walker ever moves from one minimum's region to
another's, a :class:`~edgefit.errors.ModeMixingWarning` says the chain
has not crossed between the known modes (``McmcResult.unmixed_modes``).

Prior or data?
--------------
For every sampler coordinate whose prior is flat in that coordinate and
bounded, the posterior contraction 1 - var(posterior) / var(prior), with
the flat prior's variance (upper - lower)^2 / 12, is kept in
``McmcResult.contraction`` (:func:`posterior_contraction`; Schad,
Betancourt & Vasishth 2021, Psychological Methods 26, 103).  Those below
:data:`PRIOR_CONTRACTION_MIN` are ``McmcResult.prior_dominated``; when
the dust fraction is one of them a
:class:`~edgefit.errors.PriorDominatedWarning` says that the data do not
separate gas from dust and the credible intervals restate the prior.
"""
from __future__ import annotations

import math
import warnings
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

from ..errors import (ArgumentError, FitError, ModeMixingWarning, PriorDominatedWarning,
                      ShortChainWarning)
from ..stats import ONE_SIGMA
from .likelihood import ParameterVector

if TYPE_CHECKING:
    from .result import FitResult

__all__ = ["LogPosterior", "GaussianPrior", "LogUniformPrior", "McmcResult", "run_mcmc",
           "SamplerCoordinates", "SampledPosterior", "chain_diagnostics", "RHAT_MAX", "ESS_MIN",
           "PROPOSALS", "proposal_moves", "posterior_contraction", "PRIOR_CONTRACTION_MIN"]

#: Chains shorter than this many autocorrelation times trigger a warning.
MIN_TAU_MULTIPLE = 50
#: Largest acceptable rank-normalised split-R-hat.  Vehtari et al. (2021)
#: recommend 1.01 for independent chains; the walkers of an ensemble
#: sampler are not independent and a converged run of 32 walkers x 2500
#: steps (> 50 tau) reads about 1.02, so 1.05 is used (common practice).
RHAT_MAX = 1.05
#: Smallest acceptable bulk effective sample size (Vehtari et al. 2021
#: recommend > 400, i.e. 100 per chain for four chains).
ESS_MIN = 400
#: A sampled coordinate whose posterior keeps more than this share of its
#: flat prior's variance (posterior contraction below 0.5) is reported as
#: prior-dominated: the data have not even halved the prior's variance.
#: (Our convention; the contraction itself is Schad, Betancourt & Vasishth
#: 2021, Psychological Methods 26, 103.)
PRIOR_CONTRACTION_MIN = 0.5
#: Walker proposals :func:`run_mcmc` accepts (module docstring).
PROPOSALS = ("auto", "stretch", "differential", "valley")
#: Weights of the differential-evolution move and its snooker variant in
#: the ``"differential"`` proposal.
DIFFERENTIAL_WEIGHTS = (0.8, 0.2)
#: Weights of the independence move drawing from the valley mixture, the
#: differential-evolution move and its snooker variant in the ``"valley"``
#: proposal.
VALLEY_WEIGHTS = (0.5, 0.4, 0.1)


def proposal_moves(proposal, mixture=None):
    """emcee's ``moves`` argument for a proposal name of :data:`PROPOSALS`
    (a list of (move, weight) pairs); ``"valley"`` needs the
    :class:`~edgefit.inference.valley.ValleyMixture` to draw from."""
    import emcee

    if proposal == "stretch":
        return [(emcee.moves.StretchMove(), 1.0)]
    if proposal == "differential":
        w_de, w_snooker = DIFFERENTIAL_WEIGHTS
        return [(emcee.moves.DEMove(), w_de), (emcee.moves.DESnookerMove(), w_snooker)]
    if proposal == "valley":
        if mixture is None:
            raise ArgumentError("the valley proposal needs its mixture density")
        w_jump, w_de, w_snooker = VALLEY_WEIGHTS
        return [(emcee.moves.MHMove(mixture), w_jump), (emcee.moves.DEMove(), w_de),
                (emcee.moves.DESnookerMove(), w_snooker)]
    raise ArgumentError(f"proposal must be one of {', '.join(map(repr, PROPOSALS))}, "
                        f"got {proposal!r}")


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
        self.rhat = None            # split-R-hat per parameter (arviz)
        self.ess = None             # bulk effective sample size per parameter (arviz)
        self.mode_visits = None     # samples per known minimum (post burn-in)
        self.mode_crossings = None  # walker moves between known minima's regions
        # {coordinate: posterior contraction} (flat priors)
        self.contraction: dict[str, float] | None = None
        self.coordinates = []       # sampler coordinates, e.g. "ln(dust_amax)"
        self.initial = None         # walkers' starting points (nwalkers, ndim)
        self.prior = "parameters"
        self.proposal = "stretch"   # walker proposal (PROPOSALS)
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
    def unmixed_modes(self):
        """True when the fit knew several minima and no walker moved
        between their regions."""
        return (self.mode_visits is not None and len(self.mode_visits) > 1
                and not self.mode_crossings)

    @property
    def prior_dominated(self):
        """Sampler coordinates whose posterior contraction is below
        :data:`PRIOR_CONTRACTION_MIN` (see :func:`posterior_contraction`)."""
        return [k for k, c in (self.contraction or {}).items() if c < PRIOR_CONTRACTION_MIN]

    @property
    def diagnostics_ok(self):
        """R-hat and ESS within :data:`RHAT_MAX` / :data:`ESS_MIN` (True
        when they were not computed)."""
        if self.rhat is None or self.ess is None:
            return True
        return bool(np.nanmax(self.rhat) <= RHAT_MAX and np.nanmin(self.ess) >= ESS_MIN)

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
        lines = [f"MCMC ({self.proposal} proposal): {self.nwalkers} walkers x {self.nsteps} "
                 f"steps, burn-in {self.burn}, "
                 f"thin {self.thin}, acceptance {np.mean(self.acceptance):.2f}, "
                 f"max tau {np.nanmax(self.tau):.1f} steps"
                 + ("  [SHORT CHAIN: < 50 tau]" if self.short_chain else "")]
        if self.rhat is not None and self.ess is not None:
            lines.append(f"  split-R-hat max {np.nanmax(self.rhat):.3f} (<= {RHAT_MAX}), bulk ESS "
                         f"min {np.nanmin(self.ess):.0f} (>= {ESS_MIN})"
                         + ("" if self.diagnostics_ok else "  [NOT CONVERGED]"))
        if self.coordinates:
            lines.append(f"  sampled in {', '.join(self.coordinates)}; prior flat in the "
                         + ("sampled coordinates" if self.prior == "sampled" else
                            "fit parameters"))
        if self.mode_visits is not None and len(self.mode_visits) > 1:
            lines.append(f"  samples per known minimum {list(self.mode_visits)}, "
                         f"{self.mode_crossings} walker moves between them"
                         + ("  [MODES NOT CROSSED]" if self.unmixed_modes else ""))
        if self.prior_dominated:
            con = self.contraction or {}
            lines.append("  prior-dominated (posterior contraction < "
                         f"{PRIOR_CONTRACTION_MIN}): "
                         + ", ".join(f"{k} {con[k]:.2f}" for k in self.prior_dominated))
        for n in self.names:
            med, lo, hi = self.quantiles(n)
            lines.append(f"  {n:<26} median {med:.5g}  68% [{lo:.5g}, {hi:.5g}]")
        return "\n".join(lines)

    def to_dict(self):
        return {"names": self.names, "nwalkers": self.nwalkers, "nsteps": self.nsteps,
                "burn": self.burn, "thin": self.thin, "tau": self.tau.tolist(),
                "acceptance_mean": float(np.mean(self.acceptance)), "seed": self.seed,
                "short_chain": bool(self.short_chain),
                "rhat": None if self.rhat is None else np.asarray(self.rhat).tolist(),
                "ess_bulk": None if self.ess is None else np.asarray(self.ess).tolist(),
                "mode_visits": None if self.mode_visits is None else list(self.mode_visits),
                "mode_crossings": self.mode_crossings, "coordinates": self.coordinates,
                "prior": self.prior, "proposal": self.proposal,
                "contraction": self.contraction, "prior_dominated": self.prior_dominated,
                "posterior": {n: dict(zip(("median", "lo68", "hi68"), self.quantiles(n)))
                              for n in self.names}}


#: the log-posterior in a pool worker (set there by _init_worker)
_WORKER_LOGP: Any = None


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


class SamplerCoordinates:
    """Map between the fit's free-parameter vector theta and the sampler's
    vector y: y = ln(theta) for the indices ``log_idx`` (grain sizes) and
    ``scale_idx`` (positive scales: their prior stays flat in theta, see
    :class:`SampledPosterior`), together ``ln_idx``; for a column pair (i_gas, i_dust),
    y[i_gas] = total and y[i_dust] = dust fraction."""

    def __init__(self, free, log_idx=(), pair=None, scale_idx=()):
        self.free = list(free)
        self.log_idx = np.asarray(list(log_idx), dtype=int)
        self.scale_idx = np.asarray(list(scale_idx), dtype=int)
        self.ln_idx = np.concatenate([self.log_idx, self.scale_idx]).astype(int)
        self.pair = pair

    @classmethod
    def for_result(cls, result, pv, coordinates="auto", scales=False):
        """Coordinates of a fit (module docstring).  With ``scales``, every
        free normalisation (a component parameter named ``norm``, bounded
        below by >= 0, positive at the best fit) is sampled in its
        logarithm too: the log of the flux is linear in ln(norm), the
        photon index and N_H, so the narrow band's N_H-index-normalisation
        ridge becomes straight."""
        if coordinates == "natural":
            return cls(pv.free)
        if coordinates != "auto":
            raise FitError(f"coordinates must be 'auto' or 'natural', got {coordinates!r}")
        from .fit import _column_pairs, size_parameter_names

        sizes = size_parameter_names(result.model, result.params)
        log_idx = [pv.free.index(n) for n in sizes
                   if n in pv.free and pv.lower[pv.free.index(n)] > 0]
        pair = None
        pairs = [(g, d) for g, d in _column_pairs(result.model, result.params).values()
                 if len(g) == 1 and len(d) == 1]
        if len(pairs) == 1 and pairs[0][0][0] in pv.free and pairs[0][1][0] in pv.free:
            pair = (pv.free.index(pairs[0][0][0]), pv.free.index(pairs[0][1][0]))
        scale_idx = []
        if scales:
            x0 = pv.vector(result.params)
            norms = {full for full, (_, p) in result.model.parameters().items()
                     if p.name == "norm"}
            scale_idx = [i for i, n in enumerate(pv.free)
                         if n in norms and pv.lower[i] >= 0 and x0[i] > 0]
        return cls(pv.free, log_idx, pair, scale_idx)

    def labels(self):
        out = [f"ln({self.free[i]})" for i in self.ln_idx]
        if self.pair is not None:
            g, d = (self.free[i] for i in self.pair)
            out.append(f"total = {g} + {d}")
            out.append(f"dust fraction = {d} / total")
        return out

    def to_y(self, theta):
        y = np.array(theta, dtype=float, copy=True)
        if self.ln_idx.size:
            with np.errstate(divide="ignore", invalid="ignore"):
                y[..., self.ln_idx] = np.log(y[..., self.ln_idx])
        if self.pair is not None:
            ig, idd = self.pair
            g, d = y[..., ig].copy(), y[..., idd].copy()
            tot = g + d
            with np.errstate(divide="ignore", invalid="ignore"):
                y[..., idd] = np.where(tot > 0, d / np.where(tot > 0, tot, 1.0), 0.5)
            y[..., ig] = tot
        return y

    def to_theta(self, y):
        th = np.array(y, dtype=float, copy=True)
        if self.ln_idx.size:
            with np.errstate(over="ignore"):
                th[..., self.ln_idx] = np.exp(th[..., self.ln_idx])
        if self.pair is not None:
            ig, idd = self.pair
            tot, f = th[..., ig].copy(), th[..., idd].copy()
            th[..., ig] = tot * (1.0 - f)
            th[..., idd] = tot * f
        return th

    def scale_log_jacobian(self, y):
        """ln |d theta / d y| of the scale coordinates alone (added to every
        posterior so that their prior stays flat in the parameters)."""
        return float(np.sum(y[self.scale_idx])) if self.scale_idx.size else 0.0

    def log_jacobian(self, y):
        """ln |d theta / d y| (densities flat in theta times this are the
        densities in y)."""
        lj = float(np.sum(y[self.ln_idx])) if self.ln_idx.size else 0.0
        if self.pair is not None:
            tot = y[self.pair[0]]
            lj += math.log(tot) if tot > 0 else -math.inf
        return lj

    def jacobian_y_theta(self, theta):
        """d y / d theta at ``theta`` (matrix)."""
        n = len(theta)
        jac = np.eye(n)
        for i in self.ln_idx:
            jac[i, i] = 1.0 / theta[i] if theta[i] > 0 else 0.0
        if self.pair is not None:
            ig, idd = self.pair
            g, d = theta[ig], theta[idd]
            tot = g + d
            jac[ig, ig] = jac[ig, idd] = 1.0
            if tot > 0:
                jac[idd, ig] = -d / tot ** 2
                jac[idd, idd] = g / tot ** 2
        return jac

    def box(self, pv):
        """The parameter bounds of ``pv`` as a box (lower, upper) in the
        sampler coordinates (for a column pair: total >= 0 and fraction in
        [0, 1])."""
        lower = np.array(pv.lower, dtype=float)
        upper = np.array(pv.upper, dtype=float)
        for j in self.ln_idx:
            lower[j] = math.log(lower[j]) if lower[j] > 0 else -np.inf
            upper[j] = math.log(upper[j]) if upper[j] > 0 else -np.inf
        if self.pair is not None:
            ig, idd = self.pair
            lower[ig], upper[ig] = 0.0, np.inf
            lower[idd], upper[idd] = 0.0, 1.0
        return lower, upper

    def label(self, j):
        """Name of sampler coordinate ``j``."""
        if j in self.ln_idx:
            return f"ln({self.free[j]})"
        if self.pair is not None and j == self.pair[0]:
            return "total"
        if self.pair is not None and j == self.pair[1]:
            return "dust fraction"
        return self.free[j]

    def in_bounds(self, y):
        if self.pair is not None:
            tot, f = y[self.pair[0]], y[self.pair[1]]
            if not (tot >= 0 and 0 <= f <= 1):
                return False
        return True


class SampledPosterior:
    """ln posterior in sampler coordinates: the :class:`LogPosterior` of
    theta(y), plus ln |d theta/d y| when the prior is flat in the fit
    parameters (``prior="parameters"``)."""

    def __init__(self, logp, coords, prior="sampled"):
        if prior not in ("sampled", "parameters"):
            raise FitError(f"prior must be 'sampled' or 'parameters', got {prior!r}")
        self.logp = logp
        self.coords = coords
        self.prior = prior

    def __call__(self, y):
        y = np.asarray(y, dtype=float)
        if not np.all(np.isfinite(y)) or not self.coords.in_bounds(y):
            return -math.inf
        lp = self.logp(self.coords.to_theta(y))
        if math.isfinite(lp):
            lp += (self.coords.log_jacobian(y) if self.prior == "parameters"
                   else self.coords.scale_log_jacobian(y))
        return lp


def chain_diagnostics(chain):
    """(split-R-hat, bulk ESS) per parameter of ``chain`` (nsteps, nwalkers,
    ndim), each walker taken as one chain; arviz's rank-normalised
    versions (Vehtari et al. 2021).  Constant parameters give NaN."""
    import arviz as az

    x = np.asarray(chain, dtype=float)
    rhat = np.full(x.shape[2], np.nan)
    ess = np.full(x.shape[2], np.nan)
    for k in range(x.shape[2]):
        arr = x[:, :, k].T  # (chain, draw)
        if np.ptp(arr) == 0 or arr.shape[1] < 4:
            continue
        with np.errstate(all="ignore"):
            rhat[k] = float(az.rhat(arr))
            ess[k] = float(az.ess(arr, method="bulk"))
    return rhat, ess


def posterior_contraction(samples, lower, upper):
    """1 - var(posterior) / var(prior) for each column of ``samples`` (n, d)
    whose prior is flat on [lower, upper] (variance (upper - lower)^2 / 12);
    NaN where the interval is not finite.  Near 1 the data pin the
    coordinate down, near 0 its posterior is its prior (the "posterior
    contraction" of Schad, Betancourt & Vasishth 2021, Psychological
    Methods 26, 103)."""
    x = np.asarray(samples, dtype=float)
    width = np.asarray(upper, dtype=float) - np.asarray(lower, dtype=float)
    out = np.full(x.shape[1], np.nan)
    ok = np.isfinite(width) & (width > 0)
    out[ok] = 1.0 - np.var(x[:, ok], axis=0) / (width[ok] ** 2 / 12.0)
    return out


def _flat_prior_coordinates(coords, prior, skip):
    """Indices of the sampler coordinates whose prior is flat in the
    coordinate itself: with ``prior="sampled"`` all but the scales (flat in
    the parameter), with ``"parameters"`` those sampled untransformed;
    never the parameters named in ``skip`` (a prior of the user's)."""
    transformed = set(coords.scale_idx.tolist())
    if prior != "sampled":
        transformed |= set(coords.ln_idx.tolist())
        if coords.pair is not None:
            transformed |= set(coords.pair)
    return [j for j in range(len(coords.free))
            if j not in transformed and coords.free[j] not in skip]


def _mode_assignment(chain_y, centres, idx):
    """Index of the nearest centre (in the coordinates ``idx``) for every
    sample: shape (nsteps, nwalkers)."""
    c = np.asarray(centres)[:, idx]                     # (m, k)
    x = chain_y[..., idx]                               # (s, w, k)
    d = ((x[:, :, None, :] - c[None, None, :, :]) ** 2).sum(axis=-1)
    return np.argmin(d, axis=-1)


def _initial_walkers(result, pv, coords, logp_y, nwalkers, rng, init, init_scale):
    """Walkers in sampler coordinates, shared among the known minima."""
    x0 = pv.vector(result.params)
    cov = result.covariance_of(pv.free)
    centres = [x0]
    if init == "minima":
        dmax = getattr(result, "multimodal_delta", None) or 0.0
        for m in getattr(result, "minima", [])[1:]:
            if m.delta <= dmax:
                centres.append(pv.vector(m.params))
    elif init != "ball":
        raise FitError(f"init must be 'minima' or 'ball', got {init!r}")
    groups = np.array_split(np.arange(nwalkers), len(centres))
    start = np.empty((nwalkers, len(pv)))
    for centre, members in zip(centres, groups):
        yc = coords.to_y(centre)
        if cov is not None:
            jac = coords.jacobian_y_theta(centre)
            cov_y = jac @ cov @ jac.T
            cov_y = 0.5 * (cov_y + cov_y.T)
            try:
                draws = rng.multivariate_normal(yc, cov_y * init_scale ** 2, size=len(members),
                                                method="eigh")
            except (np.linalg.LinAlgError, ValueError):
                draws = yc + 1e-3 * np.maximum(np.abs(yc), 1e-3) * rng.standard_normal(
                    (len(members), len(yc)))
        else:
            draws = yc + 1e-3 * np.where(yc != 0, np.abs(yc), 1.0) * rng.standard_normal(
                (len(members), len(yc)))
        for k, j in enumerate(members):
            y = draws[k]
            tries = 0
            while not math.isfinite(logp_y(y)) and tries < 60:
                y = yc + 0.5 * (y - yc)
                tries += 1
            if not math.isfinite(logp_y(y)):
                y = yc.copy()
            start[j] = y
    return start, [coords.to_y(c) for c in centres]


#: Share of a valley-proposal run spent before its one adaptation.
VALLEY_STAGE_FRACTION = 0.25


def _valley_stages(nsteps):
    """Steps before and after the valley proposal's adaptation."""
    first = int(nsteps * VALLEY_STAGE_FRACTION)
    return [first, nsteps - first] if first >= 20 and nsteps - first > 0 else [nsteps]


def _walkers_from(mixture, logp_y, fallback, rng, tries=20):
    """Walkers drawn from ``mixture`` where the posterior is finite (the
    rows of ``fallback`` for any still missing after ``tries`` rounds)."""
    n = len(fallback)
    out = []
    for _ in range(tries):
        for y in mixture.draw(rng, 4 * n):
            if math.isfinite(logp_y(y)):
                out.append(y)
                if len(out) == n:
                    return np.array(out)
    out += list(fallback[len(out):])
    return np.array(out)


def run_mcmc(result: FitResult, nwalkers: int | None = None, nsteps: int = 2000,
             burn: int | None = None, thin: int = 1, seed: int | None = None,
             priors: dict[str, Any] | None = None, progress: bool = False,
             processes: int | None = None, init_scale: float = 1.0, store: bool = True,
             coordinates: str = "auto", prior: str = "sampled",
             init: str = "minima", proposal: str = "auto") -> McmcResult:
    """Sample the posterior around a best fit with emcee.

    Parameters
    ----------
    result : FitResult
        Best fit (its Parameters define free parameters, bounds and ties;
        its ``minima`` the modes the walkers start in).
    nwalkers : int, optional
        Default max(32, 4 * n_free) (made even).
    nsteps : int
    burn : int, optional
        Steps discarded; default max(2 tau_max, nsteps/4).
    thin : int
    seed : int
        Seeds both the initial walkers and emcee's random state.
    priors : dict name -> callable, optional
        Extra priors (densities in the fit parameters).
    progress : bool
        tqdm progress bar (silently off when tqdm is absent).
    processes : int, optional
        Run a multiprocessing pool of this many processes.
    init_scale : float
        Initial ball = init_scale x covariance (1e-3 x |value| without one).
    coordinates : {"auto", "natural"}
        Sampler coordinates (module docstring); "natural" samples the fit
        parameters themselves.
    prior : {"sampled", "parameters"}
        Flat in the sampler coordinates (default) or in the fit parameters.
    init : {"minima", "ball"}
        Walkers shared among the known minima (default) or one ball around
        the best fit.
    proposal : {"auto", "stretch", "differential", "valley"}
        Walker proposal (module docstring): emcee's stretch move, the
        mixture of differential-evolution moves, or independence jumps
        along the grain-size valley mixed with them (for a free grain
        size; the walkers then start as draws from the valley mixture and
        ``init``/``init_scale`` are not used).  ``"auto"`` (default) is
        ``"valley"`` when one grain-size parameter is free, else
        ``"stretch"``; the result records the one used.

    Returns
    -------
    McmcResult (also stored as ``result.mcmc`` when ``store``); its chain
    is in the fit parameters.
    """
    import emcee

    if proposal not in PROPOSALS:
        proposal_moves(proposal)  # raises the one-line error
    logp = LogPosterior(result.likelihood, result.params, priors)
    pv = logp.pv
    if proposal == "auto":
        from .valley import has_size_grid

        proposal = "valley" if has_size_grid(result, pv) else "stretch"
    ndim = len(pv)
    if ndim == 0:
        raise FitError("no free parameters to sample")
    nwalkers = int(nwalkers or max(32, 4 * ndim))
    nwalkers += nwalkers % 2
    rng = np.random.default_rng(seed)
    coords = SamplerCoordinates.for_result(result, pv, coordinates,
                                           scales=proposal == "valley")
    target = SampledPosterior(logp, coords, prior)
    start, centres = _initial_walkers(result, pv, coords, target, nwalkers, rng, init,
                                      init_scale)
    mixture = None
    if proposal == "valley":
        from .valley import valley_mixture

        mixture = valley_mixture(result, pv, coords, logp.evaluator, target)
        start = _walkers_from(mixture, target, start, rng)
    moves = proposal_moves(proposal, mixture)
    pool = None
    fn: Callable[[np.ndarray], float] = target
    if processes and processes > 1:
        import multiprocessing

        # each worker receives the posterior once (initializer); emcee then
        # ships only the small _WorkerLogPosterior proxy with each batch
        pool = multiprocessing.Pool(processes, initializer=_init_worker, initargs=(target,))
        fn = _WorkerLogPosterior()
    show = bool(progress and _tqdm_available())
    # the valley proposal adapts once: after its first stage the mixture
    # gains a kernel density of that stage's later half, then stays fixed
    stages = [nsteps] if mixture is None else _valley_stages(nsteps)
    chains: list[np.ndarray] = []
    lps: list[np.ndarray] = []
    accepted = np.zeros(nwalkers)
    try:
        state = start
        random_state = np.random.RandomState(int(rng.integers(2 ** 31 - 1))).get_state()
        for k, n in enumerate(stages):
            if k > 0 and mixture is not None:
                first = chains[0]
                mixture = mixture.with_samples(first[len(first) // 2:].reshape(-1, ndim))
                moves = proposal_moves(proposal, mixture)
            sampler = emcee.EnsembleSampler(nwalkers, ndim, fn, pool=pool, moves=moves)
            sampler.random_state = random_state
            state = sampler.run_mcmc(state, n, progress=show)
            random_state = sampler.random_state
            chains.append(sampler.get_chain())
            lps.append(sampler.get_log_prob())
            accepted += sampler.acceptance_fraction * n
    finally:
        if pool is not None:
            pool.close()
            pool.join()
    chain_y = np.concatenate(chains)
    chain = coords.to_theta(chain_y)
    lp = np.concatenate(lps)
    with np.errstate(invalid="ignore", divide="ignore"):  # constant chains give NaN tau
        tau = emcee.autocorr.integrated_time(chain_y, tol=0)
    tmax = float(np.nanmax(tau))
    if burn is None:
        burn = int(min(max(2 * tmax, nsteps / 4), nsteps - 1))
    res = McmcResult(chain, lp, pv.free, burn, thin, tau, accepted / nsteps, seed)
    res.initial = coords.to_theta(start)
    res.coordinates = coords.labels()
    res.prior = prior if res.coordinates else "parameters"
    res.proposal = proposal
    post = chain_y[burn::thin]
    res.rhat, res.ess = chain_diagnostics(post)
    if len(centres) > 1 and coords.log_idx.size:
        modes = _mode_assignment(post, centres, coords.log_idx)
        res.mode_visits = [int(np.sum(modes == m)) for m in range(len(centres))]
        res.mode_crossings = int(np.sum(modes[1:] != modes[:-1]))
    flat = _flat_prior_coordinates(coords, res.prior, set(priors or ()))
    lower, upper = coords.box(pv)
    contraction = posterior_contraction(post.reshape(-1, ndim)[:, flat], lower[flat],
                                        upper[flat])
    res.contraction = {coords.label(j): float(c) for j, c in zip(flat, contraction)
                       if np.isfinite(c)}
    fraction = [k for k in res.prior_dominated
                if k == "dust fraction" or k == getattr(result.model, "fraction_param", None)]
    if fraction:
        warnings.warn(f"the data do not separate gas from dust: the posterior of the dust "
                      f"fraction ({fraction[0]}) keeps {1 - res.contraction[fraction[0]]:.0%} "
                      "of its flat prior's variance, so its credible interval (and the gas "
                      "and dust columns') mostly restates the prior; profile intervals say "
                      "what the data alone allow", PriorDominatedWarning, stacklevel=2)
    if res.short_chain:
        warnings.warn(f"MCMC chain of {nsteps} steps is shorter than {MIN_TAU_MULTIPLE} "
                      f"autocorrelation times (max tau = {tmax:.1f} steps); posterior "
                      "summaries may be unreliable", ShortChainWarning, stacklevel=2)
    elif not res.diagnostics_ok:
        hint = (" -- with a free grain size, try proposal='valley'"
                if coords.log_idx.size and proposal != "valley" else "")
        warnings.warn(f"MCMC chain not converged: split-R-hat max {np.nanmax(res.rhat):.3f} "
                      f"(want <= {RHAT_MAX}), bulk ESS min {np.nanmin(res.ess):.0f} "
                      f"(want >= {ESS_MIN}){hint}", ModeMixingWarning, stacklevel=2)
    if res.unmixed_modes:
        warnings.warn(f"MCMC walkers never moved between the {len(centres)} minima the fit "
                      "found (samples per minimum: "
                      f"{res.mode_visits}); the modes' relative weight is not sampled -- run "
                      "longer or compare the minima's statistics", ModeMixingWarning,
                      stacklevel=2)
    if store:
        result.mcmc = res
    return res
