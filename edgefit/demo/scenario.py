"""The built-in demo: a SIMULATED sightline, written to disk and fitted.

Everything here is invented for demonstration -- the source "Amber Loom",
its columns, depletion, grains, continuum, instrument and exposure.  The
scenario is chosen so that the demo shows the science: a bright source
observed for 150 ks with two gratings (a high- and a medium-resolution
one, each with its -1 and +1 orders), so that the gas-phase and the dust
Si columns are each measured at several sigma.  What separates them is
the shape of the dust edge -- extinction by grains (absorption with
self-shielding plus scattering out of the narrow extraction region, both
from Mie theory with the anomalous dispersion of the grain material near
the edge) against the bare atomic edge of the gas.  To keep that
separation clean the demo fixes what a short observation cannot tell
apart: the grain size distribution (MRN-like power law, index 3.5,
radii 0.005-0.5 um), the fraction of scattered light kept (0), the
widths and velocity of the ion lines.

Layer 6 (outside): :func:`write_sightline` writes OGIP files, a
configuration and the truth; :func:`run_demo` then runs exactly the
pipeline of ``edgefit fit`` (:func:`edgefit.analysis.pipeline.run_sightline`) and
adds a comparison with the simulated truth.  ``examples/
make_simulated_sightline.py`` writes the same files into
``examples/amber_loom/``.
"""
from __future__ import annotations

import json
import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..stats import ONE_SIGMA

if TYPE_CHECKING:
    from ..data import Response, Spectrum
    from ..inference import FitResult
    from ..models.base import ModelNode

__all__ = ["SOURCE", "TRUTH", "INSTRUMENT", "EXPOSURE_S", "SEED", "build_model",
           "instrument_responses", "simulate_observation", "write_sightline", "truth_comparison", "run_demo"]

#: Name of the invented source (always shown with "simulated").
SOURCE = "Amber Loom (simulated)"

#: Invented truth of the simulated sightline, full parameter names in the
#: parameters' own units (demo values only).  Si: 12 + 28 = 40e16 cm^-2,
#: about the Wilms et al. (2000) Si abundance times N_H; depletion 0.70.
TRUTH = {
    "ism_nh": 2.2,              # 1e22 cm-2
    "ism_mol_frac": 0.2,
    "gas_si_col": 12.0,         # 1e16 cm-2, Si in the gas phase
    "gas_si_shift": 0.0,        # eV
    "dust_col": 28.0,           # 1e16 cm-2, Si locked in grains
    "dust_amin": 0.005,         # um
    "dust_amax": 0.5,           # um
    "dust_index": 3.5,
    "dust_shift": 0.0,          # eV
    "dust_fin": 0.0,
    "ions_logn_si13": 16.3,     # log10 cm-2
    "ions_logn_si14": 16.0,
    "ions_b": 300.0,            # km/s
    "ions_v": 0.0,              # km/s
    "continuum_index": 1.8,
    "continuum_norm": 8.0,         # ph cm-2 s-1 keV-1 at 1 keV
}

#: Invented grating-like instrument: (file tag, label, FWHM in Angstrom,
#: effective area at 1.9 keV in cm^2, channel width in Angstrom).
INSTRUMENT = (
    ("hig_m1", "HiRes -1 (simulated)", 0.012, 22.0, 0.0025),
    ("hig_p1", "HiRes +1 (simulated)", 0.012, 20.0, 0.0025),
    ("med_m1", "MedRes -1 (simulated)", 0.023, 45.0, 0.005),
    ("med_p1", "MedRes +1 (simulated)", 0.023, 40.0, 0.005),
)
#: Exposure of every spectrum (one invented observation), s.
EXPOSURE_S = 1.5e5
#: Background: counts s^-1 per channel in a background region 5x the
#: source region's area (BACKSCAL 5 against 1).
BACKGROUND_RATE = 1e-4
BACKSCAL_BKG = 5.0
SEED = 20260101
#: Model energy grid (keV) and channel range (Angstrom) of the responses.
ENERGY_KEV = (1.50, 2.30, 1600)
CHANNELS_ANGSTROM = (5.5, 7.75)

