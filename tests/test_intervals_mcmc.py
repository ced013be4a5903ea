"""Profile-likelihood intervals, emcee posteriors, posterior predictive
checks and derived quantities.

Reference points: the chi-square(1) quantiles (Wilks 1938) for Delta C;
the closed-form Poisson likelihood of a single total count (Cash 1979) for
an exact profile interval; for a well-behaved parameter with many counts
the posterior (flat prior) and the profile likelihood agree (Bernstein-von
Mises), checked within 10 %.
"""
import math
import pickle
import warnings

import numpy as np
import pytest
from scipy import optimize
from scipy import stats as sps

from edgefit.errors import ShortChainWarning
from edgefit.inference import (Dataset, GaussianPrior, LogPosterior, delta_statistic,
                               derived_quantities, fit_sightline, posterior_predictive,
                               profile_intervals, run_mcmc)
from edgefit.inference._testing import (TOY_TRUTH, ToyEdgeAbsorber, simulate_counts,
                                        toy_model, toy_response)
from edgefit.models.base import COLUMN_KEY
from edgefit.models.continuum import PhotonPowerLaw

TRUTH = TOY_TRUTH
cheap_model = toy_model


@pytest.fixture(scope="module")
def fitted():
    resp = toy_response(1.6, 2.2, n_channels=120)
    model = cheap_model()
    spec = simulate_counts(model, resp, 2e4, values=TRUTH, seed=77)
    return fit_sightline(model, Dataset(spec, ranges=(1.65, 2.15)))


def test_delta_statistic_is_chi2_quantile():
    # chi-square(1 dof) quantiles: 1.0 at 68.27 %, 2.7055 at 90 %, 6.6349 at
    # 99 % to the quoted digits, and scipy.stats.chi2.ppf(level, 1) to 1e-9
    assert delta_statistic(0.682689) == pytest.approx(1.0, abs=1e-5)
    assert delta_statistic(0.90) == pytest.approx(2.7055, abs=1e-4)
    assert delta_statistic(0.99) == pytest.approx(6.6349, abs=1e-4)
    for level in (0.5, 0.6827, 0.95, 0.9973):
        assert delta_statistic(level) == pytest.approx(sps.chi2.ppf(level, 1), rel=1e-9)


def test_profile_of_single_poisson_normalisation_is_exact():
    """One free normalisation of a flat spectrum: the likelihood depends on
    the total count N only, and C(mu) - C(N) = 2[mu - N - N ln(mu/N)]
    (Cash 1979).  The profile interval must match the roots of that
    closed form to 1e-6 relative."""
    resp = toy_response(1.6, 2.2, n_channels=60)
    model = PhotonPowerLaw("pl", index=0.0, norm=1.0, fixed=["index"])
    spec = simulate_counts(model, resp, 3.0, seed=5)
    ds = Dataset(spec)
    res = fit_sightline(model, ds)
    n_tot = ds.counts.sum()
    mu_per_norm = ds.fold(model.evaluate(ds.grid, {"pl_norm": 1.0})).sum()
    ivs = profile_intervals(res, ["pl_norm"], [0.6827, 0.9])["pl_norm"]
    for level, iv in ivs.items():
        d = sps.chi2.ppf(level, 1)
        f = lambda mu: 2 * (mu - n_tot - n_tot * math.log(mu / n_tot)) - d  # noqa: E731
        lo = optimize.brentq(f, 1e-3 * n_tot, n_tot) / mu_per_norm
        hi = optimize.brentq(f, n_tot, 10 * n_tot) / mu_per_norm
        assert iv.lower == pytest.approx(lo, rel=1e-6)
        assert iv.upper == pytest.approx(hi, rel=1e-6)
        assert not (iv.lower_at_bound or iv.upper_at_bound)


