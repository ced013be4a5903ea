"""Low-level, validated access to FITS files (private helpers for ogip.py).

Everything a reader needs to turn astropy's view of a file into plain
NumPy arrays, and to turn every way a file can be broken into one of
edgefit's :mod:`edgefit.errors` classes with the file's path in the
message.
"""
from __future__ import annotations

import functools
import os
import warnings

import numpy as np
from astropy.io import fits

from ..errors import (BadUnitError, EdgefitError, InputFileError, InputWarning, MissingColumnError,
                      MissingExtensionError, MissingFileError, NotFITSError,
                      TruncatedFileError)

__all__ = ["open_fits", "find_hdu", "Table", "to_float_array", "to_int_array", "to_float",
           "file_errors"]

_FITS_BLOCK = 2880


def _data_bytes(header) -> int:
    """Bytes of the data unit (without padding) implied by a header
    (FITS standard 4.0, eq. 2: |BITPIX|/8 x GCOUNT x (PCOUNT + NAXIS1 x ... x NAXISn))."""
    naxis = int(header.get("NAXIS", 0))
    if naxis == 0:
        return 0
    size = 1
    for k in range(1, naxis + 1):
        size *= int(header.get(f"NAXIS{k}", 0))
    gcount = int(header.get("GCOUNT", 1))
    pcount = int(header.get("PCOUNT", 0))
    return abs(int(header.get("BITPIX", 8))) // 8 * gcount * (pcount + size)


