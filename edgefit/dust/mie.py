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
The kernel runs compiled with numba when numba is importable (an optional
dependency, imported lazily on first use and cached on disk by numba;
groups of spheres run in parallel threads when the batch has more than
``PARALLEL_MIN_TERMS`` terms), else as a pure-NumPy loop over the order n
vectorised over spheres (about 30x slower; fine for small batches and for
many energies at one size).  The compiled kernel takes the spheres in
groups of ``LANES`` of similar size and runs each recurrence step for the
whole group in one loop over the spheres, which the compiler turns into
SIMD instructions; the downward values are kept at every ``CHUNK``-th
order only and recomputed a chunk at a time for the upward sums, so that
the working set stays in the processor's first-level cache.  Every
sphere's arithmetic is the same operations in the same order as for that
sphere alone (the results do not depend on the other spheres of its
group; tested bit for bit).  Set ``EDGEFIT_NO_NUMBA=1`` to force the NumPy
path.  Both implement the same recurrences in the same order and agree to
about 1e-13 (tested).  Memory is bounded: the NumPy path processes spheres
in chunks of at most ``chunk_terms`` stored terms.

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
# Compiled kernel: groups of LANES spheres side by side
# --------------------------------------------------------------------------
# A group of spheres runs the recurrences of the NumPy path below, in the
# same order and with the same operations for every sphere, with the
# spheres as the inner loop: numba's loop vectoriser then executes several
# spheres at once in SIMD registers.  (The loops must contain no
# Python-error branches, so the kernels are compiled with
# error_model="numpy"; the divisors are nonzero for valid input.  Each
# sphere's quantities are one row of a flat work array whose row length is
# the constant LANES, so the vectoriser sees constant distances between
# them.)  A lane whose sphere needs no more orders keeps its sums (the new
# value is selected away), so each sphere's numbers are bit for bit those
# of a loop over that sphere alone.
#
# The downward recurrences run from N = n_start to 1 before the upward sums
# can start at n = 1.  Storing D_n(mx), D_n(x) and E_n of every order
# (5 doubles per order and sphere) would take megabytes for x ~ 1e4 and run
# at memory speed; instead the downward pass keeps its state at every
# CHUNK-th order only (a checkpoint), and the upward pass recomputes each
# chunk of orders from its checkpoint into a small buffer that stays in the
# level-1 cache.  Recomputing from a stored state repeats the same
# operations, so the values are the same.

#: Spheres processed side by side by the compiled kernel.
LANES = 16
#: Orders per recomputed chunk of the downward recurrences.
CHUNK = 32
#: Groups needing at most this many orders keep all of them from one
#: downward pass (at most 330 kB), without checkpoints.
DIRECT_ORDERS = 512

# Rows of the work array of a group (each row LANES long, one entry a sphere):
# parameters,
_IZR, _IZI, _IVX, _CR, _CI, _X, _MR, _MI, _M1R, _M1I, _NST, _NSP = range(12)
# the downward state (D(mx) real, imaginary, D(x), E real, imaginary) of
# the current order, 5 rows from _D,
_D = 12
# and the upward state: psi_{n-1}, psi_{n-2}, chi_{n-1}, chi_{n-2}, the three
# sums, a_{n-1} and b_{n-1} (real, imaginary).
_PM1, _PM2, _CM1, _CM2, _SCA, _ABS, _GS, _APR, _API, _BPR, _BPI = range(17, 28)
# psi_n of the current order
_PSI = 28
_NROWS = 29


def _lane_setup(m, mm1, x):
    """1/(mx) (real, imaginary), 1/x and c = (m-1)/(mx) (real, imaginary)."""
    z = m * x
    inv_z = 1.0 / z
    inv_x = 1.0 / x
    c = mm1 * inv_z
    return inv_z.real, inv_z.imag, inv_x, c.real, c.imag