_CONFIG = """\
# SIMULATED sightline "Amber Loom": an invented source with made-up values
# (written by edgefit.demo; see truth.json).  Run:
#     edgefit fit {config_name}
# File names are relative to this file.

[sightline]
name = "{source}"
output = "{output}"
{spectra}
[model]
absorbers = ["ism", "gas_si", "dust", "ions"]   # multiplied together
emission = ["continuum"]                           # added together

[model.components.ism]
type = "smooth_ism"
options = {{ exclude = ["Si"] }}     # Si is carried by gas_si and dust
params.nh = {{ value = 1.5, min = 0.1, max = 10.0 }}

[model.components.gas_si]
type = "gas_edge"
options = {{ element = "Si" }}
params.col = {{ value = 5.0, min = 0.0, max = 200.0 }}

[model.components.dust]
type = "dust_edge"
options = {{ material = "olivine", element = "Si" }}
params.col = {{ value = 20.0, min = 0.0, max = 300.0 }}
# size distribution held fixed (MRN-like power law): a 150 ks spectrum
# cannot tell grain size from Si column on its own
params.amin = {{ value = 0.005, fixed = true }}
params.amax = {{ value = 0.5, fixed = true }}
params.index = {{ value = 3.5, fixed = true }}
params.fin = {{ value = 0.0, fixed = true }}

[model.components.ions]
type = "ion_lines"
options = {{ ions = ["Si XIII", "Si XIV"] }}
params.logn_si13 = {{ value = 16.0, min = 12.0, max = 19.0 }}
params.logn_si14 = {{ value = 16.0, min = 12.0, max = 19.0 }}
params.b = {{ value = 300.0, fixed = true }}
params.v = {{ value = 0.0, fixed = true }}

[model.components.continuum]
type = "photon_power_law"
params.index = {{ value = 2.0, min = 0.5, max = 4.0 }}
params.norm = {{ value = 5.0, min = 0.01, max = 100.0 }}

[fit]
statistic = "poisson"

[errors]
profile = ["gas_si_col", "dust_col"]
levels = {levels}

[mcmc]
enabled = true
walkers = {walkers}
steps = {steps}
seed = 1
progress = true

[goodness]
ppc_draws = {ppc}

[plots]
unit = "Angstrom"
window = [6.05, 7.05]
display_min_counts = 2000
"""

_SPECTRUM = """
[[spectrum]]
label = "{label}"
pha = "{stem}_{tag}.pha"     # RESPFILE/ANCRFILE/BACKFILE from its header
range = [1.6, 2.2]           # keV
"""


def build_model() -> ModelNode:
    """The simulated sightline's model (components named as in the
    configuration): SmoothISM(no Si) x GasEdge(Si) x DustEdge(olivine, Si)
    x IonLines(Si XIII, Si XIV) x power law."""
    from ..models import DustEdge, GasEdge, IonLines, PhotonPowerLaw, SmoothISM

    return (SmoothISM("ism", exclude=("Si",)) * GasEdge("gas_si", element="Si")
            * DustEdge("dust", material="olivine", element="Si")
            * IonLines("ions", ions=["Si XIII", "Si XIV"]) * PhotonPowerLaw("continuum"))


def _area(area_19):
    """Invented effective-area curve: ``area_19`` cm^2 at 1.9 keV rising
    30 % per keV (a smooth stand-in for a grating's area)."""
    return lambda e: area_19 * (1.0 + 0.3 * (np.asarray(e) - 1.9))


def instrument_responses() -> list[Response]:
    """The invented instrument's four responses (in memory), in the order
    of :data:`INSTRUMENT`: :func:`edgefit.data.gaussian_response` with the
    FWHM constant in wavelength and channels in wavelength order."""
    from astropy import units as u

    from ..data import gaussian_response

    energy = np.linspace(*ENERGY_KEV[:2], ENERGY_KEV[2] + 1)
    out = []
    for _tag, _label, fwhm, area, dlam in INSTRUMENT:
        n_ch = int(round((CHANNELS_ANGSTROM[1] - CHANNELS_ANGSTROM[0]) / dlam))
        channels = np.linspace(*CHANNELS_ANGSTROM, n_ch + 1) * u.AA
        out.append(gaussian_response(energy, channels, fwhm, _area(area),
                                     wavelength_order=True, meta={"simulated": True}))
    return out


