"""Small synthetic ingredients for tests and benchmarks of the inference
layer (not physics): a Gaussian line-spread response and a toy absorber.

The toy absorber is exp(-tau) with tau = tau0 (E/E0)^-3 + step above an
edge energy -- the textbook shape of photoabsorption (sigma ~ E^-3 far
from edges) with a sharp K edge.  It is deliberately *not* registered in
:data:`edgefit.models.base.COMPONENTS`.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy import special

from ..models.base import MULTIPLICATIVE, Component, Param

__all__ = ["gaussian_response", "ToyEdgeAbsorber", "simulate_counts"]


def gaussian_response(emin=1.6, emax=2.2, n_channels=900, n_energy=None, fwhm_kev=None,
                      area_cm2=100.0, area_slope=0.0, width_sigmas=5.0):
    """A grating-like :class:`~edgefit.data.response.Response`: channels of
    equal width in energy, a Gaussian line-spread function (FWHM default
    2.5 channel widths) and an effective area ``area_cm2 (E/1.9)^slope``.
    The model grid is 10 % wider than the channel range so that the edges
    are fed."""
    from ..data.response import Response

    n_energy = n_energy or int(1.2 * n_channels)
    ch_edges = np.linspace(emin, emax, n_channels + 1)
    pad = 0.05 * (emax - emin)
    en_edges = np.linspace(emin - pad, emax + pad, n_energy + 1)
    fwhm = fwhm_kev or 2.5 * (emax - emin) / n_channels
    sig = fwhm / 2.3548200450309493
    e_mid = 0.5 * (en_edges[1:] + en_edges[:-1])
    rows, cols, vals = [], [], []
    for j, e in enumerate(e_mid):
        lo = np.searchsorted(ch_edges, e - width_sigmas * sig) - 1
        hi = np.searchsorted(ch_edges, e + width_sigmas * sig) + 1
        lo, hi = max(lo, 0), min(hi, n_channels)
        if hi <= lo:
            continue
        z = (ch_edges[lo:hi + 1] - e) / sig
        p = np.diff(special.ndtr(z))
        keep = p > 1e-12
        rows.extend(np.arange(lo, hi)[keep])
        cols.extend([j] * int(keep.sum()))
        vals.extend(p[keep])
    mat = sp.csr_array((vals, (rows, cols)), shape=(n_channels, n_energy))
    area = area_cm2 * (e_mid / 1.9) ** area_slope
    return Response(en_edges[:-1], en_edges[1:], mat, ch_edges[:-1], ch_edges[1:],
                    specresp=area)


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

    def derived(self, **values):
        v = self._merged(values)
        return {"edge_jump": (v["step"], "")}


def simulate_counts(model, response, exposure, values=None, seed=None, background=None):
    """Poisson counts of ``model`` folded through ``response`` (a Spectrum)."""
    from ..data.spectrum import Spectrum

    rng = np.random.default_rng(seed)
    mu = response.fold(model.evaluate(response.grid, values or {}), exposure)
    counts = rng.poisson(mu).astype(float)
    return Spectrum(counts=counts, exposure=exposure,
                    channels=np.arange(1, response.n_channels + 1), response=response,
                    background=background, meta={"path": "simulated"})
