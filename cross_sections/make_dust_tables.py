"""Build edgefit's default dust cross-section tables into the cache.

The per-size tables (cross sections per grain, cm², on 160 radii from
0.001 to 5 µm and 0.1 %-step energies across each edge region) are about
1.2 MB each (14 MB for the eleven default ones: olivine, pyroxene and
Mg0.6Fe0.4SiO3 pyroxene across the Si K, Mg K, Fe L and O K regions of the
elements each contains), too large to ship, and take 0.5-10 s each on one
core (about 50 s for all).  They are stored in the user cache
(``EDGEFIT_CACHE_DIR`` or ``~/.cache/edgefit``) under names that hash all
their inputs, so this script only needs to run again after the atomic data
or the table format change (the package rebuilds stale tables on demand
anyway).

Same as ``edgefit dust-tables build``.

Run:  python cross_sections/make_dust_tables.py [--rebuild]
"""
from __future__ import annotations

import sys

from edgefit.cli import main

if __name__ == "__main__":
    sys.exit(main(["dust-tables", "build", *sys.argv[1:]]))
