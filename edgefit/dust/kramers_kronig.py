"""Kramers–Kronig transform from f2 (absorptive) to f1 (dispersive).

The anomalous scattering factors of an atom (or of a formula unit, summing
its atoms) obey (Henke, Gullikson & Davis 1993, ADNDT 54, 181, eq. 8)

.. math::

    f_1(E) = Z^* - \\frac{2}{\\pi}\\, \\mathrm{PV}\\!\\int_0^\\infty
             \\frac{\\varepsilon\\, f_2(\\varepsilon)}{\\varepsilon^2 - E^2}\\,
             d\\varepsilon,
    \\qquad Z^* = Z - (Z/82.5)^{2.37},

where Z* carries the relativistic correction.  The same transform, without
Z*, maps a *change* Δf2 (e.g. near-edge fine structure measured in the
laboratory) to the change Δf1 it implies.

Numerics
--------
f2 is taken as piecewise linear between its tabulated nodes, and the
principal-value integral over every segment is done in closed form: with
f2 = a + b ε on a segment,

.. math::

    \\int \\frac{\\varepsilon (a + b\\varepsilon)}{\\varepsilon^2 - E^2}
    d\\varepsilon = \\tfrac12 (a + bE) \\ln|\\varepsilon - E|
    + \\tfrac12 (a - bE) \\ln(\\varepsilon + E) + b\\varepsilon .

Summed over segments, the singular ``ln|ε − E|`` terms at a node carry the
coefficient ½ (b_{j-1} − b_j)(E − x_j), which vanishes at E = x_j, so the
principal value is finite and exact for the interpolant.  Beyond the
tabulated range the optional tails take f2 constant below the first node
and f2 ∝ ε^-2 above the last (the high-energy form of photoabsorption).
Cost: O(N_nodes × N_out) memory and time; a few thousand by a few
thousand is a fraction of a second.
"""
from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from .._units import as_kev
from ..errors import PhysicsDataError

__all__ = ["relativistic_z_star", "kk_principal_value", "kk_f1_from_f2", "kk_delta_f1"]


def relativistic_z_star(z: float) -> float:
    """Z* = Z − (Z/82.5)^2.37, the high-energy limit of f1 including the
    relativistic correction (Henke, Gullikson & Davis 1993, ADNDT 54, 181)."""
    z = float(z)
    return z - (z / 82.5) ** 2.37


def _xlogx(c, d):
    """c * ln|d| with the term set to 0 where d == 0 (there c == 0 too)."""
    ad = np.abs(d)
    safe = np.where(ad > 0, ad, 1.0)
    return np.where(ad > 0, c * np.log(safe), 0.0)


