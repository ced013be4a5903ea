"""Make the SIMULATED example sightline "SIM-J1746" (an invented source).

Everything here is made up for demonstration: the source name, its
column density, silicon depletion, grain sizes, continuum and exposure.
The files are written with edgefit's own OGIP writers and simulated with
its own Poisson simulation, through a synthetic grating-like response
(Gaussian line-spread function of constant width in wavelength).

Writes into ``examples/sim_j1746/``:

* ``sim_j1746_meg_m1.pha``, ``sim_j1746_meg_p1.pha`` -- the -1 and +1
  orders (two "arms"), each with its ``.rmf`` and ``.arf``;
* ``sim_j1746_bkg.pha`` -- a background spectrum shared by both;
* ``truth.json`` -- the invented parameter values used.

Run:  python examples/make_simulated_sightline.py
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from edgefit.data import gaussian_response, simulate_spectrum, write_pha, write_response
from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw, SmoothISM

HERE = Path(__file__).resolve().parent / "sim_j1746"
SOURCE = "SIM-J1746 (simulated)"

#: Invented "truth" of the simulated sightline (demo values only).
TRUTH = {
    "ism_nh": 2.2,          # 1e22 cm-2
    "gas_si_col": 6.0,      # 1e16 cm-2 of Si in the gas phase
    "dust_ndust": 34.0,     # 1e16 cm-2 of Si locked in grains
    "dust_amax": 0.30,      # um, upper grain size of the MRN-like distribution
    "powlaw_index": 1.7,
    "powlaw_norm": 1.2,     # ph cm-2 s-1 keV-1 at 1 keV
}


def build_model():
    ism = SmoothISM("ism", exclude=("Si",))
    gas = GasEdge("gas_si", element="Si")
    dust = DustEdge("dust", material="olivine", element="Si")
    cont = PhotonPowerLaw("powlaw")
    return ism * gas * dust * cont


def main(seed=20260101):
    HERE.mkdir(parents=True, exist_ok=True)
    model = build_model()
    rng = np.random.default_rng(seed)
    energy_edges = np.linspace(1.55, 2.25, 1401)
    channel_edges = np.linspace(1.6, 2.2, 601)
    exposure = 1.5e5
    written = []
    for order, area in ((-1, 28.0), (1, 25.0)):
        resp = gaussian_response(energy_edges, channel_edges, fwhm=0.023, area_cm2=area,
                                 meta={"simulated": True})
        tag = f"meg_{'m' if order < 0 else 'p'}1"
        rmf = HERE / f"sim_j1746_{tag}.rmf"
        arf = HERE / f"sim_j1746_{tag}.arf"
        write_response(resp, rmf, arf, overwrite=True, simulated=True)
        flux = model.evaluate(resp.grid, TRUTH)
        bkg_rate = np.full(resp.n_channels, 2e-5)  # counts/s/channel, background region
        spec = simulate_spectrum(flux, resp, exposure, rng, background_rate=bkg_rate,
                                 backscal=1.0, background_backscal=5.0,
                                 meta={"order": order, "arm": 3, "object": SOURCE})
        bkg = spec.background
        bkg.meta.update(object=SOURCE)
        bkg_path = HERE / f"sim_j1746_{tag}_bkg.pha"
        write_pha(bkg_path, bkg, overwrite=True, background=True, object_name=SOURCE)
        pha = HERE / f"sim_j1746_{tag}.pha"
        write_pha(pha, spec, overwrite=True, respfile=rmf.name, ancrfile=arf.name,
                  backfile=bkg_path.name, object_name=SOURCE)
        written += [pha, rmf, arf, bkg_path]
    (HERE / "truth.json").write_text(json.dumps(
        {"note": "SIMULATED sightline with invented values (demo only)", "source": SOURCE,
         "seed": seed, "exposure_s": exposure, "truth": TRUTH}, indent=2) + "\n")
    for p in written:
        print("wrote", p.relative_to(HERE.parent))


if __name__ == "__main__":
    main()
