"""Make the SIMULATED example sightline "Amber Loom" (an invented source).

Everything here is made up for demonstration: the source name, its
columns (N_H 2.2e22 cm^-2; Si 12e16 cm^-2 in gas and 28e16 cm^-2 in
olivine grains, depletion 0.70), grain sizes, ion columns, continuum,
instrument and exposure.  The scenario, its truth and the writer live in
:mod:`edgefit.demo` (the same files ``edgefit demo`` fits); this script
writes them into ``examples/amber_loom/``:

* ``amber_loom_<hig|med>_<m1|p1>.pha`` -- four spectra: two invented
  gratings (FWHM 0.012 and 0.023 Angstrom) x the -1 and +1 orders, 150 ks,
  each with its ``.rmf``, ``.arf`` and ``_bkg.pha`` background;
* ``amber_loom.toml`` -- the configuration that fits them
  (``edgefit fit examples/amber_loom/amber_loom.toml``);
* ``truth.json`` -- the invented parameter values used.

Run:  python examples/make_simulated_sightline.py
"""
from __future__ import annotations

from pathlib import Path

from edgefit.demo import write_sightline

HERE = Path(__file__).resolve().parent / "amber_loom"


def main():
    config = write_sightline(HERE, walkers=32, steps=3000, output="results")
    for p in sorted(HERE.iterdir()):
        print("wrote", p.relative_to(HERE.parent))
    print(f"fit it with:  edgefit fit {config}")


if __name__ == "__main__":
    main()
