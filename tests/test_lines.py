"""Absorption-line physics (edgefit.physics.lines) against published formulas.

* Optically thin equivalent width W = pi r_e N f lambda^2 (standard; Draine
  2011, Physics of the ISM, eq. 9.15) -- 0.5 % (brief bar).
* Flat part of the curve of growth, W ~ (2 b lambda / c) sqrt(ln(tau0 / ln 2))
  (Draine 2011 eq. 9.27; an asymptotic form, a few per cent) -- 3 %.
* Damping (square-root) part, W_lambda = sqrt(r_e N f lambda^4 Gamma / c)
  (from the Lorentzian wings, Spitzer 1978 sect. 3.4 / Draine 2011 eq. 9.28)
  -- 1 % at N = 1e20 cm^-2 where the Doppler core adds < 0.2 %.
* Curve of growth by direct numerical integration with scipy.integrate.quad
  of 1 - exp(-tau(E)) (general-purpose library) -- 0.3 %.
* H-like wavelengths against the Dirac energies of a hydrogenic ion with the
  reduced mass (Bethe & Salpeter 1957); the remaining offset is the Lamb
  shift (~1e-4 relative) -- 3e-4; fine-structure splitting 2 %.
* H-like damping constants: hydrogenic A scales as Z^4 from H Ly-alpha
  A = 6.2649e8 s^-1 (NIST ASD / Wiese & Fuhr 2009, from memory) -- 1 %.
"""
import numpy as np
import pytest
from scipy.integrate import quad

from edgefit.errors import PhysicsDataError
from edgefit.physics import atomic
from edgefit.physics import lines as L

RE = 2.8179403262e-13          # cm, CODATA 2018
C_CM = 2.99792458e10           # cm/s
HC = 12.398419843320026        # keV Angstrom

SI14 = L.ion_lines("Si XIV")[0]


def _ew_angstrom(n_col, b, gamma=SI14.gamma, line=SI14, lo_e=1.0, hi_e=3.0, nbins=20000):
    edges = np.linspace(lo_e, hi_e, nbins + 1)
    lo, hi = edges[:-1], edges[1:]
    e0 = line.energy
    t = L.binned_line_transmission(lo, hi, [e0], [n_col * L.integrated_cross_section(line.f)],
                                   [L.doppler_sigma(e0, b)], [L.lorentz_hwhm(gamma)])
    return np.sum((1 - t) * (hi - lo)) * HC / e0 ** 2


@pytest.mark.parametrize("b,nbins", [(100.0, 20000), (5.0, 200), (300.0, 2000)])
def test_thin_equivalent_width(b, nbins):
    n = 1e12  # tau0 ~ 1e-4 .. 1e-3: linear regime
    w = _ew_angstrom(n, b, lo_e=1.9, hi_e=2.1, nbins=nbins)
    ref = np.pi * RE * n * SI14.f * (SI14.wavelength * 1e-8) ** 2 / 1e-8
    assert L.thin_equivalent_width(n, SI14.f, SI14.wavelength) == pytest.approx(ref, rel=1e-12)
    assert w == pytest.approx(ref, rel=0.005)


@pytest.mark.parametrize("n", [1e18, 1e19])
def test_flat_part_of_curve_of_growth(n):
    b = 100.0
    e0 = SI14.energy
    tau0 = n * L.integrated_cross_section(SI14.f) / (np.sqrt(2 * np.pi) * L.doppler_sigma(e0, b))
    ref = 2 * b / L.SPEED_OF_LIGHT_KMS * SI14.wavelength * np.sqrt(np.log(tau0 / np.log(2)))
    # negligible damping (Gamma = 1e3 s^-1) to isolate the Doppler regime
    assert _ew_angstrom(n, b, gamma=1e3, lo_e=1.9, hi_e=2.1, nbins=4000) == \
        pytest.approx(ref, rel=0.03)


def test_damping_part_of_curve_of_growth():
    n = 1e20
    lam = SI14.wavelength * 1e-8
    ref = np.sqrt(RE * n * SI14.f * lam ** 4 * SI14.gamma / C_CM) / 1e-8
    assert _ew_angstrom(n, 5.0) == pytest.approx(ref, rel=0.01)
    # square-root scaling: x100 in N gives x10 in W within 2 %
    assert _ew_angstrom(1e22, 5.0, lo_e=0.5, hi_e=6.0, nbins=40000) / \
        _ew_angstrom(1e20, 5.0) == pytest.approx(10.0, rel=0.02)


