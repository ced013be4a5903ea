"""Building blocks of sightline models.

A model is a tree of :class:`Component` leaves joined by ``*`` and ``+``:

* a **multiplicative** component returns a transmission (dimensionless,
  between 0 and 1 for absorbers) evaluated for each bin of an
  :class:`EnergyGrid`;
* an **additive** component returns a photon flux integrated over each bin,
  in photons cm^-2 s^-1 per bin.

``multiplicative * multiplicative`` is multiplicative,
``multiplicative * additive`` is additive, ``additive + additive`` is
additive; every other combination is refused.  Each component has a name
(a Python identifier, unique in the model); its parameters appear in the
model as ``<component name>_<parameter name>``.  Two components that would
produce the same full parameter name are refused.

Components declare their parameters once, as a tuple of :class:`Param`,
with unit, bounds and description.  Their numerics live in pure functions
elsewhere (``edgefit.physics``, ``edgefit.dust``); a component only wires
parameter values to those functions.  Anything that depends only on the
energy grid (interpolated cross sections, cached tables) is computed once
per grid in :meth:`Component.precompute` and cached on the instance, keyed
by the grid's content hash, so repeated evaluation in a fit is cheap.
Components and models are picklable (no closures, no open files).
"""
from __future__ import annotations

import inspect
import keyword
import operator
from typing import Any, ClassVar, Mapping

import numpy as np

from ..errors import ModelError, ParameterClashError, UnknownParameterError
from ..grid import EnergyGrid
from ..params import Param

__all__ = ["EnergyGrid", "Param", "ModelNode", "Component", "CompositeModel",
           "CompiledModel", "COMPONENTS", "register_component", "MULTIPLICATIVE",
           "ADDITIVE", "COLUMN_KEY", "element_column_key"]

MULTIPLICATIVE = "multiplicative"
ADDITIVE = "additive"

#: The key under which every component's ``derived()`` reports the column
#: density of its ``element`` in cm^-2 (gas, dust or any other phase);
#: depletions are formed from it.
COLUMN_KEY = "col_cm2"


def element_column_key(element) -> str:
    """Key of the ``derived()`` entry holding the column (cm^-2) of
    ``element`` in a component that carries several elements (class
    attributes ``phase`` and ``elements``, e.g.
    :class:`~edgefit.models.multi_edge.MultiEdgeDust`): ``col_Si_cm2``."""
    return f"col_{element}_cm2"


#: Registry of component classes by their ``registry_name``; used by the
#: generic tests and by the safe configuration-file parser.
COMPONENTS: dict[str, type["Component"]] = {}


def _check_identifier(name: str, what: str):
    if not isinstance(name, str) or not name.isidentifier() or keyword.iskeyword(name):
        raise ModelError(f"{what} {name!r} is not a valid identifier")


class ModelNode:
    """Common interface of components and composite models."""

    kind: str = MULTIPLICATIVE

    # -- structure -----------------------------------------------------
    def components(self) -> list["Component"]:
        raise NotImplementedError

    def parameters(self) -> dict[str, tuple["Component", Param]]:
        """Full parameter name -> (component, declaration), in model order."""
        out: dict[str, tuple[Component, Param]] = {}
        for comp in self.components():
            for p in comp.params:
                out[f"{comp.name}_{p.name}"] = (comp, p)
        return out

    def default_values(self) -> dict[str, float]:
        """Full parameter name -> current value stored on the components."""
        return {full: comp.values[p.name] for full, (comp, p) in self.parameters().items()}

    def component(self, name: str) -> "Component":
        for comp in self.components():
            if comp.name == name:
                return comp
        raise UnknownParameterError(f"no component named {name!r}; have "
                                    f"{[c.name for c in self.components()]}")

    def make_params(self) -> Any:  # lmfit.Parameters
        """An :class:`lmfit.Parameters` with every parameter of the model,
        its current value, bounds and whether it varies."""
        import lmfit

        params = lmfit.Parameters()
        for full, (comp, p) in self.parameters().items():
            params.add(full, value=comp.values[p.name], min=p.min, max=p.max,
                       vary=p.vary and p.name not in comp.fixed)
        return params

    def structure(self) -> str:
        """The model's shape in component names, e.g.
        ``ism * gas_si * dust * (disk + pl)`` (for display only)."""
        raise NotImplementedError

    # -- evaluation ----------------------------------------------------
    def evaluate(self, grid: EnergyGrid, values: Mapping[str, float] | None = None) -> np.ndarray:
        """Evaluate on ``grid`` with ``values`` (full names; missing ones take
        the components' stored values).  Unknown names are refused."""
        raise NotImplementedError

    def compile(self, grid: EnergyGrid, names) -> "CompiledModel":
        """A :class:`CompiledModel` of this model on ``grid`` that reads its
        values from a list ordered as ``names`` (full parameter names)."""
        return CompiledModel(self, grid, names)

    def __call__(self, grid, values: Mapping[str, float] | None = None, **kw):
        if not isinstance(grid, EnergyGrid):
            grid = EnergyGrid.from_edges(grid)
        vals = dict(values or {})
        vals.update(kw)
        unknown = set(vals) - set(self.parameters())
        if unknown:
            raise UnknownParameterError(f"unknown parameter(s) {sorted(unknown)}; model has "
                                        f"{list(self.parameters())}")
        return self.evaluate(grid, vals)

    # -- composition ---------------------------------------------------
    def __mul__(self, other):
        if not isinstance(other, ModelNode):
            return NotImplemented
        return CompositeModel(self, "*", other)

    def __add__(self, other):
        if not isinstance(other, ModelNode):
            return NotImplemented
        return CompositeModel(self, "+", other)


