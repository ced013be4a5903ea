"""One grain population seen at several edges.

:class:`MultiEdgeDust` is the dust component of a sightline whose spectra
cover several absorption edges (e.g. O K, Fe L, Mg K and Si K).  The grains
that make one edge make all of them: the same material (or mixture of
materials), the same size distribution and the same number of grains, with
the elements in the proportions of each material's formula.  So the
component has **one** dust column, **one** set of size-distribution
parameters and the mixture's fractions, and every element's dust column
follows from them by stoichiometry.

Optical depth
-------------
For materials k with formula-unit columns n_k (cm^-2), a normalised size
distribution p(a) shared by all materials and per-grain cross sections
σ_abs,k(E, a), σ_sca,k(E, a) from the package's per-size tables
(:mod:`edgefit.dust.tables`),

.. math::

    \\tau(E) = \\sum_k \\frac{n_k}{\\langle V\\rangle\\, n_{fu,k}}
        \\left[\\langle\\sigma_{abs,k}\\rangle + (1 - f_{in})\\langle\\sigma_{sca,k}\\rangle\\right]
        - \\sum_{Y \\notin T} N_{Y,dust}\\, \\sigma_Y(E),

with ⟨V⟩ = (4π/3)⟨a³⟩ the mean grain volume, n_fu,k = ρ_k N_A / M_k the
formula units per unit volume of material k (so the first factor is the
grain column of material k), T the set of *tied* elements (``elements``)
and σ_Y the unshielded atomic photoabsorption
(:func:`edgefit.physics.atomic.photoabsorption`).

Each element counted once
-------------------------
The intended model is::

    SmoothISM(exclude=T) * GasEdge(Z1) * GasEdge(Z2) ... * MultiEdgeDust(..., elements=T)

The smooth component leaves out every tied element; each tied element has
its own gas edge (gas column) and its dust atoms are carried here, inside
the grains' Mie extinction.  Grain atoms of *untied* elements (those the
smooth component still counts at the abundance table's value, gas plus
dust in the thin-grain limit) are subtracted as unshielded atoms, as
:class:`~edgefit.models.dust.DustEdge` does for all its non-edge atoms
(``count_once=True``; see :mod:`edgefit.models.dust`).  With a single
tied element this component is exactly ``DustEdge(material, element=Z)``;
with every element of the material tied nothing is subtracted.
:meth:`MultiEdgeDust.validate` (called by
:class:`~edgefit.inference.likelihood.JointLikelihood`) refuses a model
whose smooth component still counts a tied element, a tied element
without a gas component, and a tied element whose edge lies outside every
spectrum's energy range.

Parameters of the component (full names ``<name>_<param>``)
-----------------------------------------------------------
``col``  [1e16 cm^-2] dust column of the *column element*
(``column_element``, default Si when the mixture holds Si, else the first
tied element), the same quantity as DustEdge's column of its edge
element; every other element's dust column is ``col`` times the
mixture's stoichiometric ratio.  The column of a named element was chosen
over a grain column because the data measure element columns: it is
nearly uncorrelated with the grain size, which a grain column is not.

``frac_<material>``  [-] mass fraction of each material after the first
(the first material takes the rest, 1 − Σ); absent for one material.
Fractions that sum to more than one, or a mixture left without the
column element, give a non-finite transmission, which the likelihood
treats as a failed step (its NaN policy).

size-distribution parameters of the chosen family, shared by all
materials and edges (:data:`edgefit.dust.sizes.FAMILIES`; radii in µm);

``fin`` [-] kept fraction of scattered light (fixed at 0 by default: full
extinction).

Tables
------
For each material the tables are built per edge region
(:data:`edgefit.dust.tables.EDGE_REGIONS` of each tied element; other
elements' regions from :func:`edgefit.dust.tables.region_for`), exactly
as DustEdge builds them (same energies, so the same cache files), and
joined in energy.  Energies of a fit grid outside every region are filled
by extra tables over the gaps (between two regions: exactly the gap;
beyond the outermost regions: rounded outward to 0.05 keV with 25 eV to
spare).  The transmission is evaluated at bin centres (linear
interpolation of τ on the table energies).
"""
from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from .._units import as_kev
from ..errors import ModelError, PhysicsDataError
from ..physics import atomic
from .base import (MULTIPLICATIVE, Component, EnergyGrid, ModelNode, Param,
                   element_column_key)
from .dust import size_option

__all__ = ["MultiEdgeDust", "tied_edge_model"]

