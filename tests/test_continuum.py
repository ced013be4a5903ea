"""Continuum components against analytic integrals, Planck's law, the
multicolour-disk low-energy law and the bremsstrahlung formula."""
import math
import pickle

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.modeling.physical_models import BlackBody
from scipy import integrate, special

from edgefit.models import continuum as cont
from edgefit.models.base import ADDITIVE, COMPONENTS, EnergyGrid

MINE = ["photon_power_law", "multicolour_disk", "blackbody_photons", "thermal_brems",
        "line_gaussian"]
H_KEV_S = const.h.to_value(u.keV * u.s)


def quad_bins(f, lo, hi):
    return np.array([integrate.quad(f, a, b, epsabs=0, epsrel=1e-12)[0]
                     for a, b in zip(lo, hi)])


# --- generic checks looped over the registry entries of this module --------
@pytest.mark.parametrize("name", MINE)
def test_registered_finite_positive_picklable(name):
    cls = COMPONENTS[name]
    comp = cls()
    assert comp.kind == ADDITIVE
    grid = EnergyGrid.linear(0.3, 10.0, 200)
    y = comp(grid)
    assert y.shape == (200,) and np.all(np.isfinite(y)) and np.all(y >= 0)
    clone = pickle.loads(pickle.dumps(comp))
    np.testing.assert_array_equal(clone(grid), y)
    one = comp(EnergyGrid([1.0], [1.01]))
    assert one.shape == (1,)


# --- power law: closed form vs scipy quad (rtol 1e-10) ------------------------
@pytest.mark.parametrize("index", [-1.0, 0.0, 0.5, 1.0, 1.0 + 1e-9, 2.0, 3.7])
def test_power_law_bin_integral_vs_quad(index):
    lo = np.array([0.5, 1.0, 1.839, 7.0])
    hi = np.array([0.6, 1.5, 1.8395, 9.0])
    got = cont.photon_power_law_integral(lo, hi, index, norm=2.5)
    ref = quad_bins(lambda e: 2.5 * e ** -index, lo, hi)
    np.testing.assert_allclose(got, ref, rtol=1e-10)


def test_power_law_norm_is_flux_density_at_1kev():
    # a bin of 1 eV around 1 keV holds norm x 1e-3 photons to first order
    # (definition of the normalisation, photons cm^-2 s^-1 keV^-1 at 1 keV);
    # the midpoint-rule error is Gamma (Gamma + 1) h^2 / 24 = 2e-7 relative -> 1e-6
    got = cont.PhotonPowerLaw(index=1.7, norm=3.0)(EnergyGrid([0.9995], [1.0005]))
    assert got[0] == pytest.approx(3.0e-3, rel=1e-6)


# --- blackbody: Planck's law (astropy BlackBody) -------------------------------
@pytest.mark.parametrize("kt", [0.1, 0.5, 2.0])
def test_planck_photon_intensity_vs_astropy(kt):
    # astropy B_nu [erg s-1 cm-2 Hz-1 sr-1] / (h nu) / h = photons s-1 cm-2 sr-1 keV-1
    e = np.array([0.2, 1.0, 1.84, 5.0])
    temp = (kt * u.keV / const.k_B).to(u.K)
    bnu = BlackBody(temperature=temp)((e * u.keV).to(u.Hz, u.spectral()))
    ref = (bnu / (e * u.keV).to(u.erg) / (const.h.to(u.keV * u.s))).to_value(
        1 / (u.s * u.cm ** 2 * u.sr * u.Hz * u.keV * u.s))
    got = cont.planck_photon_intensity(e, kt)
    np.testing.assert_allclose(got, ref, rtol=1e-9)


def test_blackbody_total_photon_number_law():
    # Integral of the Planck photon intensity: 2 (kT)^3 / (h^3 c^2) * 2 zeta(3)
    # (standard; Rybicki & Lightman 1979 ch. 1); compared within 1e-7.
    kt = 0.4
    edges = np.geomspace(1e-4, 40 * kt, 4001)
    comp = cont.BlackbodyPhotons(kt=kt, norm=1.0)
    total = comp(EnergyGrid.from_edges(edges)).sum()
    pref = math.pi * (u.km.to(u.cm) / (10 * u.kpc).to(u.cm).value) ** 2
    c = const.c.to_value(u.cm / u.s)
    expected = pref * 2 * kt ** 3 / (H_KEV_S ** 3 * c ** 2) * 2 * special.zeta(3)
    # the part below 1e-4 keV is (1e-4/kT)^2/(4 zeta(3)) ~ 1e-8 relative, within the
    # stated 1e-7 (observed 1.3e-8); abs=0 because the total is ~1e-33 and
    # pytest.approx's default absolute tolerance (1e-12) would accept anything
    assert total == pytest.approx(expected, rel=1e-7, abs=0)


