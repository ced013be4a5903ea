"""Adding a component of your own: one small class.

A component declares its parameters once (``Param``: name, default, bounds,
unit, description) and implements ``_evaluate(grid, pre, **values)``:

* multiplicative (absorbers): return the transmission in each bin of
  ``grid`` (an ``EnergyGrid``: ``grid.lo``, ``grid.hi``, ``grid.mid``,
  ``grid.width`` in keV);
* additive (emission): return photons cm^-2 s^-1 integrated over each bin.

Optional: ``precompute(grid)`` for work that depends only on the grid
(cached per grid; its result arrives as ``pre``), ``optical_depth(energy_kev,
**values)`` for absorbers (used for derived optical depths), and
``derived(**values)`` returning ``{name: (value, unit)}``.  Setting
``registry_name`` registers the class so configuration files can use it
(``type = "cutoff_power_law"``) once the defining module is imported.
Keep components picklable: store only plain data on ``self`` (no lambdas,
open files or closures), so that parallel MCMC works.

Run this file to see the component fitted to simulated data.
"""
import numpy as np
from scipy import integrate

from edgefit.inference import Dataset, fit_sightline
from edgefit.inference._testing import simulate_counts, toy_response
from edgefit.models.base import ADDITIVE, Component, Param
from edgefit.models.continuum import bin_integral


def cutoff_power_law(energy_kev, index, e_cut, norm):
    """Photon flux density norm E^-index exp(-E/e_cut), ph cm-2 s-1 keV-1."""
    return norm * energy_kev ** -index * np.exp(-energy_kev / e_cut)


class CutoffPowerLaw(Component):
    """Power law with an exponential cut-off, integrated over each bin with
    the package's 4-node Gauss-Legendre rule (``bin_integral``)."""

    kind = ADDITIVE
    registry_name = "cutoff_power_law"
    default_name = "cpl"
    params = (
        Param("index", 1.5, -3.0, 10.0, "", "photon index"),
        Param("e_cut", 10.0, 0.1, 500.0, "keV", "e-folding energy of the cut-off"),
        Param("norm", 1.0, 0.0, 1e10, "ph cm-2 s-1 keV-1", "flux density at 1 keV "
              "without the cut-off"),
    )

    def _evaluate(self, grid, pre, index, e_cut, norm):
        return bin_integral(cutoff_power_law, grid.lo, grid.hi, index, e_cut, norm)


if __name__ == "__main__":
    comp = CutoffPowerLaw("cpl", index=1.4, e_cut=3.0, norm=0.8, fixed=["e_cut"])
    # check one bin against adaptive quadrature
    from edgefit.models.base import EnergyGrid

    g = EnergyGrid([1.8], [1.9])
    ref = integrate.quad(cutoff_power_law, 1.8, 1.9, args=(1.4, 3.0, 0.8))[0]
    print(f"bin integral {comp(g)[0]:.10g} vs quad {ref:.10g}")
    resp = toy_response(1.6, 2.2, n_channels=300)
    spec = simulate_counts(comp, resp, 2e4, seed=1)  # SIMULATED data
    res = fit_sightline(comp, Dataset(spec))
    print(res.summary())