def _down_range(w, cp, buf, n_hi, n_lo, base, to_buf):
    """Steps n = n_hi .. n_lo (n -> n-1) of the downward recurrences of all
    lanes (state zero while n > n_start of the lane).  The state of order
    r = n-1 goes to buf row r - base - 1 (``to_buf``) or, when r is a
    multiple of CHUNK, to the checkpoint cp[r // CHUNK].  Complex
    reciprocals are written conj(b)/|b|^2."""
    nl = LANES
    nrow = buf.size // (5 * nl)
    for n in range(n_hi, n_lo - 1, -1):
        nf = float(n)
        for k in range(nl):
            izr = w[_IZR * nl + k]
            izi = w[_IZI * nl + k]
            ivx = w[_IVX * nl + k]
            cnr = w[_CR * nl + k] * nf
            cni = w[_CI * nl + k] * nf
            ar = w[_D * nl + k] + nf * izr
            ai = w[(_D + 1) * nl + k] + nf * izi
            s2 = 1.0 / (ar * ar + ai * ai)
            iar = ar * s2
            iai = -ai * s2
            ib = 1.0 / (w[(_D + 2) * nl + k] + nf * ivx)
            tr = (w[(_D + 3) * nl + k] - cnr) * ib
            ti = (w[(_D + 4) * nl + k] - cni) * ib
            act = nf <= w[_NST * nl + k]
            w[(_D + 3) * nl + k] = (tr * iar - ti * iai - cnr) if act else 0.0
            w[(_D + 4) * nl + k] = (tr * iai + ti * iar - cni) if act else 0.0
            w[_D * nl + k] = (nf * izr - iar) if act else 0.0
            w[(_D + 1) * nl + k] = (nf * izi - iai) if act else 0.0
            w[(_D + 2) * nl + k] = (nf * ivx - ib) if act else 0.0
        r = n - 1
        if to_buf:
            t = r - base - 1
            if t < nrow:
                for q in range(5):
                    for k in range(nl):
                        buf[(5 * t + q) * nl + k] = w[(_D + q) * nl + k]
        elif r % CHUNK == 0:
            t = r // CHUNK
            for q in range(5):
                for k in range(nl):
                    cp[(5 * t + q) * nl + k] = w[(_D + q) * nl + k]


def _up_range(w, buf, g1, g2, n_lo, n_hi, base, xmin):
    """Orders n = n_lo .. n_hi of the upward recurrences and sums of all
    lanes; buf row n - base - 1 holds the downward values of order n.
    With xi = psi - i chi:  den_a = xi (D(mx) + m n/x) - m xi_{n-1},
    den_b = xi (m D(mx) + n/x) - xi_{n-1},
    a_n = psi (E - (m-1) D(x)) conj(den_a)/|den_a|^2,
    b_n = psi (m E + (m-1) D(x)) conj(den_b)/|den_b|^2 (module docstring),
    complex products written out in real and imaginary parts.  psi_n comes
    from the upward recurrence for n < x and from psi_{n-1} / (D_n(x) + n/x)
    otherwise; below xmin (the smallest x of the group) a loop without the
    division serves all lanes."""
    nl = LANES
    for n in range(n_lo, n_hi + 1):
        nf = float(n)
        f2 = float(2 * n - 1)
        wt = float(2 * n + 1)
        c1 = g1[n]
        c2 = g2[n]
        o = (n - base - 1) * 5 * nl
        if nf < xmin:
            for k in range(nl):
                w[_PSI * nl + k] = f2 * w[_IVX * nl + k] * w[_PM1 * nl + k] - w[_PM2 * nl + k]
        else:
            for k in range(nl):
                psi_m1 = w[_PM1 * nl + k]
                ni = nf * w[_IVX * nl + k]
                if nf < w[_X * nl + k]:
                    psi = f2 * w[_IVX * nl + k] * psi_m1 - w[_PM2 * nl + k]
                else:
                    psi = psi_m1 / (buf[o + 2 * nl + k] + ni)
                w[_PSI * nl + k] = psi
        for k in range(nl):
            inv_x = w[_IVX * nl + k]
            mr = w[_MR * nl + k]
            mi = w[_MI * nl + k]
            f = f2 * inv_x
            ni = nf * inv_x
            psi_m1 = w[_PM1 * nl + k]
            chi_m1 = w[_CM1 * nl + k]
            dr = buf[o + k]
            di = buf[o + nl + k]
            dxn = buf[o + 2 * nl + k]
            er = buf[o + 3 * nl + k]
            ei = buf[o + 4 * nl + k]
            psi = w[_PSI * nl + k]
            chi = f * chi_m1 - w[_CM2 * nl + k]
            ur = dr + mr * ni
            ui = di + mi * ni
            dar = (psi * ur + chi * ui) - (mr * psi_m1 + mi * chi_m1)
            dai = (psi * ui - chi * ur) - (mi * psi_m1 - mr * chi_m1)
            mdr = mr * dr - mi * di
            mdi = mr * di + mi * dr
            vr = mdr + ni
            dbr = (psi * vr + chi * mdi) - psi_m1
            dbi = (psi * mdi - chi * vr) + chi_m1
            qa = 1.0 / (dar * dar + dai * dai)
            qb = 1.0 / (dbr * dbr + dbi * dbi)
            m1r = w[_M1R * nl + k]
            m1i = w[_M1I * nl + k]
            pr = psi * (er - m1r * dxn)
            pi_ = psi * (ei - m1i * dxn)
            anr = (pr * dar + pi_ * dai) * qa
            ani = (pi_ * dar - pr * dai) * qa
            sr = psi * ((mr * er - mi * ei) + m1r * dxn)
            si = psi * ((mr * ei + mi * er) + m1i * dxn)
            bnr = (sr * dbr + si * dbi) * qb
            bni = (si * dbr - sr * dbi) * qb
            sca = w[_SCA * nl + k] + wt * (anr * anr + ani * ani + bnr * bnr + bni * bni)
            absn = w[_ABS * nl + k] + wt * (-(mr * di - mi * dr) * qa - mdi * qb)
            gs = w[_GS * nl + k]
            if n > 1:
                gs = gs + c1 * ((w[_APR * nl + k] * anr + w[_API * nl + k] * ani)
                                + (w[_BPR * nl + k] * bnr + w[_BPI * nl + k] * bni))
            gs = gs + c2 * (anr * bnr + ani * bni)
            act = nf <= w[_NSP * nl + k]
            w[_SCA * nl + k] = sca if act else w[_SCA * nl + k]
            w[_ABS * nl + k] = absn if act else w[_ABS * nl + k]
            w[_GS * nl + k] = gs if act else w[_GS * nl + k]
            w[_APR * nl + k] = anr
            w[_API * nl + k] = ani
            w[_BPR * nl + k] = bnr
            w[_BPI * nl + k] = bni
            w[_PM2 * nl + k] = psi_m1
            w[_CM2 * nl + k] = chi_m1
            w[_PM1 * nl + k] = psi
            w[_CM1 * nl + k] = chi


