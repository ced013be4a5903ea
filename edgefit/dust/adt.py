r"""Anomalous diffraction (van de Hulst 1957) efficiencies for soft spheres.

For a sphere with :math:`|m - 1| \ll 1` and :math:`x \gg 1` each ray crosses
the sphere undeviated and only picks up a phase shift and an attenuation.
With :math:`m = n + i\kappa` (imaginary part positive for absorption, as in
:mod:`edgefit.dust.mie`) van de Hulst (1957, §11.22) gives

.. math::

    Q_{ext} = 2 - 4e^{-\rho\tan\beta}\frac{\cos\beta}{\rho}\sin(\rho-\beta)
      - 4e^{-\rho\tan\beta}\Big(\frac{\cos\beta}{\rho}\Big)^2\cos(\rho-2\beta)
      + 4\Big(\frac{\cos\beta}{\rho}\Big)^2\cos 2\beta,

:math:`\rho = 2x(n-1)`, :math:`\tan\beta = \kappa/(n-1)`, and
:math:`Q_{abs} = 2K(4x\kappa)` with

.. math::

    K(w) = \tfrac12 + \frac{e^{-w}}{w} + \frac{e^{-w} - 1}{w^2}.

The extinction formula is singular-looking for :math:`n - 1 < 0` (X-rays)
and for :math:`\kappa \to 0` or :math:`n \to 1`.  It is the real part of the
same function at a complex argument: with :math:`w = -2ix(m-1) = 2x\kappa
- 2ix(n-1) = \rho\tan\beta - i\rho`,

.. math::

    Q_{ext} = 4\,\mathrm{Re}\,K(w), \qquad Q_{abs} = 2K(2\,\mathrm{Re}\,w),
    \qquad Q_{sca} = Q_{ext} - Q_{abs},

which reproduces the expression above for any sign of :math:`n-1` and any
:math:`\kappa \ge 0` (K has real Taylor coefficients, so
:math:`K(\bar w) = \overline{K(w)}`).  :math:`K` is evaluated from its
Taylor series :math:`K(w) = \sum_{k\ge1} (-1)^{k+1}(k+1)w^k/(k+2)!`
(:math:`= w/3 - w^2/8 + \dots`) for :math:`|w| < 1`, which avoids the
cancellation of the closed form at small :math:`|w|`, and from the closed
form with ``expm1`` elsewhere.  Both limits are exact: :math:`Q_{abs} \to
8x\kappa/3` (volume absorption) and :math:`Q_{ext} \to \rho^2/2` (the
Rayleigh–Gans limit for :math:`x \gg 1`) for small arguments.

The asymmetry parameter is not given by anomalous diffraction; ``g`` is
returned as NaN.

References
----------
van de Hulst, H. C. 1957, *Light Scattering by Small Particles* (Wiley),
§11.2 and §11.22.
"""
from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
from numpy.typing import ArrayLike

from .. import _jit
from .mie import MieEfficiencies, _prepare_index

__all__ = ["adt_efficiencies", "adt_k"]

_NSERIES = 20
# Taylor coefficients of K: c_k = (-1)^(k+1) (k+1)/(k+2)!, k = 1.._NSERIES
_COEF = np.array([(-1) ** (k + 1) * (k + 1) / math.factorial(k + 2)
                  for k in range(1, _NSERIES + 1)])


def adt_k(w):
    r"""The anomalous-diffraction function :math:`K(w) = 1/2 + e^{-w}/w + (e^{-w}-1)/w^2`.

    Parameters
    ----------
    w : complex or array_like
        Argument, real or complex with :math:`\mathrm{Re}\,w \ge 0`.

    Returns
    -------
    complex ndarray or float
        K(w); the Taylor series (20 terms, truncation < 1e-19) is used for
        :math:`|w| < 1`, the closed form with ``expm1`` elsewhere.  Real
        input gives real output.  K(0) = 0.

    References
    ----------
    van de Hulst 1957, §11.22 (eq. for the absorption efficiency).
    """
    w_in = np.asarray(w)
    out = _k_real(w_in.astype(float)) if not np.iscomplexobj(w_in) else _k_complex(w_in)
    return out[()] if out.ndim == 0 else out


