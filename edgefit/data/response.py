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

import numpy as np
import scipy.sparse as sp

from ..models.base import EnergyGrid
from .._units import HC_KEV_ANGSTROM

__all__ = ["Response"]


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
            raise ValueError(f"matrix has {n_en} energy columns but the grid has "
                             f"{len(self.grid)} bins")
        self.channel_emin = np.asarray(channel_emin, dtype=float)
        self.channel_emax = np.asarray(channel_emax, dtype=float)
        if self.channel_emin.shape != (n_chan,) or self.channel_emax.shape != (n_chan,):
            raise ValueError(f"EBOUNDS has {self.channel_emin.size} channels but the "
                             f"matrix has {n_chan}")
        self.channels = (np.arange(n_chan) + int(first_channel) if channels is None
                         else np.asarray(channels, dtype=int))
        self.specresp = (np.ones(n_en) if specresp is None
                         else np.asarray(specresp, dtype=float))
        if self.specresp.shape != (n_en,):
            raise ValueError("effective area and matrix energy grids differ in length")
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

    def matrix(self) -> sp.csr_array:
        """The folding matrix R x A (cm^2 counts per photon), CSR."""
        return self._matrix

    def fold(self, flux, exposure: float = 1.0) -> np.ndarray:
        """Expected counts per channel for ``flux`` (photons cm^-2 s^-1 per
        energy bin) over ``exposure`` seconds (default 1: a count rate)."""
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
            raise ValueError("channel mask length differs from the number of channels")
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
