"""Sightline configuration files: kept importable here; the code lives in
:mod:`edgefit.analysis.config` (layer 5, analysis)."""
from .analysis.config import *  # noqa: F401,F403
from .analysis.config import __all__  # noqa: F401
