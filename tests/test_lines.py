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
* Fast path against a direct evaluation with scipy.special.voigt_profile
  (Faddeeva package; general-purpose library) on >= 200 points per bin:
  1e-4 in transmission per bin and 0.1 % (+2e-5) of the absorbed fraction,
  b = 10-1000 km/s, logN = 12-21, bins 0.1-5 eV, seeded random velocity
  shifts and grid phases; fallback branches (Lorentzian, a >= 2, gaps) too.
* Tabulated Voigt against scipy.special.voigt_profile: 2e-4 relative within
  5 sigma, 1e-5 of the peak everywhere.
* numba and NumPy back ends agree to 1e-12 (same algorithm).
* Line data: He-like w and H-like Ly-alpha wavelengths and f against Verner,
  Verner & Ferland 1996 (ADNDT 64, 1; public copy named in the data file
  header) -- to the printed digits.
* H-like damping constants: hydrogenic A scales as Z^4 from H Ly-alpha
  A = 6.2649e8 s^-1 (NIST ASD / Wiese & Fuhr 2009, from memory) -- 1 %.
"""
import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy.integrate import quad
from scipy.special import voigt_profile

from edgefit.errors import MissingDependencyError, PhysicsDataError
from edgefit.physics import atomic
from edgefit.physics import lines as L
from edgefit.physics import voigt as V

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
    # abs=0: pytest.approx's default absolute tolerance (1e-12) exceeds W ~ 1e-7 A x 1e-12
    assert L.thin_equivalent_width(n, SI14.f, SI14.wavelength) == pytest.approx(ref, rel=1e-12,
                                                                               abs=0)
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
    with pytest.raises(PhysicsDataError):
        L.ion_lines("Fe XXV")


# He-like resonance (w, 1s2 1S0 - 1s2p 1P1) and H-like Ly-alpha lines as listed
# by Verner, Verner & Ferland 1996, ADNDT 64, 1 (read via the public copy of
# their line list in agnwinds/python, xdata/atomic/lines_linked_ver_2.dat; see
# the header of cross_sections/ion_lines.txt): wavelength [A], f.
# Wavelengths to the 1e-4 A printed in the source (5e-5 tolerance + rounding);
# f to the last printed digit (0.5e-3).
VVF96 = [
    ("O VII", 21.6019, 0.696), ("Ne IX", 13.4471, 0.724),
    ("Mg XI", 9.1688, 0.742), ("Si XIII", 6.6480, 0.757),
]
VVF96_LYA = [  # (ion, Ly-alpha1 2P3/2, Ly-alpha2 2P1/2) wavelengths [A]; f 0.277, 0.139
    ("O VIII", 18.9671, 18.9725), ("Ne X", 12.1321, 12.1375),
    ("Mg XII", 8.4192, 8.4246), ("Si XIV", 6.1804, 6.1858),
]


@pytest.mark.parametrize("ion,lam,f", VVF96)
def test_he_like_w_lines_against_verner_1996(ion, lam, f):
    (w,) = L.ion_lines(ion)
    assert w.wavelength == pytest.approx(lam, abs=6e-5)
    assert w.f == pytest.approx(f, abs=6e-4)
    assert (w.g_lower, w.g_upper) == (1, 3)
    assert w.status == "published"


@pytest.mark.parametrize("ion,lam1,lam2", VVF96_LYA)
def test_h_like_lyman_alpha_against_verner_1996(ion, lam1, lam2):
    ly1, ly2 = L.ion_lines(ion)
    assert ly1.wavelength == pytest.approx(lam1, abs=6e-5)
    assert ly2.wavelength == pytest.approx(lam2, abs=6e-5)
    # hydrogenic f in the file; Verner et al. print 0.277 and 0.139
    assert ly1.f == pytest.approx(0.277, abs=6e-4)
    assert ly2.f == pytest.approx(0.139, abs=6e-4)


def test_voigt_cross_section_integrates_to_pi_re_hc_f():
    # int sigma dE = pi r_e h c f (Draine 2011 eq. 9.8 in energy units), less
    # the Lorentzian wings beyond +-0.5 keV, 1 - (2/pi) arctan(0.5 keV / gamma)
    # (closed form; the Gaussian core is 2000 sigma inside the limits).
    # scipy.integrate.quad with epsabs=0: its default absolute tolerance
    # (1.5e-8) dwarfs an integrand of ~1e-17 cm^2 and stops it early.
    # Tolerance 1e-7 relative (quad's relative error is ~1e-11 here).
    e0 = SI14.energy
    val, _ = quad(lambda e: L.voigt_cross_section(e, e0, SI14.f, 50.0, SI14.gamma),
                  e0 - 0.5, e0 + 0.5, points=[e0], limit=400, epsabs=0, epsrel=1e-10)
    hwhm = const.hbar.to_value(u.keV * u.s) * SI14.gamma / 2   # Lorentzian HWHM, keV (astropy)
    wings = 1 - 2 / np.pi * np.arctan(0.5 / hwhm)
    assert wings > 1e-6   # the wing term is resolved by the tolerance below
    assert val == pytest.approx(np.pi * RE * HC * 1e-8 * SI14.f * (1 - wings), rel=1e-7, abs=0)


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


# ---------------------------------------------------------------------------
# Fast path (tabulated Faddeeva core, closed-form far-wing bins, compiled or
# NumPy back end) against a slow direct evaluation.
# ---------------------------------------------------------------------------

BACKENDS = ["numpy"] + (["numba"] if L.numba_available() else [])


def _direct(lo, hi, centre, area, sigma, gamma, sub_per_sigma=40, min_sub=200,
            max_sub=6000):
    """Reference: scipy.special.voigt_profile at equally spaced midpoints of
    each bin (step <= min(sigma, gamma)/40, >= 200 points per bin), mean of
    exp(-tau) over them.  Slow and simple; no tables, no wing expansion."""
    out = np.empty(lo.size)
    scale = min(min(s for s in sigma if s > 0) if any(s > 0 for s in sigma) else np.inf,
                min(g for g in gamma if g > 0) if any(g > 0 for g in gamma) else np.inf)
    for i, (a, b) in enumerate(zip(lo, hi)):
        k = int(np.clip((b - a) / scale * sub_per_sigma, min_sub, max_sub))
        x = a + (np.arange(k) + 0.5) * (b - a) / k
        tau = np.zeros(k)
        for c, A, s, g in zip(centre, area, sigma, gamma):
            tau += A * voigt_profile(x - c, s, g)
        out[i] = np.exp(-tau).mean()
    return out


def _pick_bins(t, n_even=40, n_steep=20):
    """Bins to check: evenly spread over the absorbed region, plus the
    steepest ones (where a saturated profile turns over)."""
    absorbed = np.flatnonzero(1.0 - t > 1e-7)
    even = absorbed[np.linspace(0, absorbed.size - 1, min(n_even, absorbed.size)).astype(int)]
    steep = np.argsort(np.abs(np.gradient(t)))[-n_steep:]
    return np.unique(np.concatenate([even, steep, [np.argmin(t)]]))


SI14_DOUBLET = L.ion_lines("si14")
_RNG_SWEEP = np.random.default_rng(20240611)
SWEEP = [(b, logn, bw, _RNG_SWEEP.uniform(-300, 300), _RNG_SWEEP.uniform(0, 1))
         for b in (10.0, 100.0, 1000.0)
         for logn in (12.0, 15.0, 17.0, 19.0, 21.0)
         for bw in (1e-4, 1e-3, 5e-3)]


@pytest.mark.parametrize("b,logn,bw,v,offset", SWEEP)
def test_fast_path_matches_direct_voigt(b, logn, bw, v, offset):
    # Tolerances: 1e-4 in transmission per bin (stated in
    # binned_line_transmission), and 0.1 % of the absorbed fraction 1 - T
    # plus 2e-5 (the 1e-5 tau floor, twice): b = 10-1000 km/s, thin (logN = 12) to
    # saturated (17-19) and damped (21) Si XIV Ly-alpha doublets, bins of
    # 0.1-5 eV at a random velocity shift and grid phase (seeded).  The
    # reference keeps every wing (no tau floor), so this also bounds the
    # effect of the 1e-5 floor.
    e = np.array([ln.energy for ln in SI14_DOUBLET]) / (1.0 + v / L.SPEED_OF_LIGHT_KMS)
    area = 10.0 ** logn * L.integrated_cross_section([ln.f for ln in SI14_DOUBLET])
    sig = L.doppler_sigma(e, b)
    gam = L.lorentz_hwhm([ln.gamma for ln in SI14_DOUBLET])
    edges = np.arange(1.9 + offset * bw, 2.1, bw)
    lo, hi = edges[:-1], edges[1:]
    grid = L.line_grid(lo, hi)
    results = {be: V.grid_transmission(grid, e, area, sig, gam, backend=be) for be in BACKENDS}
    t = results["numpy"]
    sel = _pick_bins(t)
    ref = _direct(lo[sel], hi[sel], e, area, sig, gam)
    for be, tb in results.items():
        assert np.all((tb >= 0) & (tb <= 1))
        np.testing.assert_allclose(tb[sel], ref, rtol=0, atol=1e-4, err_msg=be)
        np.testing.assert_allclose(1.0 - tb[sel], 1.0 - ref, rtol=1e-3, atol=2e-5,
                                   err_msg=be)
    # the public function gives the same numbers
    np.testing.assert_array_equal(
        L.binned_line_transmission(lo, hi, e, area, sig, gam), results[BACKENDS[-1]])


@pytest.mark.parametrize("case", ["lorentzian", "large_a", "gaps"])
def test_fallback_paths_match_direct_voigt(case):
    # NumPy-only branches: sigma = 0 (pure Lorentzian, as GasEdge uses), a =
    # gamma/(sqrt 2 sigma) >= 2 (scipy.special.voigt_profile in the core),
    # and a grid with gaps between bins (no shared edges).  Same 1e-4 bar.
    edges = np.arange(1.83, 1.85, 2e-4)
    lo, hi = edges[:-1], edges[1:]
    c = np.array([1.8385, 1.8391])
    area = np.array([3e-5, 1e-5])           # peak tau ~ 30
    if case == "lorentzian":
        sig, gam = np.zeros(2), np.array([3e-4, 2e-4])
    elif case == "large_a":
        sig, gam = np.array([5e-5, 5e-5]), np.array([3e-4, 2e-4])   # a = 4.2, 2.8
    else:
        sig, gam = np.array([1.2e-4, 1.2e-4]), np.array([8e-6, 8e-6])
        lo, hi = lo + 2e-5, hi - 2e-5
    t = L.binned_line_transmission(lo, hi, c, area, sig, gam)
    sel = _pick_bins(t)
    np.testing.assert_allclose(t[sel], _direct(lo[sel], hi[sel], c, area, sig, gam),
                               rtol=0, atol=1e-4)


@pytest.mark.parametrize("a", [0.0, 1e-4, 0.01, 0.3, 1.0, 1.99])
def test_tabulated_voigt_against_scipy(a):
    # voigt_fast (table of Re w(u + i a) with bilinear interpolation inside
    # 6 sqrt(2) sigma, far-wing expansion outside) against
    # scipy.special.voigt_profile (Faddeeva package): relative error < 2e-4
    # within 5 sigma, absolute error < 1e-5 of the peak everywhere
    # (interpolation bound h^2/8 |H_uu| + da^2/8 |H_aa| with h = da = 0.005).
    s = 1.0
    g = a * np.sqrt(2.0) * s
    x = np.linspace(-40.0, 40.0, 16001)
    ref = voigt_profile(x, s, g)
    fast = L.voigt_fast(x, s, g)
    core = np.abs(x) < 5 * s
    np.testing.assert_allclose(fast[core], ref[core], rtol=2e-4)
    assert np.max(np.abs(fast - ref)) < 1e-5 * ref.max()
    if a > 0:   # with damping, the wing is resolved to 2e-4 relative as well
        np.testing.assert_allclose(fast, ref, rtol=2e-4)


def test_backends_agree_on_random_line_sets():
    # numba kernel and NumPy body run the same algorithm: equal to rounding
    # (1e-12) on seeded random sets of overlapping lines, contiguous grids
    # and grids with gaps.
    if len(BACKENDS) < 2:
        pytest.skip("numba not available (not installed, or EDGEFIT_NO_NUMBA set): "
                    "only the NumPy back end exists here")
    rng = np.random.default_rng(7)
    for trial in range(40):
        nl = int(rng.integers(1, 9))
        c = rng.uniform(1.3, 2.0, nl)
        area = 10.0 ** rng.uniform(-9, -1, nl)
        sig = c * rng.uniform(5, 1500, nl) / (L.SPEED_OF_LIGHT_KMS * np.sqrt(2))
        gam = 10.0 ** rng.uniform(-7, -4.5, nl)
        edges = np.sort(rng.uniform(1.25, 2.05, int(rng.integers(200, 3000))))
        lo, hi = edges[:-1], edges[1:]
        if trial % 3 == 2:
            hi = lo + 0.8 * (hi - lo)
        grid = L.line_grid(lo, hi)
        t_np = V.grid_transmission(grid, c, area, sig, gam, backend="numpy")
        t_nb = V.grid_transmission(grid, c, area, sig, gam, backend="numba")
        np.testing.assert_allclose(t_nb, t_np, rtol=0, atol=1e-12)
        # shared-edge wing integrals (contiguous grids) = bin-by-bin ones
        t_pairs = V.grid_transmission(grid[:3] + (None,), c, area, sig, gam, backend="numpy")
        np.testing.assert_allclose(t_pairs, t_np, rtol=0, atol=1e-12)


def test_backend_choice_without_numba(monkeypatch):
    # "auto" falls back to NumPy silently; asking for numba explicitly says how to fix it
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert not L.numba_available()
    edges = np.linspace(1.95, 2.05, 501)
    grid = L.line_grid(edges[:-1], edges[1:])
    args = (np.array([2.0]), np.array([1e-4]), np.array([3e-4]), np.array([1e-5]))
    t = V.grid_transmission(grid, *args)
    np.testing.assert_array_equal(t, V.grid_transmission(grid, *args, backend="numpy"))
    with pytest.raises(MissingDependencyError, match="numba"):
        V.grid_transmission(grid, *args, backend="numba")
