r"""Exact Mie efficiencies of a homogeneous sphere, stable for X-ray grains.

Conventions
-----------
* Time dependence :math:`e^{-i\omega t}` as in Bohren & Huffman (1983), so the
  complex refractive index of an absorbing material is
  :math:`m = n + i\kappa = 1 - \delta + i\beta` with a **positive** imaginary
  part.  A negative imaginary part is rejected with :class:`ValueError`
  (several tabulations, e.g. xraydb's ``xray_delta_beta`` and miepython,
  write :math:`n - i\kappa`; pass ``np.conj(m)`` for those).
* Size parameter :math:`x = 2\pi a/\lambda` (``a`` the grain radius).
* Efficiencies are cross sections divided by :math:`\pi a^2`.

Algorithm
---------
The Lorenz–Mie coefficients (Bohren & Huffman 1983, eq. 4.88) are rewritten
with the logarithmic derivatives :math:`D_n(z) = \psi_n'(z)/\psi_n(z)` of both
the inner argument :math:`mx` and the outer argument :math:`x`, using
:math:`\psi_{n-1} = \psi_n (D_n(x) + n/x)` and
:math:`\xi_{n-1} = \xi_n (G_n(x) + n/x)`:

.. math::

    a_n = \frac{\psi_n(x)\,[D_n(mx) - m D_n(x)]}{\xi_n(x)[D_n(mx) + m n/x] - m\xi_{n-1}(x)},
    \qquad
    b_n = \frac{\psi_n(x)\,[m D_n(mx) - D_n(x)]}{\xi_n(x)[m D_n(mx) + n/x] - \xi_{n-1}(x)}.

The numerators vanish as :math:`m \to 1`; evaluated directly they are a
difference of two O(1) numbers and lose :math:`\log_{10}(1/|m-1|)` digits.
Here the difference :math:`E_n = D_n(mx) - D_n(x)` is carried through its
own downward recurrence, derived from
:math:`D_{n-1}(z) = n/z - 1/(D_n(z) + n/z)`:

.. math::

    E_{n-1} = -c\,n + \frac{E_n - c\,n}{[D_n(mx) + n/(mx)]\,[D_n(x) + n/x]},
    \qquad c = \frac{m-1}{m x},

so that :math:`D_n(mx) - m D_n(x) = E_n - (m-1) D_n(x)` and
:math:`m D_n(mx) - D_n(x) = m E_n + (m-1) D_n(x)` carry no cancellation:
the relative precision of :math:`a_n, b_n` does not degrade as
:math:`|m - 1| \to 0` (checked down to :math:`|m-1| = 10^{-6}` against
mpmath in the tests).  :math:`D_n(mx)` and :math:`D_n(x)` use downward
recurrence (Bohren & Huffman 1983 §4.8; Wiscombe 1979, NCAR/TN-140+STR)
started at :math:`N = \max(n_{stop}, |mx|) + 16 + \lceil 2|mx|^{1/3}\rceil`
from :math:`D_N = 0`.  :math:`\chi_n(x)` uses upward recurrence;
:math:`\psi_n(x)` uses upward recurrence while :math:`n < x` and
:math:`\psi_n = \psi_{n-1}/(D_n(x) + n/x)` for :math:`n \ge x`, where the
upward recurrence would lose digits (small spheres).

The number of terms is Wiscombe's :math:`n_{stop} = \lfloor x + 4.05
x^{1/3} + 2\rfloor`.

Absorption is summed directly, never as :math:`Q_{ext} - Q_{sca}`.  With
the Wronskian :math:`\psi_n\chi_n' - \psi_n'\chi_n = -1` one finds per order

.. math::

    \mathrm{Re}\,a_n - |a_n|^2 = \frac{-\mathrm{Im}[\bar m D_n(mx)]}
        {|\xi_n D_n(mx) - m\xi_n'|^2},\qquad
    \mathrm{Re}\,b_n - |b_n|^2 = \frac{-\mathrm{Im}[m D_n(mx)]}
        {|m D_n(mx)\xi_n - \xi_n'|^2},

both non-negative for an absorbing sphere, so

.. math::

    Q_{sca} = \frac{2}{x^2}\sum_n (2n+1)(|a_n|^2 + |b_n|^2),\quad
    Q_{abs} = \frac{2}{x^2}\sum_n (2n+1)\,[\ldots]_a + [\ldots]_b,\quad
    Q_{ext} = Q_{sca} + Q_{abs},

which equals the usual :math:`(2/x^2)\sum(2n+1)\mathrm{Re}(a_n+b_n)`
(Bohren & Huffman 1983 eq. 4.61, 4.62) but guarantees
:math:`Q_{ext} \ge Q_{sca} \ge 0`, :math:`Q_{abs} \ge 0` and keeps full
relative precision in a tiny :math:`Q_{abs}`.  The asymmetry parameter is
Bohren & Huffman eq. 4.62's

.. math::

    g\,Q_{sca} = \frac{4}{x^2}\Big[\sum_n \frac{n(n+2)}{n+1}
      \mathrm{Re}(a_n a_{n+1}^* + b_n b_{n+1}^*) + \sum_n
      \frac{2n+1}{n(n+1)}\mathrm{Re}(a_n b_n^*)\Big].

Back ends
---------
The per-sphere kernel runs compiled with numba when numba is importable
(an optional dependency, imported lazily on first use and cached on disk by
numba; blocks of spheres run in parallel threads when the batch has more
than ``PARALLEL_MIN_TERMS`` terms), else as a pure-NumPy loop over the
order n vectorised over spheres (about 10x slower; fine for small batches
and for many energies at one size).  The compiled loop runs the downward
recurrences of two spheres side by side (each is a chain of dependent
divisions that leaves the processor idle when run alone); every sphere's
arithmetic is unchanged.  Set ``EDGEFIT_NO_NUMBA=1`` to force
the NumPy path.  Both
implement the same recurrences in the same order and agree to about
1e-13 (tested).  Memory is bounded: the NumPy path processes spheres in
chunks of at most ``chunk_terms`` stored terms.

References
----------
Bohren, C. F. & Huffman, D. R. 1983, *Absorption and Scattering of Light by
Small Particles* (Wiley), ch. 4 and Appendix A.
Wiscombe, W. J. 1979, *Mie Scattering Calculations: Advances in Technique
and Fast, Vector-Speed Computer Codes*, NCAR/TN-140+STR.
"""
from __future__ import annotations

