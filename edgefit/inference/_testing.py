"""Small synthetic ingredients for tests and benchmarks of the inference
layer (not physics): a toy grating-like response, a toy absorber and a
Poisson simulation of a model.

The response and the simulation are thin conveniences over the data
layer (:func:`edgefit.data.gaussian_response`,
:func:`edgefit.data.simulate_spectrum`); only the toy absorber is new.
It is exp(-tau) with tau = tau0 (E/E0)^-3 + step above an edge energy --
the textbook shape of photoabsorption (sigma ~ E^-3 far from edges) with a
sharp K edge -- and is deliberately *not* registered in
:data:`edgefit.models.base.COMPONENTS`.
"""
from __future__ import annotations

import numpy as np

from ..models.base import MULTIPLICATIVE, Component, Param
from ..physics.atomic import EDGE_OFFSET_KEV

__all__ = ["toy_response", "ToyEdgeAbsorber", "toy_model", "TOY_TRUTH", "simulate_counts",
           "EDGE_FIT_RANGES", "edge_sightline_model", "edge_sightline_truth",
           "simulate_edge_sightline", "three_arm_datasets",
           "FOUR_EDGE_ARMS", "FOUR_EDGE_BANDS", "four_edge_truth", "four_edge_model",
           "four_edge_responses", "four_edge_spectra"]


def toy_response(emin=1.6, emax=2.2, n_channels=900, n_energy=None, fwhm_kev=None,
                 area_cm2=100.0, area_slope=0.0):
    """A grating-like response for tests: ``n_channels`` channels of equal
    width in energy over [emin, emax] keV, a Gaussian line-spread function
    of constant FWHM in energy (default 2.5 channel widths), an effective
    area ``area_cm2 (E/1.9 keV)^area_slope`` cm^2, and ``n_energy`` model
    bins (default 1.2 n_channels) over a range 10 % wider than the
    channels so that the ends are fed.  Built by
    :func:`edgefit.data.gaussian_response`."""
    from ..data import gaussian_response

    n_energy = n_energy or int(1.2 * n_channels)
    pad = 0.05 * (emax - emin)
    fwhm = fwhm_kev or 2.5 * (emax - emin) / n_channels
    return gaussian_response(np.linspace(emin - pad, emax + pad, n_energy + 1),
                             np.linspace(emin, emax, n_channels + 1), fwhm,
                             lambda e: area_cm2 * (e / 1.9) ** area_slope, fwhm_unit="kev")


class ToyEdgeAbsorber(Component):
    """exp(-[tau0 (E/E0)^-3 + step * (E >= edge) (E/edge)^-3]) at bin
    centres (a test absorber, not physics)."""

    kind = MULTIPLICATIVE
    default_name = "toyabs"
    params = (
        Param("tau0", 0.5, 0.0, 20.0, "", "smooth optical depth at E0 = 1.9 keV"),
        Param("step", 0.1, 0.0, 5.0, "", "edge jump in optical depth"),
    )

    def __init__(self, name=None, *, edge_kev=1.84, fixed=(), **values):
        super().__init__(name, fixed=fixed, **values)
        self.edge_kev = float(edge_kev)

    def optical_depth(self, energy_kev, **values):
        v = self._merged(values)
        e = np.asarray(energy_kev, dtype=float)
        return (v["tau0"] * (e / 1.9) ** -3
                + v["step"] * (e >= self.edge_kev) * (e / self.edge_kev) ** -3)

    def _evaluate(self, grid, pre, tau0, step):
        return np.exp(-self.optical_depth(grid.mid, tau0=tau0, step=step))

    def reference_energy(self):
        """Just above the edge (edge + 20 eV, atomic.EDGE_OFFSET_KEV)."""
        return self.edge_kev + EDGE_OFFSET_KEV

    def derived(self, **values):
        v = self._merged(values)
        return {"edge_jump": (v["step"], "")}


#: Values of :func:`toy_model`'s free parameters used as the truth of
#: simulations (invented).
TOY_TRUTH = {"abs_step": 0.3, "pl_index": 1.8, "pl_norm": 0.5}


def toy_model():
    """ToyEdgeAbsorber("abs", tau0 fixed at 0.4) x PhotonPowerLaw("pl"),
    starting at :data:`TOY_TRUTH`: a cheap three-parameter model for fit
    tests."""
    from ..models.continuum import PhotonPowerLaw

    return ToyEdgeAbsorber("abs", tau0=0.4, step=0.3, fixed=["tau0"]) * PhotonPowerLaw(
        "pl", index=1.8, norm=0.5)


def simulate_counts(model, response, exposure, values=None, seed=None, background=None):
    """Poisson counts of ``model`` (at ``values``) folded through
    ``response``: a :class:`~edgefit.data.spectrum.Spectrum` from
    :func:`edgefit.data.simulate_spectrum` (``seed`` an int or a numpy
    Generator), with ``background`` (a Spectrum) attached as given."""
    from ..data import simulate_spectrum

    spec = simulate_spectrum(model.evaluate(response.grid, values or {}), response, exposure,
                             seed)
    spec.background = background
    return spec


