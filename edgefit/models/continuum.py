"""Additive continuum components: photon spectra integrated over energy bins.

Every component here returns photons cm^-2 s^-1 **integrated over each bin**
of an :class:`~edgefit.models.base.EnergyGrid` (keV).  Where the bin
integral has a closed form it is used (power law, Gaussian line); otherwise
a fixed Gauss--Legendre rule with :data:`BIN_NODES` nodes per bin is used
(blackbody, multicolour disk, bremsstrahlung).  On grating grids the bins
are narrow (< 1 % of the energy), where a 4-node rule is exact to better
than 1e-9 relative for these smooth spectra (checked against
``scipy.integrate.quad`` in ``tests/test_continuum.py``).

The pure spectral shapes (photons cm^-2 s^-1 keV^-1 at given energies) are
module-level functions; the components only wire parameters to them.

Registry names: ``photon_power_law``, ``multicolour_disk``,
``blackbody_photons``, ``thermal_brems``, ``line_gaussian``.
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np
from astropy import constants as const
from astropy import units as u
from scipy import integrate, special
from scipy.interpolate import CubicSpline

from .. import _jit
from ..errors import ModelError
from .base import ADDITIVE, Component, Param

__all__ = [
    "BIN_NODES", "photon_power_law_integral", "planck_photon_intensity",
    "blackbody_photon_flux", "disk_photon_flux", "born_gaunt_factor",
    "brems_photon_flux", "gaussian_line_integral", "bin_integral",
    "PhotonPowerLaw", "MulticolourDisk", "BlackbodyPhotons", "ThermalBrems",
    "LineGaussian",
]

#: Gauss--Legendre nodes per bin for spectra without a closed-form integral.
BIN_NODES = 4

# --- constants (astropy CODATA values) --------------------------------
_H_KEV_S = const.h.to_value(u.keV * u.s)
_C_CM_S = const.c.to_value(u.cm / u.s)
#: 2 / (h^3 c^2) with E in keV: Planck photon intensity prefactor,
#: photons s^-1 cm^-2 sr^-1 keV^-1 per keV^2.
_PLANCK_PHOTON = 2.0 / (_H_KEV_S ** 3 * _C_CM_S ** 2)
#: (1 km / 10 kpc)^2, the geometric factor of our radius/distance norms.
_KM_10KPC_SQ = (u.km.to(u.cm) / (10 * u.kpc).to_value(u.cm)) ** 2
_K_KEV = const.k_B.to_value(u.keV / u.K)
_ERG_PER_KEV = u.keV.to(u.erg)
#: Bremsstrahlung emissivity prefactor of Rybicki & Lightman (1979) eq. 5.14a,
#: 2^5 pi e^6 / (3 m c^3) * sqrt(2 pi / (3 k m)), cgs (~6.8e-38).
_BREMS_PREFACTOR = (2 ** 5 * math.pi * const.e.gauss.value ** 6
                    / (3 * const.m_e.cgs.value * const.c.cgs.value ** 3)
                    * math.sqrt(2 * math.pi / (3 * const.k_B.cgs.value * const.m_e.cgs.value)))


def _as_array(x):
    return np.asarray(x, dtype=float)


# --- power law ----------------------------------------------------------
def photon_power_law_integral(lo, hi, index, norm=1.0):
    """Integral of ``norm * E**-index`` from ``lo`` to ``hi`` (keV).

    Closed form: norm * (hi^(1-G) - lo^(1-G)) / (1-G), written as
    norm * lo^(1-G) * ln(hi/lo) * exprel((1-G) ln(hi/lo)) so that G = 1
    (where it becomes norm * ln(hi/lo)) needs no special case and has no
    cancellation.  ``norm`` is photons cm^-2 s^-1 keV^-1 at 1 keV.
    """
    lo, hi = _as_array(lo), _as_array(hi)
    lg = np.log(hi / lo)
    s = (1.0 - index) * lg
    out = norm * lo ** (1.0 - index) * lg * special.exprel(s)
    return out if out.ndim else float(out)


# --- Gauss-Legendre helper ---------------------------------------------
_GL_X, _GL_W = np.polynomial.legendre.leggauss(BIN_NODES)


def bin_nodes(lo, hi):
    """Energies (n_bins, BIN_NODES) and weights at which :func:`bin_integral`
    samples a spectrum; the weights already include the bin half-width."""
    lo, hi = _as_array(lo), _as_array(hi)
    half = 0.5 * (hi - lo)
    mid = 0.5 * (hi + lo)
    e = mid[:, None] + half[:, None] * _GL_X[None, :]
    w = half[:, None] * _GL_W[None, :]
    return e, w


def bin_integral(func, lo, hi, *args):
    """Integral of ``func(E, *args)`` over each bin [lo, hi] by
    ``BIN_NODES``-point Gauss--Legendre quadrature (exact for polynomials of
    degree 2*BIN_NODES-1 in E)."""
    e, w = bin_nodes(lo, hi)
    return np.sum(func(e, *args) * w, axis=1)


# --- blackbody ---------------------------------------------------------
def planck_photon_intensity(energy_kev, kt_kev):
    """Planck photon intensity, photons s^-1 cm^-2 sr^-1 keV^-1:
    I_N(E) = 2 E^2 / (h^3 c^2) / (exp(E/kT) - 1)  (Planck's law divided by
    the photon energy; Rybicki & Lightman 1979, eq. 1.51)."""
    e = _as_array(energy_kev)
    x = e / kt_kev
    with np.errstate(over="ignore"):
        out = _PLANCK_PHOTON * e * e / np.expm1(np.minimum(x, 700.0))
    out = np.where(x > 700.0, 0.0, out)
    return out if out.ndim else float(out)


def blackbody_photon_flux(energy_kev, kt_kev, norm=1.0):
    """Photon flux density of a spherical blackbody, photons cm^-2 s^-1 keV^-1:
    N(E) = pi I_N(E) (R/D)^2, with ``norm`` = (R / 1 km)^2 / (D / 10 kpc)^2."""
    return math.pi * norm * _KM_10KPC_SQ * planck_photon_intensity(energy_kev, kt_kev)


# --- multicolour disk --------------------------------------------------
def _disk_g_direct(a):
    """g(a) = int_a^inf t^(5/3) / (e^t - 1) dt.

    For a >= 1 by the series sum_k k^(-8/3) Gamma(8/3, k a) (expanding
    1/(e^t - 1) = sum_k e^(-k t)); for a < 1 as
    g(0) - int_0^a, with g(0) = Gamma(8/3) zeta(8/3) and the short integral
    by adaptive quadrature after t = a s^3 (smooth integrand).
    """
    if a >= 1.0:
        k = np.arange(1, int(750.0 / a) + 2, dtype=float)
        return float(special.gamma(8.0 / 3.0)
                     * np.sum(k ** (-8.0 / 3.0) * special.gammaincc(8.0 / 3.0, k * a)))

    def f(s):
        t = a * s ** 3
        return t ** (5.0 / 3.0) / math.expm1(t) * 3.0 * a * s * s if t > 0 else 0.0

    g0 = special.gamma(8.0 / 3.0) * special.zeta(8.0 / 3.0)
    return float(g0 - integrate.quad(f, 0.0, 1.0, epsabs=0, epsrel=1e-12)[0])


_DISK_LOGA = np.linspace(math.log(1e-6), math.log(700.0), 721)
_DISK_SPLINE = None


def _disk_g(a):
    """Interpolated g(a) (cubic spline of ln g on ln a; tabulated once with
    series/quadrature of :func:`_disk_g_direct`, relative accuracy ~2e-7).  For a < 1e-6,
    g = Gamma(8/3) zeta(8/3) - (3/5) a^(5/3) ... ~ g(1e-6)."""
    global _DISK_SPLINE
    if _DISK_SPLINE is None:
        vals = np.array([_disk_g_direct(math.exp(la)) for la in _DISK_LOGA])
        _DISK_SPLINE = CubicSpline(_DISK_LOGA, np.log(vals))
    a = _as_array(a)
    la = np.log(np.clip(a, 1e-6, 700.0))
    out = np.exp(_DISK_SPLINE(la))
    return np.where(a > 700.0, 0.0, out)


def disk_photon_flux(energy_kev, t_inner_kev, norm=1.0):
    """Photon flux density of a multicolour accretion disk,
    photons cm^-2 s^-1 keV^-1.

    The disk is a sum of blackbody annuli with the Shakura & Sunyaev (1973)
    temperature profile T(r) = T_in (r / r_in)^(-3/4) from r_in outward
    (the multicolour-disk picture of Mitsuda et al. 1984, PASJ 36, 741 and
    Makishima et al. 1986, ApJ 308, 635).  Seen at inclination i from
    distance D,

        N(E) = (cos i / D^2) int_{r_in}^inf 2 pi r I_N(E, T(r)) dr
             = (r_in^2 cos i / D^2) (8 pi / 3) (2 / h^3 c^2) E^2
               a^(-8/3) g(a),   a = E / T_in,
        g(a) = int_a^inf t^(5/3) / (e^t - 1) dt

    (substituting t = E / kT(r)).  ``norm`` = (r_in / 1 km)^2 cos i /
    (D / 10 kpc)^2.
    """
    e = _as_array(energy_kev)
    a = e / t_inner_kev
    with np.errstate(divide="ignore"):
        out = (norm * _KM_10KPC_SQ * (8.0 * math.pi / 3.0) * _PLANCK_PHOTON * e * e
               * a ** (-8.0 / 3.0) * _disk_g(a))
    return out if out.ndim else float(out)


# --- bremsstrahlung ----------------------------------------------------
def born_gaunt_factor(u_ratio):
    """Velocity-averaged free-free Gaunt factor in the Born approximation,
    g(u) = (sqrt(3)/pi) exp(u/2) K_0(u/2),  u = E / kT
    (Rybicki & Lightman 1979, ch. 5, Born approximation; valid for
    kT >> Z^2 x 13.6 eV, i.e. hot plasmas).  Computed with the exponentially
    scaled Bessel function k0e so that it does not overflow."""
    uu = _as_array(u_ratio)
    out = math.sqrt(3.0) / math.pi * special.k0e(0.5 * uu)
    return out if out.ndim else float(out)


def brems_photon_flux(energy_kev, kt_kev, norm=1.0):
    """Thermal bremsstrahlung photon flux density of a hydrogen plasma,
    photons cm^-2 s^-1 keV^-1.

    From the emissivity (Rybicki & Lightman 1979, eq. 5.14a, Z = 1)
    eps_nu = 6.8e-38 n_e n_i T^(-1/2) exp(-h nu / kT) g_ff  erg s^-1 cm^-3 Hz^-1,
    the photon flux at distance D is
    N(E) = eps_nu V / (4 pi D^2) / (h nu) / h, with g_ff the Born Gaunt factor
    (:func:`born_gaunt_factor`).  ``norm`` = int n_e n_i dV / (4 pi D^2)
    in units of 1e14 cm^-5.
    """
    e = _as_array(energy_kev)
    t_k = kt_kev / _K_KEV
    uu = e / kt_kev
    with np.errstate(over="ignore", under="ignore"):
        out = (norm * 1e14 * _BREMS_PREFACTOR / math.sqrt(t_k) * np.exp(-np.minimum(uu, 745.0))
               * born_gaunt_factor(uu) / (e * _ERG_PER_KEV) / _H_KEV_S)
    return out if out.ndim else float(out)


# --- Gaussian line -----------------------------------------------------
def gaussian_line_integral(lo, hi, center, sigma, norm=1.0):
    """Photons per bin of a Gaussian line of total flux ``norm``
    (photons cm^-2 s^-1): norm [Phi((hi-c)/s) - Phi((lo-c)/s)], Phi the
    standard normal CDF; the difference is taken on the side of the line
    where it does not cancel."""
    lo, hi = _as_array(lo), _as_array(hi)
    zl, zh = (lo - center) / sigma, (hi - center) / sigma
    upper = zl > 0  # both above the centre: use survival functions
    out = np.where(upper, special.ndtr(-zl) - special.ndtr(-zh),
                   special.ndtr(zh) - special.ndtr(zl))
    out = norm * out
    return out if out.ndim else float(out)


# --- compiled kernels ---------------------------------------------------
def _exprel(x):
    """(e^x - 1) / x: scipy.special.exprel's expm1(x) / x, and for
    |x| < 0.01 (a bin of a grating spectrum: x ~ 1e-3) its Taylor series
    to x^6 / 7!, whose remainder is below x^7 / 8! < 3e-19 (relative)."""
    if abs(x) < 0.01:
        return 1.0 + x * (0.5 + x * (1.0 / 6.0 + x * (1.0 / 24.0 + x * (
            1.0 / 120.0 + x * (1.0 / 720.0 + x * (1.0 / 5040.0))))))
    if x > 717.0:
        return math.inf
    return math.expm1(x) / x


def _power_law_loop(lg, log_lo, g1, add, has_add, norm, out):
    """:meth:`PhotonPowerLaw._evaluate`'s NumPy lines as one loop (the same
    operations in the same order per bin), compiled by numba."""
    for i in range(out.size):
        v = log_lo[i] * g1
        if has_add:
            v += add
        v = math.exp(v)
        v *= norm
        v *= lg[i]
        out[i] = v * _exprel(g1 * lg[i])


@_jit.kernels
def _numba_kernels():
    """The compiled continuum kernels (None without numba)."""
    exprel = _jit.jit(_exprel)
    return {"power_law": _jit.jit(_power_law_loop, globals={"_exprel": exprel})}


# --- components --------------------------------------------------------
class PhotonPowerLaw(Component):
    """Photon power law N(E) = norm (E / pivot)^-index (E in keV),
    integrated analytically over each bin (:func:`photon_power_law_integral`).

    ``pivot`` (keV, an option, default 1) is where ``norm`` is the photon
    flux density.  Placing it inside the fitted band (e.g. at the edge)
    makes norm and index nearly uncorrelated, which shortens MCMC
    autocorrelation times; the model is the same function either way.
    """

    kind = ADDITIVE
    registry_name = "photon_power_law"
    default_name = "pl"
    params = (
        Param("index", 2.0, -3.0, 10.0, "", "photon index (N ~ E^-index)"),
        Param("norm", 1.0, 0.0, 1e10, "ph cm-2 s-1 keV-1",
              "photon flux density at the pivot energy (default 1 keV)"),
    )

    def __init__(self, name=None, *, pivot=1.0, fixed=(), **values):
        from .._units import as_kev

        self.pivot = float(as_kev(pivot, "pivot"))
        if not (np.isfinite(self.pivot) and self.pivot > 0):
            raise ModelError(f"pivot must be a positive energy, got {pivot!r}")
        super().__init__(name, fixed=fixed, **values)

    def precompute(self, grid):
        return np.log(grid.hi / grid.lo), np.log(grid.lo), math.log(self.pivot)

    def _evaluate(self, grid, pre, index, norm):
        # photon_power_law_integral with log(hi/lo) and log(lo) computed once
        # per grid: lo^(1-G) as exp((1-G) ln lo) (equal to rounding); the
        # pivot multiplies by pivot^G
        lg, log_lo, log_p = pre
        g1 = 1.0 - index
        kern = _numba_kernels()
        if kern is not None:
            out = np.empty(lg.size)
            kern["power_law"](lg, log_lo, g1, index * log_p, bool(log_p), norm, out)
            return out
        out = log_lo * g1
        if log_p:
            out += index * log_p
        np.exp(out, out=out)
        out *= norm
        out *= lg
        out *= special.exprel(g1 * lg)
        return out


class _QuadratureContinuum(Component):
    """Shared part of continua integrated by Gauss--Legendre per bin."""

    kind = ADDITIVE

    def precompute(self, grid):
        return bin_nodes(grid.lo, grid.hi)

    @staticmethod
    def _shape(energy, *args: Any, **values: Any):
        # subclasses name their parameters: _shape(energy, kt, norm)
        raise NotImplementedError

    def _evaluate(self, grid, pre, **values):
        e, w = pre
        return np.sum(self._shape(e, **values) * w, axis=1)


class MulticolourDisk(_QuadratureContinuum):
    """Multicolour accretion disk (:func:`disk_photon_flux`).

    Parameters: ``t_inner`` (keV), the colour temperature at the inner
    radius; ``norm`` = (r_in / km)^2 cos i / (D / 10 kpc)^2.
    """

    registry_name = "multicolour_disk"
    default_name = "disk"
    params = (
        Param("t_inner", 1.0, 0.01, 20.0, "keV", "temperature at the inner disk radius"),
        Param("norm", 100.0, 0.0, 1e12, "", "(r_in/km)^2 cos(i) / (D/10 kpc)^2"),
    )

    @staticmethod
    def _shape(energy, t_inner, norm):
        return disk_photon_flux(energy, t_inner, norm)


class BlackbodyPhotons(_QuadratureContinuum):
    """Spherical blackbody (:func:`blackbody_photon_flux`); ``kt`` in keV,
    ``norm`` = (R / km)^2 / (D / 10 kpc)^2."""

    registry_name = "blackbody_photons"
    default_name = "blackbody"
    params = (
        Param("kt", 0.5, 0.01, 50.0, "keV", "temperature"),
        Param("norm", 100.0, 0.0, 1e12, "", "(R/km)^2 / (D/10 kpc)^2"),
    )

    @staticmethod
    def _shape(energy, kt, norm):
        return blackbody_photon_flux(energy, kt, norm)


class ThermalBrems(_QuadratureContinuum):
    """Thermal bremsstrahlung of a hydrogen plasma with the Born Gaunt
    factor (:func:`brems_photon_flux`); ``kt`` in keV, ``norm`` =
    int n_e n_i dV / (4 pi D^2) in 1e14 cm^-5."""

    registry_name = "thermal_brems"
    default_name = "brems"
    params = (
        Param("kt", 5.0, 0.05, 200.0, "keV", "plasma temperature"),
        Param("norm", 1.0, 0.0, 1e12, "1e14 cm-5", "emission measure / (4 pi D^2)"),
    )

    @staticmethod
    def _shape(energy, kt, norm):
        return brems_photon_flux(energy, kt, norm)


class LineGaussian(Component):
    """Gaussian emission line in energy, integrated analytically over each
    bin (:func:`gaussian_line_integral`)."""

    kind = ADDITIVE
    registry_name = "line_gaussian"
    default_name = "line"
    params = (
        Param("center", 1.0, 0.05, 100.0, "keV", "line centre"),
        Param("sigma", 0.01, 1e-6, 10.0, "keV", "Gaussian standard deviation"),
        Param("norm", 1e-3, 0.0, 1e10, "ph cm-2 s-1", "total photon flux of the line"),
    )

    def _evaluate(self, grid, pre, center, sigma, norm):
        return gaussian_line_integral(grid.lo, grid.hi, center, sigma, norm)
