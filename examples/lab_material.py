"""A grain material with laboratory near-edge structure through
Kramers-Kronig.  The "laboratory" absorption here is INVENTED for the
example (a smooth edge with made-up fine-structure wiggles), labelled so
in the material's name; real data would be read with
edgefit.dust.optical.read_lab_absorption.

Run:  python examples/lab_material.py [--quick] [-o OUT]
(--quick: a coarse grain-size table).
"""
import argparse
from pathlib import Path

import numpy as np

from edgefit.dust.materials import Material
from edgefit.dust.optical import LabAbsorption, nearedge_correction
from edgefit.grid import EnergyGrid
from edgefit.models import DustEdge
from edgefit.physics import atomic

FORMULA, DENSITY = "MgFeSiO4", 3.8        # an olivine-like composition, g cm^-3


def invented_lab_data():
    """INVENTED absorption coefficient (arbitrary scale) across the Si K
    edge: a step with a white line and decaying wiggles above the edge."""
    e_edge = atomic.edge_energy("Si", "K")
    e = np.linspace(e_edge - 0.08, e_edge + 0.15, 400)
    x = e - e_edge
    step = 1.0 + 1.5 / (1.0 + np.exp(-x / 0.0015))
    white = 1.2 * np.exp(-0.5 * ((x - 0.004) / 0.002) ** 2)
    wiggles = 0.2 * np.sin(2 * np.pi * x / 0.025) * np.exp(-x / 0.05) * (x > 0)
    smooth = (e / e_edge) ** -2.7                          # falls off like photoabsorption
    return LabAbsorption(e, (step + white + wiggles) * smooth, kind="mu",
                         source="invented example data (not a measurement)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="coarse size table")
    ap.add_argument("-o", "--output", default="lab_material")
    args = ap.parse_args(argv)

    lab = invented_lab_data()
    corr = nearedge_correction(FORMULA, DENSITY, lab, atomic.edge_energy("Si", "K"))
    labmat = Material("olivine_invented_lab", FORMULA, DENSITY,
                      note="INVENTED near-edge data (example)", corrections=(corr,))
    plain = Material("olivine_atomic", FORMULA, DENSITY, note="atomic f1/f2 only")
    grid = EnergyGrid.from_edges(np.linspace(1.80, 1.95, 301))
    sizes = np.geomspace(0.001, 5.0, 30 if args.quick else 160)
    trans = {}
    for mat in (plain, labmat):
        dust = DustEdge("dust", material=mat, element="Si", size_grid=sizes, col=30.0)
        trans[mat.name] = dust(grid)
    diff = trans[labmat.name] - trans[plain.name]
    print(f"largest change of the dust transmission from the (invented) near-edge data: "
          f"{np.max(np.abs(diff)):.4f} at {grid.mid[np.argmax(np.abs(diff))]:.4f} keV")
    out = Path(args.output)
    out.mkdir(parents=True, exist_ok=True)
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6, 3.5), constrained_layout=True)
    for name, t in trans.items():
        ax.plot(grid.mid, t, label=name)
    ax.set_xlabel("energy [keV]")
    ax.set_ylabel("dust transmission (Si 30e16 cm-2)")
    ax.set_title("olivine-like grains: atomic vs INVENTED near-edge data", fontsize=9)
    ax.legend(fontsize=8)
    fig.savefig(out / "lab_material.png", dpi=110)
    print(f"figure: {out / 'lab_material.png'}")


if __name__ == "__main__":
    main()