def open_fits(path):
    """Open ``path`` with astropy, reading every header and data unit into
    memory, and close the file.

    Returns an :class:`astropy.io.fits.HDUList` whose data are loaded.

    Raises
    ------
    MissingFileError
        The file does not exist.
    NotFITSError
        The file does not begin with a FITS primary header.
    TruncatedFileError
        A header or data unit ends before the headers say it should.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise MissingFileError(path, "no such file")
    size = os.path.getsize(path)
    with open(path, "rb") as fh:
        head = fh.read(80)
    if not head.startswith(b"SIMPLE  =") or size < _FITS_BLOCK:
        if head.startswith(b"SIMPLE  ="):
            raise TruncatedFileError(path, f"file is only {size} bytes, shorter than one "
                                           "FITS header block (2880 bytes)")
        raise NotFITSError(path, "not a FITS file (it does not start with a SIMPLE card)")
    hdul = None
    try:
        with warnings.catch_warnings(), open(path, "rb") as fh:
            warnings.simplefilter("ignore")  # astropy's own truncation warnings: we check
            hdul = fits.open(fh, memmap=False, lazy_load_hdus=False)
            for i, hdu in enumerate(hdul):
                info = hdul.fileinfo(i)
                if info["datLoc"] + _data_bytes(hdu.header) > size:
                    raise TruncatedFileError(
                        path, f"file is truncated: HDU {i} ({hdu.name or 'PRIMARY'}) needs "
                              f"{info['datLoc'] + _data_bytes(hdu.header)} bytes, file has {size}")
                if isinstance(hdu, fits.BinTableHDU) and hdu.data is not None:
                    _ = hdu.data[:0]  # touch the table so that errors surface here
                    _ = hdu.columns.names
            hdul.close()
    except InputFileError:
        if hdul is not None:
            hdul.close()
        raise
    except (OSError, ValueError, TypeError, IndexError, KeyError, AttributeError,
            fits.VerifyError) as exc:
        if hdul is not None:
            hdul.close()
        raise TruncatedFileError(path, f"cannot read the FITS structure ({exc}); the file "
                                       "is probably truncated or corrupt") from exc
    return hdul


def find_hdu(hdul, path, extnames=(), hduclas=(), what="extension"):
    """First binary-table HDU whose EXTNAME is in ``extnames``, else the
    first whose HDUCLAS1/HDUCLAS2 value is in ``hduclas`` (with an
    :class:`~edgefit.errors.InputWarning` naming the file and both
    keywords); MissingExtensionError if none."""
    hdu = find_hdu_or_none(hdul, extnames)
    if hdu is None and hduclas:
        hdu, key = _find_by_class(hdul, hduclas)
        if hdu is not None:
            warnings.warn(InputWarning(
                f"{os.fspath(path)}: no extension with EXTNAME {'/'.join(extnames)}; using "
                f"extension {hdu.name!r} (HDU {hdul.index_of(hdu)}) found by its {key} = "
                f"{str(hdu.header[key]).strip()!r}"), stacklevel=3)
    if hdu is None:
        names = [h.name for h in hdul[1:]] or ["none"]
        raise MissingExtensionError(
            path, f"no {what} extension (looked for EXTNAME {'/'.join(extnames)}); the "
                  f"file has extensions: {', '.join(names)}")
    return hdu


def _find_by_class(hdul, hduclas):
    cls = {c.upper() for c in hduclas}
    for hdu in hdul[1:]:
        if isinstance(hdu, fits.BinTableHDU):
            for key in ("HDUCLAS1", "HDUCLAS2"):
                if str(hdu.header.get(key, "")).strip().upper() in cls:
                    return hdu, key
    return None, None


def find_hdu_or_none(hdul, extnames=(), hduclas=()):
    """First binary-table HDU named in ``extnames``, else the first whose
    HDUCLAS1/HDUCLAS2 is in ``hduclas`` (silently), else None."""
    ext = {e.upper() for e in extnames}
    for hdu in hdul[1:]:
        if isinstance(hdu, fits.BinTableHDU) and hdu.name.upper() in ext:
            return hdu
    return _find_by_class(hdul, hduclas)[0] if hduclas else None


class Table:
    """A binary table with case-insensitive columns and keyword fallback.

    OGIP lets many quantities be given either as a keyword (one value for
    the whole spectrum) or as a column (one value per row, or per
    channel).  :meth:`get` looks for a column first, then a keyword.
    """

    def __init__(self, hdu, path):
        self.hdu = hdu
        self.header = hdu.header
        self.path = os.fspath(path)
        self.data = hdu.data
        names = list(hdu.columns.names) if hdu.columns is not None else []
        self._names = {n.upper(): n for n in names}
        self._index = {n.upper(): i + 1 for i, n in enumerate(names)}
        self.nrows = 0 if self.data is None else len(self.data)

    def has_column(self, name):
        return name.upper() in self._names

    def has(self, name):
        return self.has_column(name) or name.upper() in self.header

    def column(self, name, required=True):
        key = name.upper()
        if key not in self._names:
            if required:
                raise MissingColumnError(self.path, f"extension {self.hdu.name} has no "
                                                    f"{name} column")
            return None
        return self.data[self._names[key]]

    def tlmin(self, name, default=None):
        idx = self._index.get(name.upper())
        if idx is None:
            return default
        val = self.header.get(f"TLMIN{idx}")
        return default if val is None else int(to_int_array(val, self.path, f"TLMIN{idx}"))

    def tunit(self, name):
        idx = self._index.get(name.upper())
        return "" if idx is None else str(self.header.get(f"TUNIT{idx}", "")).strip()

    def energy_scale(self, name) -> float:
        """Factor to keV for energy column ``name`` from its TUNIT
        (:func:`energy_scale`; the error names the file and the keyword)."""
        idx = self._index.get(name.upper())
        return energy_scale(self.tunit(name), self.path,
                            f"{name} (TUNIT{idx} in extension {self.hdu.name})")

    def keyword(self, name, default=None):
        val = self.header.get(name.upper(), default)
        return default if val is None else val

    def get(self, name, row=None, default=None):
        """Column value (for ``row`` if given) or keyword, else ``default``."""
        col = self.column(name, required=False)
        if col is not None:
            return col if row is None else col[row]
        if name.upper() in self.header:
            return self.header[name.upper()]
        return default


def as_str(value):
    """A FITS string value stripped, or None for empty/'NONE'."""
    if value is None:
        return None
    if isinstance(value, bytes):
        value = value.decode("ascii", "replace")
    value = str(value).strip()
    if not value or value.upper() == "NONE":
        return None
    return value


_ENERGY_UNITS = {"": 1.0, "kev": 1.0, "ev": 1e-3, "mev": 1e3}


def energy_scale(unit: str, path=None, column: str = "energy column") -> float:
    """Factor to keV from a TUNIT string: keV, eV or MeV in any case; keV
    when the TUNIT is absent or empty (the OGIP default).  Any other unit
    is a :class:`~edgefit.errors.BadUnitError` naming ``path`` and
    ``column``: an energy grid is never read in a unit guessed."""
    key = str(unit).strip().lower()
    if key not in _ENERGY_UNITS:
        raise BadUnitError(path, f"{column} has unit {str(unit).strip()!r}; an energy column "
                                 "must be in keV, eV or MeV")
    return _ENERGY_UNITS[key]


def to_float_array(values, path, what) -> np.ndarray:
    """``values`` as floats, or InputFileError naming ``path`` and ``what``."""
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError, OverflowError) as exc:
        raise InputFileError(path, f"{what} is not numeric ({exc})") from exc


def to_int_array(values, path, what) -> np.ndarray:
    """``values`` as 64-bit integers (whole, finite numbers only), or
    InputFileError naming ``path`` and ``what``."""
    arr = to_float_array(values, path, what)
    if not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)) or \
            np.any(np.abs(arr) >= 2.0 ** 62):
        raise InputFileError(path, f"{what} must hold whole numbers")
    return arr.astype(np.int64)


def to_float(value, path, what) -> float:
    """One number from a keyword or a one-element column cell."""
    arr = to_float_array(value, path, what)
    if arr.size != 1:
        raise InputFileError(path, f"{what} must be one number, not {arr.size}")
    return float(arr.reshape(()))


def file_errors(reader):
    """Decorator for a public reader whose first argument is the file: a
    ValueError, TypeError, IndexError, KeyError, OverflowError or astropy
    VerifyError that no specific check turned into an edgefit error (some
    corruption nobody foresaw) becomes an :class:`InputFileError` naming
    the file, so that bad files never end in a traceback.  The specific
    checks come first and give the better messages."""
    @functools.wraps(reader)
    def wrapper(path, *args, **kwargs):
        try:
            return reader(path, *args, **kwargs)
        except EdgefitError:
            raise
        except (ValueError, TypeError, IndexError, KeyError, OverflowError,
                fits.VerifyError) as exc:
            raise InputFileError(path, f"cannot read the file ({type(exc).__name__}: "
                                       f"{exc})") from exc
    return wrapper

