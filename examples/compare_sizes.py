"""Which grain sizes does one SIMULATED sightline allow?  The demo's
invented "Cinder Ford" (grains up to 1.5 um) is fitted under several
size distributions and compared by C statistic, AIC and Akaike weights.

Run:  python examples/compare_sizes.py [--quick] [-o OUT]
(--quick: a coarser grain-size table).
"""
import argparse
import math

import numpy as np

from edgefit.analysis.simulate import simulation_from_dict, simulate_spectra
from edgefit.demo.region import SIGHTLINES, simulation_dict
from edgefit.inference import Dataset, fit_sightline
from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw, SmoothISM

CANDIDATES = [  # label, DustEdge keyword arguments
    ("MRN up to 0.25 um (fixed)", dict(sizes="power_law", fixed=["amax", "amin", "index"],
                                       amax=0.25)),
    ("MRN, upper size free", dict(sizes="power_law", fixed=["amin", "index"], amax=0.25)),
    ("single size 0.1 um", dict(sizes="single", fixed=["size"], size=0.1)),
    ("single size 1 um", dict(sizes="single", fixed=["size"], size=1.0)),
]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="coarser size table")
    ap.add_argument("-o", "--output", default=None, help="(unused; prints a table)")
    args = ap.parse_args(argv)

    row = next(r for r in SIGHTLINES if r[0] == "Cinder Ford")
    setup = simulation_from_dict(simulation_dict(row, seed=7))
    data = [Dataset(s, ranges=setup.fit_range) for s in simulate_spectra(setup)]
    grid = np.geomspace(0.001, 5.0, 40 if args.quick else 160)
    rows = []
    for label, kw in CANDIDATES:
        kw = dict(kw)
        fixed = kw.pop("fixed", [])
        model = (SmoothISM("ism", exclude=["Si"], nh=row[1])
                 * GasEdge("gas_si", element="Si")
                 * DustEdge("dust", material="olivine", element="Si", size_grid=grid,
                            fixed=fixed, **kw)
                 * PhotonPowerLaw("continuum", pivot=1.85))
        res = fit_sightline(model, data, warn=False)
        k = len(res.free_names)
        rows.append((label, res.statistic, k, res.statistic + 2 * k, res.values["gas_si_col"],
                     res.values["dust_col"]))
    best = min(r[3] for r in rows)
    weights = [math.exp(-0.5 * (r[3] - best)) for r in rows]
    total = sum(weights)
    print("SIMULATED sightline Cinder Ford (truth: MRN grains up to 1.5 um)\n")
    print(f"{'size distribution':<28}{'C':>10}{'k':>4}{'dAIC':>8}{'weight':>8}"
          f"{'gas Si':>9}{'dust Si':>9}  [1e16 cm-2]")
    for (label, c, k, aic, g, d), w in zip(rows, weights):
        print(f"{label:<28}{c:>10.2f}{k:>4}{aic - best:>8.2f}{w / total:>8.2f}{g:>9.2f}{d:>9.2f}")
    print(f"\ntruth: gas {setup.truth['gas_si_col']:.2f}, dust {setup.truth['dust_col']:.2f}")


if __name__ == "__main__":
    main()
