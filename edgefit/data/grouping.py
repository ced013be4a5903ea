"""Channel grouping (binning) in the OGIP convention.

A GROUPING array has one entry per channel: +1 starts a new group, -1
continues the current one (OGIP/92-007; 0 in a file means "no grouping
information" and is treated as every channel its own group).  Channels
with non-zero QUALITY are left out of groups by :func:`group_min_counts`
(they start and end their own one-channel groups and should be excluded
from fits through the quality mask).
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike

from ..errors import ArgumentError

__all__ = ["group_min_counts", "group_starts", "group_sum", "grouping_matrix",
           "group_bounds"]


def group_min_counts(counts: ArrayLike, min_counts: float, quality: ArrayLike | None = None,
                     mask: ArrayLike | None = None) -> np.ndarray:
    """GROUPING array so that each group has at least ``min_counts`` counts.

    Channels are scanned in order; a group closes as soon as its total
    reaches ``min_counts``.  A leftover group at the end with fewer counts
    is merged into the previous group (if there is one).  Channels that are
    bad (``quality != 0``) or outside ``mask`` are never merged: each is
    its own group, and a group in progress is closed before it.

    Parameters
    ----------
    counts : array_like
        Counts per channel.
    min_counts : float
        Minimum counts per group (> 0).
    quality : array_like of int, optional
    mask : array_like of bool, optional
        Channels that may be grouped (e.g. a fit range).

    Returns
    -------
    ndarray of int (+1 / -1).
    """
    n = np.asarray(counts, dtype=float)
    if min_counts <= 0:
        raise ArgumentError("min_counts must be positive")
    usable = np.ones(n.size, bool)
    if quality is not None:
        usable &= np.asarray(quality) == 0
    if mask is not None:
        usable &= np.asarray(mask, bool)
    grouping = np.ones(n.size, dtype=int)
    i = 0
    last_start = None   # start of the last completed group (usable run)
    while i < n.size:
        if not usable[i]:
            i += 1
            last_start = None
            continue
        start, total = i, 0.0
        while i < n.size and usable[i]:
            total += n[i]
            i += 1
            if total >= min_counts:
                break
        grouping[start] = 1
        grouping[start + 1:i] = -1
        if total < min_counts and last_start is not None and start > 0 and usable[start - 1]:
            grouping[start] = -1          # merge the short tail into the previous group
        else:
            last_start = start
    return grouping


def group_starts(grouping) -> np.ndarray:
    """Indices of the first channel of every group (0 or +1 starts a group)."""
    g = np.asarray(grouping, dtype=int)
    starts = np.flatnonzero(g != -1)
    if g.size and (starts.size == 0 or starts[0] != 0):
        starts = np.concatenate(([0], starts))
    return starts


def group_sum(values: ArrayLike, grouping: ArrayLike) -> np.ndarray:
    """Sum ``values`` (counts, model counts) over each group."""
    v = np.asarray(values, dtype=float)
    return np.add.reduceat(v, group_starts(grouping)) if v.size else v


def grouping_matrix(grouping: ArrayLike) -> sp.csr_array:
    """Sparse (n_groups x n_channels) 0/1 matrix G so that G @ x sums
    channel values into groups; G @ (R @ f) groups folded model counts."""
    g = np.asarray(grouping, dtype=int)
    starts = group_starts(g)
    gid = np.cumsum(np.isin(np.arange(g.size), starts)) - 1
    return sp.csr_array((np.ones(g.size), (gid, np.arange(g.size))),
                        shape=(starts.size, g.size))


def group_bounds(emin, emax, grouping):
    """(emin, emax) of each group: the extreme channel bounds it covers (keV)."""
    starts = group_starts(grouping)
    return (np.minimum.reduceat(np.asarray(emin, float), starts),
            np.maximum.reduceat(np.asarray(emax, float), starts))
