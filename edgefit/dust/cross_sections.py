"""Per-size dust cross sections of one material (pure computation, no file I/O).

A :class:`DustTable` holds, for one material, the cross sections per grain

.. math:: \\sigma_{x}(E, a) = \\pi a^2 Q_{x}(m(E), 2\\pi a/\\lambda),
          \\qquad x \\in \\{abs, sca\\}\\ (ext = abs + sca),

in cm² on an energy grid (keV) across one or more edges and a fine grid of
grain radii (µm, default 160 radii evenly spaced in ln a from 1 nm to
5 µm), with Q from :func:`edgefit.dust.efficiencies.efficiencies`
(automatic choice of exact Mie or anomalous diffraction) and m from the
material's optical constants.  The extinction of any size distribution is
then a weighted sum over the radii (:meth:`DustTable.average`, weights from
:class:`edgefit.dust.sizes.SizeGrid`), cheap enough for every fit step.

:func:`compute_table` computes a table (optionally over a process pool,
with a progress bar); storing and finding tables on disk is the job of
:mod:`edgefit.dust.cache`.

Energy grids (:func:`edge_energy_grid`): logarithmic steps of 0.1 % (1.8 eV
at the Si K edge), plus every tabulated node of the atomic data of the
material's elements inside the range, which the atomic tables refine to
0.0004-0.02 % across each edge, so edges are resolved as in the source.
"""
from __future__ import annotations

import concurrent.futures as cf
import copy
import functools
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from .. import __version__
from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import PhysicsDataError
from ..physics import atomic
from .materials import Material, get_material
from .sizes import SizeDistribution, SizeGrid

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = ["TABLE_FORMAT_VERSION", "EDGE_REGIONS", "DEFAULT_SIZE_GRID", "DEFAULT_MATERIALS",
           "DustTable", "edge_energy_grid", "region_for", "q_efficiencies",
           "grain_cross_sections", "compute_table"]

#: Bumped whenever the stored layout or the meaning of the arrays changes.
TABLE_FORMAT_VERSION = 1

#: Default energy range (keV) of the table for each edge element: (edge, lo, hi).
EDGE_REGIONS: dict[str, tuple[str, float, float]] = {
    "Si": ("K", 1.6, 2.3),
    "Mg": ("K", 1.15, 1.6),
    "Fe": ("L3", 0.65, 0.9),
    "O": ("K", 0.48, 0.65),
}

#: Materials whose tables ``edgefit dust-tables build`` makes by default.
DEFAULT_MATERIALS = ("olivine", "pyroxene", "pyroxene_mgfe")

#: Default size grid: (amin µm, amax µm, number of radii).
DEFAULT_SIZE_GRID = (0.001, 5.0, 160)


def region_for(element) -> tuple[str, float, float]:
    """(edge name, lo keV, hi keV) of the default table for ``element``."""
    sym = atomic.element_symbol(element)
    if sym in EDGE_REGIONS:
        return EDGE_REGIONS[sym]
    e0 = atomic.edge_energy(sym, "K")
    return "K", 0.87 * e0, 1.25 * e0


def edge_energy_grid(material: str | Material, lo: float, hi: float,
                     rel_step: float = 1e-3) -> np.ndarray:
    """Energies (keV) from ``lo`` to ``hi``: logarithmic with relative step
    ``rel_step`` plus the atomic tables' nodes of every element of
    ``material`` and the energies of its laboratory near-edge corrections
    inside the range (points closer than 1e-7 relative are merged).  The
    correction nodes matter: a white line of a few eV is narrower than the
    logarithmic step (1.8 eV at the Si K edge) and would otherwise be
    sampled too coarsely and blunted."""
    material = get_material(material)
    lo, hi = float(as_kev(lo)), float(as_kev(hi))
    if not 0 < lo < hi:
        raise PhysicsDataError(f"energy range {lo}-{hi} keV is empty")
    n = int(np.ceil(np.log(hi / lo) / rel_step)) + 1
    parts = [np.geomspace(lo, hi, n)]
    for el in material.composition:
        e = atomic.table(el)[0]
        parts.append(e[(e > lo) & (e < hi)])
    for corr in material.corrections:
        e = np.asarray(corr.energy_kev, float)
        parts.append(e[(e > lo) & (e < hi)])
    grid = np.unique(np.concatenate(parts))
    keep = np.concatenate([[True], np.diff(grid) / grid[1:] > 1e-7])
    return grid[keep]