def test_profile_reports_bound(fitted):
    # a 99.99 % interval of the edge step cannot extend below the bound 0.25
    res = fitted
    res.params["abs_step"].min = res.params["abs_step"].value - 0.5 * res.error("abs_step")
    try:
        iv = profile_intervals(res, ["abs_step"], [0.9999], store=False)["abs_step"][0.9999]
    finally:
        res.params["abs_step"].min = 0.0
    assert iv.lower_at_bound and not iv.upper_at_bound
    assert iv.lower == pytest.approx(res.values["abs_step"] - 0.5 * res.error("abs_step"))


def test_mcmc_agrees_with_profile_within_ten_percent(fitted):
    res = fitted
    profile_intervals(res, ["abs_step"], [0.6827])
    iv = res.intervals["abs_step"][0.6827]
    mc = run_mcmc(res, nwalkers=32, nsteps=2500, seed=1)
    med, lo, hi = mc.quantiles("abs_step", 0.6827)
    half_prof = 0.5 * (iv.upper - iv.lower)
    half_mc = 0.5 * (hi - lo)
    assert half_mc == pytest.approx(half_prof, rel=0.10)
    assert abs(med - res.values["abs_step"]) < 0.10 * half_prof * 2
    assert lo == pytest.approx(iv.lower, abs=0.10 * half_prof * 2)
    assert hi == pytest.approx(iv.upper, abs=0.10 * half_prof * 2)
    assert not mc.short_chain and 0.2 < np.mean(mc.acceptance) < 0.8
    # derived quantities from the posterior: the toy edge jump is the step
    # parameter itself, and the toy absorber's optical depth just above its edge
    # is tau0 (E/1.9)^-3 + step (analytic)
    der = derived_quantities(res)
    jump = der["abs_edge_jump"]
    assert jump.median == pytest.approx(med, rel=5e-3)  # 2000 of the draws
    e_ref = 1.84 + 0.020    # edge + 20 eV (atomic.EDGE_OFFSET_KEV)
    tau = der["abs_tau"]
    assert tau.best == pytest.approx(0.4 * (e_ref / 1.9) ** -3 + res.values["abs_step"]
                                     * (e_ref / 1.84) ** -3, rel=1e-12)
    # posterior predictive check of a correct model is not extreme
    ppc = posterior_predictive(res, n_draws=100, seed=3)
    assert 0.01 < ppc["p_value"] < 0.99
    res.mcmc = None
    res.derived = None


def test_mcmc_is_seeded_and_warns_on_short_chains(fitted):
    with pytest.warns(ShortChainWarning):
        a = run_mcmc(fitted, nwalkers=8, nsteps=60, seed=4, store=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ShortChainWarning)
        b = run_mcmc(fitted, nwalkers=8, nsteps=60, seed=4, store=False)
    np.testing.assert_array_equal(a.chain, b.chain)
    assert a.short_chain


def test_log_posterior_picklable_with_priors(fitted):
    lp = LogPosterior(fitted.likelihood, fitted.params,
                      priors={"pl_index": GaussianPrior(1.8, 0.1)})
    clone = pickle.loads(pickle.dumps(lp))
    theta = lp.pv.vector()
    assert clone(theta) == pytest.approx(lp(theta), rel=1e-12)
    # outside bounds -> -inf; the prior adds -0.5 z^2
    bad = theta.copy()
    bad[lp.pv.free.index("abs_step")] = -1.0
    assert lp(bad) == -math.inf
    flat = LogPosterior(fitted.likelihood, fitted.params)
    z = (theta[lp.pv.free.index("pl_index")] - 1.8) / 0.1
    assert lp(theta) - flat(theta) == pytest.approx(-0.5 * z * z, rel=1e-9)


def test_mcmc_with_process_pool(fitted):
    # a process pool only distributes the likelihood calls: with the same seed
    # the chain equals the serial one exactly (emcee's moves draw all random
    # numbers in the parent process)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ShortChainWarning)
        mc = run_mcmc(fitted, nwalkers=8, nsteps=30, seed=2, processes=2, store=False)
        serial = run_mcmc(fitted, nwalkers=8, nsteps=30, seed=2, store=False)
    assert mc.chain.shape == (30, 8, 3) and np.all(np.isfinite(mc.log_prob))
    np.testing.assert_array_equal(mc.chain, serial.chain)
    np.testing.assert_array_equal(mc.log_prob, serial.log_prob)


