"""Energy grids: the bins on which models are evaluated.

This module sits below every layer (responses, physics and models all use
it) and depends only on numpy and astropy.
"""
from __future__ import annotations

import hashlib

import numpy as np
from astropy import units as u

from ._units import as_kev
from .errors import ModelError

__all__ = ["EnergyGrid"]


class EnergyGrid:
    """Bins in energy (keV) on which a model is evaluated.

    Parameters
    ----------
    lo, hi : array_like or Quantity
        Lower and upper bin edges; any spectral unit is converted to keV.
        Bins must be positive, finite, non-empty and strictly increasing.
    """

    __slots__ = ("lo", "hi", "mid", "width", "key")

    def __init__(self, lo, hi):
        from_wavelength = (isinstance(lo, u.Quantity)
                           and lo.unit.physical_type == "length")
        lo = np.atleast_1d(np.asarray(as_kev(lo, "energy_lo"), dtype=float))
        hi = np.atleast_1d(np.asarray(as_kev(hi, "energy_hi"), dtype=float))
        if lo.shape != hi.shape or lo.ndim != 1:
            raise ModelError("energy grid: lo and hi must be 1-d arrays of equal length")
        if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
            raise ModelError("energy grid: edges must be finite")
        if lo.size and lo[0] > lo[-1]:
            # bins listed in decreasing energy (e.g. converted from a
            # wavelength-ordered grid): put them in increasing order
            lo, hi = lo[::-1].copy(), hi[::-1].copy()
        if from_wavelength and lo.size and np.all(lo > hi):
            # wavelength bin lo/hi became energy hi/lo
            lo, hi = hi, lo
        if np.any(lo <= 0):
            raise ModelError("energy grid: bin edges must be positive energies")
        if np.any(hi <= lo):
            raise ModelError("energy grid: every bin needs its upper edge above its lower edge")
        if np.any(np.diff(lo) <= 0):
            raise ModelError("energy grid: bins must be in monotonic order without repeats")
        self.lo = lo
        self.hi = hi
        self.mid = 0.5 * (lo + hi)
        self.width = hi - lo
        for arr in (self.lo, self.hi, self.mid, self.width):
            arr.setflags(write=False)
        h = hashlib.blake2b(digest_size=16)
        h.update(lo.tobytes())
        h.update(hi.tobytes())
        self.key = h.hexdigest()

    @classmethod
    def from_edges(cls, edges):
        """Grid from n+1 contiguous edges."""
        e = np.asarray(as_kev(edges, "edges"), dtype=float)
        if e.size > 1 and e[0] > e[-1]:  # decreasing energy (e.g. wavelength edges)
            e = e[::-1]
        return cls(e[:-1], e[1:])

    @classmethod
    def linear(cls, emin, emax, n):
        """``n`` equal bins from ``emin`` to ``emax`` (keV or Quantity)."""
        return cls.from_edges(np.linspace(as_kev(emin), as_kev(emax), n + 1))

    def __len__(self):
        return self.lo.size

    def __eq__(self, other):
        return isinstance(other, EnergyGrid) and other.key == self.key

    def __hash__(self):
        return hash(self.key)

    def __repr__(self):
        if len(self) == 0:
            return "EnergyGrid(empty)"
        return f"EnergyGrid({len(self)} bins, {self.lo[0]:.4g}-{self.hi[-1]:.4g} keV)"
