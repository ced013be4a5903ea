"""Read OGIP spectra: PHA type I and II (SPECTRUM), with their companion
response and background files, following OGIP/92-007 (+92-007a); see
:mod:`edgefit.data.ogip`."""
from __future__ import annotations

import os
import re
import warnings

import numpy as np

from ...errors import (BadChannelsError, BadCountsError, BadExposureError, BadScalingError,
                       ChannelMismatchError, InputFileError, InputWarning, MissingColumnError,
                       MissingRowError)
from .._fitsio import (Table, as_str, file_errors, find_hdu, open_fits, to_float,
                       to_float_array, to_int_array)
from ..spectrum import Spectrum
from .responses import _warn_detchans, read_response

__all__ = ["read_pha", "read_pha_rows", "load_spectrum", "AmbiguousRowError",
           "SPECTRUM_EXT"]

SPECTRUM_EXT = ("SPECTRUM",)


class AmbiguousRowError(MissingRowError):
    """A PHA type II file has several rows and the request does not pick one."""


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
    arr = to_float_array(value, path, name)
    if arr.ndim == 0:
        return float(arr)
    if arr.size == 1:
        return float(arr.reshape(()))
    if arr.shape != (n,):
        raise InputFileError(path, f"{name} has {arr.size} values but the spectrum "
                                   f"{'row ' + str(row) + ' ' if row is not None else ''}"
                                   f"has {n} channels")
    return arr


def _per_channel_int(value, n, path, name, where=""):
    """One whole number, or one per channel, as an int array of length n."""
    arr = to_int_array(value, path, name)
    if arr.size == 1:
        return np.full(n, int(arr.reshape(-1)[0]), dtype=np.int64)
    if arr.shape != (n,):
        raise InputFileError(path, f"{name} has {arr.size} values but the spectrum has "
                                   f"{n} channels{where}")
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
    exposure = to_float(exposure, path, f"EXPOSURE{where}")
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
    quality = _per_channel_int(quality, n, path, "QUALITY", where)
    grouping = t.get("GROUPING", r)
    if grouping is not None:
        grouping = _per_channel_int(grouping, n, path, "GROUPING", where)
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
        scal += to_float(s, path, key)
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


@file_errors
def read_pha_rows(path: str | os.PathLike, attach: bool = True, row: int | None = None,
                  order: int | None = None, arm: int | str | None = None) -> list[Spectrum]:
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
    out: list[Spectrum] = []
    cache: dict = {}
    for i in _select_rows(t, path, row, order, arm):
        s = _spectrum_from_row(t, path, i, True)
        out.append(_check_scaling(_attach_companions(s, path, i, s.meta["order"],
                                                     s.meta["arm"], attach, cache)))
    return out


@file_errors
def read_pha(path: str | os.PathLike, row: int | None = None, order: int | None = None,
             arm: int | str | None = None, attach: bool = True) -> Spectrum:
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


@file_errors
def load_spectrum(pha: str | os.PathLike, rmf: str | os.PathLike | None = None,
                  arf: str | os.PathLike | None = None,
                  background: str | os.PathLike | None = None, row: int | None = None,
                  order: int | None = None, arm: int | str | None = None) -> Spectrum:
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
