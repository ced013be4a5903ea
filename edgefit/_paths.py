"""Where edgefit finds its physics data and keeps its cache.

Physics data files live in the repository's ``cross_sections/`` folder
(each with its source and version in its header).  They are found, in
order, in

1. the folder named by the environment variable ``EDGEFIT_DATA_DIR``;
2. ``cross_sections/`` next to the package (a source checkout or an
   editable install);
3. ``edgefit/_cross_sections/`` inside an installed package.

Computed tables (dust cross sections per grain size) are cached in
``EDGEFIT_CACHE_DIR`` if set, else ``$XDG_CACHE_HOME/edgefit``, else
``~/.cache/edgefit``.
"""
from __future__ import annotations

import os
from pathlib import Path

from .errors import PhysicsDataError

__all__ = ["data_dir", "data_file", "cache_dir"]

_PKG = Path(__file__).resolve().parent


def data_dir() -> Path:
    """The folder holding edgefit's physics data files."""
    env = os.environ.get("EDGEFIT_DATA_DIR")
    candidates = [Path(env)] if env else []
    candidates += [_PKG.parent / "cross_sections", _PKG / "_cross_sections"]
    for path in candidates:
        if path.is_dir():
            return path
    raise PhysicsDataError(
        "cannot find edgefit's cross_sections/ data folder; set EDGEFIT_DATA_DIR "
        f"to it (looked in {', '.join(str(c) for c in candidates)})")


def data_file(name: str) -> Path:
    """Path of one data file in :func:`data_dir`, with a clear error if absent."""
    path = data_dir() / name
    if not path.is_file():
        raise PhysicsDataError(f"{path}: data file missing; regenerate it with the "
                               "scripts in cross_sections/ (see DEVELOPERS.md)")
    return path


def cache_dir(create: bool = True) -> Path:
    """The user cache folder for computed tables."""
    env = os.environ.get("EDGEFIT_CACHE_DIR")
    if env:
        path = Path(env)
    else:
        base = os.environ.get("XDG_CACHE_HOME") or os.path.join(Path.home(), ".cache")
        path = Path(base) / "edgefit"
    if create:
        path.mkdir(parents=True, exist_ok=True)
    return path