@pytest.mark.parametrize("n,b", [(1e15, 50.0), (1e17, 20.0), (1e19, 200.0)])
def test_curve_of_growth_against_quad(n, b):
    e0 = SI14.energy
    s, g = L.doppler_sigma(e0, b), L.lorentz_hwhm(SI14.gamma)
    area = n * L.integrated_cross_section(SI14.f)
    from scipy.special import voigt_profile

    def absorbed(x):
        return -np.expm1(-area * voigt_profile(x, s, g))
    half = 0.2
    pts = [-50 * (s + g), -5 * (s + g), 0.0, 5 * (s + g), 50 * (s + g)]
    w_e, _ = quad(absorbed, -half, half, points=pts, limit=500, epsabs=1e-14, epsrel=1e-10)
    w_ref = w_e * HC / e0 ** 2
    assert _ew_angstrom(n, b, lo_e=e0 - half, hi_e=e0 + half, nbins=1000) == \
        pytest.approx(w_ref, rel=0.003)


ALPHA = 7.2973525693e-3
MEC2 = 510.99895     # keV
U_KEV = 931494.10242


def _dirac_level(n, j, z, m_nuc):
    mu = MEC2 * m_nuc / (MEC2 + m_nuc)
    za = z * ALPHA
    d = n - (j + 0.5) + np.sqrt((j + 0.5) ** 2 - za ** 2)
    return mu * ((1 + (za / d) ** 2) ** -0.5 - 1)


@pytest.mark.parametrize("key,z", [("o8", 8), ("ne10", 10), ("mg12", 12), ("si14", 14)])
def test_h_like_wavelengths_and_rates(key, z):
    m_nuc = atomic.atomic_mass(z) * U_KEV - z * MEC2
    ly1, ly2 = L.ion_lines(key)
    lam = {}
    for ln, j in ((ly1, 1.5), (ly2, 0.5)):
        lam[j] = HC / (_dirac_level(2, j, z, m_nuc) - _dirac_level(1, 0.5, z, m_nuc))
        assert ln.wavelength == pytest.approx(lam[j], rel=3e-4)
        assert ln.gamma == pytest.approx(6.2649e8 * z ** 4, rel=0.01)
    assert ly2.wavelength - ly1.wavelength == pytest.approx(lam[0.5] - lam[1.5], rel=0.02)
    # hydrogenic Ly-alpha f = 0.4162 split 2:1 (Bethe & Salpeter 1957)
    assert ly1.f + ly2.f == pytest.approx(0.4162, abs=1e-3)


def test_line_table_contents():
    # brief: He- and H-like Si, Mg, Ne, O; Ly-alpha doublets as two lines
    keys = L.ion_keys()
    assert set(keys) == {"o7", "o8", "ne9", "ne10", "mg11", "mg12", "si13", "si14"}
    for k in ("o8", "ne10", "mg12", "si14"):
        assert len(L.ion_lines(k)) == 2
    # Si XIII resonance 6.6479 A, f ~ 0.76 (REFERENCE-VALUES.md, from memory)
    w = L.ion_lines("Si XIII")[0]
    assert w.wavelength == pytest.approx(6.6479, abs=1e-3)
    assert w.f == pytest.approx(0.76, abs=0.01)
    with pytest.raises(PhysicsDataError):
        L.ion_lines("Fe XXV")


def test_voigt_cross_section_integrates_to_pi_re_hc_f():
    # int sigma dE = pi r_e h c f (Draine 2011 eq. 9.8 in energy units); 1e-4
    e0 = SI14.energy
    val, _ = quad(lambda e: L.voigt_cross_section(e, e0, SI14.f, 50.0, SI14.gamma),
                  e0 - 0.5, e0 + 0.5, points=[e0], limit=400)
    assert val == pytest.approx(np.pi * RE * HC * 1e-8 * SI14.f, rel=1e-3)


def test_huge_optical_depth_is_zero_not_nan():
    edges = np.linspace(1.9, 2.1, 201)
    t = L.binned_line_transmission(edges[:-1], edges[1:], [SI14.energy], [10.0],
                                   [1e-3], [1e-6])  # peak tau ~ 4e3
    assert np.all(np.isfinite(t)) and t.min() == 0.0 and t.max() <= 1.0


def test_bad_line_inputs():
    edges = np.linspace(1.9, 2.1, 11)
    with pytest.raises(PhysicsDataError):
        L.binned_line_transmission(edges[:-1], edges[1:], [2.0], [1e-3], [0.0], [0.0])
    with pytest.raises(PhysicsDataError):
        L.binned_line_transmission(edges[:-1], edges[1:], [2.0], [np.nan], [1e-4], [0.0])
    # no lines: all ones
    assert np.all(L.binned_line_transmission(edges[:-1], edges[1:], [], [], [], []) == 1.0)
