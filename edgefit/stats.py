"""Fit statistics as pure functions of model and observed counts.

All functions take expected counts ``model`` (> 0) and observed counts
``counts`` per bin, arrays of one shape, and return floats or arrays; none
of them knows about spectra, responses or parameters.

References
----------
Cash, W. 1979, ApJ 228, 939 -- the C statistic, C = 2 sum (m - n ln m).
Kaastra, J. S. 2017, A&A 605, A51 -- expected value and variance of the
    deviance form of C for a correct model.
Wachter, K., Leach, R. & Kellogg, E. 1979, ApJ 230, 274 -- Poisson
    likelihood of a source with a Poisson background, background profiled.
"""
from __future__ import annotations

import numpy as np
from scipy.special import gammaln, xlogy

from .errors import ArgumentError

__all__ = [
    "cash", "c_statistic", "deviance_residuals", "chi_square",
    "profiled_background_level", "profiled_background_statistic",
    "profiled_background_residuals",
    "c_statistic_expectation", "c_statistic_expectation_kaastra",
    "MODEL_FLOOR", "ONE_SIGMA",
]

#: Probability inside +/-1 sigma of a Gaussian, erf(1/sqrt 2) = 0.682689...,
#: rounded to four digits: the one "1 sigma" level of edgefit (profile
#: intervals at Delta stat = 1, posterior and derived 68 % intervals, the
#: sample table's Q_lo/Q_hi).  Abramowitz & Stegun 1964, eq. 26.2.2 / 7.1.1.
ONE_SIGMA = 0.6827

#: Expected counts below this are raised to it, so that a model that
#: predicts zero where counts are seen gives a large, finite statistic
#: rather than inf/NaN.  This is the single NaN/zero policy of edgefit.
MODEL_FLOOR = 1e-300


def _floor(model):
    return np.maximum(np.asarray(model, dtype=float), MODEL_FLOOR)


def cash(model, counts):
    """Cash (1979) C = 2 sum(m - n ln m); differs from the log-likelihood by
    a model-independent constant.  Use for parameter estimation."""
    m = _floor(model)
    return float(2.0 * np.sum(m - xlogy(counts, m)))


def _deviance_terms(model, counts):
    """Per-bin deviance 2 [m - n + n ln(n/m)] (n ln n = 0 at n = 0).

    Written as 2 m [(1 + x) log1p(x) - x] with x = (n - m)/m.  The direct
    formula subtracts numbers of size n to leave one of size (n - m)^2/m,
    so its absolute error (~1e-16 n) swamps the deviance as n -> m and
    makes the square-root residuals (and any finite-difference Jacobian of
    them) noisy near a good fit; the log1p form keeps the error relative
    to (n - m).  Bins where it is not finite (n = 0, or m at the floor)
    take the direct formula, which has no cancellation there.
    """
    m = _floor(model)
    n = np.asarray(counts, dtype=float)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        x = (n - m) / m
        d = np.asarray(2.0 * m * ((1.0 + x) * np.log1p(x) - x))
    bad = ~np.isfinite(d)
    if np.any(bad):
        mb, nb = np.broadcast_to(m, d.shape)[bad], np.broadcast_to(n, d.shape)[bad]
        d[bad] = 2.0 * (mb - nb + xlogy(nb, nb) - xlogy(nb, mb))
    return d


def c_statistic(model, counts):
    """Deviance form of Cash's statistic, C = 2 sum[m - n + n ln(n/m)]
    (Cash 1979; Kaastra 2017 eq. 4).  Zero for a perfect fit, and its
    expectation for a correct model is given by
    :func:`c_statistic_expectation`.  Use for goodness of fit."""
    return float(np.sum(_deviance_terms(model, counts)))


def deviance_residuals(model, counts):
    """Signed deviance residuals r = sign(n - m) sqrt(d), with d the
    per-bin deviance, so that sum(r**2) == :func:`c_statistic`.  Handing
    these to a least-squares minimiser minimises the Poisson likelihood
    exactly."""
    d = _deviance_terms(model, counts)
    n = np.asarray(counts, dtype=float)
    return np.sign(n - np.asarray(model, dtype=float)) * np.sqrt(np.maximum(d, 0.0))


def chi_square(model, counts, variance="data", sigma=None):
    """Pearson/Neyman chi-square with a stated variance choice.

    variance : {"data", "model", "gehrels", "given"}
        ``data``: sigma^2 = max(n, 1) (Neyman, with a floor of one count);
        ``model``: sigma^2 = m (Pearson);
        ``gehrels``: sigma = 1 + sqrt(n + 0.75) (Gehrels 1986, ApJ 303, 336 eq. 7);
        ``given``: ``sigma`` supplied by the caller (e.g. a STAT_ERR column).
    """
    m = np.asarray(model, dtype=float)
    n = np.asarray(counts, dtype=float)
    if variance == "data":
        var = np.maximum(n, 1.0)
    elif variance == "model":
        var = _floor(m)
    elif variance == "gehrels":
        var = (1.0 + np.sqrt(n + 0.75)) ** 2
    elif variance == "given":
        if sigma is None:
            raise ArgumentError("variance='given' needs sigma")
        var = np.asarray(sigma, dtype=float) ** 2
    else:
        raise ArgumentError(f"unknown variance choice {variance!r}")
    return float(np.sum((n - m) ** 2 / var))


