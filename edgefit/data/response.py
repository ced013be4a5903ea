"""Instrument response: redistribution matrix times effective area.

A :class:`Response` holds the redistribution matrix (RMF, probabilities,
channels x energy bins) as a ``scipy.sparse`` CSR matrix with the effective
area (ARF, cm^2) already multiplied into its columns, so that folding is a
single sparse matrix-vector product::

    counts[channel] = exposure * sum_E R[channel, E] * A[E] * flux[E]

with ``flux`` in photons cm^-2 s^-1 per energy bin.  Nothing here is ever
stored densely.
"""
from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike
from astropy import units as u
from scipy.special import ndtr

from ..grid import EnergyGrid
from .._units import HC_KEV_ANGSTROM, as_kev, to_value
from ..errors import ArgumentError

__all__ = ["Response", "gaussian_response", "FWHM_TO_SIGMA"]

#: sigma = FWHM * FWHM_TO_SIGMA for a Gaussian, 1 / (2 sqrt(2 ln 2)).
FWHM_TO_SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))


class Response:
    """Folding operator from an energy grid to detector channels.

    Parameters
    ----------
    energy_lo, energy_hi : ndarray
        Energy bin edges of the matrix columns, keV (ENERG_LO/ENERG_HI).
    matrix : scipy.sparse matrix, shape (n_channels, n_energies)
        Redistribution probabilities (RMF MATRIX, transposed to channel rows).
    channel_emin, channel_emax : ndarray
        Nominal energy bounds of each channel, keV (EBOUNDS E_MIN/E_MAX).
    channels : ndarray of int, optional
        Channel numbers (default ``first_channel + arange(n)``).
    specresp : ndarray, optional
        Effective area per energy bin, cm^2 (ARF SPECRESP); default 1.
    rmf_path, arf_path : str, optional
        Where the parts came from (for messages and reports).
    """

    def __init__(self, energy_lo, energy_hi, matrix, channel_emin, channel_emax,
                 channels=None, specresp=None, first_channel=1, rmf_path=None,
                 arf_path=None, meta=None):
        self.grid = EnergyGrid(np.asarray(energy_lo, float), np.asarray(energy_hi, float))
        rmf = sp.csr_array(matrix, dtype=float)
        n_chan, n_en = rmf.shape
        if n_en != len(self.grid):
            raise ArgumentError(f"matrix has {n_en} energy columns but the grid has "
                             f"{len(self.grid)} bins")
        self.channel_emin = np.asarray(channel_emin, dtype=float)
        self.channel_emax = np.asarray(channel_emax, dtype=float)
        if self.channel_emin.shape != (n_chan,) or self.channel_emax.shape != (n_chan,):
            raise ArgumentError(f"EBOUNDS has {self.channel_emin.size} channels but the "
                             f"matrix has {n_chan}")
        self.channels = (np.arange(n_chan) + int(first_channel) if channels is None
                         else np.asarray(channels, dtype=int))
        self.specresp = (np.ones(n_en) if specresp is None
                         else np.asarray(specresp, dtype=float))
        if self.specresp.shape != (n_en,):
            raise ArgumentError("effective area and matrix energy grids differ in length")
        self.rmf = rmf
        # ARF folded into the matrix once: R @ diag(A)
        self._matrix = sp.csr_array(rmf @ sp.diags_array(self.specresp))
        self._matrix.sum_duplicates()
        self.rmf_path = rmf_path
        self.arf_path = arf_path
        self.meta = dict(meta or {})

    # ------------------------------------------------------------------
    @property
    def n_channels(self) -> int:
        return self._matrix.shape[0]

    @property
    def n_energies(self) -> int:
        return self._matrix.shape[1]

    @property
    def energy_lo(self):
        return self.grid.lo

    @property
    def energy_hi(self):
        return self.grid.hi

    @property
    def channel_wavelength(self):
        """(lo, hi) wavelength bounds of each channel in Angstrom."""
        return HC_KEV_ANGSTROM / self.channel_emax, HC_KEV_ANGSTROM / self.channel_emin

    @property
    def channel_mid(self):
        """Centre of each channel in energy, keV."""
        return 0.5 * (self.channel_emin + self.channel_emax)

    def matrix(self) -> sp.csr_array:
        """The folding matrix R x A (cm^2 counts per photon), CSR."""
        return self._matrix

    def fold(self, flux, exposure: float = 1.0) -> np.ndarray:
        """Expected counts per channel for ``flux`` (photons cm^-2 s^-1 per
        energy bin) over ``exposure`` seconds (default 1: a count rate).

        One CSR matrix-vector product, counts = exposure x (RMF x ARF) @ flux;
        the matrix was assembled once at construction."""
        out = self._matrix @ flux
        if exposure != 1.0:
            out *= exposure
        return out

    def subset(self, channel_mask) -> "Response":
        """A response restricted to the channels in ``channel_mask`` and to
        the energy bins that feed them.  Useful to evaluate a model only
        where a fit window needs it."""
        mask = np.asarray(channel_mask, dtype=bool)
        if mask.shape != (self.n_channels,):
            raise ArgumentError("channel mask length differs from the number of channels")
        rows = self.rmf[np.flatnonzero(mask)]
        used = np.flatnonzero(np.asarray(abs(rows).sum(axis=0)).ravel() > 0)
        if used.size == 0:
            used = np.arange(self.n_energies)
        lo, hi = used[0], used[-1] + 1  # keep a contiguous energy range
        sub = Response(self.grid.lo[lo:hi], self.grid.hi[lo:hi], rows[:, lo:hi],
                       self.channel_emin[mask], self.channel_emax[mask],
                       channels=self.channels[mask], specresp=self.specresp[lo:hi],
                       rmf_path=self.rmf_path, arf_path=self.arf_path, meta=self.meta)
        return sub

    def __repr__(self):
        return (f"Response({self.n_channels} channels, {self.n_energies} energy bins "
                f"{self.grid.lo[0]:.4g}-{self.grid.hi[-1]:.4g} keV, nnz={self._matrix.nnz})")


