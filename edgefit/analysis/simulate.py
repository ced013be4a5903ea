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
    # counts_per_channel = 200    # instead of the continuum's norm (below)
    # [[simulate.response]]       # ... or your own responses instead of arms
    # rmf = "mine.rmf"
    # arf = "mine.arf"

    [model]                       # parameter values are the simulated truth
    ...

The ``value`` of each parameter under ``[model.components.*.params]`` is
the truth; parameters not given take the component's default.  Bounds,
``fixed`` and ties are kept for fitting.

How bright the source is comes from exactly one of two places: the
``norm`` values of the emission components (the source flux), or
``simulate.counts_per_channel``, the expected source counts per channel
near the edge in the first response over the exposure.  "Near the edge"
means the channels whose centres lie within 20 eV
(:data:`edgefit.physics.atomic.EDGE_OFFSET_KEV`) of the edge of the
model's gas or dust edge component; the emission norms are then scaled
(all by one factor, so the spectral shape is kept) until the mean
expected source count over those channels is the number given
(:func:`set_source_level`, which also takes a flux).  Giving both, or
neither, is an error.  :func:`write_simulation` writes,
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
from typing import Any

import numpy as np

from ..errors import ArgumentError, ConfigError, EdgefitError

__all__ = ["SimulationSetup", "load_simulation", "simulation_from_dict", "simulate_spectra",
           "write_simulation", "toml_text", "slug", "set_source_level", "edge_counts",
           "edge_of_model"]

_SIM_KEYS = {"exposure", "seed", "arms", "band", "energy_step", "response",
             "background_rate", "background_area", "fit_range", "stem", "group_min_counts",
             "counts_per_channel"}
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
    counts = sim.get("counts_per_channel")
    if counts is not None:
        counts = _number(counts, path, "simulate.counts_per_channel")
    try:
        given = _norms_given(data.get("model"), _norm_names(model))
    except EdgefitError as exc:
        raise ConfigError(path, f"model: {exc}") from None
    if counts is not None and given:
        raise ConfigError(path, f"simulate.counts_per_channel: the source level is also "
                                f"given as {given[0]}; give the emission norm (flux) or "
                                "counts_per_channel, not both")
    if counts is None and not given:
        raise ConfigError(path, "simulate: how bright is the source? give the emission "
                                "components' norm value (flux) or simulate.counts_per_channel")
    sections = {k: data[k] for k in _PASS_SECTIONS if k in data}
    setup = SimulationSetup(name=name, model=model, truth=truth, responses=responses,
                            exposure=exposure, background_rate=bkg_rate,
                            background_area=bkg_area, seed=int(seed_val),
                            fit_range=fit_range, stem=stem, group_min_counts=gmc,
                            sections=sections, path=Path(path) if path else None,
                            param_settings=settings)
    if counts is not None:
        try:
            setup = set_source_level(setup, counts_per_channel=counts)
        except EdgefitError as exc:
            raise ConfigError(path, f"simulate.counts_per_channel: {exc}") from None
        # the fit configuration written beside the spectra starts at the
        # scaled norms (the source level it was simulated with)
        setup.sections = _with_norms(setup.sections, setup.truth, model)
    return setup


def _norm_names(model):
    """Full names of the emission (additive) components' ``norm``
    parameters; a component without one is an EdgefitError."""
    from ..models.base import ADDITIVE

    out = []
    for comp in model.components():
        if comp.kind != ADDITIVE:
            continue
        if not any(p.name == "norm" for p in comp.params):
            raise EdgefitError(f"emission component {comp.name!r} has no 'norm' to set the "
                               "source level with")
        out.append(f"{comp.name}_norm")
    if not out:
        raise EdgefitError("the model has no emission component")
    return out


def _norms_given(model_table, names):
    """Which of ``names`` (``<component>_norm``) the [model] table gives a
    value for."""
    comps = (model_table or {}).get("components") or {} if isinstance(model_table, dict) \
        else {}
    out = []
    for full in names:
        comp = comps.get(full[:-len("_norm")])
        setting = ((comp or {}).get("params") or {}).get("norm") \
            if isinstance(comp, dict) else None
        if setting is not None and (not isinstance(setting, dict) or "value" in setting):
            out.append(f"model.components.{full[:-len('_norm')]}.params.norm")
    return out


def _with_norms(sections, truth, model):
    """``sections`` with each emission norm's value set to ``truth``'s."""
    import copy

    out = copy.deepcopy(sections)
    comps = out.setdefault("model", {}).setdefault("components", {})
    for full in _norm_names(model):
        comp = comps.setdefault(full[:-len("_norm")], {})
        params = comp.setdefault("params", {})
        setting = params.get("norm")
        setting = dict(setting) if isinstance(setting, dict) else {}
        setting["value"] = float(truth[full])
        params["norm"] = setting
    return out


