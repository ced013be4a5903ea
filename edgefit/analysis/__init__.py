"""edgefit.analysis: work on many sightlines (layer 5).

The sightline configuration (:mod:`.config`), one sightline through every
step (:func:`run_sightline`), many sightlines from a manifest
(:func:`load_manifest`, :func:`run_batch`) collected in one sample table
(:mod:`.sample_table`); ``regress`` (straight lines between sample-table
columns), the grain column helpers and the summed profile of a parameter
shared by every sightline (:func:`shared_parameter_profile`).  See the
modules for details.
"""
from .batch import BatchInterrupted, run_batch
from .config import SightlineConfig, config_from_dict, load_config
from .grains import fit_shielded_relation, grain_columns, grain_cross_section
from .manifest import Manifest, SightlineEntry, load_manifest
from .pipeline import run_sightline
from .regression import regress
from .sample_table import read_sample_table, sample_table
from .shared_profile import shared_parameter_profile

__all__ = ["run_batch", "BatchInterrupted", "load_manifest", "Manifest", "SightlineEntry",
           "run_sightline", "load_config", "config_from_dict", "SightlineConfig",
           "read_sample_table", "sample_table", "regress", "grain_columns",
           "grain_cross_section", "fit_shielded_relation", "shared_parameter_profile"]
