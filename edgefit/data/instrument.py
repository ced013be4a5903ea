"""A built-in, invented grating-like instrument with two arms.

Used by ``edgefit simulate``, ``edgefit plan`` and the demo when the user
gives no response of their own.  Nothing here describes a real
observatory: the two arms ("high" and "medium" resolution) have made-up
line-spread widths, channel sizes and effective areas, chosen to be of
the order that makes the Si K edge of a bright Galactic source measurable
in about 100 ks.  Every response made here carries ``meta['simulated'] =
True`` and its OGIP files are marked simulated.

Each arm's response is :func:`~edgefit.data.response.gaussian_response`
(a Gaussian line-spread function of constant FWHM in wavelength, channels
in wavelength order, as a dispersive grating's are) with an effective area
that varies linearly with energy around its value at
:data:`AREA_REFERENCE_KEV`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._units import HC_KEV_ANGSTROM
from ..errors import EdgefitError
from .response import Response, gaussian_response

__all__ = ["GratingArm", "ARMS", "AREA_REFERENCE_KEV", "DEFAULT_BAND_KEV",
           "ENERGY_STEP_KEV", "arm_response", "grating_responses"]

#: Energy at which an arm's effective area is quoted (keV).
AREA_REFERENCE_KEV = 1.9
#: Default band of the built-in responses (keV): the Si K edge region.
DEFAULT_BAND_KEV = (1.6, 2.2)
#: Width of the model energy bins (keV): a fifth of the high arm's FWHM
#: at the Si K edge (0.012 A is 3.3 eV there).
ENERGY_STEP_KEV = 0.0005


@dataclass(frozen=True)
class GratingArm:
    """One arm of the invented instrument (all values made up)."""

    name: str
    label: str
    fwhm_angstrom: float      # line-spread FWHM, constant in wavelength
    area_cm2: float           # effective area at AREA_REFERENCE_KEV
    area_slope: float         # fractional change of the area per keV
    channel_angstrom: float   # channel width
    order: int                # grating order recorded in the PHA (TG_M)

    def area(self, energy_kev):
        """Effective area (cm^2) at ``energy_kev``: linear in energy,
        never negative."""
        e = np.asarray(energy_kev, dtype=float)
        return np.maximum(self.area_cm2 * (1.0 + self.area_slope * (e - AREA_REFERENCE_KEV)),
                          0.0)


#: The two arms of the built-in instrument (invented numbers).
ARMS = {
    "high": GratingArm("high", "high-resolution arm (simulated)", 0.012, 30.0, 0.3,
                       0.0025, -1),
    "medium": GratingArm("medium", "medium-resolution arm (simulated)", 0.023, 60.0, 0.3,
                         0.005, 1),
}


def arm_response(arm="high", band_kev=DEFAULT_BAND_KEV, energy_step_kev=ENERGY_STEP_KEV,
                 area_scale=1.0) -> Response:
    """The response of one arm over ``band_kev`` = (lo, hi) in keV.

    The model energy grid runs from 2 % below to 2 % above the band (so
    that the line-spread function near the band's ends is complete) in
    steps of ``energy_step_kev``; the channels cover the band in wavelength
    steps of the arm's channel width.  ``area_scale`` multiplies the area
    (e.g. to stand for a brighter or fainter source in planning).
    """
    if isinstance(arm, str):
        if arm not in ARMS:
            raise EdgefitError(f"unknown instrument arm {arm!r}; the built-in instrument "
                               f"has {sorted(ARMS)}")
        arm = ARMS[arm]
    lo, hi = (float(x) for x in band_kev)
    if not (0 < lo < hi):
        raise EdgefitError(f"band {band_kev!r}: needs 0 < lo < hi (keV)")
    n_en = int(np.ceil((1.04 * hi - 0.98 * lo) / energy_step_kev))
    energy = np.linspace(0.98 * lo, 0.98 * lo + n_en * energy_step_kev, n_en + 1)
    lam_lo, lam_hi = HC_KEV_ANGSTROM / hi, HC_KEV_ANGSTROM / lo
    n_ch = max(int(round((lam_hi - lam_lo) / arm.channel_angstrom)), 1)
    channels = HC_KEV_ANGSTROM / np.linspace(lam_lo, lam_lo + n_ch * arm.channel_angstrom,
                                             n_ch + 1)
    scale = float(area_scale)
    return gaussian_response(energy, channels, arm.fwhm_angstrom,
                             lambda e: scale * arm.area(e), wavelength_order=True,
                             meta={"simulated": True, "arm": arm.name, "order": arm.order,
                                   "label": arm.label})


def grating_responses(arms=("high", "medium"), band_kev=DEFAULT_BAND_KEV,
                      energy_step_kev=ENERGY_STEP_KEV, area_scale=1.0) -> list[Response]:
    """Responses of several arms (default both), in the order given."""
    return [arm_response(a, band_kev, energy_step_kev, area_scale) for a in arms]
