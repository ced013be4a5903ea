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

import numpy as np
from numpy.typing import ArrayLike

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
