"""Batch manifests (TOML): many sightlines fitted the same way.

Format (documented in the README, section "Many sightlines"):

.. code-block:: toml

    [defaults.model]            # any section of a sightline configuration
    ...
    [defaults.errors]
    profile = ["gas_si_col"]
    [defaults.spectrum]         # applied to every spectrum of every sightline
    range = [1.6, 2.2]
    group_min_counts = 5

    [[sightline]]
    name = "SIM-A"
    pha = ["a_m1.pha", "a_p1.pha"]   # responses/backgrounds from the headers
    nh_hi = 3.1e21                    # hydrogen from other tracers, cm^-2
    nh_hi_err = 2e20
    [sightline.errors]               # overrides of any default section
    profile = "all"

A sightline's section is merged key by key over the defaults' one;
``[sightline.model]`` is merged recursively (e.g. one component's starting
value), except that a sightline model giving ``absorbers``, ``emission``
or ``term`` replaces the default model whole.  Instead of ``pha`` a
sightline may list full ``[[sightline.spectrum]]`` tables (the keys of a
configuration's ``[[spectrum]]``).  File names are relative to the manifest.

:func:`load_manifest` checks the whole manifest before anything is fitted;
every problem is one :class:`~edgefit.errors.ConfigError` naming the
manifest and the key (``sample.toml: sightline[3].pha[1]: file not found:
...``).
"""
from __future__ import annotations

import copy
import hashlib
import json
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import ArgumentError, ConfigError
from .config import SECTIONS, SightlineConfig, config_from_dict, read_toml

__all__ = ["Manifest", "SightlineEntry", "load_manifest", "HYDROGEN_KEYS", "TRACERS",
           "folder_name"]

#: Hydrogen columns from other tracers (cm^-2): value, 1-sigma error and
#: upper-limit flag of atomic H, molecular H2 and a total N_H.
TRACERS = ("nh_hi", "n_h2", "nh_total")
HYDROGEN_KEYS = tuple(k for t in TRACERS for k in (t, f"{t}_err", f"{t}_upper"))

#: Keys of ``[defaults.spectrum]`` (applied to every spectrum).
SPECTRUM_DEFAULT_KEYS = ("range", "range_unit", "group_min_counts", "grouping",
                         "channels_per_group")

_TOP_KEYS = ("defaults", "sightline")
_DEFAULT_KEYS = tuple(SECTIONS) + ("model", "spectrum")
_SIGHTLINE_KEYS = ("name", "pha", "spectrum") + tuple(SECTIONS) + ("model",) + HYDROGEN_KEYS
_MODEL_STRUCTURE = ("absorbers", "emission", "term")


def folder_name(name):
    """A file-system-safe folder name for a sightline name: characters
    other than letters, digits and ``._+-`` become ``_``."""
    out = re.sub(r"[^A-Za-z0-9._+-]+", "_", name).strip("._")
    return out or "sightline"


@dataclass
class SightlineEntry:
    """One ``[[sightline]]`` of a manifest, merged with the defaults.

    ``table`` is the merged sightline configuration (the layout of a
    configuration file), ``config`` the checked
    :class:`~edgefit.analysis.config.SightlineConfig` built from it,
    ``hydrogen`` the tracer columns (None when not given), ``folder`` the
    name of its output folder."""

    index: int
    name: str
    folder: str
    table: dict
    config: SightlineConfig
    hydrogen: dict = field(default_factory=dict)

    @property
    def key(self):
        return f"sightline[{self.index}]"

    def input_files(self):
        """Files the sightline reads: the spectra's listed files and the
        response/background files their headers name (when readable)."""
        files = []
        for p in self.config.spectrum_files():
            if p not in files:
                files.append(p)
        for s in self.config.spectra:
            if s.rmf is None or s.background is None:
                for p in _header_companions(self.config.base / s.pha):
                    if p not in files:
                        files.append(p)
        return files

    def dust_tables(self):
        """[component name, identities] of every component of the model
        that uses dust cross-section tables (its ``table_identity()``:
        material digest, table format and version, content digest)."""
        out = []
        for comp in self.config.model.components():
            ident = getattr(comp, "table_identity", None)
            if callable(ident):
                out.append([comp.name, ident()])
        return out

    def input_hash(self, extra=None):
        """SHA-256 (hex) of the merged manifest entry, ``extra`` (run
        options), the edgefit version, the identity of the dust
        cross-section tables the model uses (:meth:`dust_tables`: a table
        rebuilt with other numbers, e.g. by another version or from other
        optical constants, changes it) and the bytes of every input file: a
        rerun skips the sightline while this is unchanged.  The hydrogen
        columns are left out: they do not enter the fit, and the sample
        table takes them from the manifest at every write."""
        from .. import __version__

        h = hashlib.sha256()
        h.update(json.dumps({"table": self.table, "name": self.name, "extra": extra or {},
                             "edgefit": __version__, "dust_tables": self.dust_tables()},
                            sort_keys=True, default=str).encode())
        for p in self.input_files():
            h.update(str(p.name).encode())
            try:
                with open(p, "rb") as fh:
                    for chunk in iter(lambda: fh.read(1 << 20), b""):
                        h.update(chunk)
            except OSError as exc:
                h.update(f"unreadable: {exc}".encode())
        return h.hexdigest()


