"""The built-in demo (layer 6, beside the command line): a SIMULATED
sightline of an invented source, written to disk and fitted.

The scenario -- invented truth, instrument, files and the comparison with
the truth -- is in :mod:`edgefit.demo.scenario`; its names are re-exported
here.
"""
from .scenario import *  # noqa: F401,F403
from .scenario import (BACKGROUND_RATE, BACKSCAL_BKG, CHANNELS_ANGSTROM,  # noqa: F401
                       ENERGY_KEV, __all__, format_comparison)
