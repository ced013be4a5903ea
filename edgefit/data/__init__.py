"""Layer 1: spectra, responses, folding, OGIP file I/O, grouping, simulation."""
from .response import Response, gaussian_response
from .spectrum import Spectrum
from .ogip import (read_pha, read_pha_rows, read_arf, read_rmf, read_ebounds, read_response,
                   load_spectrum, write_pha, write_arf, write_rmf, write_response,
                   write_dataset)
from .simulate import simulate_spectrum, expected_counts
from .grouping import group_min_counts, group_sum, grouping_matrix

__all__ = ["Response", "Spectrum", "gaussian_response", "read_pha", "read_pha_rows",
           "read_arf", "read_rmf", "read_ebounds", "read_response", "load_spectrum",
           "write_pha", "write_arf", "write_rmf", "write_response", "write_dataset",
           "describe_file",
           "simulate_spectrum", "expected_counts", "group_min_counts", "group_sum",
           "grouping_matrix"]


def __getattr__(name):
    # describe_file moved to the command line (edgefit.cli.inspect); the old
    # name still works, importing it only when used
    if name == "describe_file":
        from ..cli.inspect import describe_file
        return describe_file
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
