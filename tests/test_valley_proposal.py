"""The valley proposal of ``run_mcmc`` (``proposal="valley"``).

References:

- The mixture density, alone and blended with Student-t kernels on
  sample points, against SciPy's ``scipy.stats.multivariate_t`` (a
  general-purpose reference library), to 1e-10 relative.
- Its draws against the covariance of a multivariate Student-t,
  Sigma nu / (nu - 2) (a standard result, e.g. Kotz & Nadarajah 2004,
  Multivariate t Distributions, eq. 1.2 onwards; from memory), within 4
  standard errors of a sample variance, sqrt((2 + excess kurtosis) / n)
  relative with the t's excess kurtosis 6 / (nu - 4) (common practice,
  normal-theory formula corrected for kurtosis).
- The independence Metropolis-Hastings move (Tierney 1994, Annals of
  Statistics 22, 1701) on an analytic two-mode Gaussian target with a
  deliberately mismatched mixture: the share of samples in the lighter
  mode must match its analytic weight within 4 Monte Carlo standard
  errors (binomial, with the run's own effective sample size); the same
  move with its Hastings factor dropped misses by far more (checked in
  the test, so the check can fail).
- Posterior contraction 1 - var_post / var_prior (Schad, Betancourt &
  Vasishth 2021, Psychological Methods 26, 103): uniform samples over the
  prior's interval give 0, a normal of width sigma gives 1 - 12 sigma^2 /
  width^2 (variance of a uniform, (b - a)^2 / 12), within 4 standard
  errors of a sample variance.
- A simulated Si K sightline with the upper grain size free: the chain
  converges by arviz's split-R-hat and bulk ESS (Vehtari et al. 2021)
  and crosses between the fit's minima, and the simulation's true total
  column lies inside the 95 % posterior interval (one seeded case; the
  coverage over many is ``benchmarks/validate_coverage.py --edges
  --mcmc``).
"""
import warnings

import emcee
import numpy as np
import pytest
from scipy import stats

from edgefit.errors import EdgefitWarning, PriorDominatedWarning
from edgefit.inference.mcmc import posterior_contraction
from edgefit.inference.valley import ValleyMixture

MEANS = np.array([[0.0, 1.0, -2.0], [3.0, -1.0, 0.5]])
COVS = np.array([[[1.0, 0.3, 0.1], [0.3, 2.0, -0.4], [0.1, -0.4, 0.5]],
                 [[0.2, 0.0, 0.05], [0.0, 0.3, 0.1], [0.05, 0.1, 1.5]]])


def test_mixture_density_matches_scipy_multivariate_t():
    w = np.array([0.3, 0.7])
    mix = ValleyMixture(MEANS, COVS, w, dof=5.0)
    y = np.random.default_rng(1).normal(size=(50, 3)) * 2.0
    ref = np.log(sum(wk * stats.multivariate_t(loc=m, shape=c, df=5.0).pdf(y)
                     for wk, m, c in zip(w, MEANS, COVS)))
    np.testing.assert_allclose(mix.logpdf(y), ref, rtol=1e-10)
    one = ValleyMixture(MEANS[:1], COVS[:1], [1.0], dof=5.0)
    assert one.logpdf(y[0]) == pytest.approx(
        stats.multivariate_t(loc=MEANS[0], shape=COVS[0], df=5.0).logpdf(y[0]), rel=1e-10)


def test_blending_in_sample_kernels_matches_scipy():
    # Scott's factor n^(-1/(d+4)) on the sample covariance (Scott 1992,
    # Multivariate Density Estimation, eq. 6.42; from memory)
    grid = ValleyMixture(MEANS, COVS, [0.4, 0.6], dof=5.0)
    x = np.random.default_rng(4).normal(size=(40, 3)) + [1.0, 0.0, -1.0]
    mix = grid.with_samples(x, share=0.5)
    kernel = np.cov(x, rowvar=False) * 40 ** (-2.0 / 7.0)
    y = np.random.default_rng(5).normal(size=(20, 3))
    pdf = sum(0.5 * w * stats.multivariate_t(loc=m, shape=c, df=5.0).pdf(y)
              for w, m, c in zip([0.4, 0.6], MEANS, COVS))
    pdf = pdf + sum(0.5 / 40 * stats.multivariate_t(loc=p, shape=kernel, df=5.0).pdf(y)
                    for p in x)
    np.testing.assert_allclose(mix.logpdf(y), np.log(pdf), rtol=1e-10)
    # too few points for a covariance: the mixture is returned unchanged
    assert grid.with_samples(x[:3]) is grid


def test_draws_have_the_student_t_covariance_and_stay_in_the_box():
    nu, n = 10.0, 400_000
    mix = ValleyMixture(MEANS[:1], COVS[:1], [1.0], dof=nu)
    x = mix.draw(np.random.default_rng(2), n)
    expected = COVS[0] * nu / (nu - 2.0)
    rel_se = np.sqrt((2.0 + 6.0 / (nu - 4.0)) / n)
    got = np.cov(x, rowvar=False)
    assert np.all(np.abs(np.diag(got) / np.diag(expected) - 1) < 4 * rel_se), np.diag(got)
    assert np.all(np.abs(x.mean(axis=0) - MEANS[0])
                  < 4 * np.sqrt(np.diag(expected) / n))
    boxed = ValleyMixture(MEANS[:1], COVS[:1], [1.0], dof=nu, lower=[-0.5, 0.0, -np.inf],
                          upper=[np.inf, 1.5, -1.0])
    b = boxed.draw(np.random.RandomState(3), 5000)
    assert np.all(b[:, 0] >= -0.5) and np.all((b[:, 1] >= 0) & (b[:, 1] <= 1.5))
    assert np.all(b[:, 2] <= -1.0)


