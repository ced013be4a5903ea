"""``edgefit inspect FILE [FILE...]``: what OGIP FITS files hold.

Prints one table line per spectrum (every row of a PHA type II file), ARF
or RMF: kind, row, order, arm, channels, energy range (keV), wavelength
range (Angstrom), exposure (s), total counts and a note.  A file that
cannot be read gives one line on stderr; the exit status is 2 if any file
failed, else 0.
"""
from __future__ import annotations

import sys

from ..errors import EdgefitError
from . import error_line

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
    """Plain-text table of :func:`edgefit.data.ogip.describe_file` rows."""
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
    from ..data.ogip import describe_file

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