@dataclass(eq=False)
class DustTable:
    """Cross sections per grain of one material on (energy, radius) grids.

    Attributes
    ----------
    material : Material
    energy_kev : ndarray (n_e,)
        keV, increasing.
    sizes : SizeGrid
        Radii in µm (``sizes.a``).
    sigma_abs, sigma_sca : ndarray (n_e, n_a)
        Absorption and scattering cross section per grain, cm².
    g : ndarray (n_e, n_a)
        Asymmetry parameter ⟨cos θ⟩ of the scattered light (NaN where
        anomalous diffraction, which does not give it, was used).
    meta : dict
        Method, tolerance, cache key, build time, versions.
    """

    material: Material
    energy_kev: np.ndarray
    sizes: SizeGrid
    sigma_abs: np.ndarray
    sigma_sca: np.ndarray
    g: np.ndarray
    meta: dict = field(default_factory=dict)

    @property
    def sigma_ext(self) -> np.ndarray:
        """Extinction cross section per grain, cm²."""
        return self.sigma_abs + self.sigma_sca

    def average(self, dist: SizeDistribution, kind: str = "ext") -> np.ndarray:
        """⟨σ_kind⟩(E) per grain (cm²) over the normalised distribution."""
        arr = {"ext": None, "abs": self.sigma_abs, "sca": self.sigma_sca}
        if kind not in arr:
            raise PhysicsDataError(f"kind must be 'ext', 'abs' or 'sca', not {kind!r}")
        w = self.sizes.weights(dist)
        if kind == "ext":
            return self.sigma_abs @ w + self.sigma_sca @ w
        return arr[kind] @ w

    def covers(self, lo_kev, hi_kev) -> bool:
        return self.energy_kev[0] <= lo_kev and self.energy_kev[-1] >= hi_kev

    def __repr__(self):
        return (f"DustTable({self.material.name}, {self.energy_kev.size} energies "
                f"{self.energy_kev[0]:.4g}-{self.energy_kev[-1]:.4g} keV, "
                f"{len(self.sizes)} radii {self.sizes.a[0]:.3g}-{self.sizes.a[-1]:.3g} um)")


# ---------------------------------------------------------------------------
# pure computation
# ---------------------------------------------------------------------------
def q_efficiencies(m_minus_1, x, method="auto", rtol=None):
    """(qext, qsca, qabs, g) from :func:`edgefit.dust.efficiencies.efficiencies`
    for m = 1 + ``m_minus_1`` (passed as m − 1 to keep its precision)."""
    from .efficiencies import efficiencies

    kw = {"method": method}
    if rtol is not None:
        kw["rtol"] = rtol
    mm1 = np.asarray(m_minus_1, dtype=complex)
    res = efficiencies(1.0 + mm1, x, m_minus_1=mm1, **kw)
    return tuple(np.asarray(v, dtype=float) for v in res)


def grain_cross_sections(material, energies, sizes_um, method="auto", rtol=None):
    """σ_abs, σ_sca (cm² per grain) and g of ``material`` grains, stacked as
    an array (3, n_energies, n_sizes): σ = π a² Q(m(E), 2πa/λ).  Energies in
    keV (1-d array), radii in µm (1-d array); the worker function of
    :func:`compute_table`, also used by :func:`edgefit.dust.shielding.shielding_table`."""
    mm1 = np.atleast_1d(material.m_minus_1(energies))
    area = np.pi * (sizes_um * 1e-4) ** 2
    x = 2 * np.pi * sizes_um[None, :] * 1e4 / (HC_KEV_ANGSTROM / energies[:, None])
    qext, qsca, qabs, g = q_efficiencies(mm1[:, None], x, method, rtol)
    return np.stack([qabs * area, qsca * area, g])