class Component(ModelNode):
    """A leaf of a model.  Subclasses set ``kind``, ``params``,
    ``default_name`` and ``registry_name`` and implement :meth:`_evaluate`
    (and optionally :meth:`precompute`).

    Parameters
    ----------
    name : str, optional
        Identifier used as the prefix of this component's parameters.
    fixed : iterable of str, optional
        Parameter names (short) to hold fixed by default.
    **values
        Initial values, as numbers in each parameter's unit or Quantities.
    """

    # a class attribute; components whose parameters depend on their options
    # (size-distribution family, materials) set their own per instance
    params: tuple[Param, ...] = ()
    default_name: ClassVar[str] = "comp"
    registry_name: ClassVar[str | None] = None
    #: The element whose column this component carries (e.g. ``"Si"``; set
    #: per instance by edge components), or None.
    element: str | None = None
    #: ``"gas"`` or ``"dust"`` when the component counts that phase of
    #: :attr:`element` (depletions are formed from such pairs, with the
    #: column its :meth:`derived` reports under :data:`COLUMN_KEY`), else None.
    phase: ClassVar[str | None] = None
    #: Maximum number of energy grids whose precomputation is cached.
    cache_size: ClassVar[int] = 32

    def __init_subclass__(cls, **kw):
        super().__init_subclass__(**kw)
        if cls.registry_name:
            register_component(cls)

    def __init__(self, name: str | None = None, *, fixed=(), **values):
        self.name = name or self.default_name
        _check_identifier(self.name, "component name")
        names = [p.name for p in self.params]
        self.values: dict[str, float] = {p.name: p.default for p in self.params}
        self.fixed = set(fixed)
        for key in self.fixed:
            if key not in names:
                raise UnknownParameterError(f"{type(self).__name__} has no parameter {key!r}")
        for key, val in values.items():
            if key not in names:
                raise UnknownParameterError(f"{type(self).__name__} has no parameter {key!r}; "
                                            f"it has {names}")
            self.values[key] = self.param(key).convert(val, self.name)
        self._cache: dict[str, Any] = {}

    def param(self, short_name: str) -> Param:
        for p in self.params:
            if p.name == short_name:
                return p
        raise UnknownParameterError(f"{type(self).__name__} has no parameter {short_name!r}")

    def components(self) -> list[Component]:
        return [self]

    def structure(self) -> str:
        return f"{self.name} [{self.registry_name or type(self).__name__}]"

    # subclasses -------------------------------------------------------
    def prepare(self, grid: EnergyGrid | None = None):
        """Load or compute whatever the component needs before it can be
        evaluated on ``grid`` (e.g. dust cross-section tables, which may be
        read from or written to the disk cache).  Called by :meth:`prepared`
        before :meth:`precompute` for each new grid, and callable directly;
        must be cheap when nothing is missing.  Returns self."""
        return self

    def precompute(self, grid: EnergyGrid) -> Any:
        """Anything that depends on the grid only; cached per grid.  Pure:
        no file I/O (anything read or built from disk belongs in
        :meth:`prepare`)."""
        return None

    def _evaluate(self, grid: EnergyGrid, pre: Any, *args: Any, **values: Any) -> np.ndarray:
        # subclasses name their parameters: _evaluate(self, grid, pre, nh, ...)
        raise NotImplementedError

    def has_log_transmission(self) -> bool:
        """True when :meth:`_log_transmission` gives ln T of this
        (multiplicative) component, so that a compiled product of such
        components sums logarithms and takes one exponential
        (:class:`CompiledModel`).  Default False."""
        return False

    def _log_transmission(self, grid: EnergyGrid, pre: Any, *args: Any,
                          **values: Any) -> np.ndarray:
        """ln of the transmission (−τ per bin) with the arguments of
        :meth:`_evaluate`, for components whose :meth:`has_log_transmission`
        is True; the exponential of it must be :meth:`_evaluate`'s output
        (to rounding).  The array may be cached but is never changed."""
        raise NotImplementedError

    def optical_depth(self, energy_kev, **values) -> np.ndarray:
        """Optical depth at the given energies (keV) for multiplicative
        absorbers, with ``values`` by short parameter name (missing ones take
        the stored values).  Used for derived quantities such as the gas and
        dust optical depth just above an edge.  Not defined for additive
        components."""
        raise NotImplementedError(f"{type(self).__name__} does not define an optical depth")

    def reference_energy(self) -> float | None:
        """Energy (keV) at which derived quantities report this component's
        optical depth unless the caller gives one: for an edge component,
        just above its edge (:func:`edgefit.physics.atomic.edge_bracket`).
        None (the default) when the component has no natural energy."""
        return None

    def derived(self, **values) -> dict[str, tuple[float, str]]:
        """Component-specific derived quantities for parameter ``values``
        (short names; missing ones take the stored values): a dict
        name -> (value, unit string), e.g. the element column in dust, the
        grain column density or the self-shielding ratio.  Must be pure and
        cheap enough to call for every posterior sample."""
        return {}

    def _merged(self, values) -> dict[str, float]:
        own = dict(self.values)
        for key, val in values.items():
            if key not in own:
                raise UnknownParameterError(f"{type(self).__name__} has no parameter {key!r}")
            own[key] = float(val)
        return own

    # ------------------------------------------------------------------
    def prepared(self, grid: EnergyGrid) -> Any:
        try:
            return self._cache[grid.key]
        except KeyError:
            self.prepare(grid)
            pre = self.precompute(grid)
            if len(self._cache) >= self.cache_size:
                self._cache.pop(next(iter(self._cache)))
            self._cache[grid.key] = pre
            return pre

    def evaluate(self, grid: EnergyGrid, values: Mapping[str, float] | None = None) -> np.ndarray:
        if values:
            prefix = self.name + "_"
            own = {}
            for key, default in self.values.items():
                val = values.get(prefix + key)
                own[key] = default if val is None else float(val)
        else:
            own = self.values
        return self._evaluate(grid, self.prepared(grid), **own)

    def __getstate__(self):
        state = self.__dict__.copy()
        state["_cache"] = {}  # grids are re-prepared after unpickling
        return state

    def __repr__(self):
        vals = ", ".join(f"{k}={v:.4g}" for k, v in self.values.items())
        return f"{type(self).__name__}({self.name!r}, {vals})"


