"""A counts spectrum as read from a PHA file (one row of a type II file)."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["Spectrum"]


@dataclass
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
