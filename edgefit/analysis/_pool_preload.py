"""Imported once by the local process pool's fork server
(:data:`edgefit.analysis.batch._PRELOAD`), never by the package itself.

What a sightline's first fit would otherwise pay in every worker, done
once in the server, so that every worker forked from it starts ready: the
libraries the fit reaches for on first use (lmfit, which brings pandas,
matplotlib's colour tables and emcee; numba; astropy's ECSV/YAML and FITS
writers) and numba's set-up of its compiler, which the first compiled call
in a process triggers (about a CPU-second per worker in all).  The server
does this while the main process reads the manifest and hashes the
inputs.  numba is loaded through :mod:`edgefit._jit`, not at all when
``EDGEFIT_NO_NUMBA`` is set.
"""
import astropy.io.ascii  # noqa: F401
import astropy.io.fits  # noqa: F401
import astropy.io.misc.yaml  # noqa: F401
import lmfit  # noqa: F401
import scipy.optimize  # noqa: F401
import scipy.stats  # noqa: F401

from .. import _jit
from . import config, pipeline, sample_table  # noqa: F401


def _first_compiled_call():
    """One size-distribution average on a small grid: its compiled kernels
    come from numba's disk cache (or are compiled once, here), and numba
    sets up its compiler.  A failure only leaves that to the workers."""
    from ..dust.sizes import MRN, SizeGrid

    try:
        SizeGrid.log(0.001, 5.0, 16).weights(MRN)
    except Exception:  # noqa: BLE001 -- warming up only; the fits report their own errors
        pass


if _jit.numba_module() is not None:
    _first_compiled_call()
