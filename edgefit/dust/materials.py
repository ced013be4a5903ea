"""Grain materials: formula, density and optical constants.

A :class:`Material` is a chemical formula with a mass density, optionally
with laboratory near-edge corrections (:func:`edgefit.dust.optical.nearedge_correction`).
Its refractive index m = 1 − δ + iβ comes from the atomic scattering
factors (:func:`edgefit.dust.optical.delta_beta`), so built-in materials
have smooth edges (isolated-atom f2, no fine structure); no measured
near-edge data are bundled.

Built-in materials (densities in g cm^-3 and where they come from; checked
2026-12-01, "via" names the public copy the value was read from):

=============  ==================  =======  ===========================================
name           formula             density  density source
=============  ==================  =======  ===========================================
olivine        MgFeSiO4            3.8      value used in dust models (from memory);
                                            ideal mixing of the end-member molar
                                            volumes (forsterite 3.227, fayalite
                                            4.392) gives 3.83
forsterite     Mg2SiO4             3.22     X-ray density of synthetic Mg2SiO4 at
                                            room temperature: 3.227 (Fujino et al.
                                            1981, Acta Cryst. B37, 513) and 3.219
                                            (Smyth & Hazen 1973, Am. Mineral. 58,
                                            588), via AMCSD records 0019694 and
                                            0000328 (rruff.geo.arizona.edu); was
                                            3.27 from memory
pyroxene       MgSiO3              3.21     synthetic orthoenstatite, D = 3.208
                                            (Stephenson, Sclar & Smith 1966,
                                            Mineral. Mag. 35, 838, via the
                                            Mineralogical Society archive
                                            abstract); was 3.20 from memory
pyroxene_mgfe  Mg0.6Fe0.4SiO3      3.52     linear mix of enstatite 3.21 and
                                            ferrosilite ≈ 4.0 (ferrosilite from
                                            memory, unconfirmed)
silica         SiO2                2.196    amorphous (fused) silica, CRC Handbook
                                            of Chemistry and Physics via the
                                            Wikipedia "Silicon dioxide" infobox;
                                            was 2.20 from memory
silica_quartz  SiO2                2.648    alpha-quartz (Lager, Jorgensen &
                                            Rotella 1982, J. Appl. Phys. 53, 6751,
                                            via the Wikipedia "Silicon dioxide"
                                            polymorph table); was 2.65 from memory
iron           Fe                  7.874    metallic iron at 20 C, CRC Handbook of
                                            Chemistry and Physics 80th ed. (1999),
                                            via periodictable (density.py); was
                                            7.87 from memory
graphite       C                   2.24     Draine 2003 / REFERENCE-VALUES [P]
=============  ==================  =======  ===========================================

Fayalite (Fe2SiO4, not built in) has specific gravity 4.392 (via the
Wikipedia "Fayalite" infobox, which cites the Handbook of Mineralogy).

Any other material: ``Material("name", "Mg1.6Fe0.4SiO4", 3.6)`` or
:func:`get_material` with a formula and density.
"""
from __future__ import annotations

import functools
import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .._paths import data_file
from ..errors import PhysicsDataError
from ..physics import atomic
from . import optical

__all__ = ["Material", "MATERIALS", "get_material", "atoms_per_grain"]

#: Version of how optical constants are formed from the atomic tables;
#: part of every table cache key.
OPTICAL_MODEL_VERSION = "henke-sum-1"


@functools.lru_cache(maxsize=None)
def _atomic_digest(symbol: str) -> str:
    """Hash of the atomic data file of one element (the optical-constant
    source and version for the cache key)."""
    path = data_file(f"atomic/chantler_{symbol}.txt")
    return hashlib.blake2b(path.read_bytes(), digest_size=8).hexdigest()