def test_blackbody_bins_vs_quad():
    # bin integrals against scipy.integrate.quad of the photon flux density
    # (itself checked against astropy's Planck law above); 1e-9 relative
    grid = EnergyGrid.linear(1.6, 2.2, 40)
    comp = cont.BlackbodyPhotons(kt=0.3, norm=50.0)
    ref = quad_bins(lambda e: cont.blackbody_photon_flux(e, 0.3, 50.0), grid.lo, grid.hi)
    np.testing.assert_allclose(comp(grid), ref, rtol=1e-9)


# --- multicolour disk -----------------------------------------------------------
def test_disk_vs_direct_radial_integral():
    # N(E) = cos i / D^2 int 2 pi r I_N(E, T(r)) dr with T = T_in (r/r_in)^-3/4
    # (Shakura & Sunyaev 1973; Mitsuda et al. 1984), integrated over r directly
    # with scipy quad; r_in = 10 km, D = 10 kpc, cos i = 0.5 -> norm = 50.
    t_in = 1.2
    r_in = 1e6  # cm
    d = (10 * u.kpc).to_value(u.cm)
    cosi = 0.5
    for e in (0.1, 1.0, 1.84, 6.0):
        def integrand(lr):
            r = r_in * math.exp(lr)
            return 2 * math.pi * r * r * cont.planck_photon_intensity(
                e, t_in * (r / r_in) ** -0.75)
        ref = cosi / d ** 2 * integrate.quad(integrand, 0.0, 60.0, limit=400,
                                             epsrel=1e-11)[0]
        got = cont.disk_photon_flux(e, t_in, norm=50.0)
        assert got == pytest.approx(ref, rel=2e-6), e  # spline table accuracy


def test_disk_low_energy_slope_is_minus_two_thirds():
    # For E << kT_in a multicolour disk has F_nu ~ nu^(1/3), i.e. photon
    # N(E) ~ E^(-2/3) (Mitsuda et al. 1984, PASJ 36, 741).  Tolerance 1e-3.
    e = np.array([1e-4, 1.1e-4])
    n = cont.disk_photon_flux(e, 2.0)
    slope = np.log(n[1] / n[0]) / np.log(e[1] / e[0])
    assert slope == pytest.approx(-2.0 / 3.0, abs=1e-3)


def test_disk_bins_vs_quad():
    # bin integrals against scipy.integrate.quad of the photon flux density
    # (checked against the direct radial integral above); 1e-6 relative
    grid = EnergyGrid.linear(0.5, 8.0, 30)
    comp = cont.MulticolourDisk(t_inner=0.9, norm=300.0)
    ref = quad_bins(lambda e: cont.disk_photon_flux(e, 0.9, 300.0), grid.lo, grid.hi)
    np.testing.assert_allclose(comp(grid), ref, rtol=1e-6)


# --- bremsstrahlung ----------------------------------------------------------
def test_brems_prefactor_matches_rybicki_lightman():
    # Rybicki & Lightman 1979 eq. 5.14b quote 6.8e-38 (two digits) -> 1 %;
    # abs=0 (pytest.approx's default absolute tolerance is 1e-12)
    assert cont._BREMS_PREFACTOR == pytest.approx(6.8e-38, rel=0.01, abs=0)


def test_born_gaunt_limits():
    # Born approximation g = (sqrt 3/pi) e^(u/2) K0(u/2) (Rybicki & Lightman 1979
    # ch. 5): u -> 0: (sqrt 3/pi) ln(4 / (e^gamma u)); u -> inf: (sqrt 3/pi) sqrt(pi/u)
    # (asymptotic K0); tolerances 1e-3 and 1e-3.
    s3p = math.sqrt(3) / math.pi
    u_small = 1e-5
    assert cont.born_gaunt_factor(u_small) == pytest.approx(
        s3p * math.log(4 / (math.exp(np.euler_gamma) * u_small)), rel=1e-3)
    u_big = 2e3
    assert cont.born_gaunt_factor(u_big) == pytest.approx(s3p * math.sqrt(math.pi / u_big),
                                                          rel=1e-3)