from collections import namedtuple

import numpy as np
from numpy.typing import ArrayLike

from .. import _jit
from ..errors import ArgumentError

__all__ = ["MieEfficiencies", "mie_efficiencies", "n_terms", "numba_available",
           "PARALLEL_MIN_TERMS"]

#: Result of :func:`mie_efficiencies` (and of the ADT and automatic
#: functions): extinction, scattering and absorption efficiencies
#: (dimensionless, cross section / (pi a^2)) and the asymmetry parameter g.
MieEfficiencies = namedtuple("MieEfficiencies", ["qext", "qsca", "qabs", "g"])

#: Default budget of stored terms per NumPy chunk (3 arrays, 40 bytes a term).
DEFAULT_CHUNK_TERMS = 2_000_000


def n_terms(x):
    """Number of Mie orders summed: Wiscombe (1979) n_stop = floor(x + 4.05 x^(1/3) + 2)."""
    x = np.asarray(x, dtype=float)
    return np.floor(x + 4.05 * np.cbrt(x) + 2.0).astype(np.int64)


def _n_start(nstop, absz):
    """Start of the downward recurrences: max(n_stop, |mx|) + 16 + ceil(2 |mx|^(1/3))."""
    return (np.maximum(nstop, np.ceil(absz)).astype(np.int64) + 16
            + np.ceil(2.0 * np.cbrt(absz)).astype(np.int64))