def _k_complex(w):
    """K(w) for a complex array (see :func:`adt_k`)."""
    w = w.astype(complex)
    small = np.abs(w) < 1.0
    out = np.empty_like(w)
    ws = w[small]
    acc = np.zeros_like(ws)
    for ck in _COEF[::-1]:
        acc = (acc + ck) * ws
    out[small] = acc
    wl = w[~small]
    with np.errstate(under="ignore"):
        out[~small] = 0.5 + np.exp(-wl) / wl + np.expm1(-wl) / (wl * wl)
    return out


def _k_real(w):
    """K(w) for a real array, in real arithmetic: the same numbers as
    ``_k_complex(w + 0j).real`` (the imaginary parts stay zero and never
    enter the real ones; a complex quotient by a real b is evaluated as a
    product with 1/b, as written here)."""
    small = np.abs(w) < 1.0
    out = np.empty_like(w)
    ws = w[small]
    acc = np.zeros_like(ws)
    for ck in _COEF[::-1]:        # acc = (acc + ck) * ws, in place
        np.add(acc, ck, out=acc)
        np.multiply(acc, ws, out=acc)
    out[small] = acc
    wl = w[~small]
    with np.errstate(under="ignore"):
        out[~small] = 0.5 + np.exp(-wl) * (1.0 / wl) + np.expm1(-wl) * (1.0 / (wl * wl))
    return out


def adt_efficiencies(m: ArrayLike | None, x: ArrayLike, *,
                     m_minus_1: ArrayLike | None = None) -> MieEfficiencies:
    r"""Anomalous-diffraction efficiencies (van de Hulst 1957) of spheres.

    Parameters
    ----------
    m : complex or array_like
        Refractive index :math:`m = 1 - \delta + i\beta`, imaginary part
        >= 0 (a negative one raises ValueError, as in
        :func:`edgefit.dust.mie.mie_efficiencies`).  Meaningful for
        :math:`|m-1| \ll 1`; any sign of :math:`n - 1`.
    x : float or array_like
        Size parameter :math:`2\pi a/\lambda` (> 0); meaningful for
        :math:`x \gg 1`.  Broadcasts with ``m``.
    m_minus_1 : complex or array_like, optional
        :math:`m - 1` given directly (avoids rounding ``1 - delta``).

    Returns
    -------
    MieEfficiencies
        ``(qext, qsca, qabs, g)`` with :math:`Q_{ext} = 4\,\mathrm{Re}\,K(w)`,
        :math:`w = -2ix(m-1)`, :math:`Q_{abs} = 2K(4x\kappa)`,
        :math:`Q_{sca} = Q_{ext} - Q_{abs}` and ``g`` = NaN (not provided by
        anomalous diffraction).

    Notes
    -----
    For where these agree with exact Mie theory, see
    :func:`edgefit.dust.efficiencies.efficiencies`.
    """
    _, mm1, x = _prepare_index(m, x, m_minus_1)
    kern = _adt_kernels()
    if kern is not None and x.size:
        mm1f = np.ascontiguousarray(mm1.ravel())
        xf = np.ascontiguousarray(x.ravel())
        qext, qsca, qabs = (np.empty(x.shape) for _ in range(3))
        kern[0](mm1f, xf, qext.reshape(-1), qsca.reshape(-1), qabs.reshape(-1))
    else:
        qext, qsca, qabs = _adt_q(mm1, x)
    if np.ndim(x) == 0:
        return MieEfficiencies(float(qext), float(qsca), float(qabs), float("nan"))
    return MieEfficiencies(qext, qsca, qabs, np.full(np.shape(x), np.nan))


