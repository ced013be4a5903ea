"""Folding through the sparse response and the Gaussian response maker.

References: the Gaussian distribution function from scipy.stats.norm
(independent of edgefit's own erfc-based evaluation) for the line-spread
function; analytic power-law integrals and scipy.integrate.quad for the
total-count identity sum(counts) = t * integral F(E) A(E) dE.
"""
from __future__ import annotations

import pickle

import numpy as np
import pytest
from scipy import integrate
from scipy.stats import norm

from edgefit.data import gaussian_response, grouping_matrix, group_min_counts
from edgefit.data.simulate import expected_counts, simulate_spectrum

HC = 12.398419843320026  # keV Angstrom (CODATA 2018)
FWHM_TO_SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))  # Gaussian FWHM = 2.3548 sigma


def test_narrow_line_reproduces_lsf_row_wavelength(small_response):
    """A line in one energy bin folds to exactly that bin's LSF x area x t."""
    r = small_response
    j = 200
    flux = np.zeros(r.n_energies)
    flux[j] = 0.37  # photons cm^-2 s^-1 in bin j
    t = 1234.0
    counts = r.fold(flux, t)
    # reference: Gaussian in wavelength, sigma = 0.02 A / 2.3548, scipy.stats.norm
    lam0 = HC / r.grid.mid[j]
    sig = 0.02 * FWHM_TO_SIGMA
    wlo, whi = HC / r.channel_emax, HC / r.channel_emin
    a = np.clip(wlo, lam0 - 5 * sig, lam0 + 5 * sig)
    b = np.clip(whi, lam0 - 5 * sig, lam0 + 5 * sig)
    p = norm.cdf(b, lam0, sig) - norm.cdf(a, lam0, sig)
    area = 20.0 + 5.0 * np.sin(3.0 * r.grid.mid[j])  # conftest's simulated area curve
    np.testing.assert_allclose(counts, p * area * t * 0.37, rtol=1e-9, atol=1e-12)
    # channels in wavelength order: counts peak where lam0 sits
    k = np.argmax(counts)
    assert wlo[k] <= lam0 <= whi[k]
    # the row sums to 1 - 2 Phi(-5) inside the grid (truncation at 5 sigma)
    assert counts.sum() / (area * t * 0.37) == pytest.approx(1 - 2 * norm.sf(5), rel=1e-9)


def test_narrow_line_energy_fwhm():
    """FWHM constant in energy: LSF width in keV independent of energy."""
    r = gaussian_response(np.linspace(0.5, 1.0, 501), np.linspace(0.5, 1.0, 251), 0.004,
                          1.0, fwhm_unit="kev", n_sigma=6.0)
    for j in (100, 400):
        e0 = r.grid.mid[j]
        col = r.rmf[:, [j]].toarray().ravel()
        sig = 0.004 * FWHM_TO_SIGMA
        a = np.clip(r.channel_emin, e0 - 6 * sig, e0 + 6 * sig)
        b = np.clip(r.channel_emax, e0 - 6 * sig, e0 + 6 * sig)
        np.testing.assert_allclose(col, norm.cdf(b, e0, sig) - norm.cdf(a, e0, sig),
                                   rtol=1e-9, atol=1e-15)


def test_lsf_width_recovered_from_moments():
    """The variance of a folded line in wavelength equals sigma^2 plus the
    channel-width term w^2/12 (Sheppard 1898 correction for binning)."""
    w = 0.0025  # channel width in Angstrom
    lam_edges = np.arange(5.0, 8.0 + w / 2, w)
    r = gaussian_response(HC / np.linspace(5.2, 7.8, 3001)[::-1], HC / lam_edges, 0.023, 1.0,
                          wavelength_order=True, n_sigma=8.0)
    j = 1500
    col = r.rmf[:, [j]].toarray().ravel()
    lam_mid = 0.5 * (HC / r.channel_emax + HC / r.channel_emin)
    mean = np.sum(col * lam_mid) / col.sum()
    var = np.sum(col * (lam_mid - mean) ** 2) / col.sum()
    sigma = 0.023 * FWHM_TO_SIGMA
    assert mean == pytest.approx(HC / r.grid.mid[j], abs=1e-4)
    assert var == pytest.approx(sigma ** 2 + w ** 2 / 12, rel=2e-3)