def profiled_background_level(model_src, counts, bkg_counts, ratio):
    r"""Maximum-likelihood background expectation per bin, b-hat.

    Source region: n ~ Poisson(s + r b); background region:
    n_b ~ Poisson(b), with ``model_src`` = s the expected source counts in
    the source region and ``ratio`` = r = (t_s A_s) / (t_b A_b) (exposure
    times BACKSCAL/AREASCAL ratio).  Setting d lnL / d b = 0 gives the
    quadratic (Wachter, Leach & Kellogg 1979)

    .. math:: r (1 + r)\, b^2 + [(1 + r) s - r (n + n_b)]\, b - n_b s = 0,

    whose non-negative root is returned (computed in the numerically
    stable form; b-hat = n_b exactly when r = 0).

    Returns
    -------
    ndarray
        b-hat per bin, expected counts in the *background* region; the
        background adds ``ratio * b`` to the source region.
    """
    s = np.asarray(model_src, dtype=float)
    n = np.asarray(counts, dtype=float)
    nb = np.asarray(bkg_counts, dtype=float)
    r = np.broadcast_to(np.asarray(ratio, dtype=float), s.shape)
    a = (1.0 + r) * r
    bcoef = (1.0 + r) * s - r * (n + nb)
    c = -nb * s
    disc = np.sqrt(np.maximum(bcoef * bcoef - 4.0 * a * c, 0.0))
    # numerically stable root of a b^2 + bcoef b + c = 0 (c <= 0, root >= 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        root = np.where(bcoef <= 0, (-bcoef + disc) / (2.0 * a), (2.0 * -c) / (bcoef + disc))
    root = np.where(np.isfinite(root), root, 0.0)
    # ratio = 0: the source region sees no background, so b-hat = n_b exactly
    # (the quadratic degenerates and the branch above would give 0/0 at s = 0)
    root = np.where(r == 0, nb, root)
    return np.maximum(root, 0.0)


def profiled_background_residuals(model_src, counts, bkg_counts, ratio):
    """Signed deviance residuals of a source + Poisson background fit with
    the background expectation profiled out per bin.

    Source region: n ~ Poisson(s + ratio*b); background region:
    n_b ~ Poisson(b).  Both bins' deviances are summed per channel; the sum
    of squares equals :func:`profiled_background_statistic`.
    """
    s = np.asarray(model_src, dtype=float)
    b = profiled_background_level(s, counts, bkg_counts, ratio)
    ms = s + np.asarray(ratio, dtype=float) * b
    d = _deviance_terms(ms, counts) + _deviance_terms(b, bkg_counts)
    return np.sign(np.asarray(counts, float) - ms) * np.sqrt(np.maximum(d, 0.0))


def profiled_background_statistic(model_src, counts, bkg_counts, ratio):
    """Deviance of the source + background Poisson likelihood with the
    background profiled out (Wachter, Leach & Kellogg 1979)."""
    r = profiled_background_residuals(model_src, counts, bkg_counts, ratio)
    return float(np.sum(r * r))


def c_statistic_expectation(mu):
    """Exact mean and variance of one bin's deviance C for Poisson counts
    with mean ``mu`` (direct sums over the Poisson distribution).

    Returns (mean, variance) arrays of the shape of ``mu``; sum them over
    bins for a spectrum.  For mu > 10 they agree with Kaastra (2017) eqs.
    (8)-(9); see :func:`c_statistic_expectation_kaastra`.  Non-finite ``mu``
    gives NaN mean and variance.
    """
    mu = np.atleast_1d(np.asarray(mu, dtype=float))
    mean = np.empty_like(mu)
    var = np.empty_like(mu)
    for i, m in enumerate(mu):
        if not np.isfinite(m):
            mean[i] = var[i] = np.nan   # no expectation for a NaN/inf model
            continue
        m = max(m, MODEL_FLOOR)
        # the Poisson mass outside m +- (12 sqrt(m) + 30) is < 1e-30
        nmin = max(0, int(m - 12.0 * np.sqrt(m) - 30))
        nmax = int(m + 12.0 * np.sqrt(m) + 30)
        n = np.arange(nmin, nmax + 1, dtype=float)
        logp = xlogy(n, m) - m - gammaln(n + 1)
        p = np.exp(logp)
        c = 2.0 * (m - n + xlogy(n, n) - xlogy(n, m))
        e1 = np.sum(p * c)
        mean[i] = e1
        var[i] = np.sum(p * c * c) - e1 * e1
    return mean, var


def c_statistic_expectation_kaastra(mu):
    """Kaastra (2017, A&A 605, A51) asymptotic approximation, mu > 10:
    E[C] = 1 + 0.1649/mu + 0.226/mu^2,
    Var[C] = 2 + 0.6747/mu + 0.79/mu^2 + 12/mu^3 (per bin)."""
    mu = np.asarray(mu, dtype=float)
    mean = 1.0 + 0.1649 / mu + 0.226 / mu ** 2
    var = 2.0 + 0.6747 / mu + 0.79 / mu ** 2 + 12.0 / mu ** 3
    return mean, var
