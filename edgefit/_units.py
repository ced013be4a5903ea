"""Unit handling at the package boundary.

Inside edgefit every energy is in keV, every wavelength in Angstrom, every
column density in cm^-2 and every grain size in micrometres.  Functions that
take physical values from a user accept either plain numbers (in those
units) or :class:`astropy.units.Quantity` objects, which are converted here.
"""
from __future__ import annotations

import numpy as np
from astropy import units as u

#: h c in keV Angstrom (CODATA 2018 exact h, c; e exact).
HC_KEV_ANGSTROM = 12.398419843320026

__all__ = ["HC_KEV_ANGSTROM", "to_value", "as_kev", "as_angstrom", "kev_to_angstrom",
           "angstrom_to_kev", "unit_or_none", "fits_ready_table"]


def to_value(value, unit, name="value", equivalencies=None):
    """Return ``value`` as a float or ndarray in ``unit``.

    Plain numbers are taken to be in ``unit`` already.  Quantities are
    converted, with ``equivalencies`` (e.g. :func:`astropy.units.spectral`).
    """
    if isinstance(value, u.Quantity):
        try:
            out = value.to_value(unit, equivalencies=equivalencies or [])
        except u.UnitConversionError as exc:
            raise u.UnitConversionError(
                f"{name}: cannot convert {value.unit} to {unit}") from exc
        return out
    return np.asarray(value, dtype=float) if np.ndim(value) else float(value)


def as_kev(value, name="energy"):
    """Energy in keV from a number (keV) or any spectral Quantity
    (energy, wavelength or frequency)."""
    return to_value(value, u.keV, name, equivalencies=u.spectral())


def as_angstrom(value, name="wavelength"):
    """Wavelength in Angstrom from a number (Angstrom) or any spectral Quantity."""
    return to_value(value, u.AA, name, equivalencies=u.spectral())


def kev_to_angstrom(energy_kev):
    """Convert keV to Angstrom (works on arrays)."""
    return HC_KEV_ANGSTROM / np.asarray(energy_kev, dtype=float)


def angstrom_to_kev(wavelength_angstrom):
    """Convert Angstrom to keV (works on arrays)."""
    return HC_KEV_ANGSTROM / np.asarray(wavelength_angstrom, dtype=float)


def unit_or_none(unit_str):
    """An astropy unit from a unit string: dimensionless for an empty string,
    None for a string astropy cannot parse (the caller then writes the
    column without a unit rather than failing a finished fit)."""
    if not unit_str:
        return u.dimensionless_unscaled
    try:
        return u.Unit(unit_str)
    except ValueError:
        return None


def fits_ready_table(table):
    """A copy of ``table`` whose units FITS can store: a column with a unit
    FITS has no name for (e.g. ``dex(cm-2)`` of log columns) becomes plain
    numbers with the unit written in its description (the ECSV and JSON
    files keep the unit itself)."""
    from astropy.table import Table

    out = Table(table, copy=True)
    for name in out.colnames:
        col = out[name]
        if col.unit is None:
            continue
        try:
            col.unit.to_string(format="fits")
        except (ValueError, TypeError, AttributeError):
            unit = col.unit.to_string()
            out[name] = np.asarray(col, dtype=float)
            out[name].unit = None
            out[name].description = f"unit: {unit}"
    return out
