r"""Automatic per-point choice between exact Mie theory and anomalous diffraction.

Anomalous diffraction (ADT, :mod:`edgefit.dust.adt`) costs a few operations
per point; exact Mie theory (:mod:`edgefit.dust.mie`) costs about
:math:`x + 4x^{1/3}` complex recurrence steps.  X-ray grains have
:math:`|m-1| \sim 10^{-4}`–:math:`10^{-2}` and :math:`x = 2\pi a/\lambda`
of 10–10^4, where ADT is accurate, so choosing ADT wherever it is within a
stated tolerance makes dust tables affordable.

Accuracy criterion
------------------
The relative error of ADT against exact Mie theory in :math:`Q_{ext}` and
:math:`Q_{abs}` was measured over :math:`1 \le x \le 3\times10^4`,
:math:`10^{-6} \le |m-1| \le 0.9` and all phases of :math:`m-1` in the
absorbing half plane (both signs of :math:`n-1`; including
:math:`\kappa = 0` and :math:`n = 1`).  It is bounded by

.. math::

    \epsilon_{ADT}(m, x) = 2.5|m-1|\,(1 + 6|m-1|) + \frac{\ln(4x) + 1}{x^2},

the first term being the internal-field / refraction error of the
straight-ray picture (measured :math:`\to 2|m-1|` for :math:`x \gg 1`
and small :math:`|m-1|`, growing faster above :math:`|m-1| \approx
0.01`), the second the finite-size (Rayleigh–Gans-like) error
at small phase shift (measured :math:`\approx \ln(4x)/x^2`).  ``auto`` uses
ADT where :math:`\epsilon_{ADT} \le` ``rtol`` and exact Mie elsewhere.  On
four seeded random samples of 20000 points each over the range above, the
largest measured ratio of the actual error to :math:`\epsilon_{ADT}` was
0.82 (seeds 1-4 of ``numpy.random.default_rng``; x and
:math:`|m-1|` log-uniform, phase uniform plus 10 % each of
:math:`\kappa = 0`, :math:`n-1 = 0` and :math:`n = 1` exactly; the
worst points have :math:`x > 10^4`, :math:`|m-1| \sim 10^{-2}` and weak
absorption, where the Q_abs error tends to :math:`2|n-1|`), so wherever ``auto`` picks ADT the error
in :math:`Q_{ext}` and :math:`Q_{abs}` is below ``rtol`` (checked by
``tests/test_adt.py``).  :math:`Q_{sca} = Q_{ext} - Q_{abs}` then has an
absolute error below ``rtol * (Q_ext + Q_abs)``; ``g`` is NaN at ADT
points (anomalous diffraction does not provide it).

For ``rtol`` = 1e-3 and the olivine index near the Si K edge
(:math:`|m-1| \approx 2.2\times10^{-4}`) ADT is used for
:math:`x \gtrsim 140`, i.e. grains above about 0.015 µm at 1.85 keV.
ADT can never meet ``rtol`` below about :math:`2.5|m-1|`; there ``auto``
is exact Mie everywhere.
"""
from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from .adt import _adt_kernels, _adt_q, adt_efficiencies
from .mie import MieEfficiencies, _mie_flat, _prepare_index, mie_efficiencies
from ..errors import ArgumentError

__all__ = ["efficiencies", "adt_error_bound", "DEFAULT_RTOL", "MAX_ERROR_RATIO"]

#: Default relative tolerance of the automatic choice.
DEFAULT_RTOL = 1e-3

#: Largest measured (actual ADT error) / adt_error_bound over the seeded
#: validation sample described in the module docstring.
MAX_ERROR_RATIO = 0.82


# The compiled path (edgefit.dust.adt._auto_loop) evaluates this bound per
# point with the same operations (edgefit.dust.adt._bound_point); change both
# together.
def adt_error_bound(m, x, *, m_minus_1=None):
    r"""Bound on the relative error of ADT in Q_ext and Q_abs.

    :math:`\epsilon_{ADT} = 2.5|m-1|(1 + 6|m-1|) + (\ln(4x) + 1)/x^2`, derived empirically
    against exact Mie theory (see the module docstring).

    Parameters
    ----------
    m : complex or array_like
        Refractive index (imaginary part >= 0).
    x : float or array_like
        Size parameter.
    m_minus_1 : complex or array_like, optional
        :math:`m-1` given directly.
    """
    mm1 = np.asarray(m_minus_1 if m_minus_1 is not None else np.asarray(m) - 1.0)
    x = np.asarray(x, dtype=float)
    r = np.abs(mm1)
    return 2.5 * r * (1.0 + 6.0 * r) + (np.log(4.0 * x) + 1.0) / (x * x)