def simulate_observation(model: ModelNode, response: Response, rng: np.random.Generator,
                         tag: str, values: Mapping[str, float] | None = None) -> Spectrum:
    """One Poisson realisation of the simulated sightline through
    ``response`` (with its background), as a Spectrum."""
    from ..data import simulate_spectrum

    flux = model.evaluate(response.grid, TRUTH if values is None else values)
    return simulate_spectrum(flux, response, EXPOSURE_S, rng,
                             background_rate=np.full(response.n_channels, BACKGROUND_RATE),
                             backscal=1.0, background_backscal=BACKSCAL_BKG,
                             meta={"order": -1 if tag.endswith("m1") else 1, "object": SOURCE})


def write_sightline(folder: str | os.PathLike[str], *, stem: str = "amber_loom", seed: int = SEED,
                    walkers: int = 32, steps: int = 1200, ppc_draws: int = 200,
                    levels: tuple[float, ...] = (0.6827, 0.90),
                    output: str = "results") -> Path:
    """Simulate the sightline and write it into ``folder``.

    Writes, per spectrum, ``<stem>_<tag>.pha`` with its ``.rmf``, ``.arf``
    and ``_bkg.pha``; the configuration ``<stem>.toml`` (MCMC with
    ``walkers`` x ``steps``, ``ppc_draws`` predictive draws, profile
    ``levels``, results into ``output`` relative to the folder); and
    ``truth.json``.  Responses come from
    :func:`edgefit.data.gaussian_response` (FWHM constant in wavelength,
    channels in wavelength order), counts from
    :func:`edgefit.data.simulate_spectrum` with a seeded generator.

    Returns the path of the configuration file.
    """
    from ..data import write_pha, write_response

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    model = build_model()
    rng = np.random.default_rng(seed)
    spectra = []
    for (tag, label, *_), resp in zip(INSTRUMENT, instrument_responses()):
        rmf, arf = folder / f"{stem}_{tag}.rmf", folder / f"{stem}_{tag}.arf"
        write_response(resp, rmf, arf, overwrite=True, simulated=True)
        spec = simulate_observation(model, resp, rng, tag)
        assert spec.background is not None  # simulate_observation always adds one
        bkg = folder / f"{stem}_{tag}_bkg.pha"
        write_pha(bkg, spec.background, overwrite=True, background=True, object_name=SOURCE)
        write_pha(folder / f"{stem}_{tag}.pha", spec, overwrite=True, respfile=rmf.name,
                  ancrfile=arf.name, backfile=bkg.name, object_name=SOURCE)
        spectra.append(_SPECTRUM.format(label=label, stem=stem, tag=tag))
    config = folder / f"{stem}.toml"
    config.write_text(_CONFIG.format(
        config_name=config.name, source=SOURCE, output=output, spectra="".join(spectra),
        levels=json.dumps([float(x) for x in levels]), walkers=int(walkers),
        steps=int(steps), ppc=int(ppc_draws)))
    (folder / "truth.json").write_text(json.dumps(
        {"note": "SIMULATED sightline with invented values (demo only)", "source": SOURCE,
         "seed": seed, "exposure_s": EXPOSURE_S,
         "instrument": [dict(zip(("tag", "label", "fwhm_angstrom", "area_cm2_at_1.9keV",
                                  "channel_angstrom"), row)) for row in INSTRUMENT],
         "truth": TRUTH}, indent=2) + "\n")
    return config


