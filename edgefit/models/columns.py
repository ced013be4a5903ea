"""Fit an element's total column and dust fraction instead of its gas and
dust columns.

One absorption edge measures the element's *total* column well (the edge
jump) and the split between gas and dust less well (the fine structure
near the edge, which also depends on the grain sizes).  Fitting the gas
column N_gas and the dust column N_dust directly gives two strongly
anti-correlated parameters; fitting

* ``<name>_total``    N_tot = N_gas + N_dust  [1e16 cm^-2], and
* ``<name>_dustfrac`` f = N_dust / N_tot      [0..1], the depletion,

gives one well-measured parameter and one that carries the degeneracy
alone, with the physical bounds (N_gas, N_dust >= 0) becoming the simple
box 0 <= f <= 1.

:class:`TotalAndFraction` wraps a complete model (for example
``SmoothISM * GasEdge * DustEdge * PhotonPowerLaw``) and replaces the
gas component's and the dust component's column parameters by these two.
It is a pure transform applied on each evaluation::

    N_gas = N_tot (1 - f),   N_dust = N_tot f

(plain arithmetic on the values; nothing is parsed or evaluated from
text).  The components themselves are unchanged, so their derived
quantities (gas column, dust column, grain column, optical depths) are
reported as before (see :mod:`edgefit.inference.derived`, which maps the
values through :meth:`TotalAndFraction.model_values` first), and the
gas/dust fit of the same model reaches the same best-fit statistic.

The wrapper must be the outermost node of the model: it cannot be
multiplied or added further.
"""
from __future__ import annotations

from typing import Mapping

import numpy as np

from ..errors import ModelError
from .base import MULTIPLICATIVE, Component, EnergyGrid, ModelNode, Param

__all__ = ["ElementColumns", "TotalAndFraction", "TOTAL", "FRACTION"]

#: Short names of the two parameters.
TOTAL = "total"
FRACTION = "dustfrac"


class ElementColumns(Component):
    """The two column parameters of :class:`TotalAndFraction` (a
    parameter holder; its transmission is 1, all absorption is done by
    the wrapped gas and dust components)."""

    kind = MULTIPLICATIVE
    default_name = "element"
    #: holds parameters only (figures skip it)
    parameter_holder = True
    params = (
        Param(TOTAL, 20.0, 0.0, 1e7, "1e16 cm-2",
              "total column of the element, gas plus dust (N_gas + N_dust)"),
        Param(FRACTION, 0.5, 0.0, 1.0, "",
              "fraction of the element in dust, N_dust / (N_gas + N_dust)"),
    )

    def __init__(self, name=None, *, element="Si", fixed=(), **values):
        super().__init__(name, fixed=fixed, **values)
        self.element = element

    def _evaluate(self, grid, pre, **values):
        return np.ones(len(grid))


def _column_component(model, name, phase):
    comp = model.component(name) if isinstance(name, str) else name
    if getattr(comp, "phase", None) != phase:
        raise ModelError(f"component {comp.name!r} is not a {phase}-phase component "
                         f"(its class declares phase = {getattr(comp, 'phase', None)!r})")
    if not comp.params or comp.params[0].unit != "1e16 cm-2":
        raise ModelError(f"component {comp.name!r} has no column parameter in 1e16 cm-2")
    return comp


class _CompiledTotalAndFraction:
    """The wrapped model compiled on a grid, fed the gas and dust columns
    computed from the total and fraction slots of the value list."""

    def __init__(self, node, grid, names):
        from .base import CompiledModel

        self.i_total = names.index(node.total_param)
        self.i_frac = names.index(node.fraction_param)
        self.n = len(names)
        self.inner = CompiledModel(node.model, grid, names + [node.gas_param, node.dust_param])
        self.grid = grid
        self._vals = [0.0] * (self.n + 2)

    def __call__(self, vals):
        buf = self._vals
        buf[:self.n] = vals
        total, frac = float(vals[self.i_total]), float(vals[self.i_frac])
        buf[self.n] = total * (1.0 - frac)
        buf[self.n + 1] = total * frac
        return self.inner(buf)