def three_arm_datasets(model, values):
    """Three simulated Si-edge spectra of ``model`` at ``values``: two arms
    sharing one energy grid (the second with 60 cm^2 and a narrower fit
    range), a third on its own grid with a background and grouping 15.
    Seeded (3, 5, 6), so the same call gives the same counts; it exercises
    the likelihood's shared plan, its fused kernels and the profiled-
    background path.  ``benchmarks/check_fit_numbers.py`` keeps reference
    numbers computed on these data, so changing them means rewriting that
    reference."""
    from ..data import simulate_spectrum
    from ..models import PhotonPowerLaw
    from .dataset import Dataset

    resp_a = toy_response(1.75, 2.05, n_channels=200)
    resp_b = toy_response(1.75, 2.05, n_channels=200, area_cm2=60.0)
    resp_c = toy_response(1.76, 2.04, n_channels=120)
    rng = np.random.default_rng(3)
    datasets = []
    for k, resp in enumerate((resp_a, resp_b)):
        spec = simulate_spectrum(model.evaluate(resp.grid, values), resp, 2e3 * (1 + k), rng)
        datasets.append(Dataset(spec, ranges=(1.78, 2.02) if k else None))
    bkg = simulate_counts(PhotonPowerLaw("b", index=1.0, norm=0.05), resp_c, 4e3, seed=5)
    bkg.backscal = 4.0
    spec = simulate_counts(model, resp_c, 2e3, values, seed=6, background=bkg)
    datasets.append(Dataset(spec, grouping=15))
    return datasets


#: Fit energy ranges (keV) of the simulated edge sightlines, inside the
#: default dust-table regions (:data:`edgefit.dust.tables.EDGE_REGIONS`).
EDGE_FIT_RANGES = {"Si": (1.70, 2.00), "Mg": (1.22, 1.42), "Fe": (0.67, 0.80),
                   "O": (0.50, 0.62)}


def edge_sightline_model(element="Si", material="olivine"):
    """The gas/dust model of one edge with the upper grain size free:
    SmoothISM("ism", excluding the element) x GasEdge("gas") x
    DustEdge("dust", MRN power law, amax free) x PhotonPowerLaw("pl")."""
    from ..models import DustEdge, GasEdge, PhotonPowerLaw, SmoothISM

    return (SmoothISM("ism", exclude=(element,)) * GasEdge("gas", element=element)
            * DustEdge("dust", material=material, element=element, sizes="power_law")
            * PhotonPowerLaw("pl"))


def edge_sightline_truth(model, element, nh, depletion, amax, index=1.8):
    """Parameter values of :func:`edge_sightline_model` for hydrogen column
    ``nh`` (1e22 cm^-2), the element's dust share ``depletion`` and upper
    grain size ``amax`` (µm); the element's total column is nh x its
    abundance in the model's table.  Returns (values, total in 1e16 cm^-2)."""
    from ..physics import abundances as _ab

    ism = model.component("ism")
    total = nh * 1e22 * _ab.abundances(ism.abundances)[element] / 1e16
    dust_col = model.component("dust").params[0].name
    return {"ism_nh": nh, "gas_col": (1 - depletion) * total,
            f"dust_{dust_col}": depletion * total, "dust_amax": amax,
            "pl_index": index, "pl_norm": 1.0}, total


def simulate_edge_sightline(model, element, values, rng, *, counts_per_channel=300.0,
                            arms=1, channel_angstrom=0.0025, fwhm_angstrom=0.012):
    """Seeded Poisson spectra of ``model`` at ``values`` around the edge of
    ``element``: ``arms`` grating-like spectra (Gaussian line spread of
    ``fwhm_angstrom``, channels of ``channel_angstrom``; a second arm has
    80 % of the area), the continuum normalisation scaled so that the
    median channel holds ``counts_per_channel`` counts in the first arm.
    Returns (list of Dataset, values with the scaled normalisation)."""
    from ..data import gaussian_response, simulate_spectrum
    from .._units import HC_KEV_ANGSTROM
    from .dataset import Dataset

    lo, hi = EDGE_FIT_RANGES[element]
    w_lo, w_hi = HC_KEV_ANGSTROM / (hi * 1.03), HC_KEV_ANGSTROM / (lo / 1.03)
    n_ch = int(round((w_hi - w_lo) / channel_angstrom))
    ch_edges = HC_KEV_ANGSTROM / np.linspace(w_hi, w_lo, n_ch + 1)
    e_edges = np.geomspace(lo / 1.05, hi * 1.05, int(1.3 * n_ch) + 1)
    values = dict(values)
    out = []
    for k in range(arms):
        resp = gaussian_response(e_edges, ch_edges, fwhm_angstrom, 100.0 * (1.0 - 0.2 * k))
        if k == 0:
            flux = model.evaluate(resp.grid, values)
            mu = resp.fold(flux)
            scale = counts_per_channel / float(np.median(mu))
            values["pl_norm"] = values.get("pl_norm", 1.0) * scale
            _check_inside_bounds(model, values, element)
        flux = model.evaluate(resp.grid, values)
        spec = simulate_spectrum(flux, resp, 1.0, rng,
                                 meta={"object": f"SIM-{element}-EDGE (simulated)"})
        out.append(Dataset(spec, ranges=(lo, hi), label=f"arm {k + 1}"))
    return out, values


