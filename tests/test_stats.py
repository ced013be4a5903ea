"""Poisson fit statistics against their sources.

Sources: Cash (1979, ApJ 228, 939) for C; Kaastra (2017, A&A 605, A51,
eqs. 8-9 as quoted in /work/shared/REFERENCE-VALUES.md) for the mean and
variance of the deviance C of a correct model; exact Poisson sums from
REFERENCE-VALUES.md [L]; scipy.stats.poisson for log-likelihoods;
scipy.optimize for the brute-force profile over the background
(Wachter, Leach & Kellogg 1979, ApJ 230, 274 give the closed form tested).
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize
from scipy.stats import chisquare, poisson

from edgefit.stats import (c_statistic, c_statistic_expectation,
                           c_statistic_expectation_kaastra, cash, chi_square,
                           deviance_residuals, profiled_background_residuals,
                           profiled_background_statistic)


@pytest.fixture
def counts_and_model():
    rng = np.random.default_rng(1979)
    model = rng.uniform(0.05, 40.0, 300)
    counts = rng.poisson(model).astype(float)
    return model, counts


def test_cash_equals_minus_twice_poisson_loglike(counts_and_model):
    # Cash 1979: C = -2 ln L + const, const = -2 sum ln n!  (scipy.stats.poisson)
    m, n = counts_and_model
    from scipy.special import gammaln
    ref = -2.0 * np.sum(poisson.logpmf(n, m) + gammaln(n + 1))
    assert cash(m, n) == pytest.approx(ref, rel=1e-12)


def test_deviance_equals_likelihood_ratio_to_saturated_model(counts_and_model):
    # deviance C = -2 [ln L(m) - ln L(n)]  (Cash 1979; Kaastra 2017 eq. 4)
    m, n = counts_and_model
    ref = -2.0 * np.sum(poisson.logpmf(n, m) - poisson.logpmf(n, n))
    assert c_statistic(m, n) == pytest.approx(ref, rel=1e-12)
    # and cash - deviance does not depend on the model
    m2 = m * 1.3
    assert (cash(m, n) - c_statistic(m, n)) == pytest.approx(cash(m2, n) - c_statistic(m2, n),
                                                             rel=1e-12)


def test_deviance_residuals_square_sum_is_c(counts_and_model):
    m, n = counts_and_model
    r = deviance_residuals(m, n)
    assert abs(np.sum(r * r) - c_statistic(m, n)) <= 1e-10 * c_statistic(m, n)
    nz = n != m
    np.testing.assert_array_equal(np.sign(r[nz]), np.sign(n - m)[nz])


def test_zero_model_and_zero_counts_are_finite():
    # no RuntimeWarning (pytest turns them into errors) and finite values
    assert np.isfinite(c_statistic([0.0, 1.0], [3.0, 0.0]))
    assert c_statistic([2.0], [0.0]) == pytest.approx(4.0, rel=1e-15)  # 2(m - 0)
    assert np.all(np.isfinite(deviance_residuals([0.0, 0.0], [0.0, 5.0])))


def test_exact_expectation_matches_reference_values():
    # REFERENCE-VALUES.md, exact Poisson sums [L]: mu=1: 1.14681, 1.36460;
    # mu=10: 1.01883, 2.08769 (quoted to 5 decimals -> tolerance 6e-6)
    mean, var = c_statistic_expectation([1.0, 10.0])
    np.testing.assert_allclose(mean, [1.14681, 1.01883], atol=6e-6)
    np.testing.assert_allclose(var, [1.36460, 2.08769], atol=6e-6)


def test_exact_expectation_of_non_finite_mu_is_nan():
    mean, var = c_statistic_expectation([np.nan, 5.0, np.inf])
    assert np.isnan(mean[0]) and np.isnan(var[2]) and np.isfinite(mean[1])


def test_exact_expectation_by_simulation():
    """Independent check of the exact sums at mu = 0.3 and 3 by brute
    Monte Carlo (seeded), within 5 standard errors."""
    rng = np.random.default_rng(3)
    for mu in (0.3, 3.0):
        n = rng.poisson(mu, 400_000).astype(float)
        c = deviance_residuals(np.full(n.size, mu), n) ** 2
        mean, _ = c_statistic_expectation(mu)
        assert abs(c.mean() - mean[0]) < 5 * c.std() / np.sqrt(n.size)


def test_kaastra_formulas_agree_with_exact_sums_above_10():
    # Kaastra (2017) eqs. 8-9 are fits valid for mu > 10; against the exact
    # sums they agree to 1e-4 (mean) and 4e-4 (variance) there.
    mu = np.array([10.0, 15.0, 30.0, 100.0, 1000.0])
    em, ev = c_statistic_expectation(mu)
    km, kv = c_statistic_expectation_kaastra(mu)
    np.testing.assert_allclose(km, em, atol=1e-4)
    np.testing.assert_allclose(kv, ev, atol=4e-4)
    # they are not interchangeable below ~ mu = 1 (e.g. Var 15.5 vs 1.36 at mu = 1)
    assert abs(c_statistic_expectation_kaastra(1.0)[1] - c_statistic_expectation(1.0)[1][0]) > 1


def test_c_statistic_distribution_matches_kaastra():
    """Mean and variance of C over 4000 simulated spectra of 200 bins with
    mu in 10..60 (correct model) agree with the sums of Kaastra's per-bin
    expectation formulas within 4 standard errors; a 10 % wrong model is
    rejected by far more."""
    rng = np.random.default_rng(2017)
    mu = np.linspace(10.0, 60.0, 200)
    n_sim = 4000
    counts = rng.poisson(mu, size=(n_sim, mu.size)).astype(float)
    c = np.array([c_statistic(mu, row) for row in counts])
    km, kv = c_statistic_expectation_kaastra(mu)
    exp_mean, exp_var = km.sum(), kv.sum()
    se_mean = np.sqrt(exp_var / n_sim)
    s2 = c.var(ddof=1)
    m4 = np.mean((c - c.mean()) ** 4)
    se_var = np.sqrt((m4 - s2 ** 2) / n_sim)   # standard error of a sample variance
    assert abs(c.mean() - exp_mean) < 4 * se_mean
    assert abs(s2 - exp_var) < 4 * se_var
    wrong = np.array([c_statistic(1.1 * mu, row) for row in counts[:500]])
    assert wrong.mean() - exp_mean > 20 * se_mean


def _brute_force_profile(s, n, nb, r):
    """min over b >= 0 of the joint deviance (numerical, scipy.optimize)."""
    def dev(b):
        ms = s + r * b
        t1 = 2 * (ms - n + (n * np.log(n / ms) if n > 0 else 0.0))
        t2 = 2 * (b - nb + (nb * np.log(nb / b) if nb > 0 else 0.0))
        return t1 + t2
    hi = 10.0 * (n + nb + s + 10.0)
    res = optimize.minimize_scalar(dev, bounds=(1e-12, hi), method="bounded",
                                   options={"xatol": 1e-12, "maxiter": 2000})
    best = min(res.fun, dev(1e-12)) if s > 0 else res.fun
    return best


@pytest.mark.parametrize("s,n,nb,r", [
    (5.0, 7, 3, 0.2), (20.0, 12, 40, 0.1), (0.5, 0, 0, 1.0), (3.0, 10, 0, 0.5),
    (0.0, 4, 6, 0.25), (50.0, 80, 200, 0.3), (2.0, 0, 9, 2.0), (1e-3, 1, 1, 1.0),
    (0.0, 0, 5, 0.0), (3.0, 2, 5, 0.0)])
def test_profiled_background_against_brute_force(s, n, nb, r):
    stat = profiled_background_statistic([s], [n], [nb], r)
    ref = _brute_force_profile(s, n, nb, r)
    assert stat == pytest.approx(ref, rel=1e-7, abs=1e-9)


def test_profiled_background_vector_and_residuals():
    rng = np.random.default_rng(1230)
    s = rng.uniform(0.1, 30, 50)
    r = 0.25
    b_true = rng.uniform(0.5, 20, 50)
    n = rng.poisson(s + r * b_true).astype(float)
    nb = rng.poisson(b_true).astype(float)
    total = profiled_background_statistic(s, n, nb, r)
    ref = sum(_brute_force_profile(*args, r) for args in zip(s, n, nb))
    assert total == pytest.approx(ref, rel=1e-7)
    res = profiled_background_residuals(s, n, nb, r)
    assert np.sum(res ** 2) == pytest.approx(total, rel=1e-12)


def test_chi_square_pearson_matches_scipy(counts_and_model):
    m, n = counts_and_model
    m = m * n.sum() / m.sum()   # scipy.stats.chisquare needs equal totals
    assert chi_square(m, n, variance="model") == pytest.approx(chisquare(n, m).statistic,
                                                               rel=1e-12)
    assert chi_square(m, n, variance="given", sigma=np.sqrt(m)) == pytest.approx(
        chisquare(n, m).statistic, rel=1e-12)


def test_deviance_keeps_its_digits_when_model_meets_data():
    # Reference: the deviance 2[m - n + n ln(n/m)] (Cash 1979; Kaastra 2017
    # eq. 4) evaluated in 50-digit arithmetic with mpmath.  The direct
    # double-precision formula loses every digit as m -> n (it subtracts
    # numbers of size n: residual errors ~ sqrt(1e-16 n)); the log1p form
    # keeps the residual's error at ~1e-16 sqrt(n), which keeps
    # finite-difference Jacobians of the residuals clean.
    mpmath = pytest.importorskip("mpmath")
    from edgefit.stats import deviance_residuals

    mpmath.mp.dps = 50
    for n in (3.0, 2.0e3, 1.0e6):
        for rel in (1e-13, 1e-10, 1e-7, 1e-4, 5e-3, -2e-3, 2e-2, -0.3):
            m = n * (1.0 + rel)
            exact = 2 * (mpmath.mpf(m) - n + n * mpmath.log(mpmath.mpf(n) / mpmath.mpf(m)))
            r_exact = -float(mpmath.sqrt(exact)) if m > n else float(mpmath.sqrt(exact))
            r = deviance_residuals(np.array([m]), np.array([n]))[0]
            assert abs(r - r_exact) <= 1e-9 * abs(r_exact) + 1e-14 * np.sqrt(n), (n, rel)
