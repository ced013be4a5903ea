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
"""
from __future__ import annotations

import os
import re
import warnings

import numpy as np
import scipy.sparse as sp
from astropy.io import fits

from ..errors import (ArgumentError, BadChannelsError, BadCountsError, BadExposureError,
                      BadGridError, BadScalingError, ChannelMismatchError, GridMismatchError,
                      InputFileError, InputWarning, MissingColumnError,
                      MissingExtensionError, MissingRowError)
from .._units import HC_KEV_ANGSTROM
from ._fitsio import Table, as_str, find_hdu, find_hdu_or_none, open_fits, to_float_array
from .response import Response
from .spectrum import Spectrum

__all__ = [
    "read_pha", "read_pha_rows", "read_arf", "read_rmf", "read_ebounds", "read_response",
    "load_spectrum", "write_pha", "write_arf", "write_rmf", "write_response",
    "write_dataset", "describe_file", "AmbiguousRowError", "ArfData", "EboundsData",
]

SPECTRUM_EXT = ("SPECTRUM",)
ARF_EXT = ("SPECRESP",)
RMF_EXT = ("MATRIX", "SPECRESP MATRIX")
EBOUNDS_EXT = ("EBOUNDS",)


class AmbiguousRowError(MissingRowError):
    """A PHA type II file has several rows and the request does not pick one."""


class ArfData:
    """Effective-area curve: ``energy_lo``, ``energy_hi`` (keV), ``specresp`` (cm^2)."""

    def __init__(self, energy_lo, energy_hi, specresp, path=None, meta=None):
        self.energy_lo = np.asarray(energy_lo, float)
        self.energy_hi = np.asarray(energy_hi, float)
        self.specresp = np.asarray(specresp, float)
        self.path = path
        self.meta = dict(meta or {})

    def __len__(self):
        return self.specresp.size

    def __repr__(self):
        return (f"ArfData({len(self)} bins, {self.energy_lo[0]:.4g}-{self.energy_hi[-1]:.4g} "
                f"keV, max {self.specresp.max():.4g} cm2)")


class EboundsData:
    """Channel bounds: ``channels`` (int), ``e_min``, ``e_max`` (keV)."""

    def __init__(self, channels, e_min, e_max, path=None):
        self.channels = np.asarray(channels, int)
        self.e_min = np.asarray(e_min, float)
        self.e_max = np.asarray(e_max, float)
        self.path = path

    def __len__(self):
        return self.channels.size


# ----------------------------------------------------------------------
# grids
def _check_energy_grid(lo, hi, path, what):
    """Energy bins (keV) must be finite, non-negative, non-empty and
    strictly increasing.  A first lower edge of exactly 0 (common in
    real RMFs) is moved to 1e-3 of the first upper edge so that every bin
    has a positive energy."""
    lo = np.array(lo, dtype=float)
    hi = np.array(hi, dtype=float)
    if lo.ndim != 1 or lo.shape != hi.shape or lo.size == 0:
        raise BadGridError(path, f"{what}: ENERG_LO/ENERG_HI must be 1-d columns of equal, "
                                 "non-zero length")
    if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
        raise BadGridError(path, f"{what}: energy grid has non-finite values")
    if lo[0] == 0.0 and hi[0] > 0:
        lo[0] = 1e-3 * hi[0]
    if np.any(lo <= 0) or np.any(hi <= lo):
        bad = int(np.flatnonzero((lo <= 0) | (hi <= lo))[0])
        raise BadGridError(path, f"{what}: energy bin {bad} is empty or not positive "
                                 f"({lo[bad]}-{hi[bad]} keV)")
    if np.any(np.diff(lo) <= 0) or np.any(np.diff(hi) <= 0):
        bad = int(np.flatnonzero((np.diff(lo) <= 0) | (np.diff(hi) <= 0))[0])
        raise BadGridError(path, f"{what}: energy grid is not strictly increasing at "
                                 f"bin {bad + 1} ({lo[bad]} then {lo[bad + 1]} keV)")
    return lo, hi


def _check_channel_bounds(e_min, e_max, path):
    """EBOUNDS must be finite, positive-width and monotonic (increasing
    energy, or decreasing energy for wavelength-ordered grating channels)."""
    if not (np.all(np.isfinite(e_min)) and np.all(np.isfinite(e_max))):
        raise BadGridError(path, "EBOUNDS has non-finite channel bounds")
    if np.any(e_max < e_min):
        bad = int(np.flatnonzero(e_max < e_min)[0])
        raise BadGridError(path, f"EBOUNDS channel index {bad} has E_MAX < E_MIN")
    if e_min.size > 1:
        d = np.diff(e_min)
        if not (np.all(d > 0) or np.all(d < 0)):
            bad = int(np.flatnonzero(d * np.sign(d[0] if d[0] != 0 else 1) <= 0)[0])
            raise BadGridError(path, "EBOUNDS channel energies are not monotonic (at "
                                     f"channel index {bad + 1})")


# ----------------------------------------------------------------------
# ARF, EBOUNDS, RMF
def read_arf(path) -> ArfData:
    """Read an ARF (SPECRESP extension).

    Returns
    -------
    ArfData
        ``energy_lo``, ``energy_hi`` in keV and ``specresp`` in cm^2.
    """
    hdul = open_fits(path)
    t = Table(find_hdu(hdul, path, ARF_EXT, ("SPECRESP",), "SPECRESP (ARF)"), path)
    lo, hi = _check_energy_grid(to_float_array(t.column("ENERG_LO"), path, "ENERG_LO")
                                * t.energy_scale("ENERG_LO"),
                                to_float_array(t.column("ENERG_HI"), path, "ENERG_HI")
                                * t.energy_scale("ENERG_HI"),
                                path, "ARF")
    area = to_float_array(t.column("SPECRESP"), path, "SPECRESP")
    if not np.all(np.isfinite(area)) or np.any(area < 0):
        raise InputFileError(path, "SPECRESP has negative or non-finite effective areas")
    meta = {k: t.keyword(k) for k in ("TELESCOP", "INSTRUME", "FILTER") if t.keyword(k)}
    return ArfData(lo, hi, area, path=os.fspath(path), meta=meta)


def _warn_detchans(t: Table, n, path):
    """InputWarning when the DETCHANS keyword of ``t`` is not ``n``."""
    detchans = t.keyword("DETCHANS")
    if detchans is None:
        return
    try:
        ok = int(detchans) == n
    except (TypeError, ValueError):
        ok = False
    if not ok:
        warnings.warn(InputWarning(
            f"{os.fspath(path)}: DETCHANS = {detchans!r} in extension {t.hdu.name} but it "
            f"has {n} channels; the {n} channels present are used"), stacklevel=4)


def _read_ebounds_hdu(hdul, path) -> EboundsData:
    t = Table(find_hdu(hdul, path, EBOUNDS_EXT, ("EBOUNDS",), "EBOUNDS"), path)
    scale = t.energy_scale("E_MIN")
    e_min = to_float_array(t.column("E_MIN"), path, "E_MIN") * scale
    e_max = to_float_array(t.column("E_MAX"), path, "E_MAX") * t.energy_scale("E_MAX")
    if t.has_column("CHANNEL"):
        chans = np.asarray(t.column("CHANNEL"), dtype=int)
    else:
        chans = np.arange(e_min.size) + t.tlmin("CHANNEL", 1)
    _warn_detchans(t, e_min.size, path)
    _check_channel_bounds(e_min, e_max, path)
    return EboundsData(chans, e_min, e_max, path=os.fspath(path))


def read_ebounds(path) -> EboundsData:
    """Channel energy bounds (keV) from the EBOUNDS extension of an RMF."""
    return _read_ebounds_hdu(open_fits(path), path)


def _ragged(col, nrows, path, name):
    """Column of a response table, one row per energy bin: a 2-d array
    (nrows x width) for scalar and fixed-length vector columns, a list of
    1-d arrays for variable-length ones (:func:`_take_prefix` takes both)."""
    if isinstance(col, np.ndarray) and col.dtype != object:
        arr = np.asarray(col)
        if arr.ndim == 1:
            return arr.reshape(nrows, 1)
        if arr.ndim == 2:
            return arr
        raise InputFileError(path, f"{name} column has unexpected shape {arr.shape}")
    return [np.atleast_1d(np.asarray(v)) for v in col]


def _take_prefix(rows, lengths, path, name):
    """Concatenate the first ``lengths[i]`` entries of each row."""
    lengths = np.asarray(lengths, dtype=np.int64)
    if isinstance(rows, np.ndarray):  # fixed-length 2-d
        width = rows.shape[1]
        if np.any(lengths > width):
            raise InputFileError(path, f"{name} rows are shorter than N_GRP/N_CHAN require")
        mask = np.arange(width)[None, :] < lengths[:, None]
        return rows[mask]
    pieces = []
    for i, (r, n) in enumerate(zip(rows, lengths)):
        if n > r.size:
            raise InputFileError(path, f"{name} row {i} has {r.size} values but N_GRP/N_CHAN "
                                       f"require {n}")
        pieces.append(r[:n])
    if not pieces:
        return np.zeros(0)
    return np.concatenate(pieces)


def _read_matrix_hdu(hdu, path, n_chan_hint=None, chan_offset_hint=None):
    """Parse a MATRIX/SPECRESP MATRIX table into (lo, hi, csr (chan x energy),
    first_chan, Table)."""
    t = Table(hdu, path)
    lo, hi = _check_energy_grid(to_float_array(t.column("ENERG_LO"), path, "ENERG_LO")
                                * t.energy_scale("ENERG_LO"),
                                to_float_array(t.column("ENERG_HI"), path, "ENERG_HI")
                                * t.energy_scale("ENERG_HI"),
                                path, "RMF")
    n_en = lo.size
    n_grp = np.asarray(t.column("N_GRP"), dtype=np.int64).reshape(-1)
    f_chan = _ragged(t.column("F_CHAN"), n_en, path, "F_CHAN")
    n_chan = _ragged(t.column("N_CHAN"), n_en, path, "N_CHAN")
    matrix = _ragged(t.column("MATRIX"), n_en, path, "MATRIX")
    if np.any(n_grp < 0):
        raise InputFileError(path, "N_GRP has negative entries")
    first = t.tlmin("F_CHAN", chan_offset_hint if chan_offset_hint is not None else 1)
    detchans = t.keyword("DETCHANS", n_chan_hint)
    if detchans is None:
        raise MissingColumnError(path, "MATRIX extension has no DETCHANS keyword")
    detchans = int(detchans)
    if n_chan_hint is not None and detchans != n_chan_hint:
        raise ChannelMismatchError(path, f"DETCHANS = {detchans} in MATRIX but EBOUNDS has "
                                         f"{n_chan_hint} channels")
    g_first = _take_prefix(f_chan, n_grp, path, "F_CHAN").astype(np.int64)
    g_n = _take_prefix(n_chan, n_grp, path, "N_CHAN").astype(np.int64)
    g_row = np.repeat(np.arange(n_en), n_grp)
    if np.any(g_n < 0):
        raise InputFileError(path, "N_CHAN has negative entries")
    row_len = np.bincount(g_row, weights=g_n, minlength=n_en).astype(np.int64)
    vals = _take_prefix(matrix, row_len, path, "MATRIX").astype(float)
    total = int(g_n.sum())
    start = np.cumsum(g_n) - g_n
    chan_idx = (np.arange(total) - np.repeat(start, g_n) + np.repeat(g_first - first, g_n))
    en_idx = np.repeat(g_row, g_n)
    if total and (chan_idx.min() < 0 or chan_idx.max() >= detchans):
        raise InputFileError(path, f"MATRIX refers to channels outside {first}.."
                                   f"{first + detchans - 1} (F_CHAN/N_CHAN versus DETCHANS "
                                   "and TLMIN)")
    if not np.all(np.isfinite(vals)):
        raise InputFileError(path, "MATRIX has non-finite values")
    mat = sp.csr_array(sp.coo_array((vals, (chan_idx, en_idx)), shape=(detchans, n_en)))
    mat.sum_duplicates()
    return lo, hi, mat, first, t


def read_rmf(path, arf=None) -> Response:
    """Read an RMF (or a full RSP) and, optionally, multiply in an ARF.

    Parameters
    ----------
    path : str or PathLike
        File with a MATRIX or SPECRESP MATRIX extension and EBOUNDS.
    arf : str, PathLike or ArfData, optional
        Effective area; its energy grid must match the matrix's to a
        relative 1e-5 (else :class:`~edgefit.errors.GridMismatchError`).

    Returns
    -------
    Response
    """
    hdul = open_fits(path)
    mhdu = find_hdu(hdul, path, RMF_EXT, ("RSP_MATRIX",), "MATRIX (RMF)")
    eb = _read_ebounds_hdu(hdul, path)
    lo, hi, mat, first, t = _read_matrix_hdu(mhdu, path, n_chan_hint=len(eb),
                                             chan_offset_hint=int(eb.channels[0]))
    meta = {k.lower(): t.keyword(k) for k in ("TELESCOP", "INSTRUME", "FILTER", "HDUCLAS3")
            if t.keyword(k) is not None}
    meta["extname"] = mhdu.name
    specresp = None
    arf_path = None
    if arf is not None:
        arfd = arf if isinstance(arf, ArfData) else read_arf(arf)
        arf_path = arfd.path
        if len(arfd) != lo.size or not (np.allclose(arfd.energy_lo, lo, rtol=1e-5, atol=0)
                                        and np.allclose(arfd.energy_hi, hi, rtol=1e-5, atol=0)):
            raise GridMismatchError(
                arf_path if arf_path else path,
                f"ARF energy grid ({len(arfd)} bins, {arfd.energy_lo[0]:.6g}-"
                f"{arfd.energy_hi[-1]:.6g} keV) differs from the RMF's ({lo.size} bins, "
                f"{lo[0]:.6g}-{hi[-1]:.6g} keV in {os.fspath(path)})")
        specresp = arfd.specresp
        if str(meta.get("hduclas3", "")).strip().upper() == "FULL":
            warnings.warn(InputWarning(
                f"{os.fspath(path)}: the matrix already includes the effective area "
                f"(HDUCLAS3 = 'FULL'); multiplying in the ARF {arf_path} counts the area "
                "twice -- give the ARF only with a redistribution-only RMF"), stacklevel=2)
    return Response(lo, hi, mat, eb.e_min, eb.e_max, channels=eb.channels,
                    specresp=specresp, rmf_path=os.fspath(path), arf_path=arf_path, meta=meta)


def read_response(rmf, arf=None) -> Response:
    """Response from an RMF (or RSP) file and an optional ARF file:
    the sparse folding matrix RMF x ARF.  Same as :func:`read_rmf`."""
    return read_rmf(rmf, arf=arf)


# ----------------------------------------------------------------------
# PHA
def _is_type2(t: Table) -> bool:
    if str(t.keyword("HDUCLAS4", "")).strip().upper() == "TYPE:II":
        return True
    for name in ("COUNTS", "RATE"):
        col = t.column(name, required=False)
        if col is not None:
            return np.ndim(col) == 2 or (isinstance(col, np.ndarray) and col.dtype == object)
    return False


def _row_label(value):
    if value is None:
        return None
    if isinstance(value, (bytes, str)):
        return as_str(value)
    value = np.asarray(value)
    if value.ndim:
        return None
    return int(value) if np.issubdtype(value.dtype, np.integer) else value.item()


def _per_channel(value, n, path, name, row):
    """Scalar -> float; array of length n -> array; anything else an error."""
    arr = np.asarray(value, dtype=float)
    if arr.ndim == 0:
        return float(arr)
    if arr.size == 1:
        return float(arr.reshape(()))
    if arr.shape != (n,):
        raise InputFileError(path, f"{name} has {arr.size} values but the spectrum "
                                   f"{'row ' + str(row) + ' ' if row is not None else ''}"
                                   f"has {n} channels")
    return arr


def _strip_ext_spec(name):
    """'file.pha[2]' or 'file.rmf{1}' -> 'file.pha'."""
    return re.sub(r"[\[{][^\]}]*[\]}]\s*$", "", name).strip()


def _companion(base_path, name):
    """Path of a file named in RESPFILE/ANCRFILE/BACKFILE, if it exists
    (relative names are taken relative to the PHA file's folder)."""
    name = as_str(name)
    if name is None:
        return None
    name = _strip_ext_spec(name)
    candidate = name if os.path.isabs(name) else os.path.join(
        os.path.dirname(os.path.abspath(base_path)), name)
    return candidate if os.path.isfile(candidate) else None


def _spectrum_from_row(t: Table, path, row, type2):
    """Build a Spectrum (without response) from one row of a PHA table."""
    r = row if type2 else None
    if t.has_column("COUNTS"):
        raw = t.column("COUNTS")
        is_rate = False
    elif t.has_column("RATE"):
        raw = t.column("RATE")
        is_rate = True
    else:
        raise MissingColumnError(path, f"extension {t.hdu.name} has neither a COUNTS nor a "
                                       "RATE column")
    values = to_float_array(raw[row] if type2 else raw, path, "COUNTS/RATE").reshape(-1)
    n = values.size
    where = f" in row {row}" if type2 else ""

    exposure = t.get("EXPOSURE", r)
    if exposure is None:
        raise BadExposureError(path, f"no EXPOSURE keyword or column{where}")
    exposure = float(exposure)
    if not np.isfinite(exposure) or exposure <= 0:
        raise BadExposureError(path, f"EXPOSURE = {exposure}{where}; it must be a positive "
                                     "number of seconds")

    if not np.all(np.isfinite(values)):
        bad = int(np.flatnonzero(~np.isfinite(values))[0])
        raise BadCountsError(path, f"{'RATE' if is_rate else 'COUNTS'} has non-finite values "
                                   f"(first at channel index {bad}){where}")
    if np.any(values < 0) and not is_rate:
        bad = int(np.flatnonzero(values < 0)[0])
        raise BadCountsError(path, f"COUNTS has negative values (first at channel index "
                                   f"{bad}){where}")
    counts = values * exposure if is_rate else values

    if t.has_column("CHANNEL"):
        ch = t.column("CHANNEL")
        channels = to_float_array(ch[row] if type2 else ch, path, "CHANNEL").reshape(-1)
        if channels.size != n:
            raise InputFileError(path, f"CHANNEL has {channels.size} entries but COUNTS has "
                                       f"{n}{where}")
        if not np.all(np.isfinite(channels)) or np.any(channels != np.round(channels)):
            raise BadChannelsError(path, f"CHANNEL has values that are not whole "
                                         f"numbers{where}")
        channels = channels.astype(np.int64)
    else:
        channels = np.arange(n) + t.tlmin("CHANNEL", 1)
    order = _channel_order(channels, path, where)
    _warn_detchans(t, n, path)

    stat_err = t.get("STAT_ERR", r)
    if stat_err is not None:
        stat_err = _per_channel(stat_err, n, path, "STAT_ERR", row)
        if is_rate:
            stat_err = stat_err * exposure
        if np.ndim(stat_err) == 0:
            stat_err = np.full(n, float(stat_err))
    quality = t.get("QUALITY", r, default=0)
    quality = np.broadcast_to(np.asarray(quality, dtype=int), (n,)).copy()
    grouping = t.get("GROUPING", r)
    if grouping is not None:
        grouping = np.broadcast_to(np.asarray(grouping, dtype=int), (n,)).copy()
        if np.all(grouping == 0):
            grouping = None
    backscal = _per_channel(t.get("BACKSCAL", r, default=1.0), n, path, "BACKSCAL", row)
    areascal = _per_channel(t.get("AREASCAL", r, default=1.0), n, path, "AREASCAL", row)
    poisson = t.keyword("POISSERR", None)
    poisson = bool(poisson) if poisson is not None else (stat_err is None)

    meta = {"path": os.fspath(path), "row": row if type2 else None,
            "order": _row_label(t.get("TG_M", r)), "arm": _row_label(t.get("TG_PART", r)),
            "spec_num": _row_label(t.get("SPEC_NUM", r)) if type2 else None,
            "object": as_str(t.get("OBJECT", r)), "telescope": as_str(t.keyword("TELESCOP")),
            "instrument": as_str(t.keyword("INSTRUME")),
            "respfile": as_str(t.get("RESPFILE", r)), "ancrfile": as_str(t.get("ANCRFILE", r)),
            "backfile": as_str(t.get("BACKFILE", r)), "rate_column": is_rate,
            "hduclas2": as_str(t.keyword("HDUCLAS2")),
            "simulated": bool(t.keyword("SIMULATD", False))}
    if order is not None:   # channels listed out of order: sort every per-channel array
        counts, channels, quality = counts[order], channels[order], quality[order]
        stat_err = None if stat_err is None else stat_err[order]
        grouping = None if grouping is None else grouping[order]
        backscal = backscal if np.ndim(backscal) == 0 else backscal[order]
        areascal = areascal if np.ndim(areascal) == 0 else areascal[order]
    spec = Spectrum(counts=counts, exposure=exposure, channels=channels, backscal=backscal,
                    areascal=areascal, quality=quality, grouping=grouping, stat_err=stat_err,
                    poisson=poisson, meta=meta)

    # background carried in the same row (type II grating convention)
    if t.has_column("BACKGROUND_UP") or t.has_column("BACKGROUND_DOWN"):
        spec.background = _two_sided_background(t, path, row if type2 else None, n, exposure,
                                                channels, order)
    return spec


def _channel_order(channels, path, where=""):
    """None when CHANNEL increases strictly; else the sorting permutation,
    with an InputWarning naming the file and keyword.  Repeated channel
    numbers are refused (BadChannelsError): which count belongs to the
    response row cannot be known."""
    if channels.size < 2 or np.all(np.diff(channels) > 0):
        return None
    order = np.argsort(channels, kind="stable")
    srt = channels[order]
    dup = np.flatnonzero(np.diff(srt) == 0)
    if dup.size:
        raise BadChannelsError(path, f"CHANNEL repeats channel {int(srt[dup[0]])}{where} "
                                     f"({dup.size} repeated value(s))")
    warnings.warn(InputWarning(
        f"{os.fspath(path)}: CHANNEL values are not in increasing order{where}; the "
        "channels (with their counts, errors, quality and grouping) are sorted by "
        "channel number"), stacklevel=5)
    return order


def _two_sided_background(t, path, row, n, exposure, channels, order=None):
    """Background = BACKGROUND_UP + BACKGROUND_DOWN with area scaling
    BACKSCUP + BACKSCDN (regions either side of the dispersed spectrum)."""
    total = np.zeros(n)
    scal = 0.0
    for col, key in (("BACKGROUND_UP", "BACKSCUP"), ("BACKGROUND_DOWN", "BACKSCDN")):
        if not t.has_column(col):
            continue
        c = t.column(col)
        vals = to_float_array(c[row] if row is not None else c, path, col).reshape(-1)
        if vals.size != n:
            raise InputFileError(path, f"{col} has {vals.size} values but COUNTS has {n}")
        if not np.all(np.isfinite(vals)) or np.any(vals < 0):
            raise BadCountsError(path, f"{col} has negative or non-finite counts")
        total += vals if order is None else vals[order]
        s = t.get(key, row)
        if s is None:
            raise MissingColumnError(path, f"{col} is present but its area scaling {key} is not")
        s = np.asarray(s, dtype=float)
        if s.ndim and s.size != 1:
            raise InputFileError(path, f"{key} must be one number per row")
        scal += float(s.reshape(()))
    return Spectrum(counts=total, exposure=exposure, channels=channels, backscal=scal,
                    meta={"path": os.fspath(path), "row": row, "kind": "BACKGROUND_UP+DOWN"})


def _row_summary(t, nrows):
    out = []
    for i in range(nrows):
        out.append(f"row {i}: order={_row_label(t.get('TG_M', i))}, "
                   f"arm={_row_label(t.get('TG_PART', i))}")
    return "; ".join(out)


def _select_rows(t: Table, path, row, order, arm):
    """Indices of the type II rows matching the request."""
    n = t.nrows
    if row is not None:
        if not (-n <= int(row) < n):
            raise MissingRowError(path, f"row {row} requested but the file has {n} rows "
                                        "(rows count from 0)")
        rows = [int(row) % n]
    else:
        rows = list(range(n))
    for key, want, name in (("TG_M", order, "order"), ("TG_PART", arm, "arm")):
        if want is None:
            continue
        if not t.has(key):
            raise MissingRowError(path, f"{name}={want} requested but the file has no {key} "
                                        "column or keyword")
        keep = []
        for i in rows:
            have = _row_label(t.get(key, i))
            if have == want or str(have).strip().upper() == str(want).strip().upper():
                keep.append(i)
        rows = keep
    if not rows:
        raise MissingRowError(path, f"no row with row={row}, order={order}, arm={arm}; "
                                    f"available: {_row_summary(t, n)}")
    return rows


def _attach_companions(spec, path, row, order, arm, attach, cache=None):
    """Attach response and background named in the header when they exist
    (``cache`` shares one Response among rows naming the same files)."""
    if not attach:
        return spec
    rsp = _companion(path, spec.meta.get("respfile"))
    arf = _companion(path, spec.meta.get("ancrfile"))
    if rsp is not None:
        cache = {} if cache is None else cache
        if (rsp, arf) not in cache:
            cache[(rsp, arf)] = read_response(rsp, arf)
        resp = cache[(rsp, arf)]
        _check_channels(spec, resp, path)
        spec.response = resp
    if spec.background is None:
        bkg = _companion(path, spec.meta.get("backfile"))
        if bkg is not None:
            spec.background = _read_background(bkg, spec, row, order, arm)
    return spec


def _read_background(bkg_path, spec, row=None, order=None, arm=None):
    hdul = open_fits(bkg_path)
    t = Table(find_hdu(hdul, bkg_path, SPECTRUM_EXT, ("SPECTRUM",), "SPECTRUM"), bkg_path)
    type2 = _is_type2(t)
    if type2:
        by_label = ((order is not None and t.has("TG_M")) or
                    (arm is not None and t.has("TG_PART")))
        if by_label:
            rows = _select_rows(t, bkg_path, None, order if t.has("TG_M") else None,
                                arm if t.has("TG_PART") else None)
        else:
            rows = _select_rows(t, bkg_path, 0 if t.nrows == 1 or row is None else row,
                                None, None)
        if len(rows) > 1:
            raise AmbiguousRowError(bkg_path, "several background rows match; give row=")
        b = _spectrum_from_row(t, bkg_path, rows[0], True)
    else:
        b = _spectrum_from_row(t, bkg_path, None, False)
    if b.n_channels != spec.n_channels:
        raise ChannelMismatchError(bkg_path, f"background has {b.n_channels} channels but the "
                                             f"source spectrum has {spec.n_channels}")
    return b


def _check_channels(spec, resp, path):
    if resp.n_channels != spec.n_channels:
        raise ChannelMismatchError(
            path, f"spectrum has {spec.n_channels} channels but its response "
                  f"({resp.rmf_path or 'in memory'}) has {resp.n_channels}")
    if spec.n_channels and int(spec.channels[0]) != int(resp.channels[0]):
        raise ChannelMismatchError(
            path, f"spectrum channels start at {int(spec.channels[0])} but its response's "
                  f"({resp.rmf_path or 'in memory'}) start at {int(resp.channels[0])} "
                  "(check TLMIN of CHANNEL / F_CHAN)")
    differ = np.flatnonzero(np.asarray(spec.channels) != np.asarray(resp.channels))
    if differ.size:
        i = int(differ[0])
        raise ChannelMismatchError(
            path, f"CHANNEL {int(spec.channels[i])} at index {i} but its response's "
                  f"({resp.rmf_path or 'in memory'}) channel there is {int(resp.channels[i])} "
                  "(the CHANNEL column has gaps)")


def _bad_scaling(spec, key):
    """(first bad value, number of bad channels) of BACKSCAL/AREASCAL
    among the good-quality channels, or None when all are positive."""
    v = np.broadcast_to(np.asarray(getattr(spec, key.lower()), dtype=float),
                        (spec.n_channels,))
    bad = (~np.isfinite(v) | (v <= 0)) & spec.good
    if not bad.any():
        return None
    return float(v[np.flatnonzero(bad)[0]]), int(bad.sum())


def _check_scaling(spec):
    """BACKSCAL and AREASCAL must be positive and finite (in the channels
    of good quality) wherever a background is scaled with them: refused
    (BadScalingError) when ``spec`` has a background, an InputWarning
    otherwise.  A background's own scalings are always needed."""
    src = spec.meta.get("path")
    bkg = spec.background
    for key in ("BACKSCAL", "AREASCAL"):
        found = _bad_scaling(spec, key)
        if found is None:
            continue
        what = (f"{key} = {found[0]:g} (in {found[1]} good channel(s)); it must be "
                "positive")
        if bkg is not None:
            raise BadScalingError(src, f"{what}: the background is scaled with it")
        warnings.warn(InputWarning(f"{src}: {what} (no background uses it here)"),
                      stacklevel=3)
    if bkg is not None:
        two_sided = bkg.meta.get("kind") == "BACKGROUND_UP+DOWN"
        for key in ("BACKSCAL", "AREASCAL"):
            found = _bad_scaling(bkg, key)
            if found is not None:
                name = "BACKSCUP + BACKSCDN" if two_sided and key == "BACKSCAL" else key
                raise BadScalingError(bkg.meta.get("path"), f"background {name} = "
                                      f"{found[0]:g}; it must be positive to scale the "
                                      "background to the source")
    return spec


def _open_pha(path):
    hdul = open_fits(path)
    return Table(find_hdu(hdul, path, SPECTRUM_EXT, ("SPECTRUM",), "SPECTRUM (PHA)"), path)


def _read_type1(t: Table, path, row, order, arm, attach):
    """The spectrum of a type I PHA table, checked against a ``row``/
    ``order``/``arm`` request (MissingRowError if it does not match)."""
    if row not in (None, 0):
        raise MissingRowError(path, f"row {row} requested from a type I file (one spectrum)")
    spec = _spectrum_from_row(t, path, None, False)
    for key, want in (("order", order), ("arm", arm)):
        have = spec.meta.get(key)
        if want is not None and str(have).upper() != str(want).upper():
            raise MissingRowError(path, f"{key}={want} requested but the type I file has "
                                        f"{key}={have}")
    return _attach_companions(spec, path, None, order, arm, attach)


def read_pha_rows(path, attach=True, row=None, order=None, arm=None) -> list[Spectrum]:
    """Every spectrum in a PHA file: one for type I, one per row for type II
    (optionally only the rows matching ``row``/``order``/``arm``).

    Parameters
    ----------
    path : str or PathLike
    attach : bool
        Attach the response (RESPFILE with ANCRFILE) and background
        (BACKFILE) named in the file when those files exist next to it.
    row, order, arm : optional
        Keep only matching rows (as in :func:`read_pha`); MissingRowError
        if none match.
    """
    t = _open_pha(path)
    if not _is_type2(t):
        return [_check_scaling(_read_type1(t, path, row, order, arm, attach))]
    out, cache = [], {}
    for i in _select_rows(t, path, row, order, arm):
        s = _spectrum_from_row(t, path, i, True)
        out.append(_check_scaling(_attach_companions(s, path, i, s.meta["order"],
                                                     s.meta["arm"], attach, cache)))
    return out


def read_pha(path, row=None, order=None, arm=None, attach=True) -> Spectrum:
    """Read one spectrum from a PHA type I or type II file.

    Parameters
    ----------
    path : str or PathLike
    row : int, optional
        0-based row of a type II file.
    order : int, optional
        Grating order (TG_M column or keyword), e.g. -1 or 1.
    arm : int or str, optional
        Grating arm/part (TG_PART column or keyword).
    attach : bool
        Attach response and background named by RESPFILE/ANCRFILE/BACKFILE
        when those files exist (relative names are relative to ``path``).

    Returns
    -------
    Spectrum
        Counts (RATE x EXPOSURE when the file stores rates), with
        ``meta`` holding path, row, order, arm and the companion file names.

    Raises
    ------
    MissingRowError
        No row matches ``row``/``order``/``arm`` (an :class:`AmbiguousRowError`
        when several do and the request does not pick one).
    BadChannelsError
        CHANNEL repeats a channel number (channels listed out of order are
        sorted, with an InputWarning).
    BadScalingError
        BACKSCAL or AREASCAL is zero, negative or not finite in a good
        channel and a background is scaled with it (an InputWarning when
        no background is attached).
    """
    return _check_scaling(_read_one(path, row, order, arm, attach))


def _read_one(path, row, order, arm, attach):
    """:func:`read_pha` without the final BACKSCAL/AREASCAL check."""
    t = _open_pha(path)
    if not _is_type2(t):
        return _read_type1(t, path, row, order, arm, attach)
    rows = _select_rows(t, path, row, order, arm)
    if len(rows) > 1:
        raise AmbiguousRowError(path, f"{len(rows)} rows match (row={row}, order={order}, "
                                      f"arm={arm}); choose one with row=, order= or arm= "
                                      f"({_row_summary(t, t.nrows)}), or use read_pha_rows")
    s = _spectrum_from_row(t, path, rows[0], True)
    return _attach_companions(s, path, rows[0], s.meta["order"], s.meta["arm"], attach)


def load_spectrum(pha, rmf=None, arf=None, background=None, row=None, order=None, arm=None):
    """A spectrum with its response and background, from explicit files or
    from the names in the PHA header.

    Parameters
    ----------
    pha : str or PathLike
        PHA type I or II file.
    rmf, arf : str or PathLike, optional
        Response files; when ``rmf`` is None the PHA's RESPFILE/ANCRFILE
        are used if they exist.
    background : str, PathLike or Spectrum, optional
        Background PHA (same row/order/arm chosen from a type II file).
    row, order, arm
        As in :func:`read_pha`.
    """
    spec = _read_one(pha, row, order, arm, attach=rmf is None)
    if rmf is not None:
        resp = read_response(rmf, arf)
        _check_channels(spec, resp, pha)
        spec.response = resp
    elif arf is not None:
        raise InputFileError(pha, "an ARF was given without an RMF")
    if background is not None:
        if isinstance(background, Spectrum):
            if background.n_channels != spec.n_channels:
                raise ChannelMismatchError(pha, "background and spectrum channel counts differ")
            spec.background = background
        else:
            spec.background = _read_background(background, spec, row=spec.meta.get("row"),
                                               order=order, arm=arm)
    return _check_scaling(spec)


# ----------------------------------------------------------------------
# writing
_HDUVERS_PHA = "1.2.1"
_HDUVERS_RSP = "1.3.0"


def _is_integral(a):
    a = np.asarray(a)
    return np.all(np.isfinite(a)) and np.all(a == np.round(a)) and np.all(np.abs(a) < 2**31)


def _common_header(h, telescope=None, instrument=None, simulated=False):
    h["TELESCOP"] = (telescope or "NONE", "mission/satellite name")
    h["INSTRUME"] = (instrument or "NONE", "instrument/detector name")
    h["FILTER"] = ("NONE", "filter in use")
    h["HDUCLASS"] = ("OGIP", "format conforms to OGIP standard")
    h["CREATOR"] = ("edgefit", "software that wrote this file")
    if simulated:
        h["SIMULATD"] = (True, "simulated data (not an observation)")


def _channel_columns(specs, type2):
    """CHANNEL, COUNTS, STAT_ERR, QUALITY and GROUPING columns: one value
    per channel (type I, one spectrum) or one vector per row (type II).
    Counts are written as integers when they all are."""
    n = specs[0].n_channels
    rep = f"{n}" if type2 else ""

    def rows(values):
        arr = np.stack(values)
        return arr if type2 else arr[0]

    cols = [fits.Column("CHANNEL", f"{rep}J",
                        array=rows([np.asarray(s.channels, np.int32) for s in specs]))]
    cnt = rows([s.counts for s in specs])
    if _is_integral(cnt):
        cols.append(fits.Column("COUNTS", f"{rep}J", unit="count",
                                array=np.round(cnt).astype(np.int32)))
    else:
        cols.append(fits.Column("COUNTS", f"{rep}D", unit="count", array=cnt))
    if all(s.stat_err is not None for s in specs):
        cols.append(fits.Column("STAT_ERR", f"{rep}D", unit="count",
                                array=rows([s.stat_err for s in specs])))
    cols.append(fits.Column("QUALITY", f"{rep}I",
                            array=rows([np.asarray(s.quality, np.int16) for s in specs])))
    if any(s.grouping is not None for s in specs):
        cols.append(fits.Column("GROUPING", f"{rep}I", array=rows(
            [np.zeros(n, np.int16) if s.grouping is None else np.asarray(s.grouping, np.int16)
             for s in specs])))
    return cols


def _scalar_or_none(v):
    return None if np.ndim(v) else float(v)


def write_pha(path, spectra, *, overwrite=False, respfile=None, ancrfile=None, backfile=None,
              type2=None, background=False, object_name=None):
    """Write spectra as an OGIP PHA file (type I for one spectrum, type II
    for several, or as chosen with ``type2``).

    Parameters
    ----------
    path : str or PathLike
    spectra : Spectrum or sequence of Spectrum
        For type II every spectrum must have the same number of channels;
        ``meta['order']``/``meta['arm']`` become TG_M/TG_PART columns.
    respfile, ancrfile, backfile : str or sequence of str, optional
        Companion file names to record (one per row allowed for type II);
        default: the names in each spectrum's ``meta``.
    background : bool
        Mark the file as a background spectrum (HDUCLAS2 = 'BKG').
    object_name : str, optional
        OBJECT keyword (default ``meta['object']``).
    """
    specs = [spectra] if isinstance(spectra, Spectrum) else list(spectra)
    if not specs:
        raise ArgumentError("write_pha needs at least one spectrum")
    if type2 is None:
        type2 = len(specs) > 1
    if not type2 and len(specs) != 1:
        raise ArgumentError("a type I file holds exactly one spectrum")
    n = specs[0].n_channels
    if any(s.n_channels != n for s in specs):
        raise ArgumentError("all rows of a type II file need the same number of channels")
    first = specs[0]
    simulated = any(bool(s.meta.get("simulated")) for s in specs)

    def per_row(value, key):
        if value is None:
            return [s.meta.get(key) for s in specs]
        if isinstance(value, (str, os.PathLike)):
            return [os.fspath(value)] * len(specs)
        return [None if v is None else os.fspath(v) for v in value]

    resp = per_row(respfile, "respfile")
    anc = per_row(ancrfile, "ancrfile")
    bkg = per_row(backfile, "backfile")

    if not type2:
        s = first
        cols = _channel_columns(specs, False)
        for name in ("backscal", "areascal"):
            v = getattr(s, name)
            if np.ndim(v):
                cols.append(fits.Column(name.upper(), "D", array=np.broadcast_to(v, (n,))))
        hdu = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
        h = hdu.header
        h["EXPOSURE"] = (float(s.exposure), "[s] exposure time")
        for name in ("BACKSCAL", "AREASCAL"):
            v = _scalar_or_none(getattr(s, name.lower()))
            if v is not None:
                h[name] = (v, "scaling factor")
        if s.meta.get("order") is not None:
            h["TG_M"] = (s.meta["order"], "grating order")
        if s.meta.get("arm") is not None:
            h["TG_PART"] = (s.meta["arm"], "grating arm/part")
        for key, vals in (("RESPFILE", resp), ("ANCRFILE", anc), ("BACKFILE", bkg)):
            h[key] = (vals[0] or "none", "associated file")
        h["HDUCLAS4"] = ("TYPE:I", "single spectrum")
    else:
        cols = [fits.Column("SPEC_NUM", "J", array=np.arange(1, len(specs) + 1, dtype=np.int32))]
        orders = [s.meta.get("order") for s in specs]
        arms = [s.meta.get("arm") for s in specs]
        for name, vals in (("TG_M", orders), ("TG_PART", arms)):
            if any(v is not None for v in vals):
                if all(isinstance(v, (int, np.integer)) for v in vals if v is not None):
                    cols.append(fits.Column(name, "I", array=np.array(
                        [0 if v is None else int(v) for v in vals], np.int16)))
                else:
                    cols.append(fits.Column(name, "16A", array=np.array(
                        ["" if v is None else str(v) for v in vals])))
        cols += _channel_columns(specs, True)
        cols.append(fits.Column("EXPOSURE", "D", unit="s",
                                array=np.array([s.exposure for s in specs], float)))
        for name in ("backscal", "areascal"):
            vals = [getattr(s, name) for s in specs]
            if any(np.ndim(v) for v in vals):
                cols.append(fits.Column(name.upper(), f"{n}D", array=np.stack(
                    [np.broadcast_to(np.asarray(v, float), (n,)) for v in vals])))
            else:
                cols.append(fits.Column(name.upper(), "D", array=np.array(vals, float)))
        for key, vals in (("RESPFILE", resp), ("ANCRFILE", anc), ("BACKFILE", bkg)):
            if len(set(vals)) > 1:
                width = max(len(v or "none") for v in vals)
                cols.append(fits.Column(key, f"{width}A",
                                        array=np.array([v or "none" for v in vals])))
        hdu = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
        h = hdu.header
        for key, vals in (("RESPFILE", resp), ("ANCRFILE", anc), ("BACKFILE", bkg)):
            if len(set(vals)) <= 1:
                h[key] = (vals[0] or "none", "associated file")
        h["HDUCLAS4"] = ("TYPE:II", "several spectra, one per row")
    _common_header(h, first.meta.get("telescope"), first.meta.get("instrument"), simulated)
    h["HDUCLAS1"] = ("SPECTRUM", "PHA dataset")
    h["HDUCLAS2"] = ("BKG" if background else "TOTAL", "source+background or background")
    h["HDUCLAS3"] = ("COUNT", "data stored as counts")
    h["HDUVERS"] = (_HDUVERS_PHA, "OGIP/92-007 format version")
    h["CHANTYPE"] = ("PI", "channel type")
    h["DETCHANS"] = (n, "total number of detector channels")
    h["POISSERR"] = (bool(all(s.poisson for s in specs)), "Poisson errors apply")
    h["CORRFILE"] = ("none", "no correction file")
    h["CORRSCAL"] = (0.0, "correction scaling")
    obj = object_name or first.meta.get("object")
    if obj:
        h["OBJECT"] = (str(obj), "simulated target" if simulated else "target")
    chan_col = hdu.columns.names.index("CHANNEL") + 1
    c0 = int(np.min(first.channels))
    h[f"TLMIN{chan_col}"] = c0
    h[f"TLMAX{chan_col}"] = c0 + n - 1
    primary = fits.PrimaryHDU()
    _common_header(primary.header, first.meta.get("telescope"), first.meta.get("instrument"),
                   simulated)
    fits.HDUList([primary, hdu]).writeto(path, overwrite=overwrite)


def write_arf(path, energy_lo, energy_hi, specresp, *, overwrite=False, telescope=None,
              instrument=None, simulated=False):
    """Write an ARF: ENERG_LO, ENERG_HI (keV) and SPECRESP (cm^2)
    (CAL/GEN/92-002, HDUCLAS1 = 'RESPONSE', HDUCLAS2 = 'SPECRESP')."""
    lo = np.asarray(energy_lo, float)
    hi = np.asarray(energy_hi, float)
    cols = [fits.Column("ENERG_LO", "D", unit="keV", array=lo),
            fits.Column("ENERG_HI", "D", unit="keV", array=hi),
            fits.Column("SPECRESP", "E", unit="cm**2", array=np.asarray(specresp, float))]
    hdu = fits.BinTableHDU.from_columns(cols, name="SPECRESP")
    h = hdu.header
    _common_header(h, telescope, instrument, simulated)
    h["HDUCLAS1"] = ("RESPONSE", "dataset relates to spectral response")
    h["HDUCLAS2"] = ("SPECRESP", "effective area")
    h["HDUVERS"] = ("1.1.0", "CAL/GEN/92-002a format version")
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=overwrite)