@dataclass(frozen=True, eq=False)
class Material:
    """A grain material.

    Parameters
    ----------
    name : str
        Label (used in file names and reports).
    formula : str
        Chemical formula, e.g. ``"MgFeSiO4"`` (see
        :func:`edgefit.dust.optical.parse_formula`).
    density : float or Quantity
        Mass density, g cm^-3.
    note : str
        Source of the density (free text).
    corrections : tuple of NearEdgeCorrection
        Laboratory near-edge corrections per formula unit.
    """

    name: str
    formula: str
    density: float
    note: str = ""
    corrections: tuple = field(default=())
    # atoms per formula unit, filled from ``formula`` by __post_init__
    _comp: dict[str, float] = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "density", optical.as_density(self.density))
        object.__setattr__(self, "corrections", tuple(self.corrections))
        comp = optical.parse_formula(self.formula)
        object.__setattr__(self, "_comp", comp)

    # -- composition ---------------------------------------------------
    @property
    def composition(self) -> dict[str, float]:
        """Atoms per formula unit, symbol -> count."""
        return dict(self._comp)

    @property
    def formula_mass(self) -> float:
        """Mass of one formula unit, u (g/mol)."""
        return optical.formula_mass(self._comp)

    @property
    def formula_units_per_cm3(self) -> float:
        """n_fu = ρ N_A / M, cm^-3."""
        return optical._formula_units_per_cm3(self._comp, self.density)

    def atoms_per_cm3(self, element) -> float:
        """Atoms of ``element`` per cm^3 of grain material."""
        return self.formula_units_per_cm3 * self.count(element)

    def count(self, element) -> float:
        """Atoms of ``element`` per formula unit; error if absent."""
        sym = atomic.element_symbol(element)
        if sym not in self._comp:
            raise PhysicsDataError(f"material {self.name!r} ({self.formula}) contains no "
                                   f"{sym}")
        return self._comp[sym]

    def mass_per_atom(self, element) -> float:
        """Grain mass carried per atom of ``element``, g: M / (N_A c_Z)."""
        return self.formula_mass / (atomic.AVOGADRO * self.count(element))

    def atoms_per_grain(self, element, a_um):
        """Atoms of ``element`` in a sphere of radius ``a_um`` (µm):
        (4π/3) a³ ρ N_A c_Z / M."""
        return atoms_per_grain(self, element, a_um)

    # -- optics --------------------------------------------------------
    def delta_beta(self, energy_kev):
        """(δ, β) at ``energy_kev``; m = 1 − δ + iβ."""
        return optical.delta_beta(self._comp, self.density, energy_kev, self.corrections)

    def refractive_index(self, energy_kev):
        """Complex m = 1 − δ + iβ (Henke, Gullikson & Davis 1993)."""
        return optical.refractive_index(self._comp, self.density, energy_kev,
                                        self.corrections)

    def m_minus_1(self, energy_kev):
        """m − 1 = −δ + iβ computed directly (no rounding of 1 − δ), as
        :func:`edgefit.dust.mie.mie_efficiencies` accepts it."""
        d, b = self.delta_beta(energy_kev)
        return -np.asarray(d) + 1j * np.asarray(b)

    def with_corrections(self, *corrections, name=None) -> "Material":
        """A copy with laboratory near-edge corrections added."""
        return Material(name or self.name, self.formula, self.density, self.note,
                        self.corrections + tuple(corrections))

    def key(self) -> dict:
        """Everything the optical constants depend on (for cache keys)."""
        return {
            "formula": {k: round(v, 10) for k, v in self._comp.items()},
            "density": round(self.density, 10),
            "optical_model": OPTICAL_MODEL_VERSION,
            "atomic_data": {el: _atomic_digest(el) for el in sorted(self._comp)},
            "corrections": [c.digest for c in self.corrections],
        }

    def digest(self) -> str:
        return hashlib.blake2b(json.dumps(self.key(), sort_keys=True).encode(),
                               digest_size=10).hexdigest()

    def __repr__(self):
        extra = f", {len(self.corrections)} near-edge correction(s)" if self.corrections else ""
        return f"Material({self.name!r}, {self.formula!r}, {self.density:g} g/cm3{extra})"

    def __reduce__(self):
        return (Material, (self.name, self.formula, self.density, self.note,
                           self.corrections))


def atoms_per_grain(material: Material, element: str, a_um: ArrayLike) -> float | np.ndarray:
    """Atoms of ``element`` per spherical grain of radius ``a_um`` (µm):
    N = (4π/3) a³ ρ N_A c_Z / M (a in cm)."""
    a_cm = np.asarray(a_um, dtype=float) * 1e-4
    out = 4.0 * math.pi / 3.0 * a_cm ** 3 * material.atoms_per_cm3(element)
    return float(out) if np.ndim(out) == 0 else out


#: Built-in materials by name; see the module docstring for densities' sources.
MATERIALS: dict[str, Material] = {m.name: m for m in (
    Material("olivine", "MgFeSiO4", 3.8,
             "dust-model value (from memory); ideal forsterite/fayalite mix gives 3.83"),
    Material("forsterite", "Mg2SiO4", 3.22,
             "X-ray density of synthetic Mg2SiO4 (Fujino et al. 1981: 3.227; "
             "Smyth & Hazen 1973: 3.219)"),
    Material("pyroxene", "MgSiO3", 3.21,
             "synthetic orthoenstatite 3.208 (Stephenson, Sclar & Smith 1966)"),
    Material("pyroxene_mgfe", "Mg0.6Fe0.4SiO3", 3.52,
             "linear mix of enstatite 3.21 and ferrosilite ~4.0 g/cm3 "
             "(ferrosilite from memory)"),
    Material("silica", "SiO2", 2.196, "amorphous silica (CRC Handbook)"),
    Material("silica_quartz", "SiO2", 2.648,
             "alpha-quartz (Lager, Jorgensen & Rotella 1982)"),
    Material("iron", "Fe", 7.874, "metallic iron (CRC Handbook, 80th ed.)"),
    Material("graphite", "C", 2.24, "Draine 2003 (REFERENCE-VALUES.md)"),
)}


def get_material(material: str | Material, density: Any = None,
                 name: str | None = None) -> Material:
    """A :class:`Material` from a built-in name, a Material, or a formula
    with a density (g cm^-3 or Quantity)."""
    if isinstance(material, Material):
        return material
    if not isinstance(material, str):
        raise PhysicsDataError(f"material must be a name, a formula or a Material, not "
                               f"{material!r}")
    if density is None:
        key = material.strip().lower()
        if key in MATERIALS:
            return MATERIALS[key]
        raise PhysicsDataError(f"unknown material {material!r}: built-in ones are "
                               f"{', '.join(MATERIALS)}; for another give a formula and "
                               "a density")
    return Material(name or material, material, density, "user supplied")