def _g_coefficients(nmax):
    """(n-1)(n+1)/n and (2n+1)/(n(n+1)) of the asymmetry sum, n = 0..nmax."""
    g1 = np.zeros(nmax + 1)
    g2 = np.zeros(nmax + 1)
    for n in range(1, nmax + 1):
        g1[n] = ((n - 1) * (n + 1)) / n
        g2[n] = (2 * n + 1) / (n * (n + 1))
    return g1, g2


def _group(m, mm1, x, nstop, nstart, idx, lo, hi, g1, g2, out):
    """Efficiencies of the spheres idx[lo:hi] (at most LANES; spare lanes
    repeat the last sphere and are not written) into out[:, idx[i]]."""
    nl = LANES
    kc = CHUNK
    w = np.zeros(_NROWS * nl)
    nsmax = 2
    ntop = 1
    xmin = np.inf
    for k in range(nl):
        i = idx[min(lo + k, hi - 1)]
        izr, izi, ivx, cr, ci = _lane_setup(m[i], mm1[i], x[i])
        w[_IZR * nl + k] = izr
        w[_IZI * nl + k] = izi
        w[_IVX * nl + k] = ivx
        w[_CR * nl + k] = cr
        w[_CI * nl + k] = ci
        w[_X * nl + k] = x[i]
        w[_MR * nl + k] = m[i].real
        w[_MI * nl + k] = m[i].imag
        w[_M1R * nl + k] = mm1[i].real
        w[_M1I * nl + k] = mm1[i].imag
        w[_NST * nl + k] = float(nstart[i])
        w[_NSP * nl + k] = float(nstop[i])
        nsmax = max(nsmax, nstart[i])
        ntop = max(ntop, nstop[i])
        xmin = min(xmin, x[i])
        w[_PM2 * nl + k] = np.cos(x[i])     # psi_{-1}
        w[_CM2 * nl + k] = -np.sin(x[i])    # chi_{-1}
        w[_PM1 * nl + k] = np.sin(x[i])     # psi_0
        w[_CM1 * nl + k] = np.cos(x[i])     # chi_0
    if ntop <= DIRECT_ORDERS:
        # small spheres: all orders 1 .. ntop kept from one downward pass
        buf = np.empty(ntop * 5 * nl)
        _down_range(w, buf, buf, nsmax, 2, 0, True)
        _up_range(w, buf, g1, g2, 1, ntop, 0, xmin)
    else:
        # downward pass keeping checkpoints cp[j] = state of order j * kc
        # (zero from n_start up) ...
        nchunk = (ntop - 1) // kc + 1
        cp = np.zeros((max(nsmax // kc, nchunk) + 1) * 5 * nl)
        buf = np.empty(kc * 5 * nl)
        _down_range(w, cp, buf, nsmax, 2, 0, False)
        # ... and the upward pass, a chunk of orders j kc + 1 .. (j + 1) kc
        # at a time
        for j in range(nchunk):
            base = j * kc
            o = (j + 1) * 5 * nl
            for q in range(5 * nl):
                w[_D * nl + q] = cp[o + q]
                buf[(kc - 1) * 5 * nl + q] = cp[o + q]
            _down_range(w, cp, buf, base + kc, base + 2, base, True)
            _up_range(w, buf, g1, g2, base + 1, min(base + kc, ntop), base, xmin)
    for k in range(hi - lo):
        i = idx[lo + k]
        inv_x = w[_IVX * nl + k]
        f = 2.0 * inv_x * inv_x
        qsca = f * w[_SCA * nl + k]
        qabs = f * w[_ABS * nl + k]
        out[0, i] = qsca + qabs
        out[1, i] = qsca
        out[2, i] = qabs
        out[3, i] = 2.0 * f * w[_GS * nl + k] / qsca if qsca > 0 else 0.0


def _groups_serial(m, mm1, x, nstop, nstart, idx, out):
    """All spheres, LANES at a time in the order idx (spheres of similar
    size together, so that few lanes idle)."""
    g1, g2 = _g_coefficients(nstop.max() + 1)
    for gi in range((x.size + LANES - 1) // LANES):
        lo = gi * LANES
        _group_kernel(m, mm1, x, nstop, nstart, idx, lo, min(lo + LANES, x.size),
                      g1, g2, out)


def _groups_parallel(m, mm1, x, nstop, nstart, idx, out):
    """:func:`_groups_serial` with the groups in parallel threads when
    compiled with parallel=True (``_prange`` becomes numba.prange).  A
    function of its own: numba's on-disk cache tells compiled versions of
    one function apart by argument types and bytecode, not by the parallel
    option, so one function compiled both ways would load either version
    for both."""
    g1, g2 = _g_coefficients(nstop.max() + 1)
    for gi in _prange((x.size + LANES - 1) // LANES):
        lo = gi * LANES
        _group_kernel(m, mm1, x, nstop, nstart, idx, lo, min(lo + LANES, x.size),
                      g1, g2, out)


# Names the group loops read from this module; the compiled versions get
# numba.prange and the compiled helpers instead (edgefit._jit.jit).
_prange = range
_group_kernel = _group

#: Below this many terms (sum of n_stop) the compiled loop runs on one thread,
#: where starting threads would cost more than it saves.
PARALLEL_MIN_TERMS = 200_000


@_jit.kernels
def _numba_kernels():
    """(parallel, serial) compiled group loops (built once per process;
    numba's on-disk cache makes later processes fast).  error_model="numpy"
    drops the zero-division checks that would stop the loop vectoriser."""
    nb = _jit.require("the compiled Mie kernel")
    em = "numpy"
    steps = {"_down_range": _jit.jit(_down_range, error_model=em),
             "_up_range": _jit.jit(_up_range, error_model=em),
             "_lane_setup": _jit.jit(_lane_setup, error_model=em)}
    group = _jit.jit(_group, globals=steps, error_model=em)
    names = {"_prange": nb.prange, "_group_kernel": group,
             "_g_coefficients": _jit.jit(_g_coefficients, error_model=em)}
    return (_jit.jit(_groups_parallel, parallel=True, globals=names, error_model=em),
            _jit.jit(_groups_serial, globals=names, error_model=em))


def numba_available():
    """True if the compiled (numba) back end can be used."""
    return _numba_kernels() is not None


# --------------------------------------------------------------------------
# Pure-NumPy path: the same recurrences, vectorised over spheres
# --------------------------------------------------------------------------
def _numpy_chunk(m, mm1, x, nstop, nstart, out):
    """Same algorithm as the compiled kernel (:func:`_group`) for a chunk of
    spheres (in place into out)."""
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


def _mie_flat(mf, mm1f, xf, backend="auto", chunk_terms=DEFAULT_CHUNK_TERMS):
    """(4, n) array of (qext, qsca, qabs, g) for checked 1-d contiguous
    arrays m (complex), m - 1 (complex) and x (float): the computation of
    :func:`mie_efficiencies` after its input checks."""
    if backend not in ("auto", "numba", "numpy"):
        raise ArgumentError(f"backend must be 'auto', 'numba' or 'numpy', not {backend!r}")
    nstop = n_terms(xf)
    nstart = _n_start(nstop, np.abs(mf * xf))
    out = np.empty((4, xf.size))
    kernels = None if backend == "numpy" else _numba_kernels(required=backend == "numba")
    if xf.size:
        if kernels is not None:
            order = np.argsort(nstart, kind="stable")
            if nstop.sum() >= PARALLEL_MIN_TERMS:
                # groups handed to the threads one at a time: they are sorted
                # by size, so equal contiguous shares would be unequal work
                with _jit.numba_module().parallel_chunksize(1):
                    kernels[0](mf, mm1f, xf, nstop, nstart, order, out)
            else:
                kernels[1](mf, mm1f, xf, nstop, nstart, order, out)
        else:
            _numpy_batch(mf, mm1f, xf, nstop, nstart, out, int(chunk_terms))
    return out


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
    out = _mie_flat(np.ascontiguousarray(m.ravel()), np.ascontiguousarray(mm1.ravel()),
                    np.ascontiguousarray(x.ravel()), backend, chunk_terms)
    res = [out[i].reshape(shape) for i in range(4)]
    if shape == ():
        res = [float(r) for r in res]
    return MieEfficiencies(*res)
