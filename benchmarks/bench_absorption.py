"""Speed of the absorption components (prints figures; no assertions).

Model: smooth ISM x two gas edges (Si K, Mg K) x four ionised lines
(Si XIII w, Si XIV Ly-alpha doublet, Mg XII Ly-alpha doublet, Mg XI w: four
ions, six lines) on an 8192-bin grid over 1.0-2.5 keV (0.18 eV bins, grating
like).  Prints the time per call after the grid has been prepared and its
ratio to a single numpy exp over the same grid, measured side by side.
Target: <= 1 ms per call, ratio <= 20.

Run:  python benchmarks/bench_absorption.py
"""
from __future__ import annotations

import timeit

import numpy as np

from edgefit.models.absorption import GasEdge, IonLines, SmoothISM
from edgefit.models.base import EnergyGrid


def main(n_bins=8192, repeat=7, number=200):
    grid = EnergyGrid.linear(1.0, 2.5, n_bins)
    model = (SmoothISM(exclude=("Si", "Mg"), nh=1.0)
             * GasEdge(element="Si", col=30.0)
             * GasEdge(element="Mg", col=40.0)
             * IonLines(ions=("si13", "si14", "mg11", "mg12"), logn_si13=16.5,
                        logn_si14=16.0, logn_mg11=16.0, logn_mg12=15.5, b=150.0, v=-200.0))
    values = model.default_values()
    model.evaluate(grid, values)  # first call prepares (caches) the grid
    x = -np.linspace(0.0, 5.0, n_bins)

    def run_model():
        values["ism_nh"] += 1e-9   # a fit changes parameters between calls
        model.evaluate(grid, values)

    t_model = min(timeit.repeat(run_model, repeat=repeat, number=number)) / number
    t_exp = min(timeit.repeat(lambda: np.exp(x), repeat=repeat, number=number)) / number
    t_first = timeit.timeit(lambda: type(model.left.left.left)(exclude=("Si", "Mg")).evaluate(
        grid, None), number=1)
    print(f"grid: {n_bins} bins, {grid.lo[0]:.2f}-{grid.hi[-1]:.2f} keV")
    print(f"model per call (prepared grid): {t_model * 1e3:.3f} ms  (target <= 1 ms)")
    print(f"single numpy exp over the grid: {t_exp * 1e6:.1f} us")
    print(f"ratio model / exp:              {t_model / t_exp:.1f}  (target <= 20)")
    print(f"first call of a fresh SmoothISM (precompute): {t_first * 1e3:.1f} ms")
    for comp in model.components():
        tc = min(timeit.repeat(lambda c=comp: c.evaluate(grid, values), repeat=3,
                               number=number)) / number
        print(f"  {comp.name:8s} {tc * 1e6:8.1f} us")


if __name__ == "__main__":
    main()