def _groups_of_column(indices):
    """Split sorted channel indices of one energy column into runs of
    consecutive channels: (first index of each run, run lengths)."""
    if indices.size == 0:
        return indices, indices
    breaks = np.flatnonzero(np.diff(indices) != 1) + 1
    starts = np.concatenate(([0], breaks))
    ends = np.concatenate((breaks, [indices.size]))
    return indices[starts], ends - starts


def write_rmf(path, response: Response, *, overwrite=False, include_area=False,
              telescope=None, instrument=None, simulated=False, lo_thresh=0.0):
    """Write a response's redistribution matrix with EBOUNDS.

    F_CHAN, N_CHAN and MATRIX are written as variable-length arrays
    (formats PJ/PJ/PE), one group per run of consecutive non-zero
    channels, so only non-zero elements are stored.  With
    ``include_area`` the matrix includes the effective area (an RSP;
    EXTNAME 'SPECRESP MATRIX', HDUCLAS3 'FULL'), else it is the RMF
    probability matrix (EXTNAME 'MATRIX', HDUCLAS3 'REDIST').
    """
    mat = response.matrix() if include_area else response.rmf
    csc = sp.csc_array(mat)
    if lo_thresh > 0:
        csc.data[np.abs(csc.data) < lo_thresh] = 0.0
    csc.eliminate_zeros()
    csc.sort_indices()
    first = int(response.channels[0]) if np.all(np.diff(response.channels) == 1) else 1
    ngrp = np.zeros(response.n_energies, np.int32)
    fch, nch, mvals = [], [], []
    for j in range(response.n_energies):
        a, b = csc.indptr[j], csc.indptr[j + 1]
        idx = csc.indices[a:b]
        starts, lens = _groups_of_column(idx)
        ngrp[j] = starts.size
        fch.append((starts + first).astype(np.int32))
        nch.append(lens.astype(np.int32))
        mvals.append(csc.data[a:b].astype(np.float32))
    cols = [fits.Column("ENERG_LO", "D", unit="keV", array=response.energy_lo),
            fits.Column("ENERG_HI", "D", unit="keV", array=response.energy_hi),
            fits.Column("N_GRP", "I", array=ngrp.astype(np.int16)),
            fits.Column("F_CHAN", "PJ()", array=np.array(fch + [None], dtype=object)[:-1]),
            fits.Column("N_CHAN", "PJ()", array=np.array(nch + [None], dtype=object)[:-1]),
            fits.Column("MATRIX", "PE()", array=np.array(mvals + [None], dtype=object)[:-1])]
    name = "SPECRESP MATRIX" if include_area else "MATRIX"
    hdu = fits.BinTableHDU.from_columns(cols, name=name)
    h = hdu.header
    _common_header(h, telescope, instrument, simulated)
    h["HDUCLAS1"] = ("RESPONSE", "dataset relates to spectral response")
    h["HDUCLAS2"] = ("RSP_MATRIX", "redistribution matrix")
    h["HDUCLAS3"] = ("FULL" if include_area else "REDIST", "includes area" if include_area
                     else "redistribution only")
    h["HDUVERS"] = (_HDUVERS_RSP, "CAL/GEN/92-002a format version")
    h["CHANTYPE"] = ("PI", "channel type")
    h["DETCHANS"] = (response.n_channels, "total number of detector channels")
    h["LO_THRES"] = (float(lo_thresh), "lower threshold of stored matrix values")
    fcol = hdu.columns.names.index("F_CHAN") + 1
    h[f"TLMIN{fcol}"] = first
    h[f"TLMAX{fcol}"] = first + response.n_channels - 1

    ecols = [fits.Column("CHANNEL", "J", array=np.asarray(response.channels, np.int32)),
             fits.Column("E_MIN", "D", unit="keV", array=response.channel_emin),
             fits.Column("E_MAX", "D", unit="keV", array=response.channel_emax)]
    ehdu = fits.BinTableHDU.from_columns(ecols, name="EBOUNDS")
    eh = ehdu.header
    _common_header(eh, telescope, instrument, simulated)
    eh["HDUCLAS1"] = ("RESPONSE", "dataset relates to spectral response")
    eh["HDUCLAS2"] = ("EBOUNDS", "nominal channel energy bounds")
    eh["HDUVERS"] = (_HDUVERS_RSP, "CAL/GEN/92-002a format version")
    eh["CHANTYPE"] = ("PI", "channel type")
    eh["DETCHANS"] = (response.n_channels, "total number of detector channels")
    eh["TLMIN1"] = int(np.min(response.channels))
    eh["TLMAX1"] = int(np.max(response.channels))
    fits.HDUList([fits.PrimaryHDU(), hdu, ehdu]).writeto(path, overwrite=overwrite)