def _header_companions(pha):
    """Existing files named by RESPFILE/ANCRFILE/BACKFILE in any header of
    ``pha`` (relative to its folder); nothing when it cannot be read."""
    from astropy.io import fits

    out = []
    try:
        with fits.open(pha, memmap=False) as hdul:
            for hdu in hdul:
                for key in ("RESPFILE", "ANCRFILE", "BACKFILE"):
                    val = hdu.header.get(key)
                    if not isinstance(val, str) or val.strip().lower() in ("", "none"):
                        continue
                    name = re.sub(r"[\[{][^\]}]*[\]}]\s*$", "", val).strip()
                    p = Path(name) if Path(name).is_absolute() else Path(pha).parent / name
                    if p.is_file() and p not in out:
                        out.append(p)
    except Exception:  # noqa: BLE001 -- a broken file is reported by the fit itself
        return out
    return out


@dataclass
class Manifest:
    """A checked batch manifest: its path and its sightlines in order."""

    path: Path
    sightlines: list

    @property
    def names(self):
        return [s.name for s in self.sightlines]

    def __len__(self):
        return len(self.sightlines)

    def __iter__(self):
        return iter(self.sightlines)

    def __getitem__(self, name):
        for s in self.sightlines:
            if s.name == name:
                return s
        raise KeyError(name)

    def select(self, names=None):
        """The sightlines named in ``names`` (all when None), in manifest
        order; an unknown name is an ArgumentError."""
        if not names:
            return list(self.sightlines)
        unknown = [n for n in names if n not in self.names]
        if unknown:
            raise ArgumentError(f"{self.path}: no sightline named {unknown[0]!r} "
                                f"(names: {', '.join(self.names)})")
        wanted = set(names)
        return [s for s in self.sightlines if s.name in wanted]


def _merge(base, over):
    """Recursive merge of TOML tables: ``over`` wins; lists are replaced."""
    out = copy.deepcopy(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def _table(value, path, key):
    if not isinstance(value, dict):
        raise ConfigError(path, f"{key}: must be a table")
    return value


def _unknown(table, allowed, path, key):
    bad = sorted(set(table) - set(allowed))
    if bad:
        where = f"{key}.{bad[0]}" if key else bad[0]
        raise ConfigError(path, f"{where}: unknown key (allowed: "
                                f"{', '.join(sorted(allowed))})")


def _hydrogen(sl, path, key):
    out: dict[str, float | None] = {}
    for t in TRACERS:
        for k in (t, f"{t}_err"):
            v = sl.get(k)
            if v is None:
                out[k] = None
                continue
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) \
                    or v < 0:
                raise ConfigError(path, f"{key}.{k}: a column density >= 0 in cm^-2 is "
                                        f"needed (got {v!r})")
            out[k] = float(v)
        up = sl.get(f"{t}_upper", False)
        if not isinstance(up, bool):
            raise ConfigError(path, f"{key}.{t}_upper: true or false")
        if (out[f"{t}_err"] is not None or up) and out[t] is None:
            what = f"{t}_err" if out[f"{t}_err"] is not None else f"{t}_upper"
            raise ConfigError(path, f"{key}.{what}: given without {t}")
        out[f"{t}_upper"] = up
    return out