def truth_comparison(result: FitResult, truth: Mapping[str, float] = TRUTH) -> list[tuple]:
    """Rows (name, unit, simulated truth, estimate, lower, upper, pull)
    comparing a fit of the simulated sightline with its truth.

    Free parameters use the profile-likelihood 68.3 % interval when one
    was computed, else the covariance error; derived quantities (columns,
    depletion, optical depths, grain and mass columns, self-shielding) use
    their posterior median and 68.3 % interval, with the truth computed by
    the same components at the true parameter values.  ``pull`` is
    (estimate - truth) / (half-width on the truth's side).
    """
    from ..inference.derived import _evaluate_all

    rows = []

    def pull(est, lo, hi, true):
        if lo is None or hi is None or not all(map(math.isfinite, (est, lo, hi))):
            return math.nan
        half = (est - lo) if true < est else (hi - est)
        return (est - true) / half if half > 0 else math.nan

    for name in result.free_names:
        if name not in truth:
            continue
        est = result.values[name]
        iv = result.intervals.get(name, {})
        lev = min(iv, key=lambda x: abs(x - ONE_SIGMA)) if iv else None
        if lev is not None and iv[lev].lower is not None and iv[lev].upper is not None:
            lo, hi = iv[lev].lower, iv[lev].upper
        else:
            err = result.error(name) or math.nan
            lo, hi = est - err, est + err
        rows.append((name, result.unit(name), truth[name], est, lo, hi,
                     pull(est, lo, hi, truth[name])))
    if result.derived is not None:
        true_values = dict(result.values)
        true_values.update({k: v for k, v in truth.items() if k in true_values})
        true_der = _evaluate_all(result.model, true_values, result.derived.reference_energies)
        for q in result.derived.quantities:
            if q.name not in true_der:
                continue
            lo, hi = q.interval(ONE_SIGMA)
            t = true_der[q.name][0]
            rows.append((q.name, q.unit, t, q.median, lo, hi, pull(q.median, lo, hi, t)))
    return rows


def format_comparison(rows):
    """The comparison rows as a text table."""
    lines = [f"{'quantity':<26}{'unit':<12}{'simulated truth':>16}{'estimate':>12}"
             f"{'68% interval':>26}{'pull':>7}"]
    lines.append("-" * len(lines[0]))
    for name, unit, t, est, lo, hi, p in rows:
        ptxt = f"{p:.2f}" if math.isfinite(p) else "--"
        lines.append(f"{name:<26}{unit:<12}{t:>16.4g}{est:>12.4g}"
                     f"{f'[{lo:.4g}, {hi:.4g}]':>26}{ptxt:>7}")
    return "\n".join(lines)


def run_demo(output: str | os.PathLike[str] = "edgefit-demo", *, quick: bool = False,
             quiet: bool = False) -> tuple[FitResult, list[tuple], Path]:
    """Simulate Amber Loom into ``output``, fit it exactly as ``edgefit fit``
    would, and compare with the truth.

    ``quick`` shortens the MCMC (24 walkers x 60 steps, a smoke test, not
    a converged posterior: edgefit says so) and the predictive check.
    Writes into ``output``: the simulated files and their configuration
    ``amber_loom.toml``, ``truth.json``, and under ``results/`` the fit
    tables (``fit.ecsv``, ``fit.fits``, ``fit_parameters.ecsv``), JSON,
    summary, ``truth_comparison.txt`` and figures.  Returns
    (FitResult, comparison rows, results folder).
    """
    from ..analysis.config import load_config
    from ..analysis.pipeline import run_sightline
    from ..plotting.fit_plots import save_configured

    output = Path(output)
    say = (lambda msg: None) if quiet else (lambda msg: print(msg, flush=True))
    if quick:
        cfg_path = write_sightline(output, walkers=24, steps=60, ppc_draws=30,
                                   levels=(0.6827,))
    else:
        cfg_path = write_sightline(output)
    say(f"wrote the SIMULATED sightline {SOURCE} and its configuration to {output}/")
    cfg = load_config(cfg_path)
    result = run_sightline(cfg, quiet=quiet, command="demo", figures=save_configured)
    rows = truth_comparison(result)
    text = ("fit of the SIMULATED sightline against its invented truth "
            "(pull = offset in units of the 68 % half-width)\n" + format_comparison(rows))
    (cfg.output / "truth_comparison.txt").write_text(text + "\n")
    say("")
    say(text)
    if result.mcmc is not None and result.mcmc.short_chain:
        say("note: the demo's MCMC is deliberately short (minutes, not hours); for "
            "published numbers run mcmc.steps >= 50 autocorrelation times")
    say("")
    say(f"inputs (simulated spectra, responses, {cfg_path.name}): {output}/")
    say(f"results (fit.ecsv, fit.json, fit_summary.txt, truth_comparison.txt, "
        f"spectra.png, transmission.png, corner.png): {cfg.output}/")
    return result, rows, cfg.output
