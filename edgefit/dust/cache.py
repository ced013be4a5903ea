"""Disk cache of dust cross-section tables (:mod:`edgefit.dust.cross_sections`).

Tables are stored as ``.npz`` files with a JSON header in
:func:`edgefit._paths.cache_dir`, under a name that hashes every input
(material formula, density and optical-constant source, energy grid, size
grid, method and tolerance, table format version, package version); a
table whose inputs changed is simply rebuilt.  Files are written to a
temporary name and renamed into place, so a crash or a parallel writer
never leaves a half-written table.

:func:`load_or_build` is the one function here that computes; :func:`load`
only reads (None when the table is absent or stale) and :func:`save` only
writes.
"""
from __future__ import annotations

import copy
import hashlib
import io
import json
import os
from collections import OrderedDict
from typing import TYPE_CHECKING

import numpy as np

from .. import __version__
from .._paths import cache_dir
from .._units import as_kev
from ..physics import atomic
from .cross_sections import (DEFAULT_MATERIALS, EDGE_REGIONS, TABLE_FORMAT_VERSION, DustTable,
                             _as_size_grid, compute_table, edge_energy_grid, region_for)
from .materials import get_material
from .sizes import SizeGrid

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

    from .materials import Material

__all__ = ["table_key", "table_path", "save", "load", "load_cached", "load_or_build",
           "default_table", "list_cached_tables", "build_default_tables", "table_identity"]

#: ``DustTable.meta`` key of the memoised content digest (table_identity).
_CONTENT = "_content_digest"


def _digest_array(arr) -> str:
    return hashlib.blake2b(np.ascontiguousarray(arr, dtype=float).tobytes(),
                           digest_size=10).hexdigest()


def table_key(material, energy_kev, sizes, method="auto", rtol=None) -> dict:
    """Every input a table depends on, as a JSON-able dict."""
    material = get_material(material)
    a = sizes.a if isinstance(sizes, SizeGrid) else np.asarray(sizes, dtype=float)
    e = np.asarray(energy_kev, dtype=float)
    return {"format": TABLE_FORMAT_VERSION, "edgefit": __version__,
            "material": material.key(), "energy": [float(e[0]), float(e[-1]), int(e.size),
                                                    _digest_array(e)],
            "sizes": [float(a[0]), float(a[-1]), int(a.size), _digest_array(a)],
            "method": method, "rtol": rtol}


def table_identity(table: DustTable) -> dict:
    """What identifies the numbers of ``table``, as a JSON-able dict: the
    material's digest (formula, density, optical-constant model and data,
    :meth:`~edgefit.dust.materials.Material.digest`), the table format and
    the edgefit version that built it, and a digest of its contents
    (energies, radii, both cross sections and g).  Two tables with the same
    identity hold the same numbers; a table rebuilt differently (another
    version, other optical constants, edited on disk) gets another one.
    The content digest is computed from the numbers, never stored in the
    cache file: once per table object built in memory (kept in
    ``table.meta``), and on reading a cache file once per process and file
    content (:func:`load`)."""
    content = table.meta.get(_CONTENT)
    if content is None:
        content = table.meta[_CONTENT] = _content_digest(
            table.energy_kev, table.sizes.a, table.sigma_abs, table.sigma_sca, table.g)
    return {"material": table.material.name, "material_digest": table.material.digest(),
            "format": table.meta.get("format", TABLE_FORMAT_VERSION),
            "built_by": table.meta.get("edgefit"), "content": content}


def _content_digest(*arrays) -> str:
    """Digest of a table's numbers (energies, radii, both cross sections, g)."""
    h = hashlib.blake2b(digest_size=16)
    for arr in arrays:
        a = np.ascontiguousarray(arr, dtype=float)
        h.update(str(a.shape).encode())
        h.update(a.tobytes())
    return h.hexdigest()


