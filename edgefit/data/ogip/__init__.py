"""Read and write OGIP spectral files: PHA type I and II, ARF, RMF/RSP.

Formats follow the OGIP memos OGIP/92-007 (+92-007a) for spectra and
CAL/GEN/92-002 (+92-002a) for responses:

* **PHA** (extension SPECTRUM, HDUCLAS1 = 'SPECTRUM'): CHANNEL, COUNTS or
  RATE (counts s^-1), optional STAT_ERR, QUALITY, GROUPING, and EXPOSURE
  (s), BACKSCAL, AREASCAL as keywords or columns.  Type II files
  (HDUCLAS4 = 'TYPE:II') hold one spectrum per row in vector columns; rows
  may be labelled by grating order TG_M and arm TG_PART, and may carry
  their background as BACKGROUND_UP / BACKGROUND_DOWN columns with area
  scalings BACKSCUP / BACKSCDN.
* **ARF** (extension SPECRESP): ENERG_LO, ENERG_HI (keV), SPECRESP (cm^2).
* **RMF** (extension MATRIX, or SPECRESP MATRIX for a response that
  already includes the area): ENERG_LO, ENERG_HI, N_GRP, F_CHAN, N_CHAN,
  MATRIX, where F_CHAN/N_CHAN/MATRIX may be scalars, fixed-length vectors
  or variable-length arrays and the first channel number is the TLMIN of
  F_CHAN (default 1); plus EBOUNDS (CHANNEL, E_MIN, E_MAX in keV).

The matrix is assembled directly in sparse (COO -> CSR) form; no dense
channel x energy array is ever built.

Row indices (``row=``) are 0-based Python indices into a type II table.

The package has one module per job: :mod:`~edgefit.data.ogip.responses`
(ARF, RMF, EBOUNDS readers), :mod:`~edgefit.data.ogip.spectra` (PHA
readers and companion files) and :mod:`~edgefit.data.ogip.writers`.  The
description of files for ``edgefit inspect`` is
:func:`edgefit.cli.inspect.describe_file`.
"""
from __future__ import annotations

from .responses import (ARF_EXT, EBOUNDS_EXT, RMF_EXT, ArfData, EboundsData, read_arf,
                        read_ebounds, read_response, read_rmf)
from .spectra import SPECTRUM_EXT, AmbiguousRowError, load_spectrum, read_pha, read_pha_rows
from .writers import write_arf, write_dataset, write_pha, write_response, write_rmf

__all__ = [
    "read_pha", "read_pha_rows", "read_arf", "read_rmf", "read_ebounds", "read_response",
    "load_spectrum", "write_pha", "write_arf", "write_rmf", "write_response",
    "write_dataset", "describe_file", "AmbiguousRowError", "ArfData", "EboundsData",
    "SPECTRUM_EXT", "ARF_EXT", "RMF_EXT", "EBOUNDS_EXT",
]


def __getattr__(name):
    # describe_file moved to the command line (edgefit.cli.inspect); the old
    # name still works, importing it only when used
    if name == "describe_file":
        from ...cli.inspect import describe_file
        return describe_file
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