_COL_UNIT = 1e16
_FRAC_TOL = 1e-9


def _tables():
    from ..dust import cache
    return cache


def _frac_name(material, index):
    name = f"frac_{material.name}"
    return name if name.isidentifier() else f"frac{index + 1}"


class MultiEdgeDust(Component):
    """Dust of one grain population across several edges (registry name
    ``"multi_edge_dust"``).

    Parameters
    ----------
    name : str, optional
        Component name (default ``"grains"``).
    materials : str, Material or sequence of them
        One material or a mixture (built-in names such as ``"olivine"``,
        ``"pyroxene"``, ``"iron"``, or :class:`~edgefit.dust.materials.Material`).
    elements : sequence of str, optional
        The tied elements T: those with their own gas edge, left out of the
        smooth component.  Default: every element of the mixture that has a
        default edge region (:data:`edgefit.dust.tables.EDGE_REGIONS`).
        Each must be in at least one material.
    column_element : str, optional
        Element whose dust column is the parameter ``col`` (default Si if
        the mixture holds Si, else the first of ``elements``).
    fractions : dict or sequence, optional
        Initial mass fractions: {material name: fraction}, either one per
        material (then they must sum to one) or for the materials after
        the first (their sum at most one); or a list with one fraction per
        material, in order, summing to one (the form a configuration file
        uses).
    sizes : str or SizeDistribution
        Size-distribution family name (its parameters become fit
        parameters) or a fixed :class:`~edgefit.dust.sizes.TabulatedSizes`.
    count_once : bool
        Subtract the unshielded absorption of grain atoms of untied
        elements (see the module docstring).  Default True.
    size_grid : SizeGrid or array, optional
        Radii of the tables (default 160 radii, 0.001-5 µm).
    method, rtol, cache :
        Table building (as for :class:`~edgefit.models.dust.DustEdge`).
    fixed : iterable of str
    **values
        Initial parameter values.
    """

    kind = MULTIPLICATIVE
    default_name = "grains"
    registry_name = "multi_edge_dust"
    #: phase of every element this component carries (see inference.derived)
    phase = "dust"
    _COL = Param("col", 10.0, 0.0, 1.0e5, "1e16 cm-2",
                 "dust column of the column element (all elements follow by stoichiometry)")
    _FIN = Param("fin", 0.0, 0.0, 1.0, "",
                 "fraction of scattered light kept in the extraction region", vary=False)

    def __init__(self, name=None, *, materials="olivine", elements=None, column_element=None,
                 fractions=None, sizes="power_law", count_once=True, size_grid=None,
                 method="auto", rtol=None, cache=True, fixed=(), **values):
        from ..dust.materials import get_material
        from ..dust.sizes import SizeGrid

        if isinstance(materials, (str, bytes)) or not hasattr(materials, "__iter__"):
            materials = [materials]
        try:
            self.materials = tuple(get_material(m) for m in materials)
        except PhysicsDataError as exc:
            raise ModelError(f"materials: {exc}") from exc
        if not self.materials:
            raise ModelError("materials: give at least one material")
        names = [m.name for m in self.materials]
        if len(set(names)) != len(names):
            raise ModelError(f"materials: {names} names a material twice")
        present: dict[str, None] = {}
        for m in self.materials:
            for el in m.composition:
                present.setdefault(el, None)
        if elements is None:
            regions = _tables().EDGE_REGIONS
            elements = [el for el in present if el in regions]
            if not elements:
                raise ModelError(f"elements: the mixture {names} holds none of "
                                 f"{', '.join(regions)}; name the tied elements")
        if isinstance(elements, str):
            elements = [elements]
        tied = []
        for el in elements:
            try:
                sym = atomic.element_symbol(el)
            except PhysicsDataError as exc:  # unknown symbol
                raise ModelError(f"elements: {exc}") from exc
            if sym not in present:
                raise ModelError(f"elements: {sym} is in none of the materials "
                                 f"{', '.join(f'{m.name} ({m.formula})' for m in self.materials)}")
            if sym not in tied:
                tied.append(sym)
        if not tied:
            raise ModelError("elements: name at least one tied element")
        self.elements = tuple(tied)
        if column_element is None:
            column_element = "Si" if "Si" in present else self.elements[0]
        self.column_element = atomic.element_symbol(column_element)
        if self.column_element not in present:
            raise ModelError(f"column_element: {self.column_element} is in none of the "
                             f"materials {names}")
        # size distribution -------------------------------------------------
        self.family, self.fixed_distribution, dist_params = size_option(sizes)
        self._dist_names = tuple(p.name for p in dist_params)
        # mixture fractions ---------------------------------------------------
        self._frac_names = tuple(_frac_name(m, i) for i, m in enumerate(self.materials))[1:]
        frac_params = tuple(
            Param(fn, 0.0, 0.0, 1.0, "", f"mass fraction of {m.name} grains")
            for fn, m in zip(self._frac_names, self.materials[1:]))
        init = dict(values)
        if fractions:
            init.update(self._initial_fractions(fractions))
        self.params = (self._COL,) + frac_params + dist_params + (self._FIN,)
        self.count_once = bool(count_once)
        if size_grid is not None and not isinstance(size_grid, SizeGrid):
            size_grid = SizeGrid(size_grid)
        self.size_grid = size_grid
        self.method, self.rtol, self.cache = method, rtol, bool(cache)
        super().__init__(name, fixed=fixed, **init)
        if self._frac_names and sum(self.values[f] for f in self._frac_names) > 1 + _FRAC_TOL:
            raise ModelError(f"fractions: {', '.join(self._frac_names)} sum to more than one")
        if size_grid is not None:
            a = size_grid.a
            self.params = tuple(
                Param(p.name, p.default, max(p.min, a[0]), min(p.max, a[-1]), p.unit,
                      p.description, p.vary) if p.unit == "um" else p for p in self.params)
        # per material: atoms per formula unit, mass per formula unit (g)
        self._count = np.array([[m.composition.get(el, 0.0) for el in self._all_elements()]
                                for m in self.materials])
        self._fu_mass = np.array([m.formula_mass / atomic.AVOGADRO for m in self.materials])
        self._tables: dict = {}
        self._table_ids: list | tuple = []   # filled while preparing the default span
        self.prepare()  # tables of the tied edge regions, before any fit
        self._table_ids = tuple(self._table_ids)

    def table_identity(self) -> list[dict]:
        """Identities (:func:`edgefit.dust.cache.table_identity`: material
        digest, table format, building version, content digest) of every
        material's cross-section tables over the default span of the tied
        edge regions, the ones this component was built with.  Tables for
        a fit grid reaching past that span come from the same inputs."""
        return [dict(d) for d in self._table_ids]

    def _initial_fractions(self, fractions):
        by_name = {m.name: m for m in self.materials}
        if not isinstance(fractions, dict):
            given = list(fractions)
            if len(given) != len(self.materials):
                raise ModelError(f"fractions: a list needs one fraction per material "
                                 f"{list(by_name)}, got {len(given)}")
            fractions = dict(zip(by_name, given))
        unknown = set(fractions) - set(by_name)
        if unknown:
            raise ModelError(f"fractions: {sorted(unknown)} are not among the materials "
                             f"{list(by_name)}")
        vals = {k: float(v) for k, v in fractions.items()}
        if any(not (0.0 <= v <= 1.0) for v in vals.values()):
            raise ModelError(f"fractions: each must lie in [0, 1], got {vals}")
        if len(vals) == len(self.materials):
            if abs(sum(vals.values()) - 1.0) > 1e-6:
                raise ModelError(f"fractions: one per material must sum to one, got "
                                 f"{sum(vals.values()):.6g} from {vals}")
        elif self.materials[0].name in vals:
            raise ModelError(f"fractions: give all {len(self.materials)} fractions (summing "
                             f"to one) or those of {[m.name for m in self.materials[1:]]}; "
                             f"the first material takes the rest")
        return {fn: vals[m.name] for fn, m in zip(self._frac_names, self.materials[1:])
                if m.name in vals}

    # -- bookkeeping ---------------------------------------------------------
    def _all_elements(self):
        seen = []
        for m in self.materials:
            for el in m.composition:
                if el not in seen:
                    seen.append(el)
        return seen

    def __getstate__(self):
        state = super().__getstate__()
        state["_tables"] = {}
        return state

    def mass_fractions(self, **values) -> np.ndarray:
        """Mass fraction of each material (the first takes the rest)."""
        vals = self._merged(values)
        rest = np.array([vals[f] for f in self._frac_names])
        return np.concatenate([[1.0 - rest.sum()], rest])

    def formula_unit_columns(self, **values) -> np.ndarray:
        """Formula units per cm² of each material (n_k): the dust mass
        column D = N_col / Σ_k (f_k c_col,k / m_k) split by the mass fractions
        f_k, n_k = D f_k / m_k (m_k the formula-unit mass in g).  NaN when
        the fractions are outside [0, 1] or the mixture holds none of the
        column element."""
        vals = self._merged(values)
        f = self.mass_fractions(**vals)
        if np.any(f < -_FRAC_TOL) or np.any(f > 1 + _FRAC_TOL):
            return np.full(f.size, np.nan)
        f = np.clip(f, 0.0, 1.0)
        j = self._all_elements().index(self.column_element)
        per_gram = float(np.sum(f * self._count[:, j] / self._fu_mass))
        if not per_gram > 0:
            return np.full(f.size, np.nan)
        mass = vals["col"] * _COL_UNIT / per_gram
        return mass * f / self._fu_mass

    def element_columns(self, **values) -> dict[str, float]:
        """Dust column (cm^-2) of every element of the mixture:
        N_Y = Σ_k n_k c_Y,k."""
        n = self.formula_unit_columns(**values)
        cols = n @ self._count
        return {el: float(c) for el, c in zip(self._all_elements(), cols)}

    def distribution(self, **values):
        """The shared size distribution for parameter ``values``."""
        from ..dust.sizes import make_distribution

        if self.fixed_distribution is not None:
            return self.fixed_distribution
        vals = self._merged(values)
        try:
            return make_distribution(self.family, **{k: vals[k] for k in self._dist_names})
        except PhysicsDataError as exc:
            raise ModelError(f"{self.name}: {exc}") from exc

    # -- tables ----------------------------------------------------------------
    def _regions(self):
        """Sorted, non-overlapping (lo, hi) keV edge regions of the tied
        elements."""
        tab = _tables()
        regs = sorted({tab.region_for(el)[1:] for el in self.elements})
        out: list[tuple[float, float]] = []
        for lo, hi in regs:
            if out and lo < out[-1][1]:
                lo = out[-1][1]
                if lo >= hi:
                    continue
            out.append((lo, hi))
        return out

    def segments(self, lo, hi):
        """The (lo, hi) keV pieces whose tables cover ``lo``..``hi`` keV:
        the tied elements' edge regions that overlap it, and filler pieces
        for the gaps."""
        regs = self._regions()
        pieces = []
        # below the lowest region
        if lo < regs[0][0]:
            flo = max(0.05, math.floor((lo - 0.025) / 0.05) * 0.05)
            pieces.append((flo, regs[0][0]))
        for i, (rlo, rhi) in enumerate(regs):
            pieces.append((rlo, rhi))
            if i + 1 < len(regs) and rhi < regs[i + 1][0]:
                pieces.append((rhi, regs[i + 1][0]))
        if hi > regs[-1][1]:
            pieces.append((regs[-1][1], math.ceil((hi + 0.025) / 0.05) * 0.05))
        return [(a, b) for a, b in pieces if b >= lo and a <= hi]

    def prepare(self, grid: EnergyGrid | None = None, *, energy_range=None):
        """Load (from the disk cache) or compute and store every material's
        tables covering ``grid``'s bin centres, ``energy_range`` = (lo, hi)
        keV, or by default the span of the tied edge regions.  Construction
        prepares the default span; the model's evaluation prepares each new
        grid before :meth:`precompute`, which never computes or writes a
        table.  Returns self."""
        if grid is not None:
            lo, hi = float(grid.mid[0]), float(grid.mid[-1])
        elif energy_range is not None:
            lo, hi = (float(as_kev(v)) for v in energy_range)
        else:
            regs = self._regions()
            lo, hi = regs[0][0], regs[-1][1]
        for k in range(len(self.materials)):
            self._material_table(k, lo, hi)
        return self

    def _material_table(self, k, lo, hi, build=True):
        """(energies, σ_abs, σ_sca) of material k joined over the segments
        covering lo..hi keV (strictly increasing energies).  With
        ``build=False`` only prepared tables or tables already in the disk
        cache are used (ModelError otherwise)."""
        key = (k, lo, hi)
        if key in self._tables:
            return self._tables[key]
        if not build:
            for (kk, tlo, thi), item in self._tables.items():
                if kk == k and tlo <= lo and thi >= hi:
                    return item
        tab = _tables()
        mat = self.materials[k]
        es, sa, ss = [], [], []
        last = -math.inf
        sizes = None
        for a, b in self.segments(lo, hi):
            energy = tab.edge_energy_grid(mat, a, b)
            if build:
                t = tab.load_or_build(mat, energy, self.size_grid, method=self.method,
                                      rtol=self.rtol, cache=self.cache)
            else:
                t = (tab.load_cached(mat, energy, self.size_grid, method=self.method,
                                     rtol=self.rtol) if self.cache else None)
                if t is None:
                    raise ModelError(
                        f"{self.name}: no prepared dust table of {mat.name} covers "
                        f"{lo:.4g}-{hi:.4g} keV; call {self.name}.prepare(grid) (or "
                        f"prepare(energy_range=(lo, hi))) before evaluating, or build the "
                        f"default tables with `edgefit dust-tables build`")
            if isinstance(self._table_ids, list):
                self._table_ids.append(tab.table_identity(t))
            keep = t.energy_kev > last
            es.append(t.energy_kev[keep])
            sa.append(t.sigma_abs[keep])
            ss.append(t.sigma_sca[keep])
            last = t.energy_kev[-1]
            sizes = t.sizes
        item = (np.concatenate(es), np.concatenate(sa), np.concatenate(ss), sizes)
        self._tables[key] = item
        return item

    # -- Component interface -----------------------------------------------------
    def _prepare(self, lo, hi, build=True):
        """Per-material arrays on the joined table energies that bracket
        lo..hi keV (one table point beyond each end)."""
        untied = [el for el in self._all_elements() if el not in self.elements]
        per = []
        energy = None
        sizes = None
        for k, mat in enumerate(self.materials):
            e, sa, ss, sizes = self._material_table(k, lo, hi, build)
            i0 = max(int(np.searchsorted(e, lo, side="right")) - 1, 0)
            i1 = min(int(np.searchsorted(e, hi, side="left")) + 1, e.size)
            e, sa, ss = e[i0:i1], sa[i0:i1], ss[i0:i1]
            other = np.zeros_like(e)
            if self.count_once:
                for el in untied:
                    c = mat.composition.get(el, 0.0)
                    if c:
                        other = other + c * atomic.photoabsorption(el, e)
            per.append({"energy": e, "abs": sa, "sca": ss, "other": other,
                        "fu_per_um3": mat.formula_units_per_cm3 * 1e-12})
            energy = e if energy is None else energy
        assert sizes is not None  # there is at least one material
        return {"materials": per, "a3": sizes.a ** 3, "sizes": sizes}

    def precompute(self, grid: EnergyGrid):
        # only tables made by prepare() (or already cached); never builds
        pre = self._prepare(float(grid.mid[0]), float(grid.mid[-1]), build=False)
        pre["x"] = grid.mid
        return pre

    def _tau_on(self, pre, x, vals):
        n_fu = self.formula_unit_columns(**vals)
        if not np.all(np.isfinite(n_fu)):
            return np.full(np.shape(x), np.nan)
        try:
            w = pre["sizes"].weights(self.distribution(**vals))
        except PhysicsDataError as exc:
            raise ModelError(f"{self.name}: {exc}") from exc
        volume = 4.0 * math.pi / 3.0 * float(pre["a3"] @ w)      # µm³ per grain
        keep = 1.0 - vals["fin"]
        tau = np.zeros(np.shape(x))
        for n, m in zip(n_fu, pre["materials"]):
            if n == 0.0:
                continue
            grains = n / (volume * m["fu_per_um3"])
            t = grains * (m["abs"] @ w + keep * (m["sca"] @ w)) - n * m["other"]
            tau = tau + np.interp(x, m["energy"], t)
        return tau

    def has_log_transmission(self) -> bool:
        return True

    def _log_transmission(self, grid, pre, **values):
        return np.negative(self._tau_on(pre, pre["x"], values))

    def _evaluate(self, grid, pre, **values):
        return np.exp(-self._tau_on(pre, pre["x"], values))

    def optical_depth(self, energy_kev, **values):
        """τ at ``energy_kev`` (keV or Quantity) as used in the transmission."""
        vals = self._merged(values)
        e = np.asarray(as_kev(energy_kev), dtype=float)
        pre = self._prepare(float(np.min(e)), float(np.max(e)))
        out = self._tau_on(pre, e, vals)
        return float(out) if out.ndim == 0 else out

    def edge_energies(self) -> dict[str, float]:
        """Edge energy (keV) of each tied element as placed by the atomic
        tables (K, or L3 for Fe per the default regions)."""
        tab = _tables()
        return {el: atomic.edge_position(el, tab.region_for(el)[0]) for el in self.elements}

    def derived(self, **values):
        """Dust column of every element of the mixture (``col_<El>_cm2``,
        cm^-2), formula-unit column and mass fraction of each material,
        grain column (cm^-2), dust mass column (g cm^-2) and the mean grain
        radius ⟨a⟩ (µm) of the shared distribution."""
        vals = self._merged(values)
        n_fu = self.formula_unit_columns(**vals)
        out = {element_column_key(el): (c, "cm-2")
               for el, c in self.element_columns(**vals).items()}
        dist = self.distribution(**vals)
        volume_cm3 = dist.mean_volume() * 1e-12
        grains = 0.0
        for n, mat, f in zip(n_fu, self.materials, self.mass_fractions(**vals)):
            out[f"fu_column_{mat.name}"] = (float(n), "cm-2")
            out[f"fraction_{mat.name}"] = (float(f), "")
            grains += n / (volume_cm3 * mat.formula_units_per_cm3)
        out["grain_column"] = (float(grains), "cm-2")
        out["dust_mass_column"] = (float(np.sum(n_fu * self._fu_mass)), "g cm-2")
        out["mean_radius"] = (float(dist.moment(1)), "um")
        return out

    # -- checks against the data and the rest of the model ----------------------
    def validate(self, model, grids):
        """Refuse a tied element whose edge lies outside every energy grid
        in ``grids`` (one per spectrum) or that has no gas component in
        ``model``, and a smooth component that still counts a tied element
        (when ``count_once``)."""
        spans = [(float(g.lo[0]), float(g.hi[-1])) for g in grids]
        for el, e0 in self.edge_energies().items():
            if not any(lo <= e0 <= hi for lo, hi in spans):
                rng = ", ".join(f"{lo:.4g}-{hi:.4g}" for lo, hi in spans)
                raise ModelError(f"{self.name}: elements: the {el} edge at {e0:.4g} keV lies "
                                 f"outside every spectrum's range ({rng} keV); drop {el} from "
                                 "the tied elements or add a spectrum that covers it")
        gas = {getattr(c, "element", None) for c in model.components()
               if getattr(c, "phase", None) == "gas"}
        lacking = [el for el in self.elements if el not in gas]
        if lacking:
            raise ModelError(f"{self.name}: elements: {', '.join(lacking)} has no gas component; "
                             f"add GasEdge(element=...) for it (its column may be fixed at 0) "
                             "or drop it from the tied elements")
        if self.count_once:
            from .absorption import SmoothISM

            for comp in model.components():
                if isinstance(comp, SmoothISM):
                    missing = [el for el in self.elements if el not in comp.exclude]
                    if missing:
                        raise ModelError(
                            f"{self.name}: elements: the smooth component {comp.name!r} still "
                            f"counts {', '.join(missing)}; give it exclude="
                            f"{list(self.elements)} so each element is counted once")

    def __repr__(self):
        vals = ", ".join(f"{k}={v:.4g}" for k, v in self.values.items())
        mats = "+".join(m.name for m in self.materials)
        return (f"MultiEdgeDust({self.name!r}, {mats}, tied {'/'.join(self.elements)}, "
                f"{self.family}, {vals})")


