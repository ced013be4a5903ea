"""Photoabsorption by atomic and molecular hydrogen and by helium.

* H I and He I: analytic fits of Verner, Ferland, Korista & Yakovlev 1996
  (ApJ 465, 487, eq. 1 and Table 1), read from
  ``cross_sections/hydrogen_helium.txt``:

  .. math::

     \\sigma(E) = \\sigma_0 F(y),\\quad x = E/E_0 - y_0,\\quad
     y = \\sqrt{x^2 + y_1^2},

     F(y) = [(x-1)^2 + y_w^2]\\, y^{0.5P - 5.5}\\, (1 + \\sqrt{y/y_a})^{-P}

  (sigma0 in Mb = 1e-18 cm^2; zero below the threshold E_th).
* H2 per molecule: ``H2_TO_HI`` x sigma(H I).  At X-ray energies the H2
  cross section per molecule is about 2.85 times the atomic one (Wilms,
  Allen & McCray 2000, ApJ 542, 914, after the calculation of Yan,
  Sadeghpour & Dalgarno 1998, ApJ 496, 1044).  **The factor 2.85 is from
  memory, not confirmed against the paper** (a search on 2026-12-01 reached
  only the opening of a stored copy of Wilms et al. 2000 and found no library
  or page quoting the factor with its source).

Units: energy keV (or spectral Quantity), cross sections cm^2 per atom
(per molecule for H2).
"""
from __future__ import annotations

import functools

import numpy as np

from .._paths import data_file
from .._units import as_kev
from ..errors import PhysicsDataError

__all__ = ["H2_TO_HI", "verner_fit", "sigma_hi", "sigma_hei", "sigma_h2",
           "hydrogenic_ground_state"]

#: sigma(H2) per molecule / sigma(H I) per atom at X-ray energies (from memory;
#: Wilms, Allen & McCray 2000 after Yan, Sadeghpour & Dalgarno 1998).
H2_TO_HI = 2.85


@functools.lru_cache(maxsize=1)
def _fits() -> dict[str, tuple[float, ...]]:
    path = data_file("hydrogen_helium.txt")
    out = {}
    with open(path, encoding="ascii") as fh:
        for line in fh:
            if line.startswith("#") or not line.strip():
                continue
            parts = line.split()
            out[parts[0]] = tuple(float(v) for v in parts[1:])
    for key in ("HI", "HeI"):
        if key not in out or len(out[key]) != 9:
            raise PhysicsDataError(f"{path}: missing or malformed row {key!r}")
    return out


def verner_fit(energy_ev, e_th, e_max, e0, sigma0, ya, p, yw, y0, y1):
    """Verner et al. (1996) eq. 1 in cm^2 for photon energies in eV (array);
    zero below ``e_th``.  Raises PhysicsDataError above ``e_max``."""
    e = np.asarray(energy_ev, dtype=float)
    if e.size and np.max(e) > e_max:
        raise PhysicsDataError(f"Verner et al. 1996 fit valid only up to {e_max:g} eV")
    x = e / e0 - y0
    y = np.sqrt(x * x + y1 * y1)
    f = ((x - 1.0) ** 2 + yw * yw) * y ** (0.5 * p - 5.5) * (1.0 + np.sqrt(y / ya)) ** (-p)
    return np.where(e >= e_th, sigma0 * 1e-18 * f, 0.0)


def _eval(key, energy_kev):
    scalar = np.ndim(energy_kev) == 0
    e = np.asarray(as_kev(energy_kev), dtype=float) * 1e3
    if e.size and not np.all(np.isfinite(e) & (e > 0)):
        raise PhysicsDataError("photon energies must be positive and finite")
    out = verner_fit(e, *_fits()[key])
    return float(out) if scalar else out


def sigma_hi(energy_kev):
    """Photoionisation cross section of atomic hydrogen (cm^2 per atom),
    Verner et al. 1996 fit.  ``energy_kev`` in keV or a spectral Quantity."""
    return _eval("HI", energy_kev)


def sigma_hei(energy_kev):
    """Photoionisation cross section of neutral helium (cm^2 per atom),
    Verner et al. 1996 fit (includes double ionisation as fitted there)."""
    return _eval("HeI", energy_kev)


def sigma_h2(energy_kev):
    """Photoabsorption cross section of H2 (cm^2 per molecule), taken as
    :data:`H2_TO_HI` x sigma(H I) (X-ray approximation; see module notes)."""
    return H2_TO_HI * sigma_hi(energy_kev)


def hydrogenic_ground_state(energy_kev, z=1):
    """Exact non-relativistic photoionisation cross section of a hydrogenic
    ion in its ground state (cm^2), used as an independent check:

    .. math::

       \\sigma = \\frac{A_0}{Z^2} \\left(\\frac{\\nu_1}{\\nu}\\right)^4
       \\frac{\\exp(4 - 4\\arctan(\\epsilon)/\\epsilon)}{1 - \\exp(-2\\pi/\\epsilon)},
       \\quad \\epsilon = \\sqrt{\\nu/\\nu_1 - 1},

    A_0 = 6.304e-18 cm^2, h nu_1 = 13.598 Z^2 eV (Osterbrock & Ferland 2006,
    Astrophysics of Gaseous Nebulae, eq. 2.4).
    """
    e = np.asarray(as_kev(energy_kev), dtype=float) * 1e3
    e1 = 13.598 * z * z
    ratio = np.maximum(e / e1, 1.0 + 1e-12)
    eps = np.sqrt(ratio - 1.0)
    out = 6.304e-18 / z ** 2 * ratio ** -4 * np.exp(4.0 - 4.0 * np.arctan(eps) / eps) \
        / -np.expm1(-2.0 * np.pi / eps)
    out = np.where(e >= e1, out, 0.0)
    return float(out) if np.ndim(energy_kev) == 0 else out
