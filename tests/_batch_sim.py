"""SIMULATED sample for the batch tests and benchmark: invented sightlines
("SIM-B01", ...), each with two grating-like spectra (-1 and +1 orders),
drawn with edgefit's own simulator (gaussian_response, simulate_spectrum)
from a Si gas edge x Si dust edge x power law with invented columns.  Small
and fast: 0.4 keV of band, 120 channels per spectrum."""
import numpy as np

from edgefit.data import gaussian_response, simulate_spectrum, write_pha, write_response

#: Invented truth ranges (demo-style values, not measurements).
GAS_COL = (8.0, 16.0)     # 1e16 cm-2
DUST_COL = (18.0, 34.0)   # 1e16 cm-2

MODEL_TOML = """
[defaults.model]
absorbers = ["gas_si", "dust"]
emission = ["pl"]

[defaults.model.components.gas_si]
type = "gas_edge"
options = {{ element = "Si" }}
params.col = {{ value = 10.0, min = 0.0, max = 200.0 }}

[defaults.model.components.dust]
type = "dust_edge"
options = {{ material = "olivine", element = "Si" }}
params.col = {{ value = 20.0, min = 0.0, max = 300.0 }}
params.amin = {{ value = 0.005, fixed = true }}
params.amax = {{ value = 0.25, fixed = true }}
params.index = {{ value = 3.5, fixed = true }}
params.fin = {{ value = 0.0, fixed = true }}

[defaults.model.components.pl]
type = "photon_power_law"
params.index = {{ value = 2.0, min = 0.5, max = 4.0 }}
params.norm = {{ value = 5.0, min = 0.01, max = 100.0 }}

[defaults.spectrum]
range = [1.70, 2.10]

[defaults.errors]
profile = {profile}

[defaults.derived]
draws = {draws}

[defaults.plots]
enabled = false
"""


def build_model(gas, dust):
    from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw

    return (GasEdge("gas_si", element="Si", col=gas)
            * DustEdge("dust", material="olivine", element="Si", col=dust, amin=0.005,
                       amax=0.25, index=3.5, fin=0.0)
            * PhotonPowerLaw("pl", index=1.8, norm=8.0))


def write_sample(folder, n=8, seed=11, exposure=4e4, profile='["gas_si_col", "dust_col"]',
                 hydrogen=True, draws=2000):
    """Write ``n`` simulated two-spectrum sightlines and a manifest
    ``sample.toml`` into ``folder``; returns the manifest path."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    energy = np.linspace(1.60, 2.20, 241)
    resp = gaussian_response(energy, np.linspace(1.65, 2.15, 121), fwhm=0.02, area_cm2=30.0)
    write_response(resp, folder / "arm.rmf", folder / "arm.arf", overwrite=True,
                   simulated=True)
    lines = [MODEL_TOML.format(profile=profile, draws=int(draws))]
    for i in range(n):
        name = f"SIM-B{i + 1:02d}"
        gas, dust = rng.uniform(*GAS_COL), rng.uniform(*DUST_COL)
        flux = build_model(gas, dust).evaluate(resp.grid)
        phas = []
        for order in ("m1", "p1"):
            spec = simulate_spectrum(flux, resp, exposure, rng,
                                     meta={"object": f"{name} (simulated)"})
            pha = f"{name.lower()}_{order}.pha"
            write_pha(folder / pha, spec, overwrite=True, respfile="arm.rmf",
                      ancrfile="arm.arf", object_name=f"{name} (simulated)")
            phas.append(pha)
        lines.append(f'\n[[sightline]]\nname = "{name}"\npha = {phas!r}\n'.replace("'", '"'))
        if hydrogen:
            lines.append(f"nh_hi = {2.0e21 + 1e20 * i:.6e}\nnh_hi_err = 1.0e20\n"
                         f"n_h2 = {3.0e20 + 1e19 * i:.6e}\nn_h2_err = 5.0e19\n")
    manifest = folder / "sample.toml"
    manifest.write_text("".join(lines))
    return manifest
