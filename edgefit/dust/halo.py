"""Fraction of dust-scattered light that stays in the extraction region.

X-rays scattered by grains leave the line of sight by small angles and
form a halo around the source.  Whatever part of the halo falls inside the
spectral extraction region is still counted, so the effective optical
depth of the dust is τ_abs + (1 − f_in) τ_sca.

Angular distribution (Rayleigh–Gans with a Gaussian form factor)
----------------------------------------------------------------
In the Rayleigh–Gans approximation the differential cross section of a
homogeneous sphere is proportional to the squared form factor
F(u)² = [3 (sin u − u cos u) / u³]², u ≈ k a θ (k = 2π/λ).  Expanding,
F² = 1 − u²/5 + O(u⁴) ≈ exp(−u²/5), i.e. a two-dimensional Gaussian in
the scattering angle θ with

.. math:: \\sigma_\\theta = \\frac{\\sqrt{5/2}}{k a}
          = 10.7' \\left(\\frac{1\\,\\mathrm{keV}}{E}\\right)
                  \\left(\\frac{0.1\\,\\mu\\mathrm{m}}{a}\\right),

the form used for halos by Mauche & Gorenstein 1986 (ApJ 302, 371) and
Mathis & Lee 1991 (ApJ 376, 490); the constant they quote is 10.4′ (from
memory).  Valid where Rayleigh–Gans holds, 2 k a |m − 1| ≪ 1: for
interstellar silicates above ≈ 1–2 keV for a ≲ 0.25 µm; below ≈ 1 keV and
for larger grains Mie theory gives less and differently shaped scattering
(Smith & Dwek 1998, ApJ 503, 831), so f_in from here is then a rough
guide only.

Geometry
--------
A single thin dust screen at fractional distance ``position`` = d_dust /
d_source from the observer (0: dust at the observer, 1: at the source)
sends light scattered by θ to an observed angle α = (1 − x) θ, so a region
of half-width α₀ keeps the light scattered by less than α₀ / (1 − x)
(Mathis & Lee 1991).  For a grating extraction the region is a strip
of half-width w across the dispersion (``geometry="strip"``): the
fraction is erf(θ_w / (√2 σ_θ)); photons displaced along the dispersion
direction land at a slightly wrong wavelength but are still extracted
(``along_halfwidth_arcsec`` limits that too).  ``geometry="circle"``
gives 1 − exp(−θ_r² / 2σ_θ²) for a circular region of radius α₀.

Units: energy keV, radius µm, angles arcsec (arguments) unless stated.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import erf

from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import PhysicsDataError
from .sizes import as_um

__all__ = ["rg_gaussian_width_arcmin", "fraction_in_region", "HaloGeometry"]

_RAD_TO_ARCMIN = 180.0 * 60.0 / math.pi


def rg_gaussian_width_arcmin(energy_kev: ArrayLike, a_um: ArrayLike) -> float | np.ndarray:
    """σ_θ = √(5/2) / (k a) in arcmin (Gaussian approximation to the
    Rayleigh–Gans form factor; see the module docstring)."""
    e = np.asarray(as_kev(energy_kev), dtype=float)
    a = np.asarray(as_um(a_um), dtype=float)
    k_per_um = 2 * np.pi / (HC_KEV_ANGSTROM / e * 1e-4)
    return math.sqrt(2.5) / (k_per_um * a) * _RAD_TO_ARCMIN


def fraction_in_region(energy_kev: ArrayLike, a_um: ArrayLike, halfwidth_arcsec: float,
                       position: float = 0.5, *, geometry: str = "strip",
                       along_halfwidth_arcsec: float | None = None) -> np.ndarray:
    """Fraction of the light scattered by one grain size that lands in the
    extraction region (broadcast over ``energy_kev`` and ``a_um``).

    Parameters
    ----------
    energy_kev : float, array_like or Quantity
    a_um : float, array_like or Quantity
        Grain radius, µm.
    halfwidth_arcsec : float
        Half-width of the extraction strip (or radius of the circle), arcsec.
    position : float
        Dust screen at d_dust / d_source from the observer, 0 <= x < 1.
    geometry : {"strip", "circle"}
    along_halfwidth_arcsec : float, optional
        For the strip: half-length along the dispersion direction (default
        unlimited).

    Returns
    -------
    ndarray
        f_in between 0 and 1.
    """
    if not 0 <= position < 1:
        raise PhysicsDataError(f"dust position must be in [0, 1), not {position}")
    if not halfwidth_arcsec > 0:
        raise PhysicsDataError("extraction half-width must be positive")
    sig = rg_gaussian_width_arcmin(energy_kev, a_um) * 60.0      # arcsec
    theta_w = halfwidth_arcsec / (1.0 - position)
    if geometry == "strip":
        out = erf(theta_w / (math.sqrt(2) * sig))
        if along_halfwidth_arcsec is not None:
            out = out * erf(along_halfwidth_arcsec / (1.0 - position) / (math.sqrt(2) * sig))
    elif geometry == "circle":
        out = -np.expm1(-0.5 * (theta_w / sig) ** 2)
    else:
        raise PhysicsDataError(f"geometry must be 'strip' or 'circle', not {geometry!r}")
    return out


@dataclass(frozen=True)
class HaloGeometry:
    """Extraction geometry for the dust component's halo mode (see
    :func:`fraction_in_region` for the meaning of the fields)."""

    halfwidth_arcsec: float
    position: float = 0.5
    geometry: str = "strip"
    along_halfwidth_arcsec: float | None = None

    def __post_init__(self):
        fraction_in_region(1.0, 0.1, self.halfwidth_arcsec, self.position,
                           geometry=self.geometry,
                           along_halfwidth_arcsec=self.along_halfwidth_arcsec)

    def fraction(self, energy_kev, a_um):
        """f_in(E, a), broadcast."""
        return fraction_in_region(energy_kev, a_um, self.halfwidth_arcsec, self.position,
                                  geometry=self.geometry,
                                  along_halfwidth_arcsec=self.along_halfwidth_arcsec)