def write_response(response: Response, rmf_path, arf_path=None, *, overwrite=False,
                   simulated=False, telescope=None, instrument=None):
    """Write a response as RMF + ARF (when ``arf_path`` is given) or as a
    single RSP with the area included (when it is not)."""
    kw = dict(overwrite=overwrite, simulated=simulated, telescope=telescope,
              instrument=instrument)
    if arf_path is None:
        write_rmf(rmf_path, response, include_area=True, **kw)
    else:
        write_rmf(rmf_path, response, include_area=False, **kw)
        write_arf(arf_path, response.energy_lo, response.energy_hi, response.specresp, **kw)


def write_dataset(directory, stem, spectra, response: Response, *, overwrite=False,
                  telescope=None, instrument=None) -> dict:
    """Write spectra with their response (and backgrounds) as a consistent
    set of OGIP files that :func:`read_pha` re-assembles.

    Files: ``<stem>.rmf`` and ``<stem>.arf`` from ``response``;
    ``<stem>.pha`` (type I for one spectrum, type II for several rows);
    ``<stem>_bkg.pha`` when the spectra carry backgrounds (all of them
    must).  RESPFILE/ANCRFILE/BACKFILE name these files (relative names).

    Returns
    -------
    dict with keys ``pha``, ``rmf``, ``arf`` and possibly ``bkg`` (paths).
    """
    specs = [spectra] if isinstance(spectra, Spectrum) else list(spectra)
    directory = os.fspath(directory)
    os.makedirs(directory, exist_ok=True)
    simulated = any(bool(s.meta.get("simulated")) for s in specs)
    paths = {k: os.path.join(directory, f"{stem}{suffix}")
             for k, suffix in (("pha", ".pha"), ("rmf", ".rmf"), ("arf", ".arf"))}
    write_response(response, paths["rmf"], paths["arf"], overwrite=overwrite,
                   simulated=simulated, telescope=telescope, instrument=instrument)
    backfile = None
    bkgs = [s.background for s in specs]
    if any(b is not None for b in bkgs):
        if any(b is None for b in bkgs):
            raise ArgumentError("either every spectrum has a background or none has")
        paths["bkg"] = os.path.join(directory, f"{stem}_bkg.pha")
        for b, s in zip(bkgs, specs):
            b.meta.setdefault("order", s.meta.get("order"))
            b.meta.setdefault("arm", s.meta.get("arm"))
        write_pha(paths["bkg"], bkgs, overwrite=overwrite, type2=len(bkgs) > 1,
                  background=True, respfile="none", ancrfile="none", backfile="none")
        backfile = os.path.basename(paths["bkg"])
    write_pha(paths["pha"], specs, overwrite=overwrite, type2=len(specs) > 1,
              respfile=os.path.basename(paths["rmf"]), ancrfile=os.path.basename(paths["arf"]),
              backfile=backfile or "none")
    return paths


