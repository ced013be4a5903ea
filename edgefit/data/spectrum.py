"""A counts spectrum as read from a PHA file (one row of a type II file)."""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from astropy import units as u

from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import ArgumentError, BadCountsError, BadExposureError, ChannelMismatchError

__all__ = ["Spectrum"]


@dataclass(repr=False)
class Spectrum:
    """Counts per channel with the keywords a fit needs.

    Attributes
    ----------
    counts : ndarray
        Counts per channel (RATE columns are multiplied by the exposure).
    exposure : float
        Exposure time, s.
    channels : ndarray of int
        Channel numbers (with the file's TLMIN offset).
    backscal, areascal : float or ndarray
        Scaling keywords/columns (dimensionless).
    quality : ndarray of int
        0 = good; anything else is excluded from fits.
    grouping : ndarray of int or None
        OGIP grouping (1 starts a group, -1 continues it).
    stat_err : ndarray or None
        Statistical error column when present (counts).
    poisson : bool
        POISSERR keyword.
    background : Spectrum or None
        Background spectrum (its own exposure and BACKSCAL).
    response : Response or None
        The folding response attached to this spectrum.
    meta : dict
        Everything else worth keeping: ``path``, ``row``, ``order``
        (TG_M), ``arm`` (TG_PART), ``object``, ``telescope``,
        ``instrument``, ``respfile``, ``ancrfile``, ``backfile``.
    """

    counts: np.ndarray
    exposure: float
    channels: np.ndarray
    backscal: Any = 1.0
    areascal: Any = 1.0
    quality: np.ndarray | None = None
    grouping: np.ndarray | None = None
    stat_err: np.ndarray | None = None
    poisson: bool = True
    background: "Spectrum | None" = None
    response: Any = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        self.counts = np.asarray(self.counts, dtype=float)
        self.channels = np.asarray(self.channels, dtype=int)
        if self.quality is None:
            self.quality = np.zeros(self.counts.size, dtype=int)

    @property
    def name(self) -> str:
        """A short label: file name, plus row/order/arm when known."""
        parts = [str(self.meta.get("path", "spectrum")).rsplit("/", 1)[-1]]
        for key in ("arm", "order", "row"):
            if self.meta.get(key) is not None:
                parts.append(f"{key}={self.meta[key]}")
        return " ".join(parts)

    @property
    def n_channels(self) -> int:
        return self.counts.size

    def __repr__(self):
        extra = []
        if self.response is not None:
            extra.append("response")
        if self.background is not None:
            extra.append("background")
        return (f"Spectrum({self.name!r}, {self.n_channels} channels, "
                f"{self.total_counts:.6g} counts, exposure {self.exposure:.6g} s"
                f"{', with ' + ' and '.join(extra) if extra else ''})")

    # ------------------------------------------------------------------
    @property
    def good(self) -> np.ndarray:
        """Boolean mask of channels with QUALITY == 0."""
        return np.asarray(self.quality) == 0

    @property
    def total_counts(self) -> float:
        return float(np.sum(self.counts))

    @property
    def rate(self) -> np.ndarray:
        """Counts per second per channel."""
        return self.counts / self.exposure

    def channel_bounds(self):
        """(emin, emax) of each channel in keV, from the attached response."""
        if self.response is None:
            raise ArgumentError(f"{self.name}: no response attached, channel energies unknown")
        return self.response.channel_emin, self.response.channel_emax

    def select(self, lo, hi, unit="keV", good_only=False) -> np.ndarray:
        """Channels whose centre lies in a range, as a boolean mask.

        Parameters
        ----------
        lo, hi : float or Quantity
            Range limits.  Quantities may be energies, wavelengths or
            frequencies; plain numbers are in ``unit``.  Order does not
            matter (a wavelength range is an inverted energy range).
        unit : {"keV", "angstrom"}
            Unit of plain-number limits.
        good_only : bool
            Also require QUALITY == 0.

        Returns
        -------
        ndarray of bool, one per channel.  Combine masks with ``|`` and ``&``.
        """
        unit = str(unit).lower()
        if unit not in ("kev", "angstrom"):
            raise ArgumentError("unit must be 'keV' or 'angstrom'")

        def kev(x, name):
            if isinstance(x, u.Quantity):
                return float(as_kev(x, name))
            x = float(x)
            return x if unit == "kev" else HC_KEV_ANGSTROM / x

        lo_v, hi_v = kev(lo, "lo"), kev(hi, "hi")
        e_lo, e_hi = sorted((float(lo_v), float(hi_v)))
        emin, emax = self.channel_bounds()
        mid = 0.5 * (emin + emax)
        mask = (mid >= e_lo) & (mid <= e_hi)
        if good_only:
            mask &= self.good
        return mask

    def validate(self):
        """Check counts, exposure and response channels; raise the matching
        :mod:`edgefit.errors` class naming ``meta['path']``."""
        path = self.meta.get("path")
        if not (np.isfinite(self.exposure) and self.exposure > 0):
            raise BadExposureError(path, f"exposure {self.exposure} s; must be positive")
        if not np.all(np.isfinite(self.counts)) or np.any(self.counts < 0):
            raise BadCountsError(path, "counts must be finite and non-negative")
        if self.response is not None and self.response.n_channels != self.n_channels:
            raise ChannelMismatchError(path, f"spectrum has {self.n_channels} channels, "
                                             f"response {self.response.n_channels}")
        return self

    def background_scale(self):
        """Factor that scales background counts to the source region:
        (t_s BACKSCAL_s AREASCAL_s) / (t_b BACKSCAL_b AREASCAL_b),
        per channel or scalar.  Raises if no background is attached."""
        b = self.background
        if b is None:
            raise ArgumentError(f"{self.name}: no background attached")
        return ((self.exposure * np.asarray(self.backscal, float) *
                 np.asarray(self.areascal, float)) /
                (b.exposure * np.asarray(b.backscal, float) * np.asarray(b.areascal, float)))

    def with_grouping(self, grouping) -> "Spectrum":
        """A copy with another GROUPING array (see :mod:`edgefit.data.grouping`)."""
        g = None if grouping is None else np.asarray(grouping, dtype=int)
        if g is not None and g.shape != (self.n_channels,):
            raise ArgumentError("grouping must have one entry per channel")
        return replace(self, grouping=g, meta=dict(self.meta))
