"""Exact Mie efficiencies (edgefit.dust.mie) against outside references.

References used below:
* miepython 3.x (Prahl), an independent general-purpose Mie library from PyPI;
  its convention is m = n - i kappa, so it is given conj(m).
* Bohren & Huffman 1983, "Absorption and Scattering of Light by Small
  Particles", Appendix A (BHMIE example output) and §5.2 (Rayleigh limit).
* Wiscombe 1979, NCAR/TN-140+STR, test cases for m = 1.5.
* mpmath (arbitrary precision) evaluation of Bohren & Huffman eq. 4.88 /
  4.61 / 4.62, written here independently of edgefit's formulation.
"""
import numpy as np
import pytest

from edgefit.dust.mie import MieEfficiencies, mie_efficiencies, n_terms, numba_available
from edgefit.errors import MissingDependencyError

BACKENDS = ["numpy"] + (["numba"] if numba_available() else [])


def _xray_points(n, seed):
    """Seeded X-ray-like points: m = 1 - delta + i beta, x log-uniform in [1, 3e4]."""
    rng = np.random.default_rng(seed)
    delta = 10 ** rng.uniform(-6, -2, n)
    beta = 10 ** rng.uniform(-8, -2, n)
    x = 10 ** rng.uniform(0, np.log10(3e4), n)
    return 1 - delta + 1j * beta, x


def _optical_points():
    ms = np.array([1.33 + 0j, 1.5 + 0.1j, 1.55 + 0j, 2 + 1j])
    xs = np.geomspace(0.01, 100, 16)
    m, x = np.meshgrid(ms, xs, indexing="ij")
    return m.ravel(), x.ravel()


def test_against_miepython_xray_and_optical():
    # miepython 3.3 efficiencies_mx; tolerance 1e-6 relative in Q_ext, Q_sca
    # and g (the brief's bar); the observed agreement is ~1e-10.
    miepython = pytest.importorskip("miepython")
    mx, xx = _xray_points(160, seed=20240601)
    mo, xo = _optical_points()
    m = np.concatenate([mx, mo])
    x = np.concatenate([xx, xo])
    assert m.size >= 200
    ours = mie_efficiencies(m, x)
    qext, qsca, _qback, g = miepython.efficiencies_mx(np.conj(m), x)
    np.testing.assert_allclose(ours.qext, qext, rtol=1e-6, atol=0)
    np.testing.assert_allclose(ours.qsca, qsca, rtol=1e-6, atol=0)
    np.testing.assert_allclose(ours.g, g, rtol=1e-6, atol=1e-12)
    # absorption where it is not a tiny difference in miepython's output
    big = (qext - qsca) > 1e-3 * qext
    assert big.sum() > 50
    np.testing.assert_allclose(ours.qabs[big], (qext - qsca)[big], rtol=1e-6)


def test_bohren_huffman_appendix_a():
    # Bohren & Huffman 1983 Appendix A: m = 1.55, a = 0.525 um, lambda = 0.6328 um:
    # Q_ext = Q_sca = 3.10543, g = 0.63314 (5 decimals quoted -> atol 6e-6).
    x = 2 * np.pi * 0.525 / 0.6328
    for backend in BACKENDS:
        r = mie_efficiencies(1.55, x, backend=backend)
        assert abs(r.qext - 3.10543) < 6e-6
        assert abs(r.qsca - 3.10543) < 6e-6
        assert abs(r.g - 0.63314) < 6e-6
        assert r.qabs == 0.0


@pytest.mark.parametrize("x, qsca", [(10.0, 2.8820), (100.0, 2.0944), (1000.0, 2.0139)])
def test_wiscombe_1979_m15(x, qsca):
    # Wiscombe 1979 NCAR/TN-140, m = 1.5: Q_sca to the 4 decimals quoted (atol 6e-5).
    for backend in BACKENDS:
        r = mie_efficiencies(1.5, x, backend=backend)
        assert abs(r.qsca - qsca) < 6e-5


@pytest.mark.parametrize("m", [1.5 + 0.1j, 1.33 + 0.01j, 2 + 1j, 1 - 2.1e-4 + 3.6e-5j,
                               1 - 1e-6 + 1e-8j])
def test_rayleigh_limit(m):
    # Bohren & Huffman 1983 §5.2 at x = 1e-3: Q_abs = 4x Im[(m^2-1)/(m^2+2)],
    # Q_sca = (8/3) x^4 |(m^2-1)/(m^2+2)|^2.  The neglected terms are O(x^2)
    # relative, so tolerance 1e-5.
    x = 1e-3
    alpha = (m * m - 1) / (m * m + 2)
    r = mie_efficiencies(m, x)
    np.testing.assert_allclose(r.qabs, 4 * x * alpha.imag, rtol=1e-5)
    np.testing.assert_allclose(r.qsca, 8 / 3 * x ** 4 * abs(alpha) ** 2, rtol=1e-5)