class CompositeModel(ModelNode):
    """Product or sum of two model nodes (built with ``*`` and ``+``)."""

    def __init__(self, left: ModelNode, op: str, right: ModelNode):
        if op not in "*+":
            raise ModelError(f"unknown operator {op!r}")
        if op == "*":
            if left.kind == ADDITIVE and right.kind == ADDITIVE:
                raise ModelError("cannot multiply two additive models")
            kind = ADDITIVE if ADDITIVE in (left.kind, right.kind) else MULTIPLICATIVE
        else:
            if left.kind != right.kind:
                raise ModelError("cannot add a multiplicative and an additive model")
            kind = left.kind
            if kind == MULTIPLICATIVE:
                raise ModelError("adding two multiplicative models has no meaning; "
                                 "multiply them, or add additive ones")
        self.left, self.op, self.right, self.kind = left, op, right, kind
        seen: dict[str, Component] = {}
        for comp in left.components() + right.components():
            if comp.name in seen and seen[comp.name] is not comp:
                raise ParameterClashError(f"two components are named {comp.name!r}; "
                                          "give one of them another name")
            seen[comp.name] = comp
        full: dict[str, str] = {}
        for comp in seen.values():
            for p in comp.params:
                key = f"{comp.name}_{p.name}"
                if key in full and full[key] != comp.name:
                    raise ParameterClashError(f"parameter name {key!r} would be defined by "
                                              f"{full[key]!r} and {comp.name!r}")
                full[key] = comp.name

    def components(self) -> list[Component]:
        out, seen = [], set()
        for comp in self.left.components() + self.right.components():
            if id(comp) not in seen:
                seen.add(id(comp))
                out.append(comp)
        return out

    def evaluate(self, grid: EnergyGrid, values: Mapping[str, float] | None = None) -> np.ndarray:
        a = self.left.evaluate(grid, values)
        b = self.right.evaluate(grid, values)
        return a * b if self.op == "*" else a + b

    def structure(self) -> str:
        parts = []
        for side in (self.left, self.right):
            text = side.structure()
            if self.op == "*" and isinstance(side, CompositeModel) and side.op == "+":
                text = f"({text})"
            parts.append(text)
        return f" {self.op} ".join(parts)

    def __repr__(self):
        return f"({self.left!r} {self.op} {self.right!r})"