def _check_inputs(m, x):
    m = np.asarray(m)
    x = np.asarray(x)
    if not np.issubdtype(x.dtype, np.number) or np.iscomplexobj(x):
        raise ArgumentError("size parameter x must be real (x = 2 pi a / lambda)")
    m = m.astype(complex)
    x = x.astype(float)
    if not np.all(np.isfinite(x)) or np.any(x <= 0):
        raise ArgumentError("size parameter x must be finite and > 0 (x = 2 pi a / lambda)")
    if not np.all(np.isfinite(m)):
        raise ArgumentError("refractive index m must be finite")
    if np.any(m.imag < 0):
        raise ArgumentError(
            "refractive index m has a negative imaginary part; edgefit uses "
            "m = n + i kappa = 1 - delta + i beta with kappa >= 0 for absorption "
            "(time dependence exp(-i omega t), Bohren & Huffman 1983). Indices "
            "written n - i kappa (e.g. xraydb's xray_delta_beta, miepython) must be "
            "conjugated: pass np.conj(m).")
    if np.any(m.real <= 0):
        raise ArgumentError("refractive index m must have a positive real part")
    return m, x


def _prepare_index(m, x, m_minus_1=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Checked, broadcast (m, m - 1, x).  ``m_minus_1`` (= -delta + i beta),
    when given, defines m and keeps the full precision of m - 1 for indices
    very close to 1."""
    if m_minus_1 is not None:
        mm1 = np.asarray(m_minus_1).astype(complex)
        m = 1.0 + mm1
    m, x = _check_inputs(m, x)
    if m_minus_1 is None:
        mm1 = m - 1.0
    mb, mm1b, xb = np.broadcast_arrays(m, mm1, x)
    return mb, mm1b, xb


# --------------------------------------------------------------------------
# Kernel for one sphere (compiled by numba when available)
# --------------------------------------------------------------------------
def _down(m, mm1, x, nstop, nstart, dm, dx, ee):
    """Downward recurrences n = nstart .. 2 for D_{n-1}(mx), D_{n-1}(x) and
    the m-1 term, stored for n-1 <= nstop (see :func:`_sphere`)."""
    z = m * x
    inv_z = 1.0 / z
    izr = inv_z.real
    izi = inv_z.imag
    inv_x = 1.0 / x
    c = mm1 * inv_z
    cr = c.real
    ci = c.imag
    d1r = 0.0
    d1i = 0.0
    d0 = 0.0
    er = 0.0
    ei = 0.0
    for n in range(nstart, 1, -1):
        ar = d1r + n * izr
        ai = d1i + n * izi
        s2 = 1.0 / (ar * ar + ai * ai)
        iar = ar * s2
        iai = -ai * s2
        ib = 1.0 / (d0 + n * inv_x)
        cnr = cr * n
        cni = ci * n
        tr = (er - cnr) * ib
        ti = (ei - cni) * ib
        er = tr * iar - ti * iai - cnr
        ei = tr * iai + ti * iar - cni
        d1r = n * izr - iar
        d1i = n * izi - iai
        d0 = n * inv_x - ib
        if n <= nstop + 1:
            dm[n - 1] = complex(d1r, d1i)
            dx[n - 1] = d0
            ee[n - 1] = complex(er, ei)


def _down_pair(m, mm1, x, nstop, nstart, dm, dx, ee,
               m_b, mm1_b, x_b, nstop_b, nstart_b, dm_b, dx_b, ee_b):
    """:func:`_down` for two spheres in one loop.  Each recurrence is a
    chain of dependent divisions, so one sphere alone leaves the processor
    waiting; two independent chains side by side run in about the time of
    one.  Each sphere's steps are exactly those of :func:`_down` (its state
    stays zero until n reaches its own start), so the numbers are the same."""
    z = m * x
    inv_z = 1.0 / z
    izr = inv_z.real
    izi = inv_z.imag
    inv_x = 1.0 / x
    c = mm1 * inv_z
    cr = c.real
    ci = c.imag
    d1r = 0.0
    d1i = 0.0
    d0 = 0.0
    er = 0.0
    ei = 0.0
    z_b = m_b * x_b
    inv_z_b = 1.0 / z_b
    izr_b = inv_z_b.real
    izi_b = inv_z_b.imag
    inv_x_b = 1.0 / x_b
    c_b = mm1_b * inv_z_b
    cr_b = c_b.real
    ci_b = c_b.imag
    d1r_b = 0.0
    d1i_b = 0.0
    d0_b = 0.0
    er_b = 0.0
    ei_b = 0.0
    for n in range(max(nstart, nstart_b), 1, -1):
        if n <= nstart:
            ar = d1r + n * izr
            ai = d1i + n * izi
            s2 = 1.0 / (ar * ar + ai * ai)
            iar = ar * s2
            iai = -ai * s2
            ib = 1.0 / (d0 + n * inv_x)
            cnr = cr * n
            cni = ci * n
            tr = (er - cnr) * ib
            ti = (ei - cni) * ib
            er = tr * iar - ti * iai - cnr
            ei = tr * iai + ti * iar - cni
            d1r = n * izr - iar
            d1i = n * izi - iai
            d0 = n * inv_x - ib
            if n <= nstop + 1:
                dm[n - 1] = complex(d1r, d1i)
                dx[n - 1] = d0
                ee[n - 1] = complex(er, ei)
        if n <= nstart_b:
            ar_b = d1r_b + n * izr_b
            ai_b = d1i_b + n * izi_b
            s2_b = 1.0 / (ar_b * ar_b + ai_b * ai_b)
            iar_b = ar_b * s2_b
            iai_b = -ai_b * s2_b
            ib_b = 1.0 / (d0_b + n * inv_x_b)
            cnr_b = cr_b * n
            cni_b = ci_b * n
            tr_b = (er_b - cnr_b) * ib_b
            ti_b = (ei_b - cni_b) * ib_b
            er_b = tr_b * iar_b - ti_b * iai_b - cnr_b
            ei_b = tr_b * iai_b + ti_b * iar_b - cni_b
            d1r_b = n * izr_b - iar_b
            d1i_b = n * izi_b - iai_b
            d0_b = n * inv_x_b - ib_b
            if n <= nstop_b + 1:
                dm_b[n - 1] = complex(d1r_b, d1i_b)
                dx_b[n - 1] = d0_b
                ee_b[n - 1] = complex(er_b, ei_b)


def _up(m, mm1, x, nstop, dm, dx, ee):
    """Upward recurrences and the sums of :func:`_sphere` from the stored
    downward results."""
    inv_x = 1.0 / x
    mc = m.conjugate()
    psi_m2 = np.cos(x)     # psi_{-1}
    chi_m2 = -np.sin(x)    # chi_{-1}
    psi_m1 = np.sin(x)     # psi_0
    chi_m1 = np.cos(x)     # chi_0
    sca = 0.0
    absn = 0.0
    gsum = 0.0
    a_prev = 0j
    b_prev = 0j
    for n in range(1, nstop + 1):
        if n < x:
            psi = (2 * n - 1) * inv_x * psi_m1 - psi_m2
        else:
            psi = psi_m1 / (dx[n] + n * inv_x)
        chi = (2 * n - 1) * inv_x * chi_m1 - chi_m2
        xi = complex(psi, -chi)
        xi_m1 = complex(psi_m1, -chi_m1)
        dn = dm[n]
        en = ee[n]
        dxn = dx[n]
        ni = n * inv_x
        den_a = xi * (dn + m * ni) - m * xi_m1
        den_b = xi * (m * dn + ni) - xi_m1
        qa = 1.0 / (den_a.real * den_a.real + den_a.imag * den_a.imag)
        qb = 1.0 / (den_b.real * den_b.real + den_b.imag * den_b.imag)
        an = psi * (en - mm1 * dxn) * den_a.conjugate() * qa
        bn = psi * (m * en + mm1 * dxn) * den_b.conjugate() * qb
        w = 2 * n + 1
        sca += w * (an.real * an.real + an.imag * an.imag
                    + bn.real * bn.real + bn.imag * bn.imag)
        absn += w * (-(mc * dn).imag * qa - (m * dn).imag * qb)
        if n > 1:
            gsum += ((n - 1) * (n + 1) / n) * ((a_prev * an.conjugate()).real
                                               + (b_prev * bn.conjugate()).real)
        gsum += (w / (n * (n + 1))) * (an * bn.conjugate()).real
        a_prev = an
        b_prev = bn
        psi_m2 = psi_m1
        chi_m2 = chi_m1
        psi_m1 = psi
        chi_m1 = chi
    f = 2.0 * inv_x * inv_x
    qsca = f * sca
    qabs = f * absn
    g = 2.0 * f * gsum / qsca if qsca > 0 else 0.0
    return qsca + qabs, qsca, qabs, g


def _sphere(m, mm1, x, nstop, nstart, dm, dx, ee):
    """Mie sums for one sphere; dm, dx, ee are work arrays of length >= nstop+1.

    Complex reciprocals and quotients are written as conj(b)/|b|^2 (the
    moduli involved stay far from under/overflow for n <= n_stop), which
    compiles to fewer operations than a general complex division and lets
    the |den|^2 of the absorption sum be reused.  Returns (qext, qsca, qabs, g)."""
    _down_kernel(m, mm1, x, nstop, nstart, dm, dx, ee)
    return _up_kernel(m, mm1, x, nstop, dm, dx, ee)


def _blocks_kernel(m, mm1, x, nstop, nstart, out, bounds):
    """Blocks of spheres, in parallel when compiled (``_prange`` becomes
    numba.prange); work arrays are allocated once per block.  Spheres go
    through the downward recurrences in pairs (:func:`_down_pair`)."""
    for blk in _prange(bounds.size - 1):
        lo = bounds[blk]
        hi = bounds[blk + 1]
        k = 1
        for i in range(lo, hi):
            k = max(k, nstop[i] + 1)
        dm = np.empty(k, dtype=np.complex128)
        dx = np.empty(k, dtype=np.float64)
        ee = np.empty(k, dtype=np.complex128)
        dm_b = np.empty(k, dtype=np.complex128)
        dx_b = np.empty(k, dtype=np.float64)
        ee_b = np.empty(k, dtype=np.complex128)
        i = lo
        while i + 1 < hi:
            j = i + 1
            _down_pair_kernel(m[i], mm1[i], x[i], nstop[i], nstart[i], dm, dx, ee,
                              m[j], mm1[j], x[j], nstop[j], nstart[j], dm_b, dx_b, ee_b)
            r = _up_kernel(m[i], mm1[i], x[i], nstop[i], dm, dx, ee)
            out[0, i] = r[0]
            out[1, i] = r[1]
            out[2, i] = r[2]
            out[3, i] = r[3]
            r = _up_kernel(m[j], mm1[j], x[j], nstop[j], dm_b, dx_b, ee_b)
            out[0, j] = r[0]
            out[1, j] = r[1]
            out[2, j] = r[2]
            out[3, j] = r[3]
            i += 2
        if i < hi:
            r = _sphere_kernel(m[i], mm1[i], x[i], nstop[i], nstart[i], dm, dx, ee)
            out[0, i] = r[0]
            out[1, i] = r[1]
            out[2, i] = r[2]
            out[3, i] = r[3]


# Names the block loop reads from this module; the compiled version gets
# numba.prange and the compiled sphere kernel instead (edgefit._jit.jit).
_prange = range
_down_kernel = _down
_up_kernel = _up
_down_pair_kernel = _down_pair
_sphere_kernel = _sphere

#: Below this many terms (sum of n_stop) the compiled loop runs on one thread,
#: where starting threads would cost more than it saves.
PARALLEL_MIN_TERMS = 200_000


@_jit.kernels
def _numba_kernels():
    """(parallel, serial) compiled block loops (built once per process;
    numba's on-disk cache makes later processes fast)."""
    nb = _jit.require("the compiled Mie kernel")
    down, up = _jit.jit(_down), _jit.jit(_up)
    sphere = _jit.jit(_sphere, globals={"_down_kernel": down, "_up_kernel": up})
    names = {"_prange": nb.prange, "_sphere_kernel": sphere, "_up_kernel": up,
             "_down_pair_kernel": _jit.jit(_down_pair)}
    return (_jit.jit(_blocks_kernel, parallel=True, globals=names),
            _jit.jit(_blocks_kernel, globals=names))


def numba_available():
    """True if the compiled (numba) back end can be used."""
    return _numba_kernels() is not None


# --------------------------------------------------------------------------
# Pure-NumPy path: the same recurrences, vectorised over spheres
# --------------------------------------------------------------------------
def _numpy_chunk(m, mm1, x, nstop, nstart, out):
    """Same algorithm as :func:`_sphere` for a chunk of spheres (in place into out)."""
    # order by number of terms (descending) so the active spheres are a prefix
    order = np.argsort(-nstop, kind="stable")
    m, mm1, x = m[order], mm1[order], x[order]
    nstop, nstart = nstop[order], nstart[order]
    npt = x.size
    nmax = int(nstop[0])
    z = m * x
    inv_z = 1.0 / z
    inv_x = 1.0 / x
    c = mm1 * inv_z
    dm = np.zeros((nmax + 1, npt), dtype=complex)
    dx = np.zeros((nmax + 1, npt))
    ee = np.zeros((nmax + 1, npt), dtype=complex)
    d1 = np.zeros(npt, dtype=complex)
    d0 = np.zeros(npt)
    e = np.zeros(npt, dtype=complex)
    for n in range(int(nstart.max()), 1, -1):
        act = nstart >= n
        a_ = d1 + n * inv_z
        b_ = d0 + n * inv_x
        ia = 1.0 / a_
        ib = 1.0 / b_
        cn = c * n
        e_new = (e - cn) * (ia * ib) - cn
        d1_new = n * inv_z - ia
        d0_new = n * inv_x - ib
        e = np.where(act, e_new, 0j)
        d1 = np.where(act, d1_new, 0j)
        d0 = np.where(act, d0_new, 0.0)
        if n - 1 <= nmax:
            dm[n - 1] = d1
            dx[n - 1] = d0
            ee[n - 1] = e
    mc = m.conj()
    psi_m2 = np.cos(x)
    chi_m2 = -np.sin(x)
    psi_m1 = np.sin(x)
    chi_m1 = np.cos(x)
    sca = np.zeros(npt)
    absn = np.zeros(npt)
    gsum = np.zeros(npt)
    a_prev = np.zeros(npt, dtype=complex)
    b_prev = np.zeros(npt, dtype=complex)
    for n in range(1, nmax + 1):
        k = int(np.searchsorted(-nstop, -n, side="right"))  # spheres with nstop >= n
        s = slice(0, k)
        xs, ixs, ms, mm1s = x[s], inv_x[s], m[s], mm1[s]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            up = (2 * n - 1) * ixs * psi_m1[s] - psi_m2[s]
            ratio = psi_m1[s] / (dx[n, s] + n * ixs)
        psi = np.where(n < xs, up, ratio)
        chi = (2 * n - 1) * ixs * chi_m1[s] - chi_m2[s]
        xi = psi - 1j * chi
        xi_m1 = psi_m1[s] - 1j * chi_m1[s]
        dn = dm[n, s]
        en = ee[n, s]
        dxn = dx[n, s]
        ni = n * ixs
        den_a = xi * (dn + ms * ni) - ms * xi_m1
        den_b = xi * (ms * dn + ni) - xi_m1
        an = psi * (en - mm1s * dxn) / den_a
        bn = psi * (ms * en + mm1s * dxn) / den_b
        w = 2 * n + 1
        sca[s] += w * (an.real * an.real + an.imag * an.imag
                       + bn.real * bn.real + bn.imag * bn.imag)
        absn[s] += w * (-(mc[s] * dn).imag / (den_a.real ** 2 + den_a.imag ** 2)
                        - (ms * dn).imag / (den_b.real ** 2 + den_b.imag ** 2))
        if n > 1:
            gsum[s] += ((n - 1) * (n + 1) / n) * ((a_prev[s] * an.conj()).real
                                                  + (b_prev[s] * bn.conj()).real)
        gsum[s] += (w / (n * (n + 1))) * (an * bn.conj()).real
        a_prev[s] = an
        b_prev[s] = bn
        psi_m2[s] = psi_m1[s]
        chi_m2[s] = chi_m1[s]
        psi_m1[s] = psi
        chi_m1[s] = chi
    f = 2.0 * inv_x * inv_x
    qsca = f * sca
    qabs = f * absn
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(qsca > 0, 2.0 * f * gsum / qsca, 0.0)
    res = np.empty((4, npt))
    res[0] = qsca + qabs
    res[1] = qsca
    res[2] = qabs
    res[3] = g
    out[:, order] = res


def _numpy_batch(m, mm1, x, nstop, nstart, out, chunk_terms):
    order = np.argsort(nstop, kind="stable")
    i = 0
    npt = x.size
    while i < npt:
        # largest chunk whose stored terms fit the budget (nstop sorted ascending)
        j = i + 1
        while j < npt and (nstop[order[j]] + 1) * (j + 1 - i) <= chunk_terms:
            j += 1
        idx = order[i:j]
        sub = np.empty((4, idx.size))
        _numpy_chunk(m[idx], mm1[idx], x[idx], nstop[idx], nstart[idx], sub)
        out[:, idx] = sub
        i = j


def _blocks(nstop, per_block=64):
    """Block boundaries of about equal work (sum of n_stop) for the compiled loop."""
    work = np.cumsum(nstop + 20)
    nblk = int(min(max(1, nstop.size // per_block), 256))
    edges = np.searchsorted(work, work[-1] * np.arange(1, nblk) / nblk)
    return np.unique(np.concatenate([[0], edges, [nstop.size]])).astype(np.int64)


def mie_efficiencies(m: ArrayLike | None, x: ArrayLike, *, backend: str = "auto",
                     m_minus_1: ArrayLike | None = None,
                     chunk_terms: int = DEFAULT_CHUNK_TERMS) -> MieEfficiencies:
    r"""Exact Mie efficiencies and asymmetry parameter of homogeneous spheres.

    Parameters
    ----------
    m : complex or array_like
        Complex refractive index :math:`m = n + i\kappa = 1 - \delta + i\beta`
        of the sphere relative to the medium (dimensionless).  The imaginary
        part must be >= 0 (absorbing); a negative one raises ValueError
        (conjugate indices written :math:`n - i\kappa`).  Validated for
        :math:`10^{-6} \le |m-1| \le 1` and for ordinary optical indices.
    x : float or array_like
        Size parameter :math:`x = 2\pi a/\lambda` (dimensionless, > 0),
        validated up to :math:`3\times10^4`.  ``m`` and ``x`` broadcast.
    backend : {"auto", "numba", "numpy"}
        "auto" uses the numba kernel if numba is importable (and the
        environment variable ``EDGEFIT_NO_NUMBA`` is unset), else NumPy.
    m_minus_1 : complex or array_like, optional
        :math:`m - 1` given directly (e.g. :math:`-\delta + i\beta` from
        tabulated :math:`\delta, \beta`), to avoid the rounding of
        ``1 - delta`` when :math:`|m-1|` is tiny.  Overrides ``m``.
    chunk_terms : int
        Memory bound of the NumPy path (terms stored per chunk).

    Returns
    -------
    MieEfficiencies
        Named tuple ``(qext, qsca, qabs, g)`` of floats (scalar inputs) or
        arrays of the broadcast shape.  ``g = 0`` where ``qsca == 0``
        (``m == 1`` exactly).

    Notes
    -----
    See the module docstring for the formulation (Bohren & Huffman 1983
    ch. 4; Wiscombe 1979) and its treatment of :math:`m \to 1` and of weak
    absorption.  Cost grows linearly with x (:func:`n_terms` orders).

    Examples
    --------
    >>> r = mie_efficiencies(1.55, 2 * np.pi * 0.525 / 0.6328)
    >>> round(float(r.qext), 5), round(float(r.g), 5)
    (3.10543, 0.63314)
    """
    m, mm1, x = _prepare_index(m, x, m_minus_1)
    shape = x.shape
    mf = np.ascontiguousarray(m.ravel())
    mm1f = np.ascontiguousarray(mm1.ravel())
    xf = np.ascontiguousarray(x.ravel())
    nstop = n_terms(xf)
    nstart = _n_start(nstop, np.abs(mf * xf))
    out = np.empty((4, xf.size))
    if backend not in ("auto", "numba", "numpy"):
        raise ArgumentError(f"backend must be 'auto', 'numba' or 'numpy', not {backend!r}")
    kernels = None if backend == "numpy" else _numba_kernels(required=backend == "numba")
    if xf.size:
        if kernels is not None:
            kernel = kernels[0] if nstop.sum() >= PARALLEL_MIN_TERMS else kernels[1]
            kernel(mf, mm1f, xf, nstop, nstart, out, _blocks(nstop))
        else:
            _numpy_batch(mf, mm1f, xf, nstop, nstart, out, int(chunk_terms))
    res = [out[i].reshape(shape) for i in range(4)]
    if shape == ():
        res = [float(r) for r in res]
    return MieEfficiencies(*res)