def table_path(material, energy_kev, sizes, method="auto", rtol=None, directory=None):
    """Cache file for a table with these inputs."""
    material = get_material(material)
    key = table_key(material, energy_kev, sizes, method, rtol)
    h = hashlib.blake2b(json.dumps(key, sort_keys=True).encode(), digest_size=12).hexdigest()
    safe = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in material.name)
    base = cache_dir() if directory is None else directory
    return os.path.join(os.fspath(base), f"dust_{safe}_{h}.npz"), key


def save(table: DustTable, path, key):
    """Write ``table`` to ``path`` atomically (temporary file, then rename)."""
    meta = {k: v for k, v in table.meta.items() if k != _CONTENT}
    header = dict(meta, key=key, material_name=table.material.name,
                  material_note=table.material.note,
                  units={"energy": "keV", "size": "um", "sigma": "cm2 per grain", "g": ""})
    tmp = f"{path}.{os.getpid()}.tmp.npz"
    np.savez_compressed(tmp, header=np.array(json.dumps(header)), energy_kev=table.energy_kev,
                        size_um=table.sizes.a, sigma_abs=table.sigma_abs,
                        sigma_sca=table.sigma_sca, g=table.g)
    os.replace(tmp, path)


#: Table files read in this process, by a digest of their bytes (at most
#: :data:`_READ_KEEP`, the latest last): reading the same file again -- every
#: sightline of a batch builds its model, in the main process and in the
#: workers -- costs a hash of the bytes instead of decompressing the arrays,
#: building the size grid's spline and digesting the numbers again.
_READ: OrderedDict[str, tuple] = OrderedDict()
_READ_KEEP = 8


def _read(path) -> tuple:
    """(header, energy, size grid, sigma_abs, sigma_sca, g) of the table
    file at ``path``, the header with the content digest of the numbers;
    the arrays are shared by every read of the same bytes (tables are never
    written into; they stay writeable because numba compiles read-only
    arrays as another type), the size grid is copied by :func:`load`, so no
    two tables share its work arrays."""
    with open(path, "rb") as fh:
        raw = fh.read()
    digest = hashlib.blake2b(raw, digest_size=20).hexdigest()
    hit = _READ.get(digest)
    if hit is not None:
        _READ.move_to_end(digest)
        return hit
    with np.load(io.BytesIO(raw), allow_pickle=False) as data:
        header = json.loads(str(data["header"]))
        arrays = [np.array(data[k]) for k in ("energy_kev", "size_um", "sigma_abs",
                                               "sigma_sca", "g")]
    energy, size_um, sigma_abs, sigma_sca, g = arrays
    header[_CONTENT] = _content_digest(energy, size_um, sigma_abs, sigma_sca, g)
    item = (header, energy, SizeGrid(size_um), sigma_abs, sigma_sca, g)
    _READ[digest] = item
    while len(_READ) > _READ_KEEP:
        _READ.popitem(last=False)
    return item


def load(path, material, key):
    """The table stored at ``path`` if its header carries ``key``, else None.

    A file this process read before with the same bytes is not parsed
    again: the new table shares its arrays."""
    header, energy, sizes, sigma_abs, sigma_sca, g = _read(path)
    if header.get("key") != key:
        return None
    return DustTable(material, energy, copy.copy(sizes), sigma_abs, sigma_sca, g,
                     {k: v for k, v in header.items() if k != "key"} | {"path": path})


def load_cached(material, energy_kev, sizes=None, *, method="auto", rtol=None):
    """The cached table for these inputs, or None if the cache lacks it (or
    holds an unreadable or stale file).  Reads only; never computes."""
    material = get_material(material)
    energy = np.asarray(as_kev(energy_kev, "energy"), dtype=float)
    sizes = _as_size_grid(sizes)
    path, key = table_path(material, energy, sizes, method, rtol)
    if not os.path.exists(path):
        return None
    try:
        return load(path, material, key)
    except (OSError, ValueError, KeyError):
        return None


