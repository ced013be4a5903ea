"""Simulated observations of one sightline (``edgefit simulate``).

A *simulation configuration* is a sightline configuration (the format of
``edgefit fit``, README "Configuration files") without ``[[spectrum]]``
tables and with a ``[simulate]`` table saying how to observe it:

.. code-block:: toml

    [sightline]
    name = "Tallow Reach 4 (simulated)"

    [simulate]
    exposure = 1.0e5              # s
    arms = ["high", "medium"]     # the built-in grating-like instrument ...
    band = [1.7, 2.05]            # keV
    background_rate = 1e-4        # counts s^-1 per channel, background region
    background_area = 5.0         # its area relative to the source region
    # [[simulate.response]]       # ... or your own responses instead of arms
    # rmf = "mine.rmf"
    # arf = "mine.arf"

    [model]                       # parameter values are the simulated truth
    ...

The ``value`` of each parameter under ``[model.components.*.params]`` is
the truth; parameters not given take the component's default.  Bounds,
``fixed`` and ties are kept for fitting.  :func:`write_simulation` writes,
per response, ``<stem>_<arm>.pha`` with its ``.rmf``, ``.arf`` and
``_bkg.pha`` (OGIP, marked simulated), ``truth.json`` and
``<stem>.toml``: the same configuration with ``[[spectrum]]`` tables
pointing at the new files, ready for ``edgefit fit``.

Pure computation (:func:`simulate_spectra`) is separate from writing.
"""
from __future__ import annotations

import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ArgumentError, ConfigError, EdgefitError

__all__ = ["SimulationSetup", "load_simulation", "simulation_from_dict", "simulate_spectra",
           "write_simulation", "toml_text", "slug"]

_SIM_KEYS = {"exposure", "seed", "arms", "band", "energy_step", "response",
             "background_rate", "background_area", "fit_range", "stem", "group_min_counts"}
_PASS_SECTIONS = ("sightline", "model", "fit", "errors", "mcmc", "derived", "goodness", "plots")


def slug(name):
    """A file-name stem from a sightline name: lower case, letters, digits
    and underscores ('Tallow Reach 4 (simulated)' -> 'tallow_reach_4')."""
    s = re.sub(r"\(simulated\)", "", str(name), flags=re.I)
    s = re.sub(r"[^0-9a-zA-Z]+", "_", s).strip("_").lower()
    return s or "sightline"


@dataclass
class SimulationSetup:
    """Everything needed to simulate one sightline.

    ``responses`` is a list of (tag, label, Response); ``truth`` maps full
    parameter names to the simulated values (the parameters' own units);
    ``sections`` holds the configuration's tables to copy into the fit
    configuration written beside the spectra.
    """

    name: str
    model: object
    truth: dict
    responses: list
    exposure: float
    background_rate: float = 0.0
    background_area: float = 5.0
    seed: int = 1
    fit_range: tuple | None = None
    stem: str = "sightline"
    group_min_counts: int | None = None
    sections: dict = field(default_factory=dict)
    path: Path | None = None
    param_settings: dict = field(default_factory=dict)


def _number(value, path, key, positive=True):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(path, f"{key}: must be a finite number")
    if positive and value <= 0:
        raise ConfigError(path, f"{key}: must be positive")
    return float(value)


def _pair(value, path, key):
    if (not isinstance(value, list) or len(value) != 2
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
            or not 0 < value[0] < value[1]):
        raise ConfigError(path, f"{key}: use [lo, hi] in keV with 0 < lo < hi")
    return (float(value[0]), float(value[1]))