def _adt_q(mm1, x):
    """(Q_ext, Q_sca, Q_abs) arrays for checked, broadcast m - 1 (complex)
    and x (float) arrays: the computation of :func:`adt_efficiencies`."""
    w = -2j * x * mm1
    qext = 4.0 * _k_complex(np.atleast_1d(w)).real.reshape(w.shape)
    qabs = 2.0 * _k_real(np.atleast_1d(2.0 * w.real)).reshape(w.shape)
    return qext, qext - qabs, qabs


# --------------------------------------------------------------------------
# Compiled path: the same operations per point, in real arithmetic
# --------------------------------------------------------------------------
# _adt_points evaluates, for selected points of flat arrays, the operations
# that _adt_q carries out on arrays: w = -2i x (m - 1) = 2x kappa -
# i 2x(n - 1); Re K(w) by the same 20-term series (|w| < 1) or the same
# closed form, each complex product, quotient, exp and expm1 written out in
# real and imaginary parts as NumPy forms them (products with fused
# multiply-adds, as NumPy's complex multiply does on x86-64 with FMA3;
# quotients scaled by the larger component of the divisor); K(2 Re w) as
# _k_real.  The series run with the coefficient loop outside and the
# points inside, so independent points fill the pipeline (and SIMD lanes)
# instead of one point's 20 dependent steps; each point's operations and
# their order are unchanged.  The numbers agree with _adt_q to the last
# bit where libm's exp/sin/cos agree with NumPy's (tests/test_adt.py checks
# 1e-13).


def _fma(a, b, c):
    """a * b + c rounded once (exact rationals; the compiled kernels get
    LLVM's fused multiply-add under this name instead)."""
    return float(Fraction(a) * Fraction(b) + Fraction(c))


def _re_quotient(ar, ai, br, bi):
    """Re[(ar + i ai) / (br + i bi)], scaled by the larger component of the
    divisor as NumPy's complex division is."""
    if abs(br) >= abs(bi):
        rat = bi / br
        scl = 1.0 / (br + bi * rat)
        return (ar + ai * rat) * scl
    rat = br / bi
    scl = 1.0 / (bi + br * rat)
    return (ar * rat + ai) * scl


def _k_closed(wr, wi):
    """Re K(w) from the closed form, w = wr + i wi, |w| >= 1."""
    ur = -wr
    ui = -wi
    eu = math.exp(ur)
    cu = math.cos(ui)
    su = math.sin(ui)
    e_r = eu * cu                 # exp(-w)
    e_i = eu * su
    h = math.sin(ui / 2)
    m_r = math.expm1(ur) * cu - 2 * h * h    # expm1(-w)
    m_i = eu * su
    t1 = _re_quotient(e_r, e_i, wr, wi)        # Re[exp(-w) / w]
    qr = _fma(wr, wr, -(wi * wi))  # w^2
    qi = _fma(wr, wi, wi * wr)
    t2 = _re_quotient(m_r, m_i, qr, qi)        # Re[expm1(-w) / w^2]
    return (0.5 + t1) + t2


