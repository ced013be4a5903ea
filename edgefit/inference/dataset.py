"""A spectrum prepared for fitting.

A :class:`Dataset` ties one counts spectrum to its response and fixes, once,
everything a likelihood evaluation needs:

* the **channel selection**: channels whose nominal centre lies in one of
  the fit ranges (keV or Angstrom, Quantities accepted) and whose QUALITY
  is 0;
* the **grouping** of the selected channels (the file's OGIP GROUPING
  column, a minimum number of counts per group, or a fixed number of
  channels per group); groups never straddle a gap in the selection;
* the **response subset** (:meth:`Response.subset`) restricted to the
  energy bins that feed the selected channels, and so the energy grid on
  which the model is evaluated;
* one folding matrix ``G (R A) exposure areascal`` (G sums channels into
  groups), so that expected source counts per group are a single sparse
  matrix-vector product with the model's photon flux per energy bin;
* grouped background counts and the background scaling ratio
  r = (t_s BACKSCAL_s AREASCAL_s) / (t_b BACKSCAL_b AREASCAL_b).

The cross-normalisation constant of each spectrum is a fit parameter owned
by :class:`~edgefit.inference.fit.JointLikelihood`, not by the dataset.
"""
from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp
from astropy import units as u

from ..data.grouping import group_bounds, group_min_counts, grouping_matrix
from ..errors import ModelError
from .._units import as_kev

__all__ = ["Dataset", "parse_ranges"]


def parse_ranges(ranges: Any, unit: str | u.UnitBase = "keV") -> list[tuple[float, float]] | None:
    """Fit ranges as a list of (lo, hi) in keV.

    ``ranges`` is one pair or a list of pairs; each value a number in
    ``unit`` (``"keV"`` or ``"Angstrom"``) or a Quantity (any spectral
    unit).  Wavelength pairs are flipped into increasing energy.
    """
    if ranges is None:
        return None
    if isinstance(ranges, u.Quantity):
        ranges = [ranges] if ranges.ndim == 1 else list(ranges)
    arr = ranges
    if len(arr) == 2 and np.ndim(arr[0]) == 0:
        arr = [arr]
    unit_q = u.Unit(unit)
    out = []
    for pair in arr:
        if len(pair) != 2:
            raise ModelError(f"a fit range needs two numbers, got {pair!r}")
        vals = []
        for v in pair:
            q = v if isinstance(v, u.Quantity) else float(v) * unit_q
            vals.append(float(as_kev(q, "fit range")))
        lo, hi = sorted(vals)
        if not (np.isfinite(lo) and np.isfinite(hi)) or lo <= 0 or hi <= lo:
            raise ModelError(f"fit range {pair!r} is empty or not positive")
        out.append((lo, hi))
    return out


