"""Plain-text numeric tables supplied by users (laboratory absorption
measurements, grain size distributions, ...).

One reader, so that every such file gets the same rules and the same
errors: whitespace- or comma-separated columns, ``#`` starts a comment,
blank lines are skipped, and any problem raises
:class:`~edgefit.errors.InputFileError` naming the file and the line.
"""
from __future__ import annotations

import math
import os

import numpy as np

from ..errors import InputFileError

__all__ = ["read_text_columns"]


def read_text_columns(path, columns=(0, 1), what="numbers") -> np.ndarray:
    """Read the given (0-based) ``columns`` of a plain-text table.

    Parameters
    ----------
    path : str or os.PathLike
        The file.
    columns : sequence of int
        Which columns to return, in that order.
    what : str
        Description of the expected columns for error messages, e.g.
        ``"radius (um) and n(a)"``.

    Returns
    -------
    ndarray, shape (rows, len(columns))

    Raises
    ------
    InputFileError
        The file cannot be read as text, a line lacks a column or holds
        something that is not a finite number, or there are no data rows.
    """
    path = os.fspath(path)
    columns = tuple(int(c) for c in columns)
    rows = []
    try:
        with open(path, encoding="utf-8") as fh:
            for lineno, line in enumerate(fh, 1):
                text = line.split("#", 1)[0].strip()
                if not text:
                    continue
                parts = text.replace(",", " ").split()
                try:
                    row = [float(parts[c]) for c in columns]
                except (IndexError, ValueError):
                    cols = ", ".join(str(c + 1) for c in columns)
                    raise InputFileError(path, f"line {lineno}: expected {what} in column(s) "
                                         f"{cols}, got {text[:60]!r}") from None
                if not all(math.isfinite(v) for v in row):
                    raise InputFileError(path, f"line {lineno}: {what} must be finite "
                                         f"numbers, got {text[:60]!r}")
                rows.append(row)
    except UnicodeDecodeError:
        raise InputFileError(path, "not a plain-text table") from None
    if not rows:
        raise InputFileError(path, "no data rows")
    return np.array(rows, dtype=float)
