"""The built-in demo (layer 6, beside the command line), all SIMULATED:

* ``edgefit demo``: eight invented sightlines through an invented region
  (:mod:`.region`), simulated, fitted in batch, related to N_H and reported
  on one HTML page (:mod:`.sample`, :mod:`.report`);
* the one-sightline example "Amber Loom" (:mod:`.scenario`: invented truth,
  instrument, files and the comparison with the truth; its names are
  re-exported here), which ``examples/make_simulated_sightline.py`` writes.
"""
from .scenario import *  # noqa: F401,F403
from .scenario import (BACKGROUND_RATE, BACKSCAL_BKG, CHANNELS_ANGSTROM,  # noqa: F401
                       ENERGY_KEV, __all__, format_comparison)