@functools.lru_cache(maxsize=1)
def _default_size_grid() -> SizeGrid:
    return SizeGrid.log(*DEFAULT_SIZE_GRID)


def _as_size_grid(sizes) -> SizeGrid:
    """A SizeGrid from None (:data:`DEFAULT_SIZE_GRID`; a copy sharing the
    radii and spline coefficients of one built per process), a SizeGrid or
    radii (µm)."""
    if sizes is None:
        return copy.copy(_default_size_grid())
    return sizes if isinstance(sizes, SizeGrid) else SizeGrid(sizes)


def compute_table(material: str | Material, energy_kev: ArrayLike,
                  sizes: SizeGrid | ArrayLike | None = None, *, method: str = "auto",
                  rtol: float | None = None, workers: int | None = 1,
                  progress: bool | None = None) -> DustTable:
    """Compute a :class:`DustTable` (pure; no file I/O).

    Parameters
    ----------
    material : Material or str
        Grain material (name of a built-in one or a Material).
    energy_kev : array_like or Quantity
        Increasing energies (keV).
    sizes : SizeGrid or array_like, optional
        Radii in µm; default :data:`DEFAULT_SIZE_GRID`.
    method : {"auto", "mie", "adt"}
        Passed to :func:`edgefit.dust.efficiencies.efficiencies`.
    rtol : float, optional
        Tolerance of the automatic method choice (its default if None).
    workers : int or None
        Processes over blocks of energies (started with the "spawn" method,
        safe with numba/OpenMP).  None means 1: a default table (412
        energies x 160 radii across Si K) takes about 1 s on one core once
        numba has compiled, less than starting the processes costs.
        Results do not depend on it.
    progress : bool or None
        Show a tqdm bar (None: for tables of more than 50 000 entries).

    Returns
    -------
    DustTable
    """
    material = get_material(material)
    energy = np.asarray(as_kev(energy_kev, "energy"), dtype=float)
    if energy.ndim != 1 or energy.size < 2 or np.any(np.diff(energy) <= 0):
        raise PhysicsDataError("dust table: energies must be an increasing 1-d array")
    sizes = _as_size_grid(sizes)
    work = energy.size * len(sizes)
    if workers is None:
        workers = 1
    if progress is None:
        progress = work > 50000
    nblock = max(1, min(energy.size, 4 * workers if workers > 1 else energy.size // 8 or 1))
    blocks = np.array_split(np.arange(energy.size), nblock)
    result = np.empty((3, energy.size, len(sizes)))
    bar = None
    if progress:
        try:
            from tqdm.auto import tqdm
            bar = tqdm(total=energy.size, desc=f"dust table {material.name}", unit="E",
                       leave=False)
        except ImportError:  # pragma: no cover - tqdm is a dependency
            bar = None
    t0 = time.perf_counter()
    try:
        if workers > 1:
            import multiprocessing

            ctx = multiprocessing.get_context("spawn")
            with cf.ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
                futs = {pool.submit(grain_cross_sections, material, energy[b], sizes.a, method, rtol): b
                        for b in blocks}
                for fut in cf.as_completed(futs):
                    b = futs[fut]
                    result[:, b] = fut.result()
                    if bar:
                        bar.update(b.size)
        else:
            for b in blocks:
                result[:, b] = grain_cross_sections(material, energy[b], sizes.a, method, rtol)
                if bar:
                    bar.update(b.size)
    finally:
        if bar:
            bar.close()
    if not np.all(np.isfinite(result[:2])):
        raise PhysicsDataError(f"dust table for {material.name}: non-finite efficiencies")
    meta = {"method": method, "rtol": rtol, "build_seconds": time.perf_counter() - t0,
            "format": TABLE_FORMAT_VERSION, "edgefit": __version__,
            "material": material.name, "formula": material.formula,
            "density_g_cm3": material.density}
    return DustTable(material, energy, sizes, result[0], result[1], result[2], meta)
