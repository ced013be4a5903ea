"""Write OGIP files: PHA type I/II, ARF and RMF (and all three for a
simulated data set); see :mod:`edgefit.data.ogip` for the layouts."""
from __future__ import annotations

import os
from typing import Any, Sequence

import numpy as np
from numpy.typing import ArrayLike
import scipy.sparse as sp
from astropy.io import fits

from ...errors import ArgumentError
from ..response import Response
from ..spectrum import Spectrum

__all__ = ["write_pha", "write_arf", "write_rmf", "write_response", "write_dataset"]


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


def write_pha(path: str | os.PathLike, spectra: Spectrum | Sequence[Spectrum], *,
              overwrite: bool = False, respfile: str | None = None, ancrfile: str | None = None,
              backfile: str | None = None, type2: bool | None = None, background: bool = False,
              object_name: str | None = None) -> None:
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


def write_arf(path: str | os.PathLike, energy_lo: ArrayLike, energy_hi: ArrayLike,
              specresp: ArrayLike, *,
              overwrite: bool = False, telescope: str | None = None,
              instrument: str | None = None, simulated: bool = False) -> None:
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


def write_rmf(path: str | os.PathLike, response: Response, *, overwrite: bool = False,
              include_area: bool = False, telescope: str | None = None,
              instrument: str | None = None, simulated: bool = False,
              lo_thresh: float = 0.0) -> None:
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


def write_response(response: Response, rmf_path: str | os.PathLike,
                   arf_path: str | os.PathLike | None = None, *,
                   overwrite: bool = False, simulated: bool = False,
                   telescope: str | None = None, instrument: str | None = None) -> None:
    """Write a response as RMF + ARF (when ``arf_path`` is given) or as a
    single RSP with the area included (when it is not)."""
    kw: dict[str, Any] = dict(overwrite=overwrite, simulated=simulated, telescope=telescope,
              instrument=instrument)
    if arf_path is None:
        write_rmf(rmf_path, response, include_area=True, **kw)
    else:
        write_rmf(rmf_path, response, include_area=False, **kw)
        write_arf(arf_path, response.energy_lo, response.energy_hi, response.specresp, **kw)


def write_dataset(directory: str | os.PathLike, stem: str, spectra: Spectrum | Sequence[Spectrum],
                  response: Response, *, overwrite: bool = False, telescope: str | None = None,
                  instrument: str | None = None) -> dict:
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
    with_bkg = [s.background for s in specs]
    if any(b is not None for b in with_bkg):
        bkgs = [b for b in with_bkg if b is not None]
        if len(bkgs) != len(with_bkg):
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