def _takes_positionally(func, names) -> bool:
    """True when ``func(grid, pre, *values)`` binds ``values`` to the
    parameters ``names`` in this order (a signature that names them, as
    ``SmoothISM._log_transmission(self, grid, pre, nh, mol_frac)`` does),
    so that a compiled leaf can skip building the keyword dict."""
    try:
        params = list(inspect.signature(func).parameters.values())
    except (TypeError, ValueError):
        return False
    kinds = (inspect.Parameter.POSITIONAL_ONLY, inspect.Parameter.POSITIONAL_OR_KEYWORD)
    return (len(params) == len(names) + 2 and all(p.kind in kinds for p in params)
            and tuple(p.name for p in params[2:]) == tuple(names))


class _Leaf:
    """One component of a :class:`CompiledModel`: its slots in the value
    list and the last output, reused while its own values do not change."""

    __slots__ = ("comp", "grid", "pre", "shorts", "idx", "take", "key", "out", "changed",
                 "plain", "func", "positional")

    def __init__(self, comp, grid, index, log=False):
        self.comp = comp
        self.grid = grid
        self.pre = comp.prepared(grid)
        self.shorts = tuple(comp.values)
        self.idx = tuple(index[f"{comp.name}_{k}"] for k in self.shorts)
        # the component's values as a tuple, in one C call
        self.take = operator.itemgetter(*self.idx) if len(self.idx) > 1 else None
        self.key = None
        self.out = None
        self.changed = True
        # a subclass that overrides evaluate() itself is called through it
        self.plain = type(comp).evaluate is Component.evaluate
        # with ``log``, the leaf gives ln T (see Component.has_log_transmission)
        self.func = comp._log_transmission if log else comp._evaluate
        self.positional = self.plain and _takes_positionally(self.func, self.shorts)

    def __call__(self, vals):
        take = self.take
        key = take(vals) if take is not None else tuple([vals[i] for i in self.idx])
        if key == self.key:
            self.changed = False
            return self.out
        if self.positional:
            out = self.func(self.grid, self.pre, *key)
        elif self.plain:
            out = self.func(self.grid, self.pre, **dict(zip(self.shorts, key)))
        else:
            prefix = self.comp.name + "_"
            out = self.comp.evaluate(self.grid, {prefix + k: v for k, v in
                                                 zip(self.shorts, key)})
        self.key, self.out, self.changed = key, out, True
        return out


class _Node:
    """A product or sum of two compiled nodes, written into its own buffer
    and recomputed only when a child's output changed."""

    __slots__ = ("left", "right", "mul", "out", "changed")

    def __init__(self, left, right, mul):
        self.left, self.right, self.mul = left, right, mul
        self.out = None
        self.changed = True

    def __call__(self, vals):
        a = self.left(vals)
        b = self.right(vals)
        if self.out is not None and not (self.left.changed or self.right.changed):
            self.changed = False
            return self.out
        out = self.out
        # (scalars have no ``shape``: they take the allocating branch)
        if (out is None or getattr(a, "shape", None) != out.shape
                or getattr(b, "shape", None) != out.shape or out is a or out is b):
            out = a * b if self.mul else a + b
            if not isinstance(out, np.ndarray) or out is a or out is b:
                self.out = None
                self.changed = True
                return out
        elif self.mul:
            np.multiply(a, b, out=out)
        else:
            np.add(a, b, out=out)
        self.out, self.changed = out, True
        return out


