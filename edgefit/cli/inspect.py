"""``edgefit inspect FILE [FILE...]``: what OGIP FITS files hold.

Prints one table line per spectrum (every row of a PHA type II file), ARF
or RMF: kind, row, order, arm, channels, energy range (keV), wavelength
range (Angstrom), exposure (s), total counts and a note.  A file that
cannot be read gives one line on stderr; the exit status is 2 if any file
failed, else 0.
"""
from __future__ import annotations

import os
import sys

import numpy as np

from .._units import HC_KEV_ANGSTROM
from ..data._fitsio import Table, find_hdu_or_none, open_fits
from ..data.ogip.responses import ARF_EXT, EBOUNDS_EXT, RMF_EXT, read_arf, read_ebounds, read_rmf
from ..data.ogip.spectra import SPECTRUM_EXT, _is_type2, read_pha_rows
from ..errors import EdgefitError, MissingExtensionError
from . import error_line

__all__ = ["describe_file", "format_table", "add_parser", "run"]

COLUMNS = ("file", "kind", "row", "order", "arm", "channels", "energy_keV", "wavelength_A",
           "exposure_s", "counts", "note")


def add_parser(subparsers):
    p = subparsers.add_parser(
        "inspect", help="describe OGIP FITS files (PHA, ARF, RMF)",
        description="Say what each FITS file holds: kind (PHA I/II, ARF, RMF), rows, "
                    "grating orders/arms, channels, energy and wavelength ranges, exposure "
                    "and total counts.")
    p.add_argument("files", nargs="+", metavar="FILE", help="FITS file(s) to describe")
    p.add_argument("--row", type=int, default=None,
                   help="only this row (counted from 0) of PHA type II files")
    p.add_argument("--order", type=int, default=None,
                   help="only rows with this grating order (TG_M)")
    p.add_argument("--arm", default=None,
                   help="only rows of this grating arm (TG_PART)")
    p.set_defaults(func=run)
    return p


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


def describe_file(path: str | os.PathLike[str], row: int | None = None, order: int | None = None,
                  arm: str | None = None) -> list[dict]:
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


def _fmt(value):
    if value is None:
        return "-"
    if isinstance(value, tuple):
        return f"{value[0]:.4g}-{value[1]:.4g}"
    if isinstance(value, float):
        if value.is_integer() and abs(value) < 1e15:
            return f"{value:.0f}"
        return f"{value:.6g}"
    return str(value)


def format_table(rows) -> str:
    """Plain-text table of :func:`describe_file` rows."""
    cells = [list(COLUMNS)]
    for r in rows:
        cells.append([_fmt(r.get("file")), _fmt(r.get("kind")), _fmt(r.get("row")),
                      _fmt(r.get("order")), _fmt(r.get("arm")), _fmt(r.get("channels")),
                      _fmt(r.get("energy_kev")), _fmt(r.get("wavelength_a")),
                      _fmt(r.get("exposure_s")), _fmt(r.get("counts")), r.get("note") or ""])
    widths = [max(len(c[i]) for c in cells) for i in range(len(COLUMNS))]
    lines = ["  ".join(c[i].ljust(widths[i]) for i in range(len(COLUMNS))).rstrip()
             for c in cells]
    return "\n".join(lines)


def _arm(value):
    if value is None:
        return None
    try:
        return int(value)
    except ValueError:
        return value


def run(args) -> int:
    rows, failed = [], 0
    for path in args.files:
        try:
            rows.extend(describe_file(path, row=args.row, order=args.order,
                                      arm=_arm(args.arm)))
        except (EdgefitError, OSError) as exc:
            if getattr(args, "debug", False):
                raise
            failed += 1
            print(error_line("inspect", exc), file=sys.stderr)
    if rows:
        print(format_table(rows))
    return 2 if failed else 0
