"""Registry-wide checks: every size-distribution family and component
class declares what the rest of the package relies on, registers itself,
and can be defined again under the same name (a notebook cell run twice).
"""
from __future__ import annotations

import pickle

import numpy as np
import pytest
from scipy.integrate import quad

from edgefit.dust.sizes import FAMILIES, SizeDistribution, make_distribution
from edgefit.errors import ModelError, PhysicsDataError
from edgefit.inference.derived import _reference_energy
from edgefit.models import COMPONENTS, Component, DustEdge, GasEdge
from edgefit.models.base import MULTIPLICATIVE
from edgefit.params import Param
from edgefit.physics import atomic


def test_builtin_families_registered():
    assert {"power_law", "single", "lognormal", "cutoff"} <= set(FAMILIES)
    assert "table" not in FAMILIES     # TabulatedSizes opts out: it has no parameters


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_every_family_declares_params_and_is_a_normalised_distribution(family):
    cls = FAMILIES[family]
    assert cls.family == family and issubclass(cls, SizeDistribution)
    assert cls.PARAMS and all(isinstance(p, Param) for p in cls.PARAMS)
    for p in cls.PARAMS:
        assert p.min <= p.default <= p.max, p
        assert p.unit in ("um", ""), p
    d = make_distribution(family)            # defaults
    assert d.values == {p.name: p.default for p in cls.PARAMS}
    lo, hi = d.support()
    assert 0 < lo <= hi
    assert d.moment(0) == pytest.approx(1.0, rel=1e-12)    # normalised by definition
    if lo < hi:
        # the density integrates to one over the support: scipy quad in ln a
        # (independent of the package's Gauss-Legendre nodes), 1e-6
        total, _ = quad(lambda x: d.pdf(np.exp(x)) * np.exp(x), np.log(lo), np.log(hi),
                        limit=200, epsabs=0)
        assert total == pytest.approx(1.0, rel=1e-6)
    clone = pickle.loads(pickle.dumps(d))
    assert clone.values == d.values and clone.moment(3) == pytest.approx(d.moment(3))
    # the dust edge turns the family's declarations into fit parameters
    dust = DustEdge(sizes=family)
    names = [p.name for p in dust.params]
    assert all(p.name in names for p in cls.PARAMS)


def _define_family(name, exponent):
    class Exponential(SizeDistribution):
        """n(a) ∝ exp(-a / scale) on [amin, amax] (test family)."""

        family = name
        PARAMS = (Param("scale", 0.1, 0.01, 1.0, "um", "e-folding radius", True),
                  Param("amin", 0.005, 0.001, 0.1, "um", "smallest radius", False),
                  Param("amax", 1.0, 0.2, 5.0, "um", "largest radius", False))

        def shape(self, a_um):
            return np.exp(-exponent * np.asarray(a_um, float) / self.values["scale"])
    return Exponential


def test_user_family_registers_and_can_be_redefined():
    try:
        first = _define_family("exp_test", 1.0)
        assert FAMILIES["exp_test"] is first
        # <a> of exp(-a/s) on [a0, a1] (closed form): s + (a0 e^-a0/s - a1 e^-a1/s)
        # / (e^-a0/s - e^-a1/s); 1e-8
        d = make_distribution("exp_test", scale=0.2)
        s, a0, a1 = 0.2, 0.005, 1.0
        e0, e1 = np.exp(-a0 / s), np.exp(-a1 / s)
        assert d.moment(1) == pytest.approx(s + (a0 * e0 - a1 * e1) / (e0 - e1), rel=1e-8)
        # the same class defined again (same module and name) replaces it
        second = _define_family("exp_test", 2.0)
        assert FAMILIES["exp_test"] is second and second is not first
        assert [p.name for p in DustEdge(sizes="exp_test").params][1:4] == \
            ["scale", "amin", "amax"]
        # another class under a taken family name is refused
        with pytest.raises(PhysicsDataError, match="taken"):
            type("Impostor", (SizeDistribution,), {"family": "exp_test",
                                                   "shape": lambda self, a: a})
    finally:
        FAMILIES.pop("exp_test", None)


def _define_component():
    class Grey(Component):
        """Grey absorber exp(-tau) (test component)."""

        kind = MULTIPLICATIVE
        default_name = "grey"
        registry_name = "grey_test"
        params = (Param("tau", 0.1, 0.0, 10.0, "", "optical depth"),)

        def _evaluate(self, grid, pre, tau):
            return np.full(len(grid), np.exp(-tau))
    return Grey


def test_component_class_can_be_redefined_but_not_stolen():
    try:
        first = _define_component()
        second = _define_component()
        assert COMPONENTS["grey_test"] is second and second is not first
        with pytest.raises(ModelError, match="taken"):
            type("Other", (Component,), {"registry_name": "grey_test"})
    finally:
        COMPONENTS.pop("grey_test", None)


@pytest.mark.parametrize("key", sorted(COMPONENTS))
def test_every_component_declares_element_phase_reference(key):
    cls = COMPONENTS[key]
    assert cls.phase in (None, "gas", "dust")
    assert callable(cls.reference_energy)
    assert all(isinstance(p, Param) for p in cls.params)


def test_edges_declare_reference_energy_and_nothing_is_sniffed():
    gas = GasEdge(element="Si")
    assert gas.element == "Si" and gas.phase == "gas"
    assert gas.reference_energy() == pytest.approx(
        atomic.edge_position("Si", "K") + atomic.EDGE_OFFSET_KEV, rel=1e-12)
    dust = DustEdge(element="Si")
    assert dust.element == "Si" and dust.phase == "dust"
    assert dust.reference_energy() == pytest.approx(gas.reference_energy(), abs=1e-9)
    # a component with an edge-like attribute but no declaration has no default
    plain = Component.__new__(Component)
    plain.name = "plain"
    plain.edge_kev = 1.84
    assert _reference_energy(plain, None) is None
    assert _reference_energy(plain, 2.0) == 2.0
