"""Layer 1: spectra, responses, folding, OGIP file I/O, grouping, simulation."""
from .response import Response, gaussian_response
from .spectrum import Spectrum
from .ogip import (read_pha, read_pha_rows, read_arf, read_rmf, read_ebounds, read_response,
                   load_spectrum, write_pha, write_arf, write_rmf, write_response,
                   write_dataset, describe_file)
from .simulate import simulate_spectrum, expected_counts
from .grouping import group_min_counts, group_sum, grouping_matrix

__all__ = ["Response", "Spectrum", "gaussian_response", "read_pha", "read_pha_rows",
           "read_arf", "read_rmf", "read_ebounds", "read_response", "load_spectrum",
           "write_pha", "write_arf", "write_rmf", "write_response", "write_dataset",
           "describe_file",
           "simulate_spectrum", "expected_counts", "group_min_counts", "group_sum",
           "grouping_matrix"]