def _adt_points(mm1, x, sel, nsel, qext, qsca, qabs):
    """ADT efficiencies of the points sel[:nsel] of flat arrays (m - 1
    complex) into qext, qsca, qabs at the same indices."""
    coef = _COEF
    nc = coef.shape[0]
    # the points' w, split by series / closed form for K(w) and K(2 Re w)
    wr = np.empty(nsel)
    wi = np.empty(nsel)
    kc = np.empty(nsel)
    kr = np.empty(nsel)
    cs = np.empty(nsel, dtype=np.intp)      # series points of K(w)
    rs = np.empty(nsel, dtype=np.intp)      # series points of K(2 Re w)
    ncs = 0
    nrs = 0
    for p in range(nsel):
        i = sel[p]
        z = mm1[i]
        two_x = 2.0 * x[i]
        a = two_x * z.imag
        b = -(two_x * z.real)
        wr[p] = a
        wi[p] = b
        if math.hypot(a, b) < 1.0:
            cs[ncs] = p
            ncs += 1
        else:
            kc[p] = _k_closed(a, b)
        v = 2.0 * a
        if abs(v) < 1.0:
            rs[nrs] = p
            nrs += 1
        else:
            kr[p] = 0.5 + math.exp(-v) * (1.0 / v) + math.expm1(-v) * (1.0 / (v * v))
    # series of K(w): coefficients outside, points inside
    sr = np.empty(ncs)
    si = np.empty(ncs)
    ar = np.zeros(ncs)
    ai = np.zeros(ncs)
    for q in range(ncs):
        sr[q] = wr[cs[q]]
        si[q] = wi[cs[q]]
    for j in range(nc - 1, -1, -1):
        c = coef[j]
        for q in range(ncs):
            br = ar[q] + c
            aiq = ai[q]
            ar[q] = _fma(br, sr[q], -(aiq * si[q]))
            ai[q] = _fma(br, si[q], aiq * sr[q])
    for q in range(ncs):
        kc[cs[q]] = ar[q]
    # series of K(2 Re w)
    vr = np.empty(nrs)
    acc = np.zeros(nrs)
    for q in range(nrs):
        vr[q] = 2.0 * wr[rs[q]]
    for j in range(nc - 1, -1, -1):
        c = coef[j]
        for q in range(nrs):
            acc[q] = (acc[q] + c) * vr[q]
    for q in range(nrs):
        kr[rs[q]] = acc[q]
    for p in range(nsel):
        i = sel[p]
        qe = 4.0 * kc[p]
        qa = 2.0 * kr[p]
        qext[i] = qe
        qsca[i] = qe - qa
        qabs[i] = qa


def _adt_loop(mm1, x, qext, qsca, qabs):
    """ADT efficiencies of every point of flat arrays (m - 1 complex)."""
    n = x.shape[0]
    _adt_points(mm1, x, np.arange(n), n, qext, qsca, qabs)


def _bound_point(r, x):
    """:func:`edgefit.dust.efficiencies.adt_error_bound` for one point,
    :math:`|m - 1| = r`, with the same operations in the same order."""
    return 2.5 * r * (1.0 + 6.0 * r) + (math.log(4.0 * x) + 1.0) / (x * x)


def _auto_loop(mm1, x, rtol, qext, qsca, qabs, g, idx):
    """The automatic ADT/Mie choice of
    :func:`edgefit.dust.efficiencies.efficiencies` over flat arrays: for each
    point the error bound; where it is <= rtol the ADT efficiencies (and
    g = NaN) into the outputs, elsewhere the point's index into ``idx``.
    Returns the number of indices written (the points left for exact Mie
    theory, in increasing order)."""
    n = x.shape[0]
    sel = np.empty(n, dtype=np.intp)
    nsel = 0
    n_exact = 0
    for i in range(n):
        z = mm1[i]
        if _bound_point(math.hypot(z.real, z.imag), x[i]) <= rtol:
            sel[nsel] = i
            nsel += 1
            g[i] = np.nan
        else:
            idx[n_exact] = i
            n_exact += 1
    _adt_points(mm1, x, sel, nsel, qext, qsca, qabs)
    return n_exact


# All compiled functions live in this file: numba's disk cache notices a
# change of the file that holds a function, not of the files of the
# compiled helpers it calls.
@_jit.kernels
def _adt_kernels():
    """(compiled _adt_loop, compiled _auto_loop)."""
    em = "numpy"
    fma = {"_fma": _jit.fma()}
    helpers = {**fma, "_re_quotient": _jit.jit(_re_quotient, error_model=em)}
    names = {**fma, "_k_closed": _jit.jit(_k_closed, globals=helpers, error_model=em)}
    names["_adt_points"] = _jit.jit(_adt_points, globals=names, error_model=em)
    names["_bound_point"] = _jit.jit(_bound_point, error_model=em)
    return (_jit.jit(_adt_loop, globals=names, error_model=em),
            _jit.jit(_auto_loop, globals=names, error_model=em))
