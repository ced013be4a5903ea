"""The demo's invented region: eight SIMULATED sightlines through "the
Brindle Cloud", a made-up molecular cloud.

Every name and number here is invented for the demonstration (the
sightline names are made-up place words, not shaped like any catalogue
designation).  Each sightline is a bright background X-ray source seen
through the cloud with the built-in two-arm grating-like instrument
(:mod:`edgefit.data.instrument`); its truth is a hydrogen column N_H, a
silicon depletion (the fraction of Si in grains), olivine grains with an
MRN-like power-law size distribution, and a power-law continuum.  Seven
sightlines have grains up to 0.25 µm; one ("Cinder Ford") has grains up to
1.5 µm, large enough that their interiors are shielded and the dust edge
is weaker per Si atom.  The silicon abundance per H is the package's
default abundance table's, so the total Si column grows with N_H with
that slope.

Hydrogen columns "from other tracers" (21-cm HI and H2) are invented
too, with 5 % errors, and drawn around the truth with a fixed seed.
"""
from __future__ import annotations

import numpy as np

__all__ = ["REGION", "SIGHTLINES", "EXPOSURE_S", "BAND_KEV", "FIT_RANGE_KEV", "AMAX_FIT_UM",
           "si_abundance", "truth_of", "simulation_dict", "tracer_columns"]

#: Name of the invented region (always shown with "simulated").
REGION = "Brindle Cloud (simulated)"
#: Exposure of every observation (s), band of the responses and fit range (keV).
EXPOSURE_S = 1.2e5
BAND_KEV = (1.65, 2.15)
FIT_RANGE_KEV = (1.67, 2.12)
ENERGY_STEP_KEV = 0.001
#: Upper grain size assumed by the fits (µm): the MRN-like default.
AMAX_FIT_UM = 0.25
TRACER_SEED = 424242
#: Energy (keV) at which the continuum norm is given in the model: inside
#: the band, so that norm and photon index are nearly uncorrelated (short
#: MCMC autocorrelation times).
PIVOT_KEV = 1.85

#: name, N_H (1e22 cm^-2), Si depletion, largest grain radius (µm),
#: continuum photon index, continuum norm (ph cm^-2 s^-1 keV^-1 at 1 keV;
#: the model's norm is at PIVOT_KEV),
#: molecular fraction 2 N(H2) / N_H.  All invented.
SIGHTLINES = (
    ("Osprey Gate", 0.8, 0.62, 0.25, 1.9, 30.0, 0.10),
    ("Tallow Reach", 1.2, 0.70, 0.25, 2.0, 26.0, 0.15),
    ("Quill Hollow", 1.6, 0.66, 0.25, 1.7, 22.0, 0.20),
    ("Marrow Spire", 2.0, 0.74, 0.25, 1.8, 28.0, 0.25),
    ("Cinder Ford", 2.4, 0.72, 1.50, 2.1, 32.0, 0.30),
    ("Juniper Shoal", 2.8, 0.78, 0.25, 1.9, 30.0, 0.35),
    ("Hazel Weir", 3.3, 0.76, 0.25, 2.0, 34.0, 0.40),
    ("Lumen Cairn", 3.8, 0.81, 0.25, 1.8, 30.0, 0.45),
)


def si_abundance():
    """Si atoms per H atom of the package's default abundance table."""
    from ..physics.abundances import abundance

    return float(abundance("Si"))


def truth_of(row):
    """The simulated truth of one sightline (full parameter names of the
    demo model, in the parameters' own units)."""
    name, nh, dep, amax, index, norm, mol = row
    n_si = nh * 1e22 * si_abundance() / 1e16          # 1e16 cm^-2
    return {"ism_nh": nh, "ism_mol_frac": mol, "gas_si_col": (1 - dep) * n_si,
            "dust_col": dep * n_si, "dust_amax": amax, "dust_amin": 0.005,
            "dust_index": 3.5, "continuum_index": index,
            "continuum_norm": norm * PIVOT_KEV ** -index}


def _model(truth, fit):
    """The [model] table: for simulating (``fit`` False, values = truth) or
    the manifest's defaults (``fit`` True: free columns, N_H and continuum,
    N_H starting per sightline at its tracer value, sizes fixed at MRN).

    N_H is left free on purpose: fixing it at a tracer value 5 % off moves
    several 1e16 cm^-2 of Si between the gas and the dust edge (the smooth
    absorption's curvature across the band trades against the gas edge)."""
    t = truth
    amax = AMAX_FIT_UM if fit else t["dust_amax"]
    return {
        "absorbers": ["ism", "gas_si", "dust"], "emission": ["continuum"],
        "components": {
            "ism": {"type": "smooth_ism", "options": {"exclude": ["Si"]},
                    "params": {"nh": ({"value": t["ism_nh"], "min": 0.1, "max": 10.0} if fit
                                      else {"value": t["ism_nh"], "fixed": True}),
                               "mol_frac": {"value": t["ism_mol_frac"], "fixed": True}}},
            "gas_si": {"type": "gas_edge", "options": {"element": "Si"},
                       "params": {"col": {"value": 10.0 if fit else t["gas_si_col"],
                                          "min": 0.0, "max": 300.0}}},
            "dust": {"type": "dust_edge", "options": {"material": "olivine", "element": "Si"},
                     "params": {"col": {"value": 30.0 if fit else t["dust_col"],
                                        "min": 0.0, "max": 500.0},
                                "amax": {"value": amax, "fixed": True},
                                "amin": {"value": 0.005, "fixed": True},
                                "index": {"value": 3.5, "fixed": True}}},
            "continuum": {"type": "photon_power_law", "options": {"pivot": PIVOT_KEV},
                          "params": {"index": {"value": 2.0 if fit else t["continuum_index"],
                                               "min": 0.5, "max": 4.0},
                                     "norm": {"value": 8.0 if fit else t["continuum_norm"],
                                              "min": 0.1, "max": 500.0}}}}}


def simulation_dict(row, seed):
    """Simulation configuration (the ``edgefit simulate`` format) of one
    sightline."""
    return {"sightline": {"name": f"{row[0]} (simulated)"},
            "simulate": {"exposure": EXPOSURE_S, "arms": ["high", "medium"],
                         "band": list(BAND_KEV), "energy_step": ENERGY_STEP_KEV,
                         "background_rate": 1e-4, "background_area": 5.0, "seed": int(seed),
                         "fit_range": list(FIT_RANGE_KEV)},
            "model": _model(truth_of(row), fit=False)}


def fit_model(row=None):
    """The [model] table the demo's batch fits (sizes fixed at MRN)."""
    return _model(truth_of(row or SIGHTLINES[0]), fit=True)


def tracer_columns(rng=None):
    """Invented 21-cm and H2 columns (cm^-2) with 5 % errors, drawn around
    the truth: {name: dict(nh_hi, nh_hi_err, n_h2, n_h2_err)}."""
    rng = np.random.default_rng(TRACER_SEED if rng is None else rng)
    out = {}
    for row in SIGHTLINES:
        name, nh, mol = row[0], row[1] * 1e22, row[6]
        hi, h2 = nh * (1 - mol), nh * mol / 2
        out[name] = {"nh_hi": float(hi * (1 + 0.05 * rng.standard_normal())),
                     "nh_hi_err": float(0.05 * hi),
                     "n_h2": float(h2 * (1 + 0.05 * rng.standard_normal())),
                     "n_h2_err": float(0.05 * h2)}
    return out