def simulation_from_dict(data, path=None, seed=None):
    """A :class:`SimulationSetup` from a parsed simulation configuration
    (see the module docstring); errors name ``path`` and the key."""
    from .config import apply_parameter_settings, build_model
    from ..data import read_response
    from ..data.instrument import DEFAULT_BAND_KEV, ENERGY_STEP_KEV, arm_response

    base = Path(path).parent if path is not None else Path(".")
    bad = set(data) - set(_PASS_SECTIONS) - {"simulate"}
    if bad:
        extra = " ([[spectrum]] tables are what simulate writes)" if "spectrum" in bad else ""
        raise ConfigError(path, f"{sorted(bad)[0]}: not allowed in a simulation "
                                f"configuration{extra}")
    sim = data.get("simulate")
    if not isinstance(sim, dict):
        raise ConfigError(path, "simulate: missing; give a [simulate] table with at least "
                                "'exposure' (s)")
    bad = set(sim) - _SIM_KEYS
    if bad:
        raise ConfigError(path, f"simulate.{sorted(bad)[0]}: unknown key (allowed: "
                                f"{sorted(_SIM_KEYS)})")
    if "exposure" not in sim:
        raise ConfigError(path, "simulate.exposure: missing (seconds)")
    exposure = _number(sim["exposure"], path, "simulate.exposure")
    band = _pair(sim.get("band", list(DEFAULT_BAND_KEV)), path, "simulate.band")
    step = _number(sim.get("energy_step", ENERGY_STEP_KEV), path, "simulate.energy_step")
    responses = []
    if "response" in sim:
        if "arms" in sim:
            raise ConfigError(path, "simulate.arms: give either arms (built-in instrument) "
                                    "or [[simulate.response]] tables, not both")
        rl = sim["response"]
        if not isinstance(rl, list) or not rl or not all(isinstance(r, dict) for r in rl):
            raise ConfigError(path, "simulate.response: use [[simulate.response]] tables")
        for i, r in enumerate(rl):
            key = f"simulate.response[{i}]"
            bad = set(r) - {"rmf", "arf", "label"}
            if bad or not isinstance(r.get("rmf"), str):
                raise ConfigError(path, f"{key}: needs 'rmf' (and optionally 'arf', 'label')")
            resp = read_response(str(base / r["rmf"]),
                                 str(base / r["arf"]) if r.get("arf") else None)
            tag = slug(r.get("label") or Path(r["rmf"]).stem)
            responses.append((tag, str(r.get("label") or Path(r["rmf"]).name), resp))
    else:
        arms = sim.get("arms", ["high", "medium"])
        if not isinstance(arms, list) or not arms or not all(isinstance(a, str) for a in arms):
            raise ConfigError(path, "simulate.arms: a list of arm names, e.g. "
                                    "[\"high\", \"medium\"]")
        for a in arms:
            try:
                resp = arm_response(a, band, step)
            except EdgefitError as exc:
                raise ConfigError(path, f"simulate.arms: {exc}") from None
            responses.append((a, resp.meta["label"], resp))
    bkg_rate = _number(sim.get("background_rate", 0.0), path, "simulate.background_rate",
                       positive=False)
    if bkg_rate < 0:
        raise ConfigError(path, "simulate.background_rate: must not be negative")
    bkg_area = _number(sim.get("background_area", 5.0), path, "simulate.background_area")
    fit_range = _pair(sim["fit_range"], path, "simulate.fit_range") if "fit_range" in sim \
        else (band[0] * 1.01, band[1] * 0.99)
    seed_val = sim.get("seed", 1) if seed is None else seed
    if isinstance(seed_val, bool) or not isinstance(seed_val, int) or seed_val < 0:
        raise ConfigError(path, "simulate.seed: a non-negative integer")
    gmc = sim.get("group_min_counts")
    if gmc is not None and (isinstance(gmc, bool) or not isinstance(gmc, int) or gmc < 1):
        raise ConfigError(path, "simulate.group_min_counts: a positive integer")
    sl = data.get("sightline", {})
    if not isinstance(sl, dict):
        raise ConfigError(path, "sightline: must be a table")
    name = str(sl.get("name", Path(path).stem if path else "sightline"))
    stem = sim.get("stem") or slug(name)
    if not isinstance(stem, str) or not re.fullmatch(r"[A-Za-z0-9_.-]+", stem):
        raise ConfigError(path, "simulate.stem: letters, digits, '_', '.', '-' only")
    model, _components, settings = build_model(data.get("model"), path)
    params = apply_parameter_settings(model.make_params(), settings, model, path)
    truth = {k: float(p.value) for k, p in params.items()}
    sections = {k: data[k] for k in _PASS_SECTIONS if k in data}
    return SimulationSetup(name=name, model=model, truth=truth, responses=responses,
                           exposure=exposure, background_rate=bkg_rate,
                           background_area=bkg_area, seed=int(seed_val),
                           fit_range=fit_range, stem=stem, group_min_counts=gmc,
                           sections=sections, path=Path(path) if path else None,
                           param_settings=settings)


