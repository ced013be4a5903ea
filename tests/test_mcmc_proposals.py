"""Walker proposals of ``run_mcmc`` (``proposal="stretch"``, ``"differential"``
and ``"valley"``; the valley proposal has more checks in test_valley_proposal.py).

Reference: an analytic Gaussian.  The log-likelihood is a correlated
three-dimensional normal density with known mean and covariance, far
inside flat bounds, so the posterior is that normal itself.  The sample
mean, variances and correlations must agree with the analytic values
within 4 Monte Carlo standard errors, using the run's own bulk effective
sample size n_eff (arviz) per parameter: the standard error of a mean is
sigma / sqrt(n_eff), of a variance sigma^2 sqrt(2 / n_eff), of a
correlation (1 - rho^2) / sqrt(n_eff) (normal-theory large-sample
formulas; common practice, standard results of sampling theory).  These bounds do catch a wrong move: emcee's snooker move used
alone with its Hastings factor dropped gave variances 8 to 13 standard
errors too small (tried while writing this test).
"""
import json
import warnings

import lmfit
import numpy as np
import pytest

from edgefit.errors import ArgumentError, ShortChainWarning
from edgefit.inference import run_mcmc
from edgefit.inference.mcmc import PROPOSALS

# the analytic Gaussian: mean, standard deviations, correlations
MEAN = np.array([1.5, -3.0, 40.0])
SIGMA = np.array([0.2, 1.0, 5.0])
CORR = np.array([[1.0, 0.8, -0.5],
                 [0.8, 1.0, -0.3],
                 [-0.5, -0.3, 1.0]])
COV = CORR * np.outer(SIGMA, SIGMA)
NAMES = ["a", "b", "c"]


class _GaussianLikelihood:
    """Duck-typed likelihood: ``compile`` returns an evaluator whose
    ``log_likelihood(theta)`` is the analytic Gaussian's log-density."""

    def __init__(self):
        self.precision = np.linalg.inv(COV)

    def compile(self, params):
        return self

    def log_likelihood(self, theta):
        d = np.asarray(theta) - MEAN
        return -0.5 * float(d @ self.precision @ d)

    def residuals(self, theta):
        # whitened offsets: their sum of squares is the statistic
        return np.linalg.solve(np.linalg.cholesky(COV), np.asarray(theta) - MEAN)

    def statistic(self, theta):
        return -2.0 * self.log_likelihood(theta)


class _GaussianFit:
    """The parts of a FitResult that ``run_mcmc`` reads, for the analytic
    Gaussian: parameters at the mean with flat bounds 20 sigma wide, and
    the covariance (the walkers start in a ball drawn from it)."""

    def __init__(self):
        self.likelihood = _GaussianLikelihood()
        self.params = lmfit.Parameters()
        for n, m, s in zip(NAMES, MEAN, SIGMA):
            self.params.add(n, value=m, min=m - 20 * s, max=m + 20 * s)
        self.minima = []
        self.mcmc = None

    def covariance_of(self, names):
        idx = [NAMES.index(n) for n in names]
        return COV[np.ix_(idx, idx)]


#: chain lengths: > 50 autocorrelation times (about 36 steps for the
#: stretch move, 12 for the differential mixture on this density; the
#: valley proposal's mixture is here one Student-t at the exact Gaussian)
STEPS = {"auto": 2500, "stretch": 2500, "differential": 1500, "valley": 1500}


@pytest.mark.parametrize("proposal", PROPOSALS)
def test_proposal_samples_the_analytic_gaussian(proposal):
    fit = _GaussianFit()
    mc = run_mcmc(fit, nwalkers=24, nsteps=STEPS[proposal], seed=11, coordinates="natural",
                  init="ball", proposal=proposal, store=False)
    # "auto" resolves to the stretch move here (no grain-size parameter)
    assert mc.proposal == ("stretch" if proposal == "auto" else proposal)
    assert not mc.short_chain
    x = mc.flat_samples()
    n_eff = np.asarray(mc.ess)
    assert np.all(n_eff > 1000), n_eff
    mean = x.mean(axis=0)
    cov = np.cov(x, rowvar=False)
    sd = np.sqrt(np.diag(cov))
    assert np.all(np.abs(mean - MEAN) < 4 * SIGMA / np.sqrt(n_eff)), (mean, n_eff)
    assert np.all(np.abs(np.diag(cov) / SIGMA ** 2 - 1) < 4 * np.sqrt(2 / n_eff)), \
        (np.diag(cov), n_eff)
    corr = cov / np.outer(sd, sd)
    for i in range(3):
        for j in range(i):
            se = (1 - CORR[i, j] ** 2) / np.sqrt(min(n_eff[i], n_eff[j]))
            assert abs(corr[i, j] - CORR[i, j]) < 4 * se, (i, j, corr[i, j])


def test_differential_proposal_is_seeded_and_recorded(tmp_path):
    fit = _GaussianFit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ShortChainWarning)
        a = run_mcmc(fit, nwalkers=8, nsteps=40, seed=3, coordinates="natural", init="ball",
                     proposal="differential", store=False)
        b = run_mcmc(fit, nwalkers=8, nsteps=40, seed=3, coordinates="natural", init="ball",
                     proposal="differential", store=False)
        s = run_mcmc(fit, nwalkers=8, nsteps=40, seed=3, coordinates="natural", init="ball",
                     store=False)
    np.testing.assert_array_equal(a.chain, b.chain)
    # same seed and start, another proposal: another chain
    assert not np.array_equal(a.chain, s.chain)
    assert s.proposal == "stretch" and "stretch proposal" in s.summary()
    # to_dict -> JSON -> back: the proposal and the run's numbers survive
    d = json.loads(json.dumps(a.to_dict()))
    assert d["proposal"] == "differential" and "differential proposal" in a.summary()
    assert d["nwalkers"] == 8 and d["nsteps"] == 40 and d["names"] == NAMES
    assert d["tau"] == pytest.approx(a.tau.tolist(), rel=1e-15)


def test_unknown_proposal_is_an_argument_error():
    with pytest.raises(ArgumentError, match="'stretch', 'differential'.*'leapfrog'"):
        run_mcmc(_GaussianFit(), nsteps=10, proposal="leapfrog", store=False)
