"""Absorption-line physics: Voigt cross sections and bin-averaged transmission.

A line of absorption oscillator strength f at rest energy E0 has the
integrated cross section (e.g. Draine 2011, *Physics of the Interstellar and
Intergalactic Medium*, eq. 9.8, written per unit energy)

.. math:: \\int \\sigma\\, dE = \\pi r_e\\, h c\\, f
          \\;(= 1.0976\\times10^{-19} f\\ \\mathrm{cm^2\\,keV}),

distributed with a Voigt profile: a Gaussian of standard deviation
sigma_G = E0 b / (c sqrt 2) (b the Doppler parameter) convolved with a
Lorentzian of half width gamma = hbar Gamma / 2 (Gamma the damping
constant, s^-1).  The optically thin equivalent width is then
W_lambda = pi r_e N f lambda^2.

Lines are usually narrower than grating bins, so transmission is averaged
over each bin (:func:`binned_line_transmission`), which conserves
equivalent widths.  This is the inner loop of every fit with ion lines, so
it is built for speed without giving up accuracy (1e-4 per bin against a
direct evaluation, see the function's notes):

* bins near a line core are sub-sampled with two Gauss-Legendre points per
  sub-interval, where the Voigt function comes from a table of
  Re w(u + i a) (scipy.special.wofz, built once per process,
  :func:`voigt_table`) interpolated in u and a;
* bins in the wings get the closed-form bin average of the far-wing
  expansion (arctan plus Gaussian-moment terms) and exp(-<tau>);
* all lines are handled in one pass: a compiled loop when numba is
  importable (:func:`numba_available`; set ``EDGEFIT_NO_NUMBA=1`` to turn
  it off), else the vectorised NumPy body; both implement the same
  algorithm and agree to rounding (tests/test_lines.py).

The algorithm lives in :mod:`edgefit.physics.voigt`
(:func:`~edgefit.physics.voigt.binned_line_transmission`,
:func:`~edgefit.physics.voigt.grid_transmission`); its names are
re-exported here.

Line data for He-like and H-like O, Ne, Mg, Si are in
``cross_sections/ion_lines.txt`` (:func:`ion_lines`).

Units: energies keV, wavelengths Angstrom, b km/s, Gamma s^-1, columns cm^-2.
"""
from __future__ import annotations

import functools
import shlex
from dataclasses import dataclass

import numpy as np
from scipy.special import voigt_profile

from .._paths import data_file
from .._units import HC_KEV_ANGSTROM
from ..errors import PhysicsDataError
from .atomic import CLASSICAL_ELECTRON_RADIUS_CM

__all__ = ["IonLine", "ion_lines", "ion_keys", "SPEED_OF_LIGHT_KMS", "HBAR_KEV_S",
           "integrated_cross_section", "doppler_sigma", "lorentz_hwhm",
           "voigt_cross_section", "thin_equivalent_width", "binned_line_transmission",
           "line_grid", "voigt_table", "voigt_fast", "numba_available"]

#: Speed of light, km/s (exact).
SPEED_OF_LIGHT_KMS = 299792.458
#: Reduced Planck constant, keV s (CODATA 2018).
HBAR_KEV_S = 6.582119569e-19
_SQRT2 = np.sqrt(2.0)
#: pi r_e h c in cm^2 keV: integral of the cross section over energy per unit f.
_PI_RE_HC = np.pi * CLASSICAL_ELECTRON_RADIUS_CM * HC_KEV_ANGSTROM * 1e-8


@dataclass(frozen=True)
class IonLine:
    """One tabulated line.  ``wavelength`` in Angstrom (vacuum), ``energy`` keV,
    ``gamma`` = damping constant in s^-1, ``status`` how the values were
    obtained (see the data file header)."""

    ion: str
    key: str
    label: str
    transition: str
    wavelength: float
    f: float
    g_lower: int
    g_upper: int
    gamma: float
    status: str

    @property
    def energy(self) -> float:
        return HC_KEV_ANGSTROM / self.wavelength


@functools.lru_cache(maxsize=1)
def _load_lines() -> tuple[IonLine, ...]:
    path = data_file("ion_lines.txt")
    out = []
    with open(path, encoding="ascii") as fh:
        for n, line in enumerate(fh, 1):
            if line.startswith("#") or not line.strip():
                continue
            parts = shlex.split(line)
            if len(parts) != 10:
                raise PhysicsDataError(f"{path}, line {n}: expected 10 fields")
            ion, key, label, tr, lam, f, gl, gu, a, stat = parts
            out.append(IonLine(ion.replace("_", " "), key, label, tr, float(lam), float(f),
                               int(gl), int(gu), float(a), stat))
    return tuple(out)


def ion_lines(ion: str | None = None) -> tuple[IonLine, ...]:
    """Tabulated lines, all or those of one ion (``"Si XIV"`` or key ``"si14"``)."""
    lines = _load_lines()
    if ion is None:
        return lines
    want = ion.strip().lower().replace(" ", "")
    sel = tuple(ln for ln in lines if ln.key == want or ln.ion.lower().replace(" ", "") == want)
    if not sel:
        raise PhysicsDataError(f"no line data for ion {ion!r}; have "
                               f"{', '.join(dict.fromkeys(ln.ion for ln in lines))}")
    return sel


def ion_keys() -> tuple[str, ...]:
    """Keys of the tabulated ions (``"o7"``, ``"o8"``, ..., ``"si14"``), in file order."""
    return tuple(dict.fromkeys(ln.key for ln in _load_lines()))


def integrated_cross_section(f):
    """Energy-integrated cross section pi r_e h c f, in cm^2 keV."""
    return _PI_RE_HC * np.asarray(f, dtype=float)


def doppler_sigma(energy_kev, b_kms):
    """Gaussian standard deviation (keV) of a line at ``energy_kev`` with
    Doppler parameter b (km/s): sigma = E b / (c sqrt 2)."""
    return np.asarray(energy_kev, dtype=float) * np.asarray(b_kms, dtype=float) \
        / (SPEED_OF_LIGHT_KMS * _SQRT2)


def lorentz_hwhm(gamma_s):
    """Lorentzian half width at half maximum (keV) for damping constant
    Gamma (s^-1): hbar Gamma / 2."""
    return HBAR_KEV_S * np.asarray(gamma_s, dtype=float) / 2.0


def voigt_cross_section(energy_kev, e0_kev, f, b_kms, gamma_s):
    """Line cross section per absorber (cm^2) at ``energy_kev``:
    pi r_e h c f V(E - E0; sigma_G, gamma), with V the unit-area Voigt
    profile (scipy.special.voigt_profile)."""
    e = np.asarray(energy_kev, dtype=float)
    return _PI_RE_HC * f * voigt_profile(e - e0_kev, doppler_sigma(e0_kev, b_kms),
                                         lorentz_hwhm(gamma_s))


def thin_equivalent_width(column_cm2, f, wavelength_angstrom):
    """Optically thin equivalent width in Angstrom: W = pi r_e N f lambda^2."""
    return np.pi * CLASSICAL_ELECTRON_RADIUS_CM * column_cm2 * f \
        * (wavelength_angstrom * 1e-8) ** 2 / 1e-8


# The bin-averaged transmission (algorithm and numba kernel) lives in
# edgefit.physics.voigt; its public names stay importable from here.
from .voigt import (binned_line_transmission, line_grid, numba_available,  # noqa: E402
                    voigt_fast, voigt_table)