def test_brems_flux_vs_emissivity_formula():
    # eps_nu = 6.8e-38 n_e n_i T^-1/2 exp(-h nu/kT) g  (R&L 5.14b, Z = 1), coded here
    # independently with astropy units; N(E) = eps_nu EM/(4 pi D^2) / (h nu) / h.
    kt = 3.0
    e = np.array([0.5, 1.84, 7.0])
    t = (kt * u.keV / const.k_B).to_value(u.K)
    e_esu, m_g, c_cms, k_cgs = (const.e.gauss.value, const.m_e.cgs.value, const.c.cgs.value,
                                const.k_B.cgs.value)
    pref = (32 * np.pi * e_esu ** 6 / (3 * m_g * c_cms ** 3)
            * np.sqrt(2 * np.pi / (3 * k_cgs * m_g)))  # erg cm3 s-1 Hz-1 K^1/2
    g = math.sqrt(3) / math.pi * np.exp(e / kt / 2) * special.k0(e / kt / 2)
    em_per_area = 2.0e14  # cm^-5 -> norm = 2
    eps = pref * t ** -0.5 * np.exp(-e / kt) * g  # per unit n_e n_i, erg s-1 Hz-1 cm3
    ref = eps * em_per_area / (e * u.keV).to_value(u.erg) / H_KEV_S
    np.testing.assert_allclose(cont.brems_photon_flux(e, kt, norm=2.0), ref, rtol=1e-10)


def test_brems_bins_vs_quad():
    # bin integrals against scipy.integrate.quad of the photon flux density
    # (checked against the R&L emissivity above); 1e-10 relative
    grid = EnergyGrid.linear(1.6, 2.2, 25)
    ref = quad_bins(lambda e: cont.brems_photon_flux(e, 2.0, 1.5), grid.lo, grid.hi)
    np.testing.assert_allclose(cont.ThermalBrems(kt=2.0, norm=1.5)(grid), ref, rtol=1e-10)


# --- Gaussian line -----------------------------------------------------------
def test_gaussian_line_total_and_bins():
    # Normal distribution: the bins (+-34 sigma of the centre) hold the whole
    # norm (1e-12); single bins against scipy.integrate.quad of the normal
    # density written out here (1e-9)
    grid = EnergyGrid.linear(1.7, 2.0, 300)
    comp = cont.LineGaussian(center=1.865, sigma=0.004, norm=2e-3)
    y = comp(grid)
    assert y.sum() == pytest.approx(2e-3, rel=1e-12)
    pdf = lambda e: 2e-3 * np.exp(-0.5 * ((e - 1.865) / 0.004) ** 2) / (0.004 * math.sqrt(2 * math.pi))  # noqa: E731
    sel = slice(140, 160)
    np.testing.assert_allclose(y[sel], quad_bins(pdf, grid.lo[sel], grid.hi[sel]), rtol=1e-9)


def test_gaussian_far_tail_no_cancellation():
    # 12 sigma above the centre: norm [sf(zl) - sf(zh)] from scipy.stats, rel 1e-9
    from scipy.stats import norm as normal

    got = cont.gaussian_line_integral(1.0 + 12 * 0.01, 1.0 + 12.1 * 0.01, 1.0, 0.01, 1.0)
    ref = normal.sf(12.0) - normal.sf(12.1)
    assert got == pytest.approx(ref, rel=1e-9, abs=0) and got > 0


def test_power_law_pivot_against_quadrature():
    # N(E) = norm (E / pivot)^-index integrated over each bin must equal
    # scipy.integrate.quad of the same function (rel 1e-10), and a pivot
    # only rescales the norm: norm_1keV = norm_pivot pivot^index (algebra)
    import numpy as np
    from scipy import integrate

    from edgefit.grid import EnergyGrid
    from edgefit.models import PhotonPowerLaw

    edges = np.linspace(1.6, 2.2, 13)
    pl = PhotonPowerLaw("p", pivot=1.85, index=2.3, norm=4.0)
    got = pl(EnergyGrid.from_edges(edges))
    ref = [integrate.quad(lambda e: 4.0 * (e / 1.85) ** -2.3, a, b, epsabs=0, epsrel=1e-12)[0]
           for a, b in zip(edges[:-1], edges[1:])]
    np.testing.assert_allclose(got, ref, rtol=1e-10)
    one = PhotonPowerLaw("q", index=2.3, norm=4.0 * 1.85 ** 2.3)(EnergyGrid.from_edges(edges))
    np.testing.assert_allclose(got, one, rtol=1e-12)
