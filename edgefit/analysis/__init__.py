"""edgefit.analysis: work on many sightlines (layer 5).

``regress`` (straight lines between sample-table columns) and the grain
column helpers are importable from here; see the modules for details.
"""
from .grains import fit_shielded_relation, grain_columns, grain_cross_section
from .regression import regress

__all__ = ["regress", "grain_columns", "grain_cross_section", "fit_shielded_relation"]