def kk_principal_value(energy_kev: ArrayLike, f2: ArrayLike, energy_out_kev: ArrayLike, *,
                       tails: bool = True,
                       chunk: int = 512) -> float | np.ndarray:
    """PV ∫ ε f2(ε) / (ε² − E²) dε for piecewise-linear f2.

    Parameters
    ----------
    energy_kev : array_like
        Strictly increasing, positive node energies (keV).
    f2 : array_like
        f2 at the nodes (electrons; any consistent unit works).
    energy_out_kev : array_like or float
        Energies E (keV) at which to evaluate the integral; must be positive
        and distinct from the first and last node if ``tails`` is on.
    tails : bool
        Add f2 = f2[0] for 0 < ε < ε_0 and f2 = f2[-1] (ε_N/ε)² for ε > ε_N.
    chunk : int
        Output energies processed at once (bounds memory).

    Returns
    -------
    ndarray
        The principal-value integral (units of f2), same shape as
        ``energy_out_kev``.
    """
    x = np.asarray(as_kev(energy_kev, "energy"), dtype=float)
    y = np.asarray(f2, dtype=float)
    if x.ndim != 1 or x.shape != y.shape or x.size < 2:
        raise PhysicsDataError("Kramers-Kronig: energy and f2 must be 1-d arrays of "
                               "equal length >= 2")
    if np.any(np.diff(x) <= 0) or x[0] <= 0 or not np.all(np.isfinite(y)):
        raise PhysicsDataError("Kramers-Kronig: energies must be positive and strictly "
                               "increasing, f2 finite")
    eout = np.asarray(as_kev(energy_out_kev, "energy"), dtype=float)
    scalar = eout.ndim == 0
    eflat = np.atleast_1d(eout).ravel()
    if np.any(eflat <= 0) or not np.all(np.isfinite(eflat)):
        raise PhysicsDataError("Kramers-Kronig: output energies must be positive")
    b = np.diff(y) / np.diff(x)                      # slopes per segment
    a = y[:-1] - b * x[:-1]                          # intercepts per segment
    out = np.empty_like(eflat)
    for start in range(0, eflat.size, chunk):
        e = eflat[start:start + chunk, None]
        # regular part: sum_k G_k(x_{k+1}) - G_k(x_k)
        g_hi = 0.5 * (a - b * e) * np.log(x[1:] + e) + b * x[1:]
        g_lo = 0.5 * (a - b * e) * np.log(x[:-1] + e) + b * x[:-1]
        total = np.sum(g_hi - g_lo, axis=1)
        # singular part grouped by node
        d = e - x  # (n_e, n_nodes)
        total += np.sum(_xlogx(0.5 * (b[:-1] - b[1:]) * d[:, 1:-1], d[:, 1:-1]), axis=1)
        total += _xlogx(0.5 * (y[-1] + b[-1] * d[:, -1]), d[:, -1])
        total -= _xlogx(0.5 * (y[0] + b[0] * d[:, 0]), d[:, 0])
        if tails:
            e1 = e[:, 0]
            with np.errstate(divide="ignore"):
                low = 0.5 * y[0] * np.log(np.abs(x[0] ** 2 - e1 ** 2) / e1 ** 2)
                high = -y[-1] * x[-1] ** 2 / (2 * e1 ** 2) * np.log(
                    np.abs(1.0 - e1 ** 2 / x[-1] ** 2))
            total += low + high
        out[start:start + chunk] = total
    if not np.all(np.isfinite(out)):
        raise PhysicsDataError("Kramers-Kronig: output energy coincides with the end of "
                               "the tabulated range; move it inside")
    return float(out[0]) if scalar else out.reshape(eout.shape)


def kk_f1_from_f2(energy_kev: ArrayLike, f2: ArrayLike, energy_out_kev: ArrayLike, z: float, *,
                  tails: bool = True) -> float | np.ndarray:
    """f1 from f2 by the Kramers–Kronig relation (Henke et al. 1993, eq. 8).

    f1(E) = Z* − (2/π) PV ∫ ε f2(ε)/(ε² − E²) dε with Z* from
    :func:`relativistic_z_star`.  ``f2`` should cover a wide energy range
    (tens of eV to hundreds of keV) for the absolute f1 to be accurate;
    see :func:`kk_principal_value` for the numerics and the tails.

    Parameters
    ----------
    energy_kev, f2 : array_like
        Tabulated f2 (electrons/atom) at increasing energies (keV).
    energy_out_kev : array_like or float
        Energies (keV) for f1.
    z : float
        Atomic number (or, for a formula unit, the sum of Z over its atoms
        -- then pass the sum of the atoms' Z* yourself via ``z`` and note
        that the relativistic term is not additive; the difference is
        below 0.01 electron for Z < 30).

    Returns
    -------
    f1 : float or ndarray
        Electrons per atom, including Z*.
    """
    pv = kk_principal_value(energy_kev, f2, energy_out_kev, tails=tails)
    return relativistic_z_star(z) - (2.0 / np.pi) * pv


def kk_delta_f1(energy_kev: ArrayLike, delta_f2: ArrayLike,
                energy_out_kev: ArrayLike) -> float | np.ndarray:
    """Change of f1 implied by a change Δf2 that vanishes outside its nodes.

    Δf1(E) = −(2/π) PV ∫ ε Δf2(ε)/(ε² − E²) dε (Henke et al. 1993, eq. 8,
    applied to the difference; Z* cancels).  Δf2 must go to zero at the
    first and last node (taper it) or the splice leaves a logarithmic
    spike there.
    """
    return -(2.0 / np.pi) * kk_principal_value(energy_kev, delta_f2, energy_out_kev,
                                               tails=False)