def _defined_in(cls, name):
    """The class of ``cls``'s MRO whose namespace defines ``name``."""
    return next(k for k in cls.__mro__ if name in k.__dict__)


class _Exp:
    """exp of a compiled sum of log transmissions, written into its own
    buffer and recomputed only when the sum changed."""

    __slots__ = ("child", "out", "changed")

    def __init__(self, child):
        self.child = child
        self.out = None
        self.changed = True

    def __call__(self, vals):
        t = self.child(vals)
        if self.out is not None and not self.child.changed:
            self.changed = False
            return self.out
        out = self.out
        if out is None or out.shape != getattr(t, "shape", None) or out is t:
            out = np.empty(np.shape(t))
        np.exp(t, out=out)
        self.out, self.changed = out, True
        return out


class CompiledModel:
    """A model bound to one energy grid and evaluated from a flat list of
    parameter values (the hot loop of a fit: no dicts of full names, no
    Parameters).

    ``names`` lists the full parameter names in the order of the value
    vector (it may hold more names than the model's).  Each component is
    handed its own values by precomputed positions; a component whose
    values did not change since the previous call returns its previous
    output unchanged (components are pure functions of grid and values),
    and products and sums are written into buffers owned by this object.
    A product of two or more absorbers that give their log transmission
    (:meth:`Component.has_log_transmission`: the smooth ISM, gas edges
    without lines, dust edges) is evaluated as the exponential of the sum
    of their logarithms, one exponential instead of one per absorber;
    otherwise the arithmetic is that of :meth:`ModelNode.evaluate` (same
    operands, same order).  Results agree with :meth:`ModelNode.evaluate`
    to rounding (exp(a + b) against exp(a) exp(b)).

    The array returned may be reused by the next call: copy it to keep it.
    """

    def __init__(self, model: ModelNode, grid: EnergyGrid, names):
        index = {n: i for i, n in enumerate(names)}
        missing = set(model.parameters()) - set(index)
        if missing:
            raise UnknownParameterError(f"no slot for parameter(s) {sorted(missing)}")
        self.grid = grid
        self.root = self._build(model, grid, index)

    @classmethod
    def _build(cls, node, grid, index):
        if isinstance(node, Component):
            return _Leaf(node, grid, index)
        if cls._log_product(node):
            return _Exp(cls._build_log(node, grid, index))
        return _Node(cls._build(node.left, grid, index), cls._build(node.right, grid, index),
                     node.op == "*")

    @classmethod
    def _log_product(cls, node):
        """True for a component or product whose every factor gives its log
        transmission."""
        if isinstance(node, Component):
            cls_ = type(node)
            # a subclass that overrides _evaluate but not _log_transmission
            # keeps its own _evaluate
            return (node.kind == MULTIPLICATIVE and cls_.evaluate is Component.evaluate
                    and _defined_in(cls_, "_evaluate") is _defined_in(cls_, "_log_transmission")
                    and node.has_log_transmission())
        return (isinstance(node, CompositeModel) and node.op == "*"
                and cls._log_product(node.left) and cls._log_product(node.right))

    @classmethod
    def _build_log(cls, node, grid, index):
        if isinstance(node, Component):
            return _Leaf(node, grid, index, log=True)
        return _Node(cls._build_log(node.left, grid, index),
                     cls._build_log(node.right, grid, index), False)

    def __call__(self, vals) -> np.ndarray:
        """Model on the grid for ``vals`` (a list of floats in ``names`` order)."""
        return self.root(vals)


def register_component(cls):
    """Add a component class to :data:`COMPONENTS` under its registry name.

    Defining a class again under the same module and name (a notebook cell
    run twice, a module reloaded) replaces the old registration; another
    class under a taken registry name is refused."""
    name = cls.registry_name
    old = COMPONENTS.get(name)
    if old is not None and old is not cls and (old.__module__, old.__qualname__) != (
            cls.__module__, cls.__qualname__):
        raise ModelError(f"component registry name {name!r} is taken by "
                         f"{old.__module__}.{old.__qualname__}")
    COMPONENTS[name] = cls
    return cls