def test_ppc_flags_wrong_model():
    """Data with a strong edge fitted by a model whose edge is fixed at zero:
    the posterior predictive p-value (Gelman, Meng & Stern 1996) is tiny."""
    resp = toy_response(1.6, 2.2, n_channels=120)
    truth = ToyEdgeAbsorber("abs", tau0=0.4, step=1.0) * PhotonPowerLaw("pl", index=1.8,
                                                                         norm=0.5)
    spec = simulate_counts(truth, resp, 3e4, seed=12)
    model = ToyEdgeAbsorber("abs", tau0=0.4, step=0.0, fixed=["tau0", "step"]) * \
        PhotonPowerLaw("pl", index=1.8, norm=0.5)
    res = fit_sightline(model, Dataset(spec), warn=False)
    ppc = posterior_predictive(res, n_draws=100, seed=1)
    assert ppc["p_value"] < 0.01


class _Phased(ToyEdgeAbsorber):
    """Toy absorber that reports an element column N = step x 1e16 cm^-2
    and declares a phase (test only, not registered)."""

    registry_name = None

    def __init__(self, name, phase, **kw):
        super().__init__(name, **kw)
        self.phase = phase
        self.element = "Si"

    def derived(self, **values):
        v = self._merged(values)
        return {COLUMN_KEY: (v["step"] * 1e16, "cm-2")}


def test_depletion_uses_declared_phase_not_names():
    """depletion = N_dust / (N_gas + N_dust) (definition) from components
    that declare phase and element; a component named like dust without a
    phase attribute does not take part."""
    from edgefit.inference.derived import _evaluate_all

    gas = _Phased("gas_like", "gas", step=0.3)
    dust = _Phased("grains", "dust", step=0.9)
    decoy = ToyEdgeAbsorber("dust_decoy", step=5.0)
    model = gas * dust * decoy * PhotonPowerLaw("pl")
    out = _evaluate_all(model, model.default_values(), {})
    assert out["depletion_Si"][0] == pytest.approx(0.9 / 1.2, rel=1e-12)
    gas.phase = "neither"
    assert "depletion_Si" not in _evaluate_all(model, model.default_values(), {})


def test_profile_from_a_bound_without_covariance_reaches_the_far_end():
    """A best fit a hair above its lower bound with no covariance error
    (a dust fraction fitted at zero, say) starts the scan with a step of
    ~1e-17 of the value; the steps must still reach the level.  Reference:
    the same fit with its covariance error as the first step gives the same
    upper end (the interval is the set Delta C <= chi-square(1) quantile,
    Wilks 1938, whatever the steps), to 1e-4 of the interval."""
    from edgefit.models.continuum import LineGaussian

    resp = toy_response(1.6, 2.2, n_channels=120)
    model = PhotonPowerLaw("pl", index=1.8, norm=0.5) + LineGaussian(
        "ln", center=1.9, sigma=0.01, norm=0.0, fixed=["center", "sigma"])
    spec = simulate_counts(model, resp, 2e4, values={"ln_norm": 0.0}, seed=3)
    res = fit_sightline(model, Dataset(spec), warn=False)
    with_cov = profile_intervals(res, ["ln_norm"], [0.95], store=False)["ln_norm"][0.95]
    assert with_cov.lower_at_bound and with_cov.upper is not None
    res.params["ln_norm"].set(value=1e-17 * with_cov.upper)   # a hair above the bound
    res.covariance = None
    no_cov = profile_intervals(res, ["ln_norm"], [0.95], store=False)["ln_norm"][0.95]
    assert no_cov.upper is not None, no_cov.notes
    assert no_cov.upper == pytest.approx(with_cov.upper, rel=1e-4, abs=0)
