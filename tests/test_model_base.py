"""Composition rules of edgefit.models.base: kinds, names, parameters,
evaluation, caching, pickling.  (Rules of the package itself; the numbers
checked are exact products/sums of component outputs.)  The one physical
conversion checked, Angstrom -> keV, uses E = hc / lambda with
hc = 12.398419843320026 keV Angstrom (CODATA 2018 h and c, as in
astropy.constants), to 1e-12."""
import pickle

import numpy as np
import pytest
from astropy import units as u

from edgefit.errors import ModelError, ParameterClashError, UnknownParameterError
from edgefit.inference._testing import ToyEdgeAbsorber
from edgefit.models.base import (ADDITIVE, MULTIPLICATIVE, Component, CompositeModel,
                                 EnergyGrid, Param)
from edgefit.models.continuum import LineGaussian, PhotonPowerLaw

GRID = EnergyGrid.linear(1.6, 2.2, 50)


class CountingAbsorber(Component):
    kind = MULTIPLICATIVE
    default_name = "count"
    params = (Param("tau", 0.1, 0.0, 5.0, "", "flat optical depth"),)

    def __init__(self, *a, **k):
        super().__init__(*a, **k)
        self.n_pre = 0

    def precompute(self, grid):
        self.n_pre += 1
        return np.ones(len(grid))

    def _evaluate(self, grid, pre, tau):
        return pre * np.exp(-tau)


def test_kinds_of_products_and_sums():
    a, b = ToyEdgeAbsorber("a"), CountingAbsorber("b")
    pl, line = PhotonPowerLaw("pl"), LineGaussian("ln")
    assert (a * b).kind == MULTIPLICATIVE
    assert (a * pl).kind == ADDITIVE and (pl * a).kind == ADDITIVE
    assert (pl + line).kind == ADDITIVE
    assert (a * (pl + line)).kind == ADDITIVE
    with pytest.raises(ModelError):
        pl * line
    with pytest.raises(ModelError):
        a + b
    with pytest.raises(ModelError):
        a + pl


def test_evaluation_is_product_and_sum_of_parts():
    a, pl, line = ToyEdgeAbsorber("a", tau0=0.3), PhotonPowerLaw("pl"), LineGaussian(
        "ln", center=1.9, sigma=0.01, norm=0.01)
    model = a * (pl + line)
    np.testing.assert_allclose(model(GRID), a(GRID) * (pl(GRID) + line(GRID)), rtol=1e-15)


def test_parameter_names_and_clashes():
    model = ToyEdgeAbsorber("abs") * PhotonPowerLaw("pl")
    assert list(model.parameters()) == ["abs_tau0", "abs_step", "pl_index", "pl_norm"]
    with pytest.raises(ParameterClashError):
        PhotonPowerLaw("pl") + PhotonPowerLaw("pl")
    # the same instance used twice is one component, not a clash
    shared = ToyEdgeAbsorber("abs")
    m2 = shared * PhotonPowerLaw("p1") + shared * PhotonPowerLaw("p2")
    assert [c.name for c in m2.components()] == ["abs", "p1", "p2"]
    # names that would produce the same full parameter name are refused
    class Other(Component):
        kind = ADDITIVE
        params = (Param("norm", 1.0),)

        def _evaluate(self, grid, pre, norm):
            return np.full(len(grid), norm)

    class Under(Component):
        kind = ADDITIVE
        params = (Param("b_norm", 1.0),)

        def _evaluate(self, grid, pre, b_norm):
            return np.full(len(grid), b_norm)

    with pytest.raises(ParameterClashError):
        Other("a_b") + Under("a")


def test_invalid_names_and_unknown_parameters():
    with pytest.raises(ModelError):
        PhotonPowerLaw("not an identifier")
    with pytest.raises(UnknownParameterError):
        PhotonPowerLaw(slope=2)
    with pytest.raises(UnknownParameterError):
        PhotonPowerLaw(fixed=["slope"])
    model = ToyEdgeAbsorber("abs") * PhotonPowerLaw("pl")
    with pytest.raises(UnknownParameterError):
        model(GRID, pl_slope=1.0)