def _gaussian_bin_probability(lo, hi):
    """P(lo < z < hi) for a standard normal z, accurate in both tails
    (uses the upper tail when both limits are positive)."""
    with np.errstate(invalid="ignore"):
        upper = (lo + hi) > 0
    return np.where(upper, ndtr(-lo) - ndtr(-hi), ndtr(hi) - ndtr(lo))


def gaussian_response(energy_edges_kev: ArrayLike, channel_edges_kev: ArrayLike,
                      fwhm: float | u.Quantity,
                      area_cm2: ArrayLike | Callable[[np.ndarray], ArrayLike] = 1.0, *,
                      fwhm_unit: str = "angstrom",
                      n_sigma: float = 5.0, wavelength_order: bool = False,
                      first_channel: int = 1, meta: dict | None = None) -> Response:
    """A synthetic, grating-like response with a Gaussian line-spread function.

    A photon in energy bin i (centre E_i) lands in channel k with
    probability

        P_ik = Phi((x_k,hi - x_i) / sigma) - Phi((x_k,lo - x_i) / sigma),

    where x is wavelength (x = hc / E, Angstrom) when the FWHM is constant
    in wavelength, as for a dispersive grating, or energy (keV) when it is
    constant in energy; sigma = FWHM / (2 sqrt(2 ln 2)), and Phi is the
    standard normal distribution function.  The line-spread function is
    truncated at ``n_sigma`` standard deviations either side of x_i: the
    tails beyond (a fraction 2 Phi(-n_sigma), 5.7e-7 at n_sigma = 5) are
    dropped, not redistributed, and photons falling beyond the outermost
    channels are lost, so rows sum to slightly less than 1 at the grid
    ends.  Only the entries inside the window are computed and stored,
    so the matrix is sparse from the start.

    Parameters
    ----------
    energy_edges_kev : array_like or Quantity, shape (n + 1,)
        Edges of the model energy bins (keV, or any spectral Quantity).
    channel_edges_kev : array_like or Quantity, shape (m + 1,)
        Edges of the detector channels (keV, or any spectral Quantity).
    fwhm : float or Quantity
        Width of the line-spread function.  A number is in ``fwhm_unit``;
        a Quantity with a length unit means constant in wavelength, with
        an energy unit constant in energy.
    area_cm2 : float, array of shape (n,), or callable
        Effective area per energy bin in cm^2; a callable is called with
        the bin centres in keV.
    fwhm_unit : {"angstrom", "kev"}
        Unit of a plain-number ``fwhm``.
    n_sigma : float
        Truncation of the line-spread function, in standard deviations.
    wavelength_order : bool
        Number channels in increasing wavelength (decreasing energy), as
        grating spectra usually are; default increasing energy.
    first_channel : int
        Number of the first channel.

    Returns
    -------
    Response
    """
    e_edges = np.sort(np.asarray(as_kev(energy_edges_kev, "energy_edges_kev"), float))
    c_edges = np.sort(np.asarray(as_kev(channel_edges_kev, "channel_edges_kev"), float))
    if e_edges.ndim != 1 or e_edges.size < 2 or c_edges.ndim != 1 or c_edges.size < 2:
        raise ArgumentError("energy and channel edges need at least two values each")
    if isinstance(fwhm, u.Quantity):
        if fwhm.unit.physical_type == "length":
            fwhm_unit, width = "angstrom", to_value(fwhm, u.AA, "fwhm")
        else:
            fwhm_unit, width = "kev", to_value(fwhm, u.keV, "fwhm")
    else:
        width = float(fwhm)
    fwhm_unit = fwhm_unit.lower()
    if fwhm_unit not in ("angstrom", "kev"):
        raise ArgumentError("fwhm_unit must be 'angstrom' or 'kev'")
    if not (np.isfinite(width) and width > 0):
        raise ArgumentError("fwhm must be positive")
    sigma = width * FWHM_TO_SIGMA
    lo, hi = e_edges[:-1], e_edges[1:]
    mid = 0.5 * (lo + hi)
    n_en, n_ch = mid.size, c_edges.size - 1
    if fwhm_unit == "angstrom":
        x0 = HC_KEV_ANGSTROM / mid
        xe = HC_KEV_ANGSTROM / c_edges[::-1]      # increasing wavelength edges
    else:
        x0 = mid
        xe = c_edges
    half = n_sigma * sigma
    k_lo = np.clip(np.searchsorted(xe, x0 - half, side="right") - 1, 0, n_ch)
    k_hi = np.clip(np.searchsorted(xe, x0 + half, side="left"), 0, n_ch)
    count = np.maximum(k_hi - k_lo, 0)
    total = int(count.sum())
    start = np.cumsum(count) - count
    row = np.repeat(np.arange(n_en), count)
    k = np.arange(total) - np.repeat(start, count) + np.repeat(k_lo, count)
    centre = x0[row]
    a = (np.maximum(xe[k], centre - half) - centre) / sigma
    b = (np.minimum(xe[k + 1], centre + half) - centre) / sigma
    prob = np.where(b > a, _gaussian_bin_probability(a, b), 0.0)
    kk = n_ch - 1 - k if fwhm_unit == "angstrom" else k  # channel index in energy order
    emin_e, emax_e = c_edges[:-1], c_edges[1:]
    if wavelength_order:
        chan_index = n_ch - 1 - kk
        emin, emax = emin_e[::-1].copy(), emax_e[::-1].copy()
    else:
        chan_index = kk
        emin, emax = emin_e, emax_e
    keep = prob > 0
    rmf = sp.csr_array(sp.coo_array((prob[keep], (chan_index[keep], row[keep])),
                                    shape=(n_ch, n_en)))
    if callable(area_cm2):
        area = np.asarray(area_cm2(mid), dtype=float)
    else:
        area = np.broadcast_to(np.asarray(area_cm2, dtype=float), (n_en,)).copy()
    if area.shape != (n_en,) or not np.all(np.isfinite(area)) or np.any(area < 0):
        raise ArgumentError("area_cm2 must be finite, non-negative and one value per energy bin")
    info = {"lsf": "gaussian", "fwhm": width, "fwhm_unit": fwhm_unit, "n_sigma": n_sigma}
    info.update(meta or {})
    return Response(lo, hi, rmf, emin, emax, first_channel=first_channel, specresp=area,
                    meta=info)
