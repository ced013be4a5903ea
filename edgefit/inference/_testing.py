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

__all__ = ["toy_response", "ToyEdgeAbsorber", "toy_model", "TOY_TRUTH", "simulate_counts"]


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
