"""Read OGIP responses: ARF (SPECRESP), RMF/RSP (MATRIX or SPECRESP MATRIX)
and EBOUNDS, following CAL/GEN/92-002 (+92-002a); see :mod:`edgefit.data.ogip`."""
from __future__ import annotations

import os
import warnings

import numpy as np
import scipy.sparse as sp

from ...errors import (BadGridError, ChannelMismatchError, GridMismatchError, InputFileError,
                       InputWarning, MissingColumnError)
from .._fitsio import Table, file_errors, find_hdu, open_fits, to_float_array, to_int_array
from ..response import Response

__all__ = ["read_arf", "read_rmf", "read_ebounds", "read_response", "ArfData",
           "EboundsData", "ARF_EXT", "RMF_EXT", "EBOUNDS_EXT"]

ARF_EXT = ("SPECRESP",)
RMF_EXT = ("MATRIX", "SPECRESP MATRIX")
EBOUNDS_EXT = ("EBOUNDS",)


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
@file_errors
def read_arf(path: str | os.PathLike) -> ArfData:
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
        chans = to_int_array(t.column("CHANNEL"), path, "EBOUNDS CHANNEL").reshape(-1)
        if chans.size != e_min.size:
            raise InputFileError(path, f"EBOUNDS has {chans.size} CHANNEL values but "
                                       f"{e_min.size} E_MIN values")
    else:
        chans = np.arange(e_min.size) + t.tlmin("CHANNEL", 1)
    _warn_detchans(t, e_min.size, path)
    _check_channel_bounds(e_min, e_max, path)
    return EboundsData(chans, e_min, e_max, path=os.fspath(path))


@file_errors
def read_ebounds(path: str | os.PathLike) -> EboundsData:
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
    n_grp = to_int_array(t.column("N_GRP"), path, "N_GRP").reshape(-1)
    if n_grp.size != n_en:
        raise InputFileError(path, f"N_GRP has {n_grp.size} values for {n_en} energy bins")
    f_chan = _ragged(t.column("F_CHAN"), n_en, path, "F_CHAN")
    n_chan = _ragged(t.column("N_CHAN"), n_en, path, "N_CHAN")
    matrix = _ragged(t.column("MATRIX"), n_en, path, "MATRIX")
    if np.any(n_grp < 0):
        raise InputFileError(path, "N_GRP has negative entries")
    first = t.tlmin("F_CHAN", chan_offset_hint if chan_offset_hint is not None else 1)
    detchans = t.keyword("DETCHANS", n_chan_hint)
    if detchans is None:
        raise MissingColumnError(path, "MATRIX extension has no DETCHANS keyword")
    detchans = int(to_int_array(detchans, path, "DETCHANS").reshape(-1)[0])
    if detchans <= 0:
        raise InputFileError(path, f"DETCHANS = {detchans}; it must be positive")
    if n_chan_hint is not None and detchans != n_chan_hint:
        raise ChannelMismatchError(path, f"DETCHANS = {detchans} in MATRIX but EBOUNDS has "
                                         f"{n_chan_hint} channels")
    g_first = to_int_array(_take_prefix(f_chan, n_grp, path, "F_CHAN"), path, "F_CHAN")
    g_n = to_int_array(_take_prefix(n_chan, n_grp, path, "N_CHAN"), path, "N_CHAN")
    g_row = np.repeat(np.arange(n_en), n_grp)
    if np.any(g_n < 0):
        raise InputFileError(path, "N_CHAN has negative entries")
    row_len = np.bincount(g_row, weights=g_n, minlength=n_en).astype(np.int64)
    vals = to_float_array(_take_prefix(matrix, row_len, path, "MATRIX"), path, "MATRIX")
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


@file_errors
def read_rmf(path: str | os.PathLike, arf: str | os.PathLike | None = None) -> Response:
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


def read_response(rmf: str | os.PathLike, arf: str | os.PathLike | None = None) -> Response:
    """Response from an RMF (or RSP) file and an optional ARF file:
    the sparse folding matrix RMF x ARF.  Same as :func:`read_rmf`."""
    return read_rmf(rmf, arf=arf)