def tied_edge_model(continuum: ModelNode, *, materials: Any = "olivine",
                    elements: Sequence[str] | None = None,
                    gas_columns: dict[str, float] | None = None, nh: float | None = None,
                    abundances: Any = None, name: str = "grains",
                    **dust_kw: Any) -> ModelNode:
    """The standard tied-edge sightline model::

        SmoothISM(exclude=T) * GasEdge(Z) for Z in T * MultiEdgeDust(materials, T) * continuum

    ``gas_columns`` gives initial gas columns {element: 1e16 cm^-2};
    ``nh`` the initial N_H (1e22 cm^-2); other keywords go to
    :class:`MultiEdgeDust`.  Gas components are named ``gas_<element>``.
    """
    from .absorption import GasEdge, SmoothISM

    dust = MultiEdgeDust(name, materials=materials, elements=elements, **dust_kw)
    ism_kw = {} if abundances is None else {"abundances": abundances}
    if nh is not None:
        ism_kw["nh"] = nh
    model = SmoothISM(exclude=dust.elements, **ism_kw)
    gas_columns = dict(gas_columns or {})
    for el in dust.elements:
        edge = _tables().region_for(el)[0]
        kw = {"col": gas_columns.pop(el)} if el in gas_columns else {}
        model = model * GasEdge(element=el, edge=edge, **kw)
    if gas_columns:
        raise ModelError(f"gas_columns: {sorted(gas_columns)} are not tied elements "
                         f"{list(dust.elements)}")
    return model * dust * continuum