# ----------------------------------------------------------------------
# description (for `edgefit inspect`)
def _kind_of(hdul):
    kinds = []
    sp_hdu = find_hdu_or_none(hdul, SPECTRUM_EXT, ("SPECTRUM",))
    if sp_hdu is not None:
        kinds.append(("pha", sp_hdu))
    m = find_hdu_or_none(hdul, RMF_EXT, ("RSP_MATRIX",))
    if m is not None:
        kinds.append(("rmf", m))
    a = find_hdu_or_none(hdul, ARF_EXT, ())
    if a is not None and m is not a and a.name.upper() == "SPECRESP":
        kinds.append(("arf", a))
    if m is None:
        e = find_hdu_or_none(hdul, EBOUNDS_EXT, ("EBOUNDS",))
        if e is not None:
            kinds.append(("ebounds", e))
    return kinds


def _wave_range(emin, emax):
    lo, hi = float(np.min(emin)), float(np.max(emax))
    return (HC_KEV_ANGSTROM / hi if hi > 0 else np.inf,
            HC_KEV_ANGSTROM / lo if lo > 0 else np.inf)


def describe_file(path, row=None, order=None, arm=None) -> list[dict]:
    """What an OGIP FITS file holds, as one dict per spectrum/response part.

    Keys: ``file``, ``kind`` ('PHA I', 'PHA II', 'ARF', 'RMF', 'RSP',
    'EBOUNDS'), ``row``, ``order``, ``arm``, ``channels``,
    ``energy_kev`` (min, max), ``wavelength_a`` (min, max), ``exposure_s``,
    ``counts``, ``note``.  Spectra are read with their companion files
    (RESPFILE/ANCRFILE/BACKFILE), so problems in those are reported too.
    ``row``/``order``/``arm`` restrict a PHA file to the matching rows.
    """
    hdul = open_fits(path)
    kinds = _kind_of(hdul)
    if not kinds:
        names = [h.name for h in hdul[1:]] or ["none"]
        raise MissingExtensionError(path, "no SPECTRUM, SPECRESP, MATRIX or EBOUNDS extension "
                                          f"(extensions: {', '.join(names)})")
    out = []
    fname = os.path.basename(os.fspath(path))
    for kind, _hdu in kinds:
        base = {"file": fname, "row": None, "order": None, "arm": None, "channels": None,
                "energy_kev": None, "wavelength_a": None, "exposure_s": None, "counts": None,
                "note": ""}
        if kind == "pha":
            t = Table(_hdu, path)
            label = "PHA II" if _is_type2(t) else "PHA I"
            for s in read_pha_rows(path, row=row, order=order, arm=arm):
                d = dict(base, kind=label, row=s.meta.get("row"), order=s.meta.get("order"),
                         arm=s.meta.get("arm"), channels=s.n_channels,
                         exposure_s=s.exposure, counts=float(np.sum(s.counts)))
                notes = []
                if s.response is not None:
                    r = s.response
                    d["energy_kev"] = (float(r.channel_emin.min()), float(r.channel_emax.max()))
                    d["wavelength_a"] = _wave_range(r.channel_emin, r.channel_emax)
                    notes.append("response attached")
                elif s.meta.get("respfile"):
                    notes.append(f"RESPFILE {s.meta['respfile']} not found")
                if s.background is not None:
                    notes.append(f"background {np.sum(s.background.counts):.0f} counts")
                if s.meta.get("simulated"):
                    notes.append("simulated")
                d["note"] = "; ".join(notes)
                out.append(d)
        elif kind == "rmf":
            r = read_rmf(path)
            full = str(r.meta.get("hduclas3", "")).upper() == "FULL" or \
                r.meta.get("extname") == "SPECRESP MATRIX"
            d = dict(base, kind="RSP" if full else "RMF", channels=r.n_channels,
                     energy_kev=(float(r.energy_lo[0]), float(r.energy_hi[-1])),
                     wavelength_a=_wave_range(r.energy_lo, r.energy_hi),
                     note=f"{r.n_energies} energy bins, nnz={r.matrix().nnz}")
            out.append(d)
        elif kind == "arf":
            a = read_arf(path)
            d = dict(base, kind="ARF", energy_kev=(float(a.energy_lo[0]), float(a.energy_hi[-1])),
                     wavelength_a=_wave_range(a.energy_lo, a.energy_hi),
                     note=f"{len(a)} energy bins, area max {a.specresp.max():.4g} cm2")
            out.append(d)
        else:
            e = read_ebounds(path)
            d = dict(base, kind="EBOUNDS", channels=len(e),
                     energy_kev=(float(e.e_min.min()), float(e.e_max.max())),
                     wavelength_a=_wave_range(e.e_min, e.e_max))
            out.append(d)
    return out
