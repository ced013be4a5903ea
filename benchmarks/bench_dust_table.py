"""Speed of the dust edge at fit time, and of building its table (prints
figures; no assertions).

The dust component (olivine, MRN power law with free amax, Si K) evaluated
from its cached per-size table on an 8192-bin grid over 1.6-2.2 keV: time
per call after the grid has been prepared (amax changes between calls, as
in a fit, so the size weights are recomputed every time), side by side with
one numpy exp over the same grid.  Target: <= 2 ms per call.

Also prints the time to build the default Si K table (412 energies x 160
radii) from scratch on one core, and to load it from the disk cache.
The cache goes to a temporary folder unless EDGEFIT_CACHE_DIR is set.

Run:  python benchmarks/bench_dust_table.py
"""
from __future__ import annotations

import itertools
import os
import tempfile
import time
import timeit

import numpy as np


def main(n_bins=8192, repeat=7, number=200):
    tmp = None
    if "EDGEFIT_CACHE_DIR" not in os.environ:
        tmp = tempfile.TemporaryDirectory()
        os.environ["EDGEFIT_CACHE_DIR"] = tmp.name
    from edgefit.dust import tables
    from edgefit.dust.efficiencies import efficiencies
    from edgefit.models.base import EnergyGrid
    from edgefit.models.dust import DustEdge

    efficiencies(1 - 1e-4 + 1e-5j, np.array([10.0, 1e4]))  # compile numba kernels first
    energy = tables.edge_energy_grid("olivine", 1.6, 2.3)
    t0 = time.perf_counter()
    table = tables.load_or_build("olivine", energy, progress=False, rebuild=True)
    t_build = time.perf_counter() - t0
    t0 = time.perf_counter()
    tables.load_or_build("olivine", energy)
    t_load = time.perf_counter() - t0

    grid = EnergyGrid.linear(1.6, 2.2, n_bins)
    dust = DustEdge(material="olivine", element="Si", col=20.0)
    values = dust.default_values()
    dust.evaluate(grid, values)  # prepares the grid (loads the table)
    x = -np.linspace(0.0, 5.0, n_bins)
    amax = itertools.cycle([0.20, 0.25, 0.30, 0.35])

    def run():
        values["dust_amax"] = next(amax)  # a fit changes parameters between calls
        dust.evaluate(grid, values)

    t_call = min(timeit.repeat(run, repeat=repeat, number=number)) / number
    t_exp = min(timeit.repeat(lambda: np.exp(x), repeat=repeat, number=number)) / number
    t_weights = min(timeit.repeat(lambda: table.sizes.weights(dust.distribution()),
                                  repeat=repeat, number=number)) / number
    print(f"table: {table.energy_kev.size} energies {energy[0]:.2f}-{energy[-1]:.2f} keV x "
          f"{len(table.sizes)} radii {table.sizes.a[0]:g}-{table.sizes.a[-1]:g} um")
    print(f"build from scratch (1 core, numba compiled): {t_build:.2f} s; "
          f"load from cache: {t_load * 1e3:.1f} ms")
    print(f"grid: {n_bins} bins, {grid.lo[0]:.2f}-{grid.hi[-1]:.2f} keV")
    print(f"dust transmission per call (prepared grid): {t_call * 1e3:.3f} ms  "
          "(target <= 2 ms)")
    print(f"  of which size weights: {t_weights * 1e3:.3f} ms")
    print(f"single numpy exp over the grid: {t_exp * 1e6:.1f} us")
    print(f"ratio dust / exp: {t_call / t_exp:.1f}")
    if tmp is not None:
        tmp.cleanup()


if __name__ == "__main__":
    main()