def _check_inside_bounds(model, values, element):
    """A simulated truth outside the fit's bounds cannot be covered by any
    interval: refuse it (it once passed unnoticed, with the continuum
    normalisation of heavily absorbed O K sightlines at 1e19)."""
    from ..errors import ArgumentError

    params = model.make_params()
    for name, v in values.items():
        if name in params and not (params[name].min <= v <= params[name].max):
            raise ArgumentError(
                f"simulated {element} sightline: the true {name} = {v:.4g} lies outside the "
                f"fit's bounds [{params[name].min:.4g}, {params[name].max:.4g}]; draw a "
                "smaller hydrogen column or fewer counts")


# ---------------------------------------------------------------------------
# a simulated four-edge sightline (O K, Fe L, Mg K, Si K) for the tied-edge
# dust component: invented values throughout
# ---------------------------------------------------------------------------
#: Simulated arms: (label, wavelength range Angstrom, FWHM Angstrom, channel
#: width Angstrom, effective area cm^2) -- invented, grating-like.
FOUR_EDGE_ARMS = (
    ("short_a", (5.6, 10.6), 0.012, 0.01, 20.0),
    ("short_b", (5.6, 10.6), 0.023, 0.01, 35.0),
    ("long", (15.0, 25.0), 0.025, 0.02, 40.0),
)
#: Fit band (Angstrom) around each edge for single-edge fits.
FOUR_EDGE_BANDS = {"Si": (6.3, 7.3), "Mg": (8.9, 10.3), "Fe": (16.3, 18.8), "O": (21.0, 24.8)}


def four_edge_truth(nh=0.5, dust_si=6.5, amax=0.25, norm=20.0, index=1.8,
                    abundances="wilms00"):
    """Invented truth of a four-edge olivine sightline: N_H (1e22 cm^-2),
    the olivine dust column (Si in grains, 1e16 cm^-2; Mg, Fe, Si, O in
    grains stand 1:1:1:4) and each element's gas column chosen so that
    gas + dust equals the abundance table's value times N_H (so single-edge
    models with the smooth component counting the other elements are
    exact).  Returns (full parameter values of :func:`four_edge_model`,
    {element: (gas, dust) in 1e16 cm^-2})."""
    from ..physics import abundances as _ab

    table = _ab.abundances(abundances)
    stoich = {"Mg": 1.0, "Fe": 1.0, "Si": 1.0, "O": 4.0}
    cols = {}
    for el, c in stoich.items():
        total = table[el] * nh * 1e22 / 1e16
        dust = c * dust_si
        if not dust < total:
            from ..errors import ArgumentError

            raise ArgumentError(f"dust {el} {dust} exceeds the total {total}")
        cols[el] = (total - dust, dust)
    values = {"ism_nh": nh, "grains_col": dust_si, "grains_amax": amax,
              "pl_norm": norm, "pl_index": index}
    for el, (gas, _) in cols.items():
        values[f"gas_{el.lower()}_col"] = gas
    return values, cols


def four_edge_model(**dust_kw):
    """SmoothISM(exclude O, Mg, Si, Fe) x one GasEdge per element x olivine
    MultiEdgeDust ("grains", upper size free) x PhotonPowerLaw("pl")."""
    from ..models.continuum import PhotonPowerLaw
    from ..models.multi_edge import tied_edge_model

    return tied_edge_model(PhotonPowerLaw("pl"), materials="olivine",
                           elements=("O", "Fe", "Mg", "Si"), **dust_kw)


def four_edge_responses(arms=FOUR_EDGE_ARMS):
    """Gaussian grating-like responses of :data:`FOUR_EDGE_ARMS`: channels
    of equal width in wavelength, model bins of the same width over a range
    0.1 Angstrom wider at each end."""
    from .._units import HC_KEV_ANGSTROM
    from ..data import gaussian_response

    out = []
    for _, (lo, hi), fwhm, dlam, area in arms:
        chan = np.arange(lo, hi + 0.5 * dlam, dlam)
        lam = np.arange(lo - 0.1, hi + 0.1 + 0.5 * dlam, dlam)
        out.append(gaussian_response(HC_KEV_ANGSTROM / lam[::-1], HC_KEV_ANGSTROM / chan[::-1],
                                     fwhm, area, fwhm_unit="angstrom"))
    return out


def four_edge_spectra(model, values, responses, exposure, rng):
    """One Poisson spectrum per response of ``model`` at ``values``."""
    from ..data import simulate_spectrum

    return [simulate_spectrum(model.evaluate(r.grid, values), r, exposure, rng)
            for r in responses]
