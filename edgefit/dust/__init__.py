"""edgefit.dust: X-ray optical constants, Mie/ADT efficiencies, size
distributions, per-size cross-section tables, self-shielding and halos.

Pure computation only (the table cache in :mod:`edgefit.dust.cache` is the
one place that reads and writes files; :mod:`edgefit.dust.tables` re-exports
it together with :mod:`edgefit.dust.cross_sections`).  Units: energy keV, radius µm,
density g cm^-3, cross sections cm², columns cm^-2.
"""
from .adt import adt_efficiencies
from .efficiencies import efficiencies
from .halo import HaloGeometry, fraction_in_region, rg_gaussian_width_arcmin
from .kramers_kronig import kk_delta_f1, kk_f1_from_f2, kk_principal_value, relativistic_z_star
from .materials import MATERIALS, Material, atoms_per_grain, get_material
from .mie import mie_efficiencies
from .optical import (LabAbsorption, NearEdgeCorrection, delta_beta, formula_mass,
                      nearedge_correction, number_densities, parse_formula,
                      read_lab_absorption, refractive_index)
from .shielding import shielding_table
from .sizes import (FAMILIES, MRN, CutoffPowerLaw, LogNormal, PowerLaw, SingleSize,
                    SizeDistribution, SizeGrid, TabulatedSizes, dust_mass_column,
                    grain_column, make_distribution, mean_atoms_per_grain, read_size_table)
from .cache import default_table, list_cached_tables, load_or_build
from .cross_sections import EDGE_REGIONS, DustTable, compute_table, edge_energy_grid

__all__ = [
    "mie_efficiencies", "adt_efficiencies", "efficiencies",
    "HaloGeometry", "fraction_in_region", "rg_gaussian_width_arcmin",
    "kk_delta_f1", "kk_f1_from_f2", "kk_principal_value", "relativistic_z_star",
    "MATERIALS", "Material", "atoms_per_grain", "get_material",
    "LabAbsorption", "NearEdgeCorrection", "delta_beta", "formula_mass",
    "nearedge_correction", "number_densities", "parse_formula", "read_lab_absorption",
    "refractive_index", "shielding_table",
    "FAMILIES", "MRN", "CutoffPowerLaw", "LogNormal", "PowerLaw", "SingleSize",
    "SizeDistribution", "SizeGrid", "TabulatedSizes", "dust_mass_column", "grain_column",
    "make_distribution", "mean_atoms_per_grain", "read_size_table",
    "EDGE_REGIONS", "DustTable", "compute_table", "default_table", "edge_energy_grid",
    "list_cached_tables", "load_or_build",
]

