"""Energy grids: the bins on which models are evaluated.

This module sits below every layer (responses, physics and models all use
it) and depends only on numpy and astropy.
"""
from __future__ import annotations

import hashlib

import numpy as np

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
        lo = np.atleast_1d(np.asarray(as_kev(lo, "energy_lo"), dtype=float))
        hi = np.atleast_1d(np.asarray(as_kev(hi, "energy_hi"), dtype=float))
        if lo.shape != hi.shape or lo.ndim != 1:
            raise ModelError("energy grid: lo and hi must be 1-d arrays of equal length")
        if lo.size and (lo[0] > lo[-1]):  # wavelength order given; flip
            lo, hi = hi[::-1].copy(), lo[::-1].copy()
        if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
            raise ModelError("energy grid: edges must be finite")
        if np.any(lo <= 0) or np.any(hi <= lo) or np.any(np.diff(lo) <= 0):
            raise ModelError("energy grid: bins must be positive, non-empty and increasing")
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