class Dataset:
    """One spectrum ready for fitting.

    Parameters
    ----------
    spectrum : Spectrum
        Counts, exposure, quality, grouping, scaling keywords, background.
    response : Response, optional
        Defaults to ``spectrum.response``.
    ranges : pair or list of pairs, optional
        Fit ranges in ``unit`` (or Quantities); default: every channel.
    unit : {"keV", "Angstrom"}
        Unit of plain numbers in ``ranges``.
    grouping : {None, "file"} or int
        ``None``: no grouping; ``"file"``: the spectrum's OGIP GROUPING;
        an int ``k`` > 0: groups of at least ``k`` counts.
    channels_per_group : int, optional
        Alternatively, a fixed number of channels per group.
    label : str, optional
        Name used in summaries and plots (default ``spectrum.name``).
    """

    def __init__(self, spectrum, response=None, *, ranges=None, unit="keV",
                 grouping=None, channels_per_group=None, label=None):
        self.spectrum = spectrum
        self.response = response if response is not None else spectrum.response
        if self.response is None:
            raise ModelError(f"spectrum {spectrum.name!r} has no response")
        resp = self.response
        if resp.n_channels != spectrum.n_channels:
            raise ModelError(f"spectrum {spectrum.name!r} has {spectrum.n_channels} channels "
                             f"but its response has {resp.n_channels}")
        self.label = label or spectrum.name
        self.exposure = float(spectrum.exposure)
        if not self.exposure > 0:
            raise ModelError(f"spectrum {self.label!r}: exposure must be positive")
        self.ranges_kev = parse_ranges(ranges, unit)
        centre = resp.channel_mid
        mask = spectrum.good
        if self.ranges_kev is not None:
            inr = np.zeros_like(mask)
            for lo, hi in self.ranges_kev:
                inr |= (centre >= lo) & (centre <= hi)
            mask &= inr
        if not mask.any():
            raise ModelError(f"spectrum {self.label!r}: no good channel lies in the fit "
                             f"range(s) {self.ranges_kev}")
        self.channel_mask = mask
        self.sub = resp.subset(mask)
        self.grid = self.sub.grid
        # where the sub-grid sits in the parent response's energy grid, so that
        # datasets sharing a parent grid can share one model evaluation
        start = int(np.searchsorted(resp.grid.lo, self.grid.lo[0]))
        self.energy_slice = (start, start + len(self.grid))
        sel = np.flatnonzero(mask)
        counts_sel = np.asarray(spectrum.counts, dtype=float)[sel]

        # -- grouping: a start flag per selected channel ----------------
        starts = np.ones(sel.size, dtype=bool)
        if grouping == "file":
            if spectrum.grouping is not None:
                starts = np.asarray(spectrum.grouping)[sel] != -1
        elif grouping is not None and grouping is not False:
            k = float(grouping)
            if k <= 0:
                raise ModelError("grouping: minimum counts per group must be positive")
            # each contiguous run of selected channels is grouped on its own;
            # OGIP GROUPING: +1 starts a group, -1 continues it
            starts = group_min_counts(spectrum.counts, k, mask=mask)[sel] != -1
        if channels_per_group:
            k = int(channels_per_group)
            if k < 1:
                raise ModelError("channels_per_group must be at least 1")
            starts = np.zeros(sel.size, dtype=bool)
            starts[::k] = True
        starts |= np.r_[True, np.diff(sel) > 1]  # never across gaps
        group_id = np.cumsum(starts) - 1
        n_groups = int(group_id[-1]) + 1
        ogip_grouping = np.where(starts, 1, -1)
        self.grouping_matrix = grouping_matrix(ogip_grouping)
        g = self.grouping_matrix
        self.n_groups = n_groups
        self.n_channels_used = sel.size

        areascal = np.broadcast_to(np.asarray(spectrum.areascal, dtype=float),
                                   (spectrum.n_channels,))[sel]
        fold = sp.csr_array(sp.diags_array(areascal * self.exposure) @ self.sub.matrix())
        self.matrix = sp.csr_array(g @ fold)
        self.matrix.sum_duplicates()
        self.counts = g @ counts_sel
        emin = resp.channel_emin[sel]
        emax = resp.channel_emax[sel]
        self.group_emin, self.group_emax = group_bounds(emin, emax, ogip_grouping)
        self.group_channels = np.bincount(group_id).astype(float)

        bkg = spectrum.background
        self.bkg_counts = None
        self.bkg_ratio = None
        if bkg is not None:
            if bkg.n_channels != spectrum.n_channels:
                raise ModelError(f"spectrum {self.label!r}: background has {bkg.n_channels} "
                                 f"channels, source has {spectrum.n_channels}")
            ratio_ch = np.broadcast_to(spectrum.background_scale(),
                                       (spectrum.n_channels,))[sel]
            self.bkg_counts = g @ np.asarray(bkg.counts, dtype=float)[sel]
            # one ratio per group: channel mean (exact when constant)
            self.bkg_ratio = (g @ ratio_ch) / self.group_channels

    # ------------------------------------------------------------------
    @property
    def has_background(self) -> bool:
        return self.bkg_counts is not None

    def fold(self, flux):
        """Expected source counts per group for ``flux`` (photons cm^-2 s^-1
        per bin of :attr:`grid`), before cross-normalisation."""
        return self.matrix @ flux

    def __repr__(self):
        rng = ", ".join(f"{a:.4g}-{b:.4g}" for a, b in (self.ranges_kev or []))
        return (f"Dataset({self.label!r}, {self.n_channels_used} channels in {self.n_groups} "
                f"groups, {len(self.grid)} energy bins, ranges keV: [{rng or 'all'}])")