def test_extinction_paradox():
    # Q_ext -> 2 for x -> infinity (van de Hulst 1957 §8.22; Bohren & Huffman
    # 1983 §4.4.3).  The edge correction is O(x^(-2/3)) (common practice), so
    # 1 % at x = 1e4, and the excess shrinks with x for an absorbing sphere.
    m = 1.5 + 0.1j
    xs = np.array([1e2, 1e3, 1e4])
    q = mie_efficiencies(m, xs).qext
    assert abs(q[-1] - 2) < 0.01
    assert np.all(np.diff(np.abs(q - 2)) < 0)
    # X-ray grain: rho = 2x|n-1| = 600 and 4 x kappa = 12 -> opaque, Q_ext ~ 2
    r = mie_efficiencies(1 - 1e-2 + 1e-4j, 3e4)
    assert abs(r.qext - 2) < 0.01


@pytest.mark.parametrize("backend", BACKENDS)
def test_energy_conservation(backend):
    # Q_ext = Q_sca + Q_abs, Q_ext >= Q_sca >= 0, Q_abs >= 0 (Bohren & Huffman
    # 1983 eq. 3.25), and -1 <= g <= 1, over a seeded random X-ray grid.
    m, x = _xray_points(120, seed=7)
    x = x / 10
    r = mie_efficiencies(m, x, backend=backend)
    assert np.all(r.qsca >= 0) and np.all(r.qabs >= 0)
    assert np.all(r.qext >= r.qsca)
    np.testing.assert_allclose(r.qext, r.qsca + r.qabs, rtol=1e-13)
    assert np.all(np.abs(r.g) <= 1)


def _mie_mpmath(mm1, x, dps=40):
    """Bohren & Huffman 1983 eq. 4.88 (a_n, b_n with D_n(mx) by downward
    recurrence), eq. 4.61-4.62 for Q_ext, Q_sca, at ``dps`` decimal digits;
    Q_abs = Q_ext - Q_sca (harmless at this precision)."""
    mp = pytest.importorskip("mpmath")
    with mp.workdps(dps):
        m = 1 + mp.mpc(mm1.real, mm1.imag)
        x = mp.mpf(x)
        nstop = int(float(x) + 4.05 * float(x) ** (1 / 3) + 2)
        z = m * x
        top = nstop + 60 + int(abs(complex(z)))
        d = [mp.mpc(0)] * (top + 1)
        for n in range(top, 0, -1):
            d[n - 1] = n / z - 1 / (d[n] + n / z)
        psi0, psi1 = mp.cos(x), mp.sin(x)
        chi0, chi1 = -mp.sin(x), mp.cos(x)
        qe = qs = mp.mpf(0)
        for n in range(1, nstop + 1):
            psi0, psi1 = psi1, (2 * n - 1) / x * psi1 - psi0
            chi0, chi1 = chi1, (2 * n - 1) / x * chi1 - chi0
            xi1, xi0 = psi1 - 1j * chi1, psi0 - 1j * chi0
            fa = d[n] / m + n / x
            fb = m * d[n] + n / x
            a = (fa * psi1 - psi0) / (fa * xi1 - xi0)
            b = (fb * psi1 - psi0) / (fb * xi1 - xi0)
            qe += (2 * n + 1) * mp.re(a + b)
            qs += (2 * n + 1) * (abs(a) ** 2 + abs(b) ** 2)
        qe *= 2 / x ** 2
        qs *= 2 / x ** 2
        return float(qe), float(qs), float(qe - qs)


@pytest.mark.parametrize("mm1", [-1e-6 + 1e-8j, -1e-6 + 1e-10j, 1e-6 + 0j, -1e-4 + 1e-8j])
@pytest.mark.parametrize("x", [0.01, 1.0, 30.0, 300.0])
def test_m_close_to_one_against_mpmath(mm1, x):
    # Near m = 1 the textbook a_n, b_n cancel (miepython agrees only to ~1e-10
    # there, partly from rounding 1 + (m-1)); edgefit keeps ~1e-13.  Reference:
    # mpmath at 40 digits (above).  Tolerance 1e-11 relative in Q_ext, Q_sca,
    # Q_abs (where Q_abs is not pure round-off, i.e. kappa > 0).
    ref = _mie_mpmath(mm1, x)
    for backend in BACKENDS:
        r = mie_efficiencies(None, x, m_minus_1=mm1, backend=backend)
        np.testing.assert_allclose(r.qext, ref[0], rtol=1e-11)
        np.testing.assert_allclose(r.qsca, ref[1], rtol=1e-11)
        if mm1.imag > 0:
            np.testing.assert_allclose(r.qabs, ref[2], rtol=1e-11)
        else:
            assert r.qabs == 0