def load_simulation(path, seed=None):
    """Read a simulation configuration file (TOML); ``seed`` overrides
    ``simulate.seed``."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(path, "configuration file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, f"not valid TOML: {exc}") from None
    return simulation_from_dict(data, path, seed)


def simulate_spectra(setup, rng=None, values=None, exposure=None):
    """One Poisson realisation through every response of ``setup``.

    ``values`` (full names) override the truth; ``exposure`` (s) the
    setup's.  Returns a list of :class:`~edgefit.data.Spectrum`, each with
    its response and (when the background rate is positive) a background
    spectrum of the same exposure from a region ``background_area`` times
    larger.  ``rng``: a seed or a numpy Generator (default the setup's seed).
    """
    from ..data import simulate_spectrum

    gen = rng if isinstance(rng, np.random.Generator) else \
        np.random.default_rng(setup.seed if rng is None else rng)
    vals = dict(setup.truth)
    vals.update(values or {})
    t = float(setup.exposure if exposure is None else exposure)
    out = []
    for tag, label, resp in setup.responses:
        flux = setup.model.evaluate(resp.grid, vals)
        bkg = (np.full(resp.n_channels, setup.background_rate * setup.background_area)
               if setup.background_rate > 0 else None)
        meta = {"object": setup.name, "label": label, "arm": resp.meta.get("arm", tag)}
        if "order" in resp.meta:
            meta["order"] = resp.meta["order"]
        out.append(simulate_spectrum(flux, resp, t, gen, background_rate=bkg, backscal=1.0,
                                     background_backscal=setup.background_area, meta=meta))
    return out


# ---------------------------------------------------------------------------
def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ("nan" if math.isnan(v) else
                                                  ("inf" if v > 0 else "-inf"))
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise ArgumentError(f"cannot write {type(v).__name__} to TOML")


def _key(k):
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def _emit(lines, prefix, table):
    scalars = {k: v for k, v in table.items()
               if not isinstance(v, dict) and not (isinstance(v, list) and v
                                                    and all(isinstance(x, dict) for x in v))}
    if scalars or not prefix:
        if prefix:
            lines.append(f"\n[{prefix}]")
        for k, v in scalars.items():
            lines.append(f"{_key(k)} = {_toml_value(v)}")
    for k, v in table.items():
        if k in scalars:
            continue
        sub = f"{prefix}.{_key(k)}" if prefix else _key(k)
        if isinstance(v, dict):
            _emit(lines, sub, v)
        else:
            for item in v:
                lines.append(f"\n[[{sub}]]")
                for kk, vv in item.items():
                    lines.append(f"{_key(kk)} = {_toml_value(vv)}")


def toml_text(data, header=""):
    """``data`` (nested dicts, lists, strings, numbers, booleans) as TOML
    text; tables become ``[section]`` headers, lists of tables ``[[...]]``.
    Reading the text back with :mod:`tomllib` gives ``data`` again."""
    lines = [header.rstrip("\n")] if header else []
    _emit(lines, "", data)
    return "\n".join(lines).lstrip("\n") + "\n"


def write_simulation(setup, folder, *, overwrite=True, spectra=None):
    """Simulate (unless ``spectra`` are given) and write everything into
    ``folder``; returns the path of the fit configuration written.

    Files: per response ``<stem>_<tag>.pha``, ``.rmf``, ``.arf`` and
    ``_bkg.pha`` (when there is a background); ``truth.json`` (the
    simulated values, seed, exposure); ``<stem>.toml``, the configuration
    with ``[[spectrum]]`` tables for ``edgefit fit``.
    """
    from ..data import write_pha, write_response

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    spectra = simulate_spectra(setup) if spectra is None else spectra
    entries = []
    for (tag, label, resp), spec in zip(setup.responses, spectra):
        stem = f"{setup.stem}_{tag}"
        rmf, arf = folder / f"{stem}.rmf", folder / f"{stem}.arf"
        write_response(resp, rmf, arf, overwrite=overwrite, simulated=True)
        backfile = None
        if spec.background is not None:
            bkg = folder / f"{stem}_bkg.pha"
            write_pha(bkg, spec.background, overwrite=overwrite, background=True,
                      object_name=setup.name, respfile="none", ancrfile="none",
                      backfile="none")
            backfile = bkg.name
        write_pha(folder / f"{stem}.pha", spec, overwrite=overwrite, respfile=rmf.name,
                  ancrfile=arf.name, backfile=backfile or "none", object_name=setup.name)
        entry = {"label": label, "pha": f"{stem}.pha", "range": list(setup.fit_range)}
        if setup.group_min_counts:
            entry["group_min_counts"] = int(setup.group_min_counts)
        entries.append(entry)
    truth = {"note": "SIMULATED sightline; every value is invented", "name": setup.name,
             "seed": setup.seed, "exposure_s": setup.exposure,
             "background_rate": setup.background_rate,
             "background_area": setup.background_area,
             "spectra": [e["pha"] for e in entries], "truth": setup.truth}
    (folder / "truth.json").write_text(json.dumps(truth, indent=2) + "\n")
    sections = {k: v for k, v in setup.sections.items()}
    sl = dict(sections.get("sightline", {}))
    sl.setdefault("name", setup.name)
    sl.pop("output", None)
    sl["output"] = f"{setup.stem}_results"
    data = {"sightline": sl, "spectrum": entries}
    data.update({k: v for k, v in sections.items() if k != "sightline"})
    cfg = folder / f"{setup.stem}.toml"
    cfg.write_text(toml_text(data, header=(
        f"# SIMULATED sightline {setup.name!r}: invented values, written by edgefit "
        f"simulate\n# (seed {setup.seed}; truth in truth.json).  Fit with:  edgefit fit "
        f"{cfg.name}\n")))
    return cfg