def edge_of_model(model: Any) -> tuple[str, float]:
    """(element, edge energy in keV) of the model's first gas or dust edge
    component (the edge "near the edge" refers to)."""
    for comp in model.components():
        if getattr(comp, "phase", None) not in ("gas", "dust"):
            continue
        if hasattr(comp, "edge_kev"):
            return comp.element, float(comp.edge_kev)
        if hasattr(comp, "edge_energy"):
            return comp.element, float(comp.edge_energy())
    raise EdgefitError("the model has no gas or dust edge component to count near")


def edge_counts(setup: SimulationSetup, values: dict | None = None,
                exposure: float | None = None) -> float:
    """Mean expected *source* counts per channel near the edge (channel
    centres within :data:`~edgefit.physics.atomic.EDGE_OFFSET_KEV` of it) in
    the setup's first response over ``exposure`` (default the setup's),
    with the truth (or ``values``, full names, over it).  Pure
    computation."""
    from ..physics.atomic import EDGE_OFFSET_KEV

    _tag, label, resp = setup.responses[0]
    element, e0 = edge_of_model(setup.model)
    near = np.abs(resp.channel_mid - e0) <= EDGE_OFFSET_KEV
    if not near.any():
        raise EdgefitError(f"no channel of the first response ({label}) lies within "
                           f"{EDGE_OFFSET_KEV * 1e3:g} eV of the {element} edge at "
                           f"{e0:.4f} keV")
    vals = dict(setup.truth)
    vals.update(values or {})
    t = float(setup.exposure if exposure is None else exposure)
    model: Any = setup.model
    counts = resp.fold(model.evaluate(resp.grid, vals), t)
    return float(np.mean(counts[near]))


def set_source_level(setup: SimulationSetup, *, flux: Any = None,
                     counts_per_channel: Any = None) -> SimulationSetup:
    """A copy of ``setup`` whose emission norms are scaled (all by one
    factor) to one of:

    ``flux``
        the unabsorbed photon flux density of the emission at the edge
        energy (a Quantity convertible to ph cm-2 s-1 keV-1, or a number in
        those units);
    ``counts_per_channel``
        the mean expected source counts per channel near the edge in the
        first response over the setup's exposure (:func:`edge_counts`; a
        Quantity in count or count / chan, or a number).

    Exactly one must be given (else one ArgumentError line).  The model is
    linear in the emission norms, so the scaling is exact."""
    from astropy import units as u

    if (flux is None) == (counts_per_channel is None):
        raise ArgumentError("source level: give flux (photon flux density at the edge) or "
                            "counts_per_channel (counts per channel near the edge)"
                            + (", not both" if flux is not None else ""))
    names = _norm_names(setup.model)
    if flux is not None:
        unit = u.Unit("ph cm-2 s-1 keV-1")
        try:
            target = (flux.to_value(unit) if isinstance(flux, u.Quantity) else float(flux))
        except (u.UnitConversionError, TypeError, ValueError):
            raise ArgumentError(f"flux: {flux!r} is not a photon flux density "
                                f"(ph cm-2 s-1 keV-1)") from None
        what = "flux"
        _el, e0 = edge_of_model(setup.model)
        from ..grid import EnergyGrid

        grid = EnergyGrid(np.array([e0 * (1 - 1e-4)]), np.array([e0 * (1 + 1e-4)]))
        emission = _emission_only(setup.model)
        current = float(emission.evaluate(grid, setup.truth)[0] / grid.width[0])
    else:
        try:
            if isinstance(counts_per_channel, u.Quantity):
                target = counts_per_channel.to_value(
                    u.count / u.chan if counts_per_channel.unit.is_equivalent(u.count / u.chan)
                    else u.count)
            else:
                target = float(counts_per_channel)
        except (u.UnitConversionError, TypeError, ValueError):
            raise ArgumentError(f"counts_per_channel: {counts_per_channel!r} is not a "
                                "number of counts (per channel)") from None
        what = "counts_per_channel"
        current = edge_counts(setup)
    if not (math.isfinite(target) and target > 0):
        raise ArgumentError(f"{what}: must be a positive finite number, got {target:g}")
    if not (math.isfinite(current) and current > 0):
        raise EdgefitError(f"{what}: the model gives no source photons at the edge to scale")
    scale = target / current
    import dataclasses

    truth = dict(setup.truth)
    for n in names:
        truth[n] = truth[n] * scale
    return dataclasses.replace(setup, truth=truth)


def _emission_only(model):
    """The sum of the model's additive components (the unabsorbed source)."""
    from ..models.base import ADDITIVE

    parts = [c for c in model.components() if c.kind == ADDITIVE]
    total = parts[0]
    for c in parts[1:]:
        total = total + c
    return total


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
