"""Fit one SIMULATED sightline ("Amber Loom", an invented source shipped in
examples/amber_loom/): four grating spectra, gas-phase and dust Si edges.

Run:  python examples/one_sightline.py [--quick] [-o OUT]
(--quick: profile intervals only, no MCMC).
"""
import argparse
from pathlib import Path

import astropy.units as u

from edgefit.data import read_pha
from edgefit.inference import (Dataset, derived_quantities, fit_sightline,
                               profile_intervals, run_mcmc)
from edgefit.models import DustEdge, GasEdge, IonLines, PhotonPowerLaw, SmoothISM

HERE = Path(__file__).resolve().parent / "amber_loom"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="no MCMC")
    ap.add_argument("-o", "--output", default="one_sightline_results")
    args = ap.parse_args(argv)

    # --- the fit in about fifteen lines -----------------------------------
    spectra = [read_pha(HERE / f"amber_loom_{g}_{o}1.pha") for g in ("hig", "med") for o in "mp"]
    data = [Dataset(s, ranges=(1.6 * u.keV, 2.2 * u.keV)) for s in spectra]
    model = (SmoothISM("ism", exclude=["Si"])
             * GasEdge("gas_si", element="Si")
             * DustEdge("dust", material="olivine", element="Si",
                        fixed=["amax"], amax=0.5 * u.um)        # MRN-like, up to 0.5 um
             * IonLines("ions", ions=["Si XIII", "Si XIV"], fixed=["b", "v"], b=300.0)
             * PhotonPowerLaw("continuum"))
    result = fit_sightline(model, data)                        # Poisson (C statistic)
    profile_intervals(result, ["gas_si_col", "dust_col"], levels=(0.6827, 0.95))
    if not args.quick:
        run_mcmc(result, nwalkers=32, nsteps=3000, seed=1, progress=True)
    derived_quantities(result)                                 # columns, depletion, tau
    print(result.summary())
    result.write(args.output)                                  # ECSV/FITS with units, JSON
    print(f"\nresults in {args.output}/ (a SIMULATED sightline: see {HERE}/truth.json)")


if __name__ == "__main__":
    main()