# two-mode Gaussian target in 2-D: weight 0.25 at (-4, 0), 0.75 at (4, 1)
T_W = np.array([0.25, 0.75])
T_MU = np.array([[-4.0, 0.0], [4.0, 1.0]])
T_SD = np.array([[0.5, 0.8], [0.7, 0.4]])


def _target(y):
    comps = [np.log(w) + stats.norm.logpdf(y, m, s).sum() for w, m, s in zip(T_W, T_MU, T_SD)]
    return float(np.logaddexp(*comps))


def _run(move, seed=5, nwalkers=16, nsteps=3000):
    rng = np.random.default_rng(seed)
    start = T_MU[1] + 0.1 * rng.standard_normal((nwalkers, 2))   # all in the heavy mode
    sampler = emcee.EnsembleSampler(nwalkers, 2, _target, moves=[(move, 1.0)])
    sampler.random_state = np.random.RandomState(seed).get_state()
    sampler.run_mcmc(start, nsteps)
    chain = sampler.get_chain(discard=200)
    light = chain[..., 0] < 0
    import arviz as az

    n_eff = float(az.ess(light.T.astype(float), method="bulk"))
    return float(light.mean()), n_eff


def test_independence_move_samples_the_right_mode_weights():
    # a mismatched proposal: equal weights, shifted means, wider shapes
    mix = ValleyMixture(T_MU + [[0.4, -0.3], [-0.3, 0.2]],
                        [np.diag((1.5 * s) ** 2) for s in T_SD], [0.5, 0.5], dof=5.0)
    share, n_eff = _run(emcee.moves.MHMove(mix))
    se = np.sqrt(T_W[0] * (1 - T_W[0]) / n_eff)
    assert abs(share - T_W[0]) < 4 * se, (share, n_eff)

    def no_hastings_factor(coords, random):
        new, _ = mix(coords, random)
        return new, np.zeros(len(coords))

    broken, n_eff_b = _run(emcee.moves.MHMove(no_hastings_factor))
    se_b = np.sqrt(T_W[0] * (1 - T_W[0]) / n_eff_b)
    assert abs(broken - T_W[0]) > 8 * se_b, (broken, n_eff_b)


@pytest.mark.slow
def test_valley_chain_mixes_on_a_size_free_sightline():
    from edgefit.inference import fit_sightline, run_mcmc
    from edgefit.inference._edge_coverage import _model, draw_tasks
    from edgefit.inference._testing import edge_sightline_truth, simulate_edge_sightline
    from edgefit.inference.fit import reparametrise
    from edgefit.inference.mcmc import ESS_MIN, RHAT_MAX

    task = draw_tasks(3, "Si", 2026)[2]
    model = _model("Si")
    truth, total = edge_sightline_truth(model, "Si", task["nh"], task["depletion"],
                                        task["amax"])
    ds, truth = simulate_edge_sightline(model, "Si", truth,
                                        np.random.default_rng(task["seed"]),
                                        counts_per_channel=task["counts"], arms=task["arms"])
    params = model.make_params()
    params["dust_amax"].set(value=0.3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EdgefitWarning)
        res = fit_sightline(model, ds, params=params, goodness=False, warn=False)
        tf = reparametrise(res, "total_fraction", gas="gas", dust="dust")
        # the default proposal ("auto") picks the valley proposal here
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", PriorDominatedWarning)
            mc = run_mcmc(tf, nwalkers=32, nsteps=1500, seed=1, store=False)
    assert mc.proposal == "valley" and "ln(pl_norm)" in mc.coordinates
    assert np.nanmax(mc.rhat) <= RHAT_MAX and np.nanmin(mc.ess) >= ESS_MIN, \
        (mc.rhat, mc.ess)
    if mc.mode_visits is not None and len(mc.mode_visits) > 1:
        assert mc.mode_crossings > 0
    # the dust fraction's contraction: its flat prior on [0, 1] has variance 1/12
    frac = tf.model.fraction_param
    f = mc.flat_samples([frac])[:, 0]
    assert mc.contraction[frac] == pytest.approx(1 - 12 * np.var(f), abs=1e-12)
    warned = any(issubclass(w.category, PriorDominatedWarning) for w in caught)
    assert warned == (mc.contraction[frac] < 0.5) == (frac in mc.prior_dominated)
    x = mc.flat_samples([tf.model.total_param])[:, 0]
    lo, hi = np.quantile(x, [0.025, 0.975])
    assert lo <= total <= hi, (lo, total, hi)


def test_posterior_contraction_of_uniform_and_normal_samples():
    rng = np.random.default_rng(7)
    n = 200_000
    lower, upper = np.array([0.0, -2.0, 0.0]), np.array([1.0, 3.0, np.inf])
    flat = rng.uniform(lower[:2], upper[:2], size=(n, 2))
    narrow = rng.normal(0.5, 0.1, size=(n, 1))
    c = posterior_contraction(np.hstack([flat, narrow]), lower, upper)
    # var(sample) has relative standard error sqrt((2 + excess kurtosis) / n);
    # a uniform's excess kurtosis is -6/5
    assert np.all(np.abs(c[:2]) < 4 * np.sqrt(0.8 / n)), c
    assert np.isnan(c[2])
    c2 = posterior_contraction(narrow, [0.0], [1.0])
    assert c2[0] == pytest.approx(1 - 12 * 0.01, abs=4 * 12 * 0.01 * np.sqrt(2 / n))
