"""Layer 1: spectra, responses, folding, statistics, simulation."""
from .response import Response
from .spectrum import Spectrum

__all__ = ["Response", "Spectrum"]