def test_backends_agree_and_chunking():
    # The NumPy path implements the same recurrences as the numba kernel;
    # they agree to round-off (1e-12), and chunking changes nothing.
    m, x = _xray_points(60, seed=11)
    x = x / 30
    a = mie_efficiencies(m, x, backend="numpy")
    b = mie_efficiencies(m, x, backend="numpy", chunk_terms=5000)
    for u, v in zip(a, b):
        np.testing.assert_allclose(u, v, rtol=1e-15, atol=0)
    if numba_available():
        c = mie_efficiencies(m, x, backend="numba")
        for u, v in zip(a, c):
            np.testing.assert_allclose(u, v, rtol=1e-12, atol=0)


def test_numba_backend_refused_without_numba(monkeypatch):
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    with pytest.raises(MissingDependencyError, match="numba"):
        mie_efficiencies(1.5, 2.0, backend="numba")
    # "auto" falls back to NumPy silently, with the published B&H value
    r = mie_efficiencies(1.55, 2 * np.pi * 0.525 / 0.6328)
    assert abs(r.qext - 3.10543) < 6e-6


def test_m_minus_1_keeps_precision():
    # Rounding 1 - 1e-7 costs ~1e-9 relative in m - 1; passing m - 1 directly
    # removes it.  Reference: mpmath above (40 digits).
    mm1 = -1e-7 + 3e-9j
    ref = _mie_mpmath(mm1, 50.0)
    r = mie_efficiencies(None, 50.0, m_minus_1=mm1)
    np.testing.assert_allclose(r.qext, ref[0], rtol=1e-12)


def test_shapes_and_types():
    r = mie_efficiencies(1.5 + 0.01j, 3.0)
    assert isinstance(r, MieEfficiencies)
    assert all(isinstance(v, float) for v in r)
    m = np.array([1.5, 1.6 + 0.1j])[:, None]
    x = np.array([0.5, 1.0, 2.0])[None, :]
    r = mie_efficiencies(m, x)
    assert all(np.shape(v) == (2, 3) for v in r)
    one = mie_efficiencies(1.6 + 0.1j, 2.0)
    assert r.qext[1, 2] == pytest.approx(one.qext, rel=1e-14)
    assert n_terms(1000.0) == int(1000 + 4.05 * 10 + 2)


def test_input_errors():
    with pytest.raises(ValueError, match="kappa >= 0"):
        mie_efficiencies(1 - 1e-3 - 1e-4j, 10.0)
    with pytest.raises(ValueError, match="x must be finite and > 0"):
        mie_efficiencies(1.5, 0.0)
    with pytest.raises(ValueError, match="x must be finite"):
        mie_efficiencies(1.5, np.nan)
    with pytest.raises(ValueError, match="backend"):
        mie_efficiencies(1.5, 1.0, backend="gpu")


def test_grouped_spheres_equal_single_sphere_results():
    """The compiled kernel runs groups of mie.LANES spheres side by side
    (SIMD lanes) and recomputes the downward recurrences a chunk of orders
    at a time from checkpoints (above mie.DIRECT_ORDERS orders); every
    sphere's efficiencies must equal those computed for it alone, bit for
    bit (each sphere's operations are unchanged), whatever the other
    spheres of its group, including spare lanes of the last group; and the
    threaded and the one-thread group loops must agree bit for bit.
    Values from miepython 3 and mpmath are the outside checks elsewhere in
    this file."""
    from edgefit.dust import mie

    if not mie.numba_available():
        pytest.skip("numba not available")
    rng = np.random.default_rng(12)
    n = 2 * mie.LANES + 5
    # sizes from Rayleigh to about 9 chunks above the direct limit, mixed
    # within groups; X-ray and optical indices
    x = np.exp(rng.uniform(np.log(0.05), np.log(3000.0), n))
    m = 1 - 10 ** rng.uniform(-5, -1, n) + 1j * 10 ** rng.uniform(-6, -1, n)
    m[::7] = 1.5 + 0.02j
    together = mie.mie_efficiencies(m, x)
    for i in range(n):
        alone = mie.mie_efficiencies(m[i:i + 1], x[i:i + 1])
        for a, b in zip(together, alone):
            assert np.asarray(a)[i] == np.asarray(b)[0]
    mm1 = m - 1
    nstop = mie.n_terms(x)
    nstart = mie._n_start(nstop, np.abs(m * x))
    order = np.argsort(nstart, kind="stable")
    outs = []
    for kernel in mie._numba_kernels():
        out = np.empty((4, n))
        kernel(m, mm1, x, nstop, nstart, order, out)
        outs.append(out)
    np.testing.assert_array_equal(outs[0], outs[1])
    np.testing.assert_array_equal(outs[1], np.array(together))
