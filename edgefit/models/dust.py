"""The dust edge: transmission of grains of one material across an edge.

Transmission exp(−τ_dust(E)) with

.. math::

    \\tau_{dust}(E) = N_{Z,dust}\\left[
        \\frac{\\langle\\sigma_{abs}\\rangle + (1 - f_{in})\\langle\\sigma_{sca}\\rangle}
             {\\langle N_Z(a)\\rangle}
        - \\sum_{Y \\neq Z} \\frac{c_Y}{c_Z}\\, \\sigma_Y(E) \\right],

where ⟨·⟩ averages over the normalised size distribution (weighted sums
over a cached per-size table, :mod:`edgefit.dust.tables`),
⟨N_Z(a)⟩ = (4π/3) ⟨a³⟩ ρ N_A c_Z / M is the mean number of atoms of the edge
element Z per grain, c_Y atoms of element Y per formula unit, σ_Y the
unshielded atomic photoabsorption (:func:`edgefit.physics.atomic.photoabsorption`,
from the same f2 as the optical constants) and f_in the fraction of
scattered light kept in the extraction region (0: full extinction, the
usual case for narrow grating extractions; 1: absorption only).

Each element counted once
-------------------------
A silicate grain absorbs through its O, Mg and Fe as well as its Si, and
scatters as a whole; the Mie cross sections contain all of that.  The
intended model is::

    SmoothISM(exclude=[Z]) * GasEdge(Z) * DustEdge(material, element=Z)

where the smooth interstellar component counts every atom of the other
elements (O, Mg, Fe ...) as unshielded atoms at the abundance table's
value, and the gas edge counts the gas-phase atoms of Z.  So by default
(``count_once=True``) the dust edge subtracts the unshielded atomic
absorption of its own other atoms, N_Y,dust σ_Y(E) with
N_Y,dust = N_Z,dust c_Y / c_Z -- which the smooth component already counts
-- and the product counts each atom once: the grain's Z atoms with their
self-shielding, its other atoms by the smooth component plus the
(shielding and scattering) correction carried here.  With large grains
that correction can be negative below the edge (shielded O absorbs less
than free O).  Pass ``count_once=False`` when no smooth component is used.

Parameters of the component (full names ``<name>_<param>``)
-----------------------------------------------------------
``col``  column of the edge element in grains, 1e16 cm^-2 (named like
:class:`~edgefit.models.absorption.GasEdge`'s gas column);
size-distribution parameters of the chosen family
(:data:`edgefit.dust.sizes.FAMILIES`: ``power_law`` amin/amax/index,
``single`` size, ``lognormal`` center/width/amin/amax, ``cutoff``
amin/index/atrans/acut/amax; radii in µm; none for a user table);
``shift`` a shift of the dust cross sections in energy (eV; a chemical
shift of the edge in the solid; the whole dust τ moves rigidly);
``fin`` the kept fraction of scattered light (ignored, and held fixed, when
a :class:`~edgefit.dust.halo.HaloGeometry` is given: then f_in(E, a)
follows from the Rayleigh–Gans halo of each grain size).

The transmission is evaluated at bin centres.  The tables cover the
element's default edge region (:data:`edgefit.dust.tables.EDGE_REGIONS`)
extended to the fit grid when needed (with 25 eV to spare for the shift,
rounded outward to 0.05 keV; built once and cached on disk).  Where a
shifted evaluation reaches past the end of a table, the end value is
used.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import _jit
from .._units import as_kev
from ..errors import ModelError, PhysicsDataError
from ..physics import atomic
from .base import COLUMN_KEY, MULTIPLICATIVE, Component, EnergyGrid, Param

if TYPE_CHECKING:
    from ..dust.sizes import SizeDistribution

__all__ = ["DustEdge"]

def _tables():
    from ..dust import cache
    return cache


_NOT_PREPARED = ("call {name}.prepare(grid) (or prepare(energy_range=(lo, hi))) before "
                 "evaluating, or build the default tables with `edgefit dust-tables build`")


def _remember(cache, key, value, size):
    """Store in a small first-in-first-out cache dict."""
    if len(cache) >= size:
        cache.pop(next(iter(cache)))
    cache[key] = value


def _interp_scaled_loop(x, shift, xp, fp, scale, u, out):
    """u = np.interp(x - shift, xp, fp) (end values outside ``xp``) and
    out = u * scale in one pass over the increasing ``x`` (compiled by
    numba; the interpolation formula of np.interp, equal to rounding)."""
    last = xp.size - 1
    j = 0
    for i in range(x.size):
        xi = x[i] - shift
        if xi >= xp[last]:
            v = fp[last]
        elif xi <= xp[0]:
            v = fp[0]
        else:
            while xp[j + 1] <= xi:
                j += 1
            v = (fp[j + 1] - fp[j]) / (xp[j + 1] - xp[j]) * (xi - xp[j]) + fp[j]
        u[i] = v
        out[i] = v * scale


@_jit.kernels
def _numba_kernels():
    """The compiled interpolation of the dust edge (None without numba)."""
    # divisions by the (increasing) table energies' steps need no zero check
    return {"interp": _jit.jit(_interp_scaled_loop, nogil=True, error_model="numpy")}



def size_option(sizes: Any) -> tuple[str, SizeDistribution | None, tuple[Param, ...]]:
    """Resolve a dust component's ``sizes`` option.

    A registered family name makes the family's parameters fit parameters:
    returns (name, None, its Params).  A parameter-free distribution (a
    :class:`~edgefit.dust.sizes.TabulatedSizes`) is used as it is: returns
    ("table", the distribution, ()).  Anything else is a :class:`ModelError`
    naming the ``sizes`` option.
    """
    from ..dust.sizes import FAMILIES
    from ..dust.sizes import SizeDistribution as Distribution

    if isinstance(sizes, Distribution):
        if sizes.PARAMS:
            raise ModelError("sizes: pass a family by name to fit its parameters, or a "
                             "TabulatedSizes for a fixed table")
        return "table", sizes, ()
    if sizes not in FAMILIES:
        raise ModelError(f"sizes: unknown size distribution {sizes!r}; have "
                         f"{', '.join(FAMILIES)} or a TabulatedSizes")
    return sizes, None, tuple(FAMILIES[sizes].PARAMS)

class DustEdge(Component):
    """Dust edge of one grain material (registry name ``"dust_edge"``).

    Parameters
    ----------
    name : str, optional
        Component name (default ``"dust"``).
    material : str or Material
        Built-in material name (``"olivine"``, ``"pyroxene"`` ...), a
        :class:`~edgefit.dust.materials.Material`, or a chemical formula
        (e.g. ``"Mg1.8Fe0.2SiO4"``) together with ``density``.
    density : float or Quantity, optional
        Mass density (g cm^-3) of a material given by its formula; this is
        how a configuration file defines a material of its own
        (``options = { material = "Mg1.8Fe0.2SiO4", density = 3.4 }``).
    element : str
        The edge element Z whose dust column is the parameter ``col``.
    sizes : str or SizeDistribution
        Family name (``"power_law"`` -- MRN defaults --, ``"single"``,
        ``"lognormal"``, ``"cutoff"``) whose parameters become fit
        parameters, or a fixed :class:`~edgefit.dust.sizes.TabulatedSizes`.
    count_once : bool
        Subtract the grain's other atoms' unshielded absorption (see the
        module docstring).  Default True.
    halo : HaloGeometry, optional
        Compute f_in from the extraction geometry instead of the ``fin``
        parameter.
    energy_range : (float, float), optional
        Table energy range in keV (default: the element's edge region).
    table : DustTable, optional
        Use this table instead of the cached default one (it must cover
        the fit grid).
    size_grid : SizeGrid or array, optional
        Radii of the table (default 160 radii, 0.001-5 µm).
    method, rtol :
        Efficiency method and tolerance for building tables.
    cache : bool
        Store built tables on disk (default True).
    fixed : iterable of str
        Parameters held fixed by default.
    **values
        Initial parameter values (numbers in their units or Quantities).
    """

    kind = MULTIPLICATIVE
    default_name = "dust"
    registry_name = "dust_edge"
    #: Phase of the edge element this component carries (read by
    #: :mod:`edgefit.inference.derived` to form depletions).
    phase = "dust"
    _BASE_PARAMS = (
        Param("col", 10.0, 0.0, 1.0e5, "1e16 cm-2",
              "column density of the edge element locked in grains"),
    )
    _TAIL_PARAMS = (
        Param("shift", 0.0, -20.0, 20.0, "eV",
              "energy shift of the dust cross sections (chemical shift)", vary=False),
        Param("fin", 0.0, 0.0, 1.0, "",
              "fraction of scattered light kept in the extraction region", vary=False),
    )
    params = _BASE_PARAMS + tuple(Param(*p) for p in (
        ("amin", 0.005, 0.001, 1.0, "um", "smallest grain radius", False),
        ("amax", 0.25, 0.006, 5.0, "um", "largest grain radius", True),
        ("index", 3.5, 1.0, 6.0, "", "power-law index q of n(a) ∝ a^-q", False),
    )) + _TAIL_PARAMS

    def __init__(self, name=None, *, material="olivine", density=None, element="Si",
                 sizes="power_law", count_once=True, halo=None, energy_range=None,
                 table=None, size_grid=None, method="auto", rtol=None, cache=True, fixed=(),
                 **values):
        from ..dust.materials import get_material
        from ..dust.sizes import SizeGrid

        self.material = get_material(material, density)
        self.element = atomic.element_symbol(element)
        self.material.count(self.element)  # error if the material lacks it
        self.family, self.fixed_distribution, dist_params = size_option(sizes)
        self.params = self._BASE_PARAMS + dist_params + self._TAIL_PARAMS
        self._dist_names = tuple(p.name for p in dist_params)
        self.count_once = bool(count_once)
        self.halo = halo
        self.energy_range = (None if energy_range is None
                             else tuple(float(as_kev(v)) for v in energy_range))
        self.table = table
        if size_grid is not None and not isinstance(size_grid, SizeGrid):
            size_grid = SizeGrid(size_grid)
        self.size_grid = table.sizes if table is not None else size_grid
        self.method, self.rtol, self.cache = method, rtol, bool(cache)
        if halo is not None:
            fixed = set(fixed) | {"fin"}
        super().__init__(name, fixed=fixed, **values)
        self._tables: dict = {}
        if self.size_grid is not None:
            a = self.size_grid.a
            self.params = tuple(
                Param(p.name, p.default, max(p.min, a[0]), min(p.max, a[-1]), p.unit,
                      p.description, p.vary) if p.unit == "um" else p for p in self.params)
        self.prepare()  # the default region's table, before any fit
        ident = _tables().table_identity
        self._table_ids = ([ident(self.table)] if self.table is not None
                           else [ident(t) for t, _ in self._tables.values()])

    def table_identity(self) -> list[dict]:
        """Identities (:func:`edgefit.dust.cache.table_identity`: material
        digest, table format, building version, content digest) of the
        cross-section table this component was built with -- the given
        ``table``, or the one of its default energy range.  A table for a
        fit grid reaching past that range comes from the same inputs
        (material, size grid, method, tolerance, version)."""
        return [dict(d) for d in self._table_ids]

    # -- pickling: drop in-memory tables (they reload from the disk cache) --
    def __getstate__(self):
        state = super().__getstate__()
        state["_tables"] = {}
        return state

    # -- tables ----------------------------------------------------------
    def _region(self):
        if self.energy_range is not None:
            return self.energy_range
        _, lo, hi = _tables().region_for(self.element)
        return lo, hi

    def prepare(self, grid: EnergyGrid | None = None, *, energy_range=None):
        """Load (from the disk cache) or compute and store the cross-section
        table covering ``grid``'s bin centres, ``energy_range`` = (lo, hi)
        keV, or by default the table's energy range (the element's edge
        region).  Construction prepares the default range; the model's
        evaluation prepares each new grid before :meth:`precompute`, which
        never computes or writes a table.  Returns self."""
        if grid is not None:
            lo, hi = float(grid.mid[0]), float(grid.mid[-1])
        elif energy_range is not None:
            lo, hi = (float(as_kev(v)) for v in energy_range)
        elif self.table is not None:
            return self
        else:
            lo, hi = self._region()
        self._table_for(lo, hi)
        return self

    def _table_range(self, lo, hi):
        """Energy range (keV) of the table used for lo..hi keV: the region,
        extended with room for the shift parameter, rounded outward to
        0.05 keV."""
        rlo, rhi = self._region()
        tlo = min(rlo, math.floor((lo - 0.025) / 0.05) * 0.05) if lo < rlo else rlo
        thi = max(rhi, math.ceil((hi + 0.025) / 0.05) * 0.05) if hi > rhi else rhi
        return tlo, thi

    def _table_for(self, lo, hi, build=True):
        """(table, table-level precomputation) covering lo..hi keV; with
        ``build=False`` only a prepared table or one already in the disk
        cache is used (ModelError otherwise)."""
        if self.table is not None:
            if not self.table.covers(lo, hi):
                raise ModelError(
                    f"{self.name}: the given dust table covers "
                    f"{self.table.energy_kev[0]:.4g}-{self.table.energy_kev[-1]:.4g} keV but "
                    f"{lo:.4g}-{hi:.4g} keV is needed")
            return self.table, self._table_pre(self.table)
        for (tlo, thi), item in self._tables.items():
            if tlo <= lo and thi >= hi:
                return item
        tlo, thi = self._table_range(lo, hi)
        tab = _tables()
        energy = tab.edge_energy_grid(self.material, max(tlo, 0.05), thi)
        if build:
            table = tab.load_or_build(self.material, energy, self.size_grid,
                                      method=self.method, rtol=self.rtol, cache=self.cache)
        else:
            table = (tab.load_cached(self.material, energy, self.size_grid, method=self.method,
                                     rtol=self.rtol) if self.cache else None)
            if table is None:
                raise ModelError(
                    f"{self.name}: no prepared dust table of {self.material.name} covers "
                    f"{lo:.4g}-{hi:.4g} keV; " + _NOT_PREPARED.format(name=self.name))
        item = (table, self._table_pre(table))
        self._tables[(tlo, thi)] = item
        return item

    def _table_pre(self, table):
        """Grid-independent arrays of one table: effective σ per size and the
        other atoms' unshielded absorption per edge atom."""
        e = table.energy_kev
        if self.halo is not None:
            f = self.halo.fraction(e[:, None], table.sizes.a[None, :])
            s_sca_out = (1.0 - f) * table.sigma_sca
        else:
            s_sca_out = None
        other = np.zeros_like(e)
        cz = self.material.count(self.element)
        for el, c in self.material.composition.items():
            if el != self.element:
                other = other + (c / cz) * atomic.photoabsorption(el, e)
        from ..dust.sizes import make_distribution

        per_cm3 = self.material.atoms_per_cm3(self.element)
        return {"energy": e, "abs": table.sigma_abs, "sca": table.sigma_sca,
                "sca_out": s_sca_out, "other_atoms": other,
                "other": other if self.count_once else np.zeros_like(e), "a3": table.sizes.a ** 3,
                "atoms_per_um3": per_cm3 * 1e-12,
                # for the fit-time path (see _per_column): the distribution
                # factory (imported here, not per evaluation) and the caches
                "make_distribution": make_distribution,
                "weights": {}, "per_column": {}, "combined": {}}

    # -- distribution ------------------------------------------------------
    def distribution(self, **values):
        """The size distribution for parameter ``values`` (short names)."""
        from ..dust.sizes import make_distribution

        if self.fixed_distribution is not None:
            return self.fixed_distribution
        vals = self._merged(values)
        try:
            return make_distribution(self.family, **{k: vals[k] for k in self._dist_names})
        except PhysicsDataError as exc:
            raise ModelError(f"{self.name}: {exc}") from exc

    def _per_atom(self, table, pre, vals):
        """(σ_abs, σ_sca lost from the extraction region) per edge atom in
        grains, cm², on the table energies, and the mean atoms per grain."""
        try:
            w = table.sizes.weights(self.distribution(**vals))
        except PhysicsDataError as exc:
            raise ModelError(f"{self.name}: {exc}") from exc
        atoms = 4.0 * math.pi / 3.0 * float(pre["a3"] @ w) * pre["atoms_per_um3"]
        s_abs = pre["abs"] @ w / atoms
        if pre["sca_out"] is not None:
            lost = pre["sca_out"] @ w / atoms
        else:
            lost = (1.0 - vals["fin"]) * (pre["sca"] @ w / atoms)
        return s_abs, lost, atoms

    def _tau_table(self, table, pre, vals):
        s_abs, lost, _ = self._per_atom(table, pre, vals)
        return vals["col"] * 1e16 * (s_abs + lost - pre["other"])

    # -- fit-time fast path ------------------------------------------------
    #: Entries kept in each of the fit-time caches (weights per size-
    #: distribution value, size averages per (distribution, fin), optical
    #: depth per column on a grid per (distribution, fin, shift)).
    fast_cache_size = 16

    def _weights_cached(self, table, pre, values, key):
        """(W, ⟨N_Z(a)⟩) of the size distribution, cached per distinct
        value ``key`` of its parameters."""
        cache = pre["weights"]
        hit = cache.get(key)
        if hit is None:
            try:
                if self.fixed_distribution is not None:
                    dist = self.fixed_distribution
                else:       # ``values`` holds every parameter: no merging needed
                    dist = pre["make_distribution"](self.family,
                                                    **dict(zip(self._dist_names, key)))
                w = table.sizes.weights(dist)
            except PhysicsDataError as exc:
                raise ModelError(f"{self.name}: {exc}") from exc
            atoms = 4.0 * math.pi / 3.0 * float(pre["a3"] @ w) * pre["atoms_per_um3"]
            hit = (w, atoms)
            _remember(cache, key, hit, self.fast_cache_size)
        return hit

    def _per_column(self, table, pre, values, dkey, rows):
        """τ_dust / (N_Z,dust 1e16) on table rows ``rows``: the size average
        (one matrix product of the combined per-size cross section
        σ_abs + (1 − f_in) σ_sca, or σ_abs + σ_sca,lost with a halo, with the
        weights) per edge atom, less the other atoms' term (divided and
        subtracted in place); cached per (distribution, f_in)."""
        fin = 0.0 if self.halo is not None else values["fin"]
        cache = pre["per_column"]
        key = (dkey, fin, rows)
        hit = cache.get(key)
        if hit is None:
            w, atoms = self._weights_cached(table, pre, values, dkey)
            combined = pre["combined"]
            mat = combined.get(fin)
            if mat is None:
                lost = pre["sca_out"] if pre["sca_out"] is not None else (1.0 - fin) * pre["sca"]
                mat = pre["abs"] + lost
                _remember(combined, fin, mat, 4)
            r0, r1 = rows
            hit = mat[r0:r1] @ w
            hit /= atoms
            hit -= pre["other"][r0:r1]
            _remember(cache, key, hit, self.fast_cache_size)
        return hit

    # -- Component interface ---------------------------------------------
    def precompute(self, grid: EnergyGrid):
        # The table must cover the bin centres (prepared by prepare(), never
        # built here); a shifted evaluation that reaches past a table end
        # takes the end value (np.interp).
        table, pre = self._table_for(grid.mid[0], grid.mid[-1], build=False)
        # the table rows any shift within the parameter's bounds can reach
        e = pre["energy"]
        sp = self.param("shift")
        lo = grid.mid[0] - max(sp.max, 0.0) * 1e-3
        hi = grid.mid[-1] - min(sp.min, 0.0) * 1e-3
        r0 = max(int(np.searchsorted(e, lo, side="right")) - 1, 0)
        r1 = min(int(np.searchsorted(e, hi, side="left")) + 1, e.size)
        return {"table": table, "pre": pre, "x": grid.mid, "rows": (r0, r1),
                "energy_rows": e[r0:r1], "shift_range": (sp.min, sp.max), "shapes": {}}

    def _log_transmission(self, grid, pre, **values):
        """−N_Z,dust u(E − shift) (the log of the transmission), with u the optical depth per unit
        column interpolated from the table (cached per distribution, f_in
        and shift, so a change of the column alone costs one multiply and
        one exp over the grid)."""
        shift = values["shift"]
        dkey = tuple(map(values.__getitem__, self._dist_names))
        key = (dkey, values["fin"], shift)
        shapes = pre["shapes"]
        u = shapes.get(key)
        scale = -(values["col"] * 1e16)
        if u is not None:
            return u * scale
        smin, smax = pre["shift_range"]
        if smin <= shift <= smax:
            rows, energy = pre["rows"], pre["energy_rows"]
        else:
            energy = pre["pre"]["energy"]
            rows = (0, energy.size)
        per_col = self._per_column(pre["table"], pre["pre"], values, dkey, rows)
        kern = _numba_kernels()
        if kern is not None:
            x = pre["x"]
            u = np.empty(x.size)
            out = np.empty(x.size)
            kern["interp"](x, shift * 1e-3, energy, per_col, scale, u, out)
        else:
            u = np.interp(pre["x"] - shift * 1e-3, energy, per_col)
            out = u * scale
        _remember(shapes, key, u, self.fast_cache_size)
        return out

    def has_log_transmission(self) -> bool:
        return True

    def _evaluate(self, grid, pre, **values):
        tau = self._log_transmission(grid, pre, **values)
        return np.exp(tau, out=tau)

    def optical_depth(self, energy_kev, **values):
        """τ_dust at ``energy_kev`` (keV or Quantity) as used in the
        transmission (including the count-once subtraction when on)."""
        vals = self._merged(values)
        e = np.asarray(as_kev(energy_kev), dtype=float)
        lo, hi = float(np.min(e)), float(np.max(e))
        table, pre = self._table_for(lo, hi)
        tau_t = self._tau_table(table, pre, vals)
        out = np.interp(e - vals["shift"] * 1e-3, pre["energy"], tau_t)
        return float(out) if out.ndim == 0 else out

    def edge_energy(self) -> float:
        """Edge energy (keV) of the edge element (K, or L3 for Fe-group L
        edges per the default regions) as placed by the atomic tables that
        the optical constants come from
        (:func:`edgefit.physics.atomic.edge_position`)."""
        edge = _tables().region_for(self.element)[0]
        return atomic.edge_position(self.element, edge)

    def reference_energy(self) -> float:
        """Just above the edge: :meth:`edge_energy` plus 20 eV (keV)."""
        return atomic.edge_bracket(self.edge_energy())[1]

    def derived(self, **values):
        """N_Z in dust ``col_cm2`` (cm^-2), grain column (cm^-2), dust mass
        column (g cm^-2), the dust optical depth just below and just above
        the edge and its jump across the edge (edge position plus shift,
        -/+ 20 eV: :func:`edgefit.physics.atomic.edge_bracket`, the same
        rule as :class:`~edgefit.models.absorption.GasEdge`), the shifted
        edge energy, and the self-shielding ratio of the
        distribution: the jump of ⟨σ_abs⟩ per Z atom over the unshielded
        jump of the same atoms, σ_Z(E+) − σ_Z(E−) plus the other atoms'
        (small) change, as in :mod:`edgefit.dust.shielding`.  For Fe the
        edge is L3 (0.708 keV in the tables) and E± = 0.688 / 0.728 keV straddle both L3
        and L2, so the jump is that of the whole L2,3 pair."""
        vals = self._merged(values)
        e0 = self.edge_energy() + vals["shift"] * 1e-3
        e_lo, e_hi = atomic.edge_bracket(e0)
        table, pre = self._table_for(e_lo - 0.02, e_hi + 0.02)
        s_abs, lost, atoms = self._per_atom(table, pre, vals)
        n = vals["col"] * 1e16
        tau_t = n * (s_abs + lost - pre["other"])
        eq = np.array([e_lo, e_hi]) - vals["shift"] * 1e-3
        tau_lo, tau_hi = np.interp(eq, pre["energy"], tau_t)
        abs_lo, abs_hi = np.interp(eq, pre["energy"], s_abs)
        sig_lo, sig_hi = atomic.photoabsorption(self.element, eq) + np.interp(
            eq, pre["energy"], pre["other_atoms"])
        mass = n * self.material.mass_per_atom(self.element)
        return {
            COLUMN_KEY: (n, "cm-2"),
            "grain_column": (n / atoms, "cm-2"),
            "dust_mass_column": (mass, "g cm-2"),
            "tau_below": (float(tau_lo), ""),
            "tau_above": (float(tau_hi), ""),
            "tau_jump": (float(tau_hi - tau_lo), ""),
            "edge_energy": (e0, "keV"),
            "shielding_ratio": (float((abs_hi - abs_lo) / (sig_hi - sig_lo)), ""),
        }

    def __repr__(self):
        vals = ", ".join(f"{k}={v:.4g}" for k, v in self.values.items())
        return (f"DustEdge({self.name!r}, {self.material.name}, {self.element}, "
                f"{self.family}, {vals})")
