"""edgefit: gas and dust absorption edges in X-ray grating spectra."""
from __future__ import annotations

__version__ = "0.1.0"

from .errors import EdgefitError  # noqa: E402

__all__ = ["__version__", "EdgefitError"]