def efficiencies(m: ArrayLike | None, x: ArrayLike, method: str = "auto",
                 rtol: float = DEFAULT_RTOL, *, m_minus_1: ArrayLike | None = None,
                 backend: str = "auto") -> MieEfficiencies:
    r"""Efficiencies of homogeneous spheres by exact Mie theory, ADT or an automatic mix.

    Parameters
    ----------
    m : complex or array_like
        Refractive index :math:`m = 1 - \delta + i\beta` (imaginary part
        >= 0, see :func:`edgefit.dust.mie.mie_efficiencies`).
    x : float or array_like
        Size parameter :math:`2\pi a/\lambda` (> 0); broadcasts with ``m``.
    method : {"auto", "mie", "adt"}
        "mie": exact everywhere; "adt": anomalous diffraction everywhere;
        "auto": ADT where :func:`adt_error_bound` <= ``rtol``, exact Mie
        elsewhere.
    rtol : float
        Relative accuracy demanded of Q_ext and Q_abs at ADT points
        (default 1e-3); must be in (0, 0.1].
    m_minus_1 : complex or array_like, optional
        :math:`m-1` given directly (precision for tiny :math:`|m-1|`).
    backend : str
        Passed to :func:`edgefit.dust.mie.mie_efficiencies`.

    Returns
    -------
    MieEfficiencies
        ``(qext, qsca, qabs, g)``; ``g`` is NaN where ADT was used.
    """
    if method == "mie":
        return mie_efficiencies(m, x, m_minus_1=m_minus_1, backend=backend)
    if method == "adt":
        return adt_efficiencies(m, x, m_minus_1=m_minus_1)
    if method != "auto":
        raise ArgumentError(f"method must be 'auto', 'mie' or 'adt', not {method!r}")
    if not (0 < rtol <= 0.1):
        raise ArgumentError("rtol must be in (0, 0.1]; ADT is not a useful "
                         "approximation beyond 10 %")
    m, mm1, x = _prepare_index(m, x, m_minus_1)
    scalar = x.ndim == 0
    kern = None if backend == "numpy" else _adt_kernels()
    if kern is not None:
        out = _auto_compiled(kern[1], mm1, x, rtol, backend)
    else:
        out = _auto_numpy(mm1, x, rtol, backend)
    if scalar:
        return MieEfficiencies(*(float(o) for o in out))
    return MieEfficiencies(*out)


def _auto_numpy(mm1, x, rtol, backend):
    """The automatic choice with array operations: [qext, qsca, qabs, g]
    for checked, broadcast m - 1 and x."""
    use_adt = adt_error_bound(None, x, m_minus_1=mm1) <= rtol
    out = [np.empty(x.shape) for _ in range(4)]
    if np.any(use_adt):
        # inputs checked above: the ADT computation without a second check
        for o, v in zip(out, _adt_q(mm1[use_adt], x[use_adt])):
            o[use_adt] = v
        out[3][use_adt] = np.nan
    exact = ~use_adt
    if np.any(exact):
        _exact_at(out, exact, mm1, x, backend)
    return out


def _auto_compiled(kern, mm1, x, rtol, backend):
    """The automatic choice with the compiled loop: the same bound, the
    same comparison and the same ADT and exact-Mie numbers as
    :func:`_auto_numpy` (ADT to a few units in the last place)."""
    mm1f = np.ascontiguousarray(mm1.ravel())
    xf = np.ascontiguousarray(x.ravel())
    n = xf.shape[0]
    out = [np.empty(x.shape) for _ in range(4)]
    flat = [o.reshape(-1) for o in out]
    idx = np.empty(n, dtype=np.intp)
    n_exact = kern(mm1f, xf, float(rtol), flat[0], flat[1], flat[2], flat[3], idx)
    if n_exact:
        _exact_at(flat, idx[:n_exact], mm1f, xf, backend)
    return out


def _exact_at(out, where, mm1, x, backend):
    """Exact Mie efficiencies into ``out`` (qext, qsca, qabs, g) at the
    points ``where`` (a mask or indices) of checked m - 1 and x arrays: the
    numbers of mie_efficiencies(None, x, m_minus_1=m - 1), without its
    second check of the inputs."""
    mm1e = mm1[where]
    for o, v in zip(out, _mie_flat(1.0 + mm1e, mm1e, x[where], backend)):
        o[where] = v