def test_values_override_and_quantities():
    pl = PhotonPowerLaw("pl", index=1.5)
    line = LineGaussian("ln", center=6.6 * u.AA, sigma=2 * u.eV)
    assert line.values["center"] == pytest.approx(12.398419843320026 / 6.6, rel=1e-12)
    assert line.values["sigma"] == pytest.approx(0.002)
    np.testing.assert_allclose(pl(GRID, pl_index=2.5),
                               PhotonPowerLaw("q", index=2.5)(GRID), rtol=1e-15)
    with pytest.raises(ModelError):
        LineGaussian(sigma=2 * u.cm ** 2)


def test_make_params_bounds_fixed_and_ties():
    model = ToyEdgeAbsorber("abs", fixed=["tau0"]) * (PhotonPowerLaw("p1") + PhotonPowerLaw("p2"))
    params = model.make_params()
    assert params["abs_tau0"].vary is False
    assert params["abs_step"].min == 0.0 and params["abs_step"].max == 5.0
    params["p2_index"].expr = "p1_index"
    params["p1_index"].value = 1.3
    params.update_constraints()
    assert params["p2_index"].value == pytest.approx(1.3)


def test_precompute_cached_per_grid_and_pickling():
    ab = CountingAbsorber("c")
    model = ab * PhotonPowerLaw("pl")
    model(GRID)
    model(GRID, c_tau=0.2)
    assert ab.n_pre == 1
    model(EnergyGrid.linear(1.0, 2.0, 10))
    assert ab.n_pre == 2
    clone = pickle.loads(pickle.dumps(model))
    cab = clone.components()[0]
    assert cab._cache == {}          # grids are re-prepared after unpickling
    n_before = cab.n_pre
    np.testing.assert_array_equal(clone(GRID), model(GRID))
    assert cab.n_pre == n_before + 1 and list(cab._cache) == [GRID.key]


def test_energy_grid_rules():
    # bins given in wavelength (lo/hi in Angstrom) come out in increasing energy
    g = EnergyGrid([6.0, 6.5] * u.AA, [6.5, 7.0] * u.AA)
    assert np.all(g.hi > g.lo) and g.lo[0] < g.lo[-1]
    assert g.hi[-1] == pytest.approx(12.398419843320026 / 6.0, rel=1e-12)
    gw = EnergyGrid.from_edges(np.array([6.0, 6.5, 7.0]) * u.AA)
    assert np.all(np.diff(gw.lo) > 0)
    assert gw == EnergyGrid.from_edges((np.array([6.0, 6.5, 7.0]) * u.AA).to(u.keV,
                                                                             u.spectral()))
    for lo, hi in (([1.0, 1.0], [1.1, 1.2]), ([1.0], [0.9]), ([-1.0], [1.0]),
                   ([np.nan], [1.0])):
        with pytest.raises(ModelError):
            EnergyGrid(lo, hi)


def test_composite_repr_and_component_lookup():
    model = ToyEdgeAbsorber("abs") * PhotonPowerLaw("pl")
    assert isinstance(model, CompositeModel)
    assert model.component("pl").name == "pl"
    with pytest.raises(UnknownParameterError):
        model.component("nope")


def test_structure_shows_grouping():
    # Display only: sums inside products are bracketed, as in ordinary algebra.
    from edgefit.models import GasEdge, LineGaussian, PhotonPowerLaw, SmoothISM

    m = SmoothISM("ism") * GasEdge(element="Si") * (PhotonPowerLaw("pl") + LineGaussian("ln"))
    assert m.structure() == ("ism [smooth_ism] * gas_si [gas_edge] * "
                             "(pl [photon_power_law] + ln [line_gaussian])")