def test_total_counts_equal_integral_of_flux_times_area():
    """sum_channels counts = t * integral F(E) A(E) dE (all photons land in
    channels: channel range wider than the energy grid by >> 5 sigma)."""
    k, gamma, t = 3.0e-2, 1.7, 4.0e4   # photons cm^-2 s^-1 keV^-1 at 1 keV; index; s
    edges = np.linspace(1.6, 2.1, 20001)
    lo, hi = edges[:-1], edges[1:]
    # analytic integral of k E^-gamma over each bin
    flux = k / (1 - gamma) * (hi ** (1 - gamma) - lo ** (1 - gamma))

    def area(e):
        return 30.0 + 8.0 * np.cos(2.0 * e)

    r = gaussian_response(edges, np.linspace(1.4, 2.3, 1801), 0.02, area)
    total = r.fold(flux, t).sum()
    ref, err = integrate.quad(lambda e: k * e ** -gamma * area(e), 1.6, 2.1,
                              epsabs=0, epsrel=1e-12)
    # errors: area sampled at bin centres (O(h^2) ~ 1e-10) and the 5-sigma
    # truncation (2 Phi(-5) = 5.7e-7) -> 2e-6 is a tight bound
    assert total == pytest.approx(t * ref, rel=2e-6)


def test_fold_linear_and_exposure(small_response):
    rng = np.random.default_rng(5)
    f1, f2 = rng.random(small_response.n_energies), rng.random(small_response.n_energies)
    np.testing.assert_allclose(small_response.fold(2 * f1 + f2, 10.0),
                               10.0 * (2 * small_response.fold(f1) + small_response.fold(f2)),
                               rtol=1e-12)
    np.testing.assert_allclose(small_response.fold(f1, 1.0),
                               small_response.matrix() @ f1, rtol=0)


def test_response_is_sparse_and_picklable(small_response):
    r = small_response
    # 5 sigma either side of a 0.0085 A sigma over ~0.0044 A channels: ~20 channels/bin
    assert r.matrix().nnz < 0.1 * r.n_channels * r.n_energies
    r2 = pickle.loads(pickle.dumps(r))
    f = np.linspace(0, 1, r.n_energies)
    np.testing.assert_array_equal(r2.fold(f), r.fold(f))


def test_subset_matches_masked_fold(small_response):
    r = small_response
    mask = (r.channel_mid > 1.75) & (r.channel_mid < 1.95)
    sub = r.subset(mask)
    energies = r.grid.mid
    flux = 1e-3 * energies ** -2
    sub_flux = flux[(energies >= sub.grid.lo[0]) & (energies <= sub.grid.hi[-1])]
    np.testing.assert_allclose(sub.fold(sub_flux), r.fold(flux)[mask], rtol=1e-12)


def test_grouping_matrix_groups_folded_counts(small_response):
    flux = np.full(small_response.n_energies, 1e-4)
    mu = small_response.fold(flux, 1e3)
    g = group_min_counts(mu, 25.0)
    np.testing.assert_allclose(grouping_matrix(g) @ mu,
                               np.add.reduceat(mu, np.flatnonzero(g == 1)), rtol=1e-12)


def test_simulation_mean_and_background(small_response):
    """Seeded Poisson draws average to the folded expectation: over 400
    draws of each channel the mean is within 5 standard errors."""
    r = small_response
    flux = np.full(r.n_energies, 2e-4)
    bkg_rate = np.full(r.n_channels, 1e-3)   # counts/s in the background region
    mu = expected_counts(flux, r, 2e3, bkg_rate, backscal=1.0, background_backscal=4.0)
    rng = np.random.default_rng(2024)
    draws = np.array([simulate_spectrum(flux, r, 2e3, rng, background_rate=bkg_rate,
                                        background_backscal=4.0).counts for _ in range(400)])
    z = (draws.mean(axis=0) - mu) / np.sqrt(mu / 400)
    assert np.max(np.abs(z)) < 5.0
    s = simulate_spectrum(flux, r, 2e3, 9, background_rate=bkg_rate, background_backscal=4.0)
    assert s.background_scale() == pytest.approx(0.25)
    same = simulate_spectrum(flux, r, 2e3, 9, background_rate=bkg_rate, background_backscal=4.0)
    np.testing.assert_array_equal(s.counts, same.counts)  # seeded: reproducible