class TotalAndFraction(ModelNode):
    """``model`` with the columns of gas component ``gas`` and dust
    component ``dust`` (names or components; both of one element)
    replaced by ``<name>_total`` and ``<name>_dustfrac``.

    Parameters
    ----------
    model : ModelNode
        The complete model.
    gas, dust : str or Component
        The gas-phase and dust-phase components (their first parameter is
        the column, in 1e16 cm^-2).  The dust component may be a
        :class:`~edgefit.models.multi_edge.MultiEdgeDust`, whose column is
        that of its ``column_element``: the total is then that element's.
    name : str, optional
        Prefix of the two parameters (default: the element symbol in lower
        case, e.g. ``si_total``, ``si_dustfrac``).

    Starting values are taken from the components' stored columns
    (total = gas + dust, fraction = dust / total; 0.5 when both are 0).
    """

    def __init__(self, model: ModelNode, gas: str = "gas", dust: str = "dust",
                 name: str | None = None) -> None:
        if isinstance(model, TotalAndFraction):
            raise ModelError("the model is already in total/fraction form")
        g = _column_component(model, gas, "gas")
        d = _column_component(model, dust, "dust")
        # a grain population across edges carries the column of its column element
        d_element = getattr(d, "column_element", None) or d.element
        if g.element != d_element:
            raise ModelError(f"gas component {g.name!r} is {g.element} but dust component "
                             f"{d.name!r} is {d_element}")
        self.model = model
        self.kind = model.kind
        self.element = g.element
        self.gas_param = f"{g.name}_{g.params[0].name}"
        self.dust_param = f"{d.name}_{d.params[0].name}"
        gv, dv = g.values[g.params[0].name], d.values[d.params[0].name]
        total = gv + dv
        frac = dv / total if total > 0 else 0.5
        g_fixed = g.params[0].name in g.fixed or not g.params[0].vary
        d_fixed = d.params[0].name in d.fixed or not d.params[0].vary
        fixed = {TOTAL, FRACTION} if (g_fixed and d_fixed) else set()
        self.columns = ElementColumns(name or g.element.lower(), element=g.element,
                                      total=total, dustfrac=frac, fixed=fixed)
        self.total_param = f"{self.columns.name}_{TOTAL}"
        self.fraction_param = f"{self.columns.name}_{FRACTION}"
        inner = model.parameters()
        for new in (self.total_param, self.fraction_param):
            if new in inner:
                raise ModelError(f"parameter name {new!r} already exists in the model; "
                                 "pass another name")
        if any(c.name == self.columns.name for c in model.components()):
            raise ModelError(f"component name {self.columns.name!r} already exists in the "
                             "model; pass another name")

    # -- structure --------------------------------------------------------
    def components(self) -> list[Component]:
        return self.model.components() + [self.columns]

    def parameters(self) -> dict[str, tuple[Component, Param]]:
        out = {k: v for k, v in self.model.parameters().items()
               if k not in (self.gas_param, self.dust_param)}
        for p in self.columns.params:
            out[f"{self.columns.name}_{p.name}"] = (self.columns, p)
        return out

    def structure(self) -> str:
        return (f"{self.model.structure()}  [{self.gas_param}, {self.dust_param} from "
                f"{self.total_param}, {self.fraction_param}]")

    # -- the transform ------------------------------------------------------
    def model_values(self, values: Mapping[str, float]) -> dict[str, float]:
        """``values`` plus the gas and dust columns computed from the
        total and fraction (stored values where ``values`` lacks them)."""
        v = dict(values)
        total = float(v.get(self.total_param, self.columns.values[TOTAL]))
        frac = float(v.get(self.fraction_param, self.columns.values[FRACTION]))
        v[self.gas_param] = total * (1.0 - frac)
        v[self.dust_param] = total * frac
        return v

    @staticmethod
    def from_columns(gas_column: float, dust_column: float) -> tuple[float, float]:
        """(total, fraction) for a gas and a dust column."""
        total = gas_column + dust_column
        return total, (dust_column / total if total > 0 else 0.5)

    def evaluate(self, grid: EnergyGrid, values: Mapping[str, float] | None = None) -> np.ndarray:
        return self.model.evaluate(grid, self.model_values(values or {}))

    def compile(self, grid, names):
        """Vector-in evaluation (see :class:`~edgefit.models.base.CompiledModel`):
        the wrapped model compiled with two extra slots that receive
        N_tot (1 - f) and N_tot f from the slots of the total and fraction."""
        return _CompiledTotalAndFraction(self, grid, list(names))

    def __mul__(self, other):
        raise ModelError("TotalAndFraction must wrap the complete model; build the product "
                         "first, then wrap it")

    __rmul__ = __mul__
    __add__ = __mul__
    __radd__ = __mul__

    def __repr__(self):
        return f"TotalAndFraction({self.model!r}, {self.gas_param}, {self.dust_param})"
