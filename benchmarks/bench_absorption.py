"""Speed of the absorption components (prints figures; no assertions).

Model: smooth ISM x two gas edges (Si K, Mg K) x four ionised lines
(Si XIII w, Si XIV Ly-alpha doublet, Mg XII Ly-alpha doublet, Mg XI w: four
ions, six lines) on an 8192-bin grid over 1.0-2.5 keV (0.18 eV bins, grating
like).  For each back end of the ion lines ("auto" = numba when importable,
and "numpy") it prints the time per call of the whole model after the grid
has been prepared, its ratio to a single numpy exp over the same grid
(measured side by side, interleaved), and the time of each component.
Each figure is the best of ``repeat`` timings of ``number`` calls; the
whole measurement is done ``rounds`` times and the median is printed (the
machine may be shared).  Target: <= 1 ms per call, ratio <= 20.

Run:  python benchmarks/bench_absorption.py [--rounds 5]
"""
from __future__ import annotations

import argparse
import statistics
import time
import timeit

import numpy as np

from edgefit.models.absorption import GasEdge, IonLines, SmoothISM
from edgefit.models.base import EnergyGrid
from edgefit.physics import lines as _lines


def build(backend):
    return (SmoothISM(exclude=("Si", "Mg"), nh=1.0)
            * GasEdge(element="Si", col=30.0)
            * GasEdge(element="Mg", col=40.0)
            * IonLines(ions=("si13", "si14", "mg11", "mg12"), logn_si13=16.5,
                       logn_si14=16.0, logn_mg11=16.0, logn_mg12=15.5, b=150.0, v=-200.0,
                       backend=backend))


def one_round(grid, models, repeat, number):
    x = -np.linspace(0.0, 5.0, len(grid))
    out = {}
    best = lambda f: min(timeit.repeat(f, repeat=repeat, number=number)) / number  # noqa: E731
    for backend, model in models.items():
        values = model.default_values()

        def run_model(model=model, values=values):
            values["ism_nh"] += 1e-9   # a fit changes parameters between calls
            values["ions_b"] = 150.0 + (values["ions_b"] - 149.5) % 1.0
            model.evaluate(grid, values)

        t_exp1 = best(lambda: np.exp(x))
        t_model = best(run_model)
        t_exp2 = best(lambda: np.exp(x))
        t_exp = 0.5 * (t_exp1 + t_exp2)
        comps = {c.name: best(lambda c=c: c.evaluate(grid, values)) for c in model.components()}
        out[backend] = (t_model, t_exp, comps)
    return out


def main(n_bins=8192, repeat=7, number=200, rounds=5):
    grid = EnergyGrid.linear(1.0, 2.5, n_bins)
    backends = ["auto", "numpy"] if _lines.numba_available() else ["numpy"]
    t0 = time.perf_counter()
    _lines.voigt_table()
    t_table = time.perf_counter() - t0
    models = {}
    for be in backends:
        models[be] = build(be)
        t0 = time.perf_counter()
        models[be].evaluate(grid, None)   # first call prepares (caches) the grid
        print(f"first call, backend {be:5s} (grid preparation"
              f"{', numba compile or cache load' if be == 'auto' else ''}): "
              f"{(time.perf_counter() - t0) * 1e3:.1f} ms")
    print(f"Voigt table build (once per process): {t_table * 1e3:.1f} ms")
    ref = models[backends[-1]].evaluate(grid, None)
    for be in backends:
        diff = np.max(np.abs(models[be].evaluate(grid, None) - ref))
        print(f"max |difference| {be} vs numpy: {diff:.1e}")
    results = [one_round(grid, models, repeat, number) for _ in range(rounds)]
    print(f"grid: {n_bins} bins, {grid.lo[0]:.2f}-{grid.hi[-1]:.2f} keV; "
          f"median of {rounds} rounds (range in brackets)")
    for be in backends:
        label = "numba" if be == "auto" else be
        tm = [r[be][0] for r in results]
        te = [r[be][1] for r in results]
        ratio = [a / b for a, b in zip(tm, te)]
        print(f"[ion lines: {label}]")
        print(f"  model per call (prepared grid): {statistics.median(tm) * 1e3:.3f} ms "
              f"[{min(tm) * 1e3:.3f}-{max(tm) * 1e3:.3f}]  (target <= 1 ms)")
        print(f"  single numpy exp over the grid: {statistics.median(te) * 1e6:.1f} us")
        print(f"  ratio model / exp:              {statistics.median(ratio):.1f} "
              f"[{min(ratio):.1f}-{max(ratio):.1f}]  (target <= 20)")
        for name in results[0][be][2]:
            tc = [r[be][2][name] for r in results]
            print(f"    {name:8s} {statistics.median(tc) * 1e6:8.1f} us")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--bins", type=int, default=8192)
    args = ap.parse_args()
    main(n_bins=args.bins, rounds=args.rounds)