def load_manifest(path: str | os.PathLike) -> Manifest:
    """Read and check a batch manifest; returns a :class:`Manifest`.

    The whole manifest is checked before it is returned: TOML syntax,
    unknown keys, sightline names (present, unique, distinct folders),
    spectra (at least one per sightline), every listed file's existence,
    every sightline's merged configuration (model, sections, spectra) and
    the hydrogen columns.  The first problem raises a ConfigError naming
    the manifest and the key.
    """
    path = Path(path)
    data = read_toml(path, "manifest")
    base = path.parent
    _unknown(data, _TOP_KEYS, path, "")
    defaults = _table(data.get("defaults", {}), path, "defaults")
    _unknown(defaults, _DEFAULT_KEYS, path, "defaults")
    for k, v in defaults.items():
        _table(v, path, f"defaults.{k}")
    spec_defaults = defaults.get("spectrum", {})
    _unknown(spec_defaults, SPECTRUM_DEFAULT_KEYS, path, "defaults.spectrum")
    sightlines = data.get("sightline")
    if not isinstance(sightlines, list) or not sightlines:
        raise ConfigError(path, "sightline: give at least one [[sightline]] table")
    entries: list = []
    seen: dict = {}
    folders: dict = {}
    for i, sl in enumerate(sightlines):
        key = f"sightline[{i}]"
        _table(sl, path, key)
        _unknown(sl, _SIGHTLINE_KEYS, path, key)
        name = sl.get("name")
        if not isinstance(name, str) or not name.strip():
            raise ConfigError(path, f"{key}.name: every sightline needs a name (a string)")
        if name in seen:
            raise ConfigError(path, f"{key}.name: duplicate name {name!r} (also "
                                    f"sightline[{seen[name]}])")
        seen[name] = i
        folder = folder_name(name)
        if folder.lower() in folders:
            raise ConfigError(path, f"{key}.name: {name!r} and {folders[folder.lower()]!r} "
                                    f"would share the output folder {folder!r}")
        folders[folder.lower()] = name
        pha = sl.get("pha")
        spectra = sl.get("spectrum")
        if pha is not None and spectra is not None:
            raise ConfigError(path, f"{key}.spectrum: give either pha = [...] or "
                                    "[[sightline.spectrum]] tables, not both")
        if pha is not None:
            if isinstance(pha, str):
                pha = [pha]
            if not isinstance(pha, list) or not all(isinstance(p, str) and p for p in pha):
                raise ConfigError(path, f"{key}.pha: a list of PHA file names")
            spectra = [{"pha": p} for p in pha]
            spec_keys = [f"{key}.pha[{j}]" for j in range(len(pha))]
        else:
            if spectra is not None and (not isinstance(spectra, list)
                                        or not all(isinstance(s, dict) for s in spectra)):
                raise ConfigError(path, f"{key}.spectrum: use [[sightline.spectrum]] tables")
            spectra = spectra or []
            spec_keys = [f"{key}.spectrum[{j}].pha" for j in range(len(spectra))]
        if not spectra:
            raise ConfigError(path, f"{key}.pha: sightline {name!r} has no spectra (give "
                                    "pha = [\"a.pha\", ...] or [[sightline.spectrum]] tables)")
        spectra = [_merge(spec_defaults, s) for s in spectra]
        # files first: a missing file is the likeliest mistake
        for j, s in enumerate(spectra):
            for k in ("pha", "rmf", "arf", "background"):
                f = s.get(k)
                if not isinstance(f, str):
                    continue
                if not (base / f).is_file():
                    fkey = spec_keys[j] if k == "pha" else f"{key}.spectrum[{j}].{k}"
                    raise ConfigError(path, f"{fkey}: file not found: {base / f}")
        table = {}
        for sec in tuple(SECTIONS) + ("model",):
            d = defaults.get(sec, {})
            o = sl.get(sec)
            if o is None:
                if d:
                    table[sec] = copy.deepcopy(d)
                continue
            _table(o, path, f"{key}.{sec}")
            if sec == "model" and set(o) & set(_MODEL_STRUCTURE):
                table[sec] = copy.deepcopy(o)
            elif sec == "model":
                table[sec] = _merge(d, o)
            else:
                table[sec] = dict(copy.deepcopy(d), **copy.deepcopy(o))
        if "model" not in table:
            raise ConfigError(path, f"{key}.model: no model (give [defaults.model] or "
                                    "[sightline.model])")
        table["spectrum"] = spectra
        cfg = config_from_dict(table, path, base=base, key_prefix=f"{key}.", name=name,
                               output=base / folder)
        entries.append(SightlineEntry(index=i, name=name, folder=folder, table=table,
                                      config=cfg, hydrogen=_hydrogen(sl, path, key)))
    return Manifest(path=path, sightlines=entries)