def load_or_build(material: str | Material, energy_kev: ArrayLike,
                  sizes: SizeGrid | ArrayLike | None = None, *, method: str = "auto",
                  rtol: float | None = None, cache: bool = True, rebuild: bool = False,
                  workers: int | None = None, progress: bool | None = None) -> DustTable:
    """The table for these inputs from the cache, computing and storing it
    if absent (or if ``rebuild``).  ``cache=False`` computes without
    touching the disk.  See :func:`compute_table` for the arguments."""
    material = get_material(material)
    energy = np.asarray(as_kev(energy_kev, "energy"), dtype=float)
    sizes = _as_size_grid(sizes)
    if not cache:
        return compute_table(material, energy, sizes, method=method, rtol=rtol,
                             workers=workers, progress=progress)
    path, key = table_path(material, energy, sizes, method, rtol)
    if not rebuild and os.path.exists(path):
        try:
            table = load(path, material, key)
        except (OSError, ValueError, KeyError):
            table = None  # unreadable or stale: rebuild below
        if table is not None:
            return table
    table = compute_table(material, energy, sizes, method=method, rtol=rtol,
                          workers=workers, progress=progress)
    table.meta["key"] = key
    try:
        save(table, path, key)
        table.meta["path"] = path
    except OSError as exc:  # a read-only cache is not fatal
        table.meta["cache_error"] = str(exc)
    return table


def default_table(material: str | Material = "olivine", element: str = "Si", *,
                  energy_range: tuple[float, float] | None = None,
                  sizes: SizeGrid | ArrayLike | None = None, method: str = "auto",
                  rtol: float | None = None, cache: bool = True, rebuild: bool = False,
                  workers: int | None = None, progress: bool | None = None) -> DustTable:
    """The table of ``material`` across ``element``'s edge region
    (:data:`EDGE_REGIONS`, or ``energy_range`` = (lo, hi) keV), default
    size grid, from the cache or built once."""
    material = get_material(material)
    if energy_range is None:
        _, lo, hi = region_for(element)
    else:
        lo, hi = (float(as_kev(v)) for v in energy_range)
    energy = edge_energy_grid(material, lo, hi)
    return load_or_build(material, energy, sizes, method=method, rtol=rtol, cache=cache,
                         rebuild=rebuild, workers=workers, progress=progress)


def list_cached_tables(directory: str | os.PathLike[str] | None = None) -> list[dict]:
    """Headers of the tables in the cache folder (with their paths)."""
    base = cache_dir() if directory is None else directory
    out = []
    for name in sorted(os.listdir(base)):
        if not (name.startswith("dust_") and name.endswith(".npz")):
            continue
        path = os.path.join(base, name)
        try:
            with np.load(path, allow_pickle=False) as data:
                header = json.loads(str(data["header"]))
                header["n_energy"] = int(data["energy_kev"].size)
                header["energy_range"] = [float(data["energy_kev"][0]),
                                          float(data["energy_kev"][-1])]
                header["n_size"] = int(data["size_um"].size)
        except (OSError, ValueError, KeyError):
            continue
        header["path"] = path
        header["bytes"] = os.path.getsize(path)
        out.append(header)
    return out


def build_default_tables(materials=DEFAULT_MATERIALS, elements=tuple(EDGE_REGIONS), *,
                         rebuild=False, method="auto", rtol=None, workers=None,
                         progress=None) -> list[DustTable]:
    """Build (or load) the default table of every material across the edge
    region of every element it contains (:data:`EDGE_REGIONS`), into the
    cache.  Returns the tables."""
    out = []
    for name in materials:
        material = get_material(name)
        for element in elements:
            if atomic.element_symbol(element) not in material.composition:
                continue
            out.append(default_table(material, element, method=method, rtol=rtol,
                                     rebuild=rebuild, workers=workers, progress=progress))
            out[-1].meta["element"] = atomic.element_symbol(element)
    return out
