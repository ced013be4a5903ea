"""Per-size dust cross-section tables and their disk cache (compatibility
module).

The computation lives in :mod:`edgefit.dust.cross_sections` (pure, no file
I/O) and the disk cache in :mod:`edgefit.dust.cache`; every public name of
both is importable from here, as before the split.
"""
from __future__ import annotations

from .cache import (build_default_tables, default_table, list_cached_tables, load,
                    load_cached, load_or_build, save, table_identity, table_key, table_path)
from .cross_sections import (DEFAULT_MATERIALS, DEFAULT_SIZE_GRID, EDGE_REGIONS,
                             TABLE_FORMAT_VERSION, DustTable, compute_table, edge_energy_grid,
                             grain_cross_sections, q_efficiencies, region_for)

__all__ = ["TABLE_FORMAT_VERSION", "EDGE_REGIONS", "DEFAULT_SIZE_GRID", "DustTable",
           "edge_energy_grid", "region_for", "q_efficiencies", "grain_cross_sections",
           "compute_table", "table_key", "table_path", "save", "load", "load_cached",
           "load_or_build", "default_table", "list_cached_tables", "DEFAULT_MATERIALS",
           "build_default_tables", "table_identity"]
