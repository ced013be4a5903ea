"""Sightline configuration files (TOML) -> data, model and fit settings.

The file format is documented in the README (section "Configuration files").  Parsing is safe:
TOML is read with :mod:`tomllib`; component types are looked up in
:data:`edgefit.models.base.COMPONENTS`; the model is given in structured
form only -- lists of component names, never a text expression:

.. code-block:: toml

    [model]
    absorbers = ["ism", "gas_si", "dust"]   # multiplied together
    emission  = ["disk", "pl"]          # added together

means (ism x gas_si x dust) x (disk + pl); several ``[[model.term]]``
tables, each with its own ``absorbers`` and ``emission`` lists, are summed
(model = sum over terms of prod(absorbers) x sum(emission)), and a
component named in several terms is one shared object with shared
parameters.  :func:`model_from_terms` builds the model with Python's ``*``
and ``+`` on component objects (no ``eval`` anywhere); parameter ties are
limited to ``factor x other_parameter`` and are handed to lmfit as a
generated expression of one validated name and one number.

Every error is a :class:`~edgefit.errors.ConfigError` naming the file and
the offending key, e.g. ``sightline.toml: model.components.pl.type:
unknown component type 'powerlaw'``.
"""
from __future__ import annotations

import importlib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from astropy import units as u

from .errors import (ConfigError, EdgefitError, InputFileError, ModelError,
                     UnknownParameterError)

__all__ = ["SightlineConfig", "load_config", "model_terms", "model_from_terms",
           "build_model", "apply_parameter_settings", "load_component_modules"]

#: Modules whose import registers component types (absent ones are skipped).
COMPONENT_MODULES = ("edgefit.models.continuum", "edgefit.models.absorption",
                     "edgefit.models.dust")

_TOP_KEYS = {"sightline", "spectrum", "model", "fit", "errors", "mcmc", "derived",
             "goodness", "plots"}
_SPECTRUM_KEYS = {"label", "pha", "rmf", "arf", "background", "row", "order", "arm", "range",
                  "range_unit", "group_min_counts", "grouping", "channels_per_group"}
_PARAM_KEYS = {"value", "min", "max", "fixed", "tie", "factor", "unit"}


def load_component_modules():
    """Import the modules that define components so they register."""
    for name in COMPONENT_MODULES:
        try:
            importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name != name:
                raise


# ---------------------------------------------------------------------------
def _name_list(value, path, key):
    """A list of component names (a TOML array of strings)."""
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise ConfigError(path, f"{key}: must be a list of component names, "
                                "e.g. [\"ism\", \"dust\"]")
    return value


def model_terms(model_table, path=None):
    """The model's terms from the ``[model]`` table, unchecked against the
    components: a list of (key prefix, absorber names, emission names).

    Either ``absorbers``/``emission`` directly in ``[model]`` (one term) or
    ``[[model.term]]`` tables (summed), not both."""
    flat = {"absorbers", "emission"} & set(model_table)
    terms = model_table.get("term")
    if flat and terms is not None:
        raise ConfigError(path, "model.term: give either absorbers/emission in [model] or "
                                "[[model.term]] tables, not both")
    if terms is None:
        if "emission" not in model_table:
            raise ConfigError(path, "model.emission: missing; list the emission (additive) "
                                    "components, e.g. emission = [\"continuum\"]")
        return [("model", _name_list(model_table.get("absorbers", []), path,
                                     "model.absorbers"),
                 _name_list(model_table["emission"], path, "model.emission"))]
    if not isinstance(terms, list) or not terms or not all(isinstance(t, dict) for t in terms):
        raise ConfigError(path, "model.term: use one or more [[model.term]] tables")
    out = []
    for i, t in enumerate(terms):
        key = f"model.term[{i}]"
        bad = set(t) - {"absorbers", "emission"}
        if bad:
            raise ConfigError(path, f"{key}.{sorted(bad)[0]}: unknown key (use absorbers, "
                                    "emission)")
        if "emission" not in t:
            raise ConfigError(path, f"{key}.emission: missing")
        out.append((key, _name_list(t.get("absorbers", []), path, f"{key}.absorbers"),
                    _name_list(t["emission"], path, f"{key}.emission")))
    return out


def model_from_terms(terms, components, path=None):
    """Model = sum over terms of (product of absorbers) x (sum of emission).

    Parameters
    ----------
    terms : list of (key, absorber names, emission names)
        As returned by :func:`model_terms`; ``key`` prefixes error messages.
    components : dict name -> Component

    Returns
    -------
    (model, set of names used).  Every problem -- an unknown name, a name
    listed twice in one list, an empty emission list, an additive component
    among the absorbers or a multiplicative one among the emission -- is a
    ConfigError naming the file and the key.
    """
    from .models.base import ADDITIVE, MULTIPLICATIVE

    used = set()
    model = None
    for key, absorbers, emission in terms:
        if not emission:
            raise ConfigError(path, f"{key}.emission: empty; a model needs at least one "
                                    "emission (additive) component")
        for role, names, kind, other in (("absorbers", absorbers, MULTIPLICATIVE, "emission"),
                                         ("emission", emission, ADDITIVE, "absorbers")):
            for j, name in enumerate(names):
                k = f"{key}.{role}[{j}]"
                if name not in components:
                    raise ConfigError(path, f"{k}: component {name!r} is not defined under "
                                            f"[model.components]; defined: "
                                            f"{sorted(components)}")
                if names.index(name) != j:
                    raise ConfigError(path, f"{k}: {name!r} is listed twice")
                if components[name].kind != kind:
                    raise ConfigError(path, f"{k}: {name!r} is {components[name].kind}; "
                                            f"list it under {other}")
                used.add(name)
        emit = components[emission[0]]
        for name in emission[1:]:
            emit = emit + components[name]
        term = emit
        if absorbers:
            absorb = components[absorbers[0]]
            for name in absorbers[1:]:
                absorb = absorb * components[name]
            term = absorb * emit
        model = term if model is None else model + term
    return model, used


# ---------------------------------------------------------------------------
def _plain_value(value, path, key):
    """An option value: TOML scalars, lists of them, or {value, unit} tables
    (-> Quantity)."""
    if isinstance(value, (str, int, float, bool)):
        return value
    if isinstance(value, list):
        return [_plain_value(v, path, f"{key}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict) and set(value) <= {"value", "unit"} and "value" in value:
        return _quantity(value, path, key)
    raise ConfigError(path, f"{key}: unsupported value {value!r}")


def _quantity(table, path, key):
    try:
        return float(table["value"]) * u.Unit(table.get("unit", ""))
    except (ValueError, TypeError) as exc:
        raise ConfigError(path, f"{key}: bad value/unit ({exc})") from None


def _make_component(cls, name, options, init, fixed, path, key, ctype):
    """``cls(name, fixed=fixed, **init, **options)`` with errors naming the key."""
    clash = set(options) & {p.name for p in cls.params}
    if clash:
        raise ConfigError(path, f"{key}.options.{sorted(clash)[0]}: is a fit parameter; "
                                "set it under params")
    try:
        return cls(name, fixed=fixed, **init, **options)
    except TypeError as exc:
        raise ConfigError(path, f"{key}.options: {exc}") from None
    except UnknownParameterError:
        bad_opt = sorted(set(options))
        raise ConfigError(path, f"{key}.options: {ctype} does not take option(s) "
                                f"{bad_opt}") from None
    except EdgefitError as exc:
        raise ConfigError(path, f"{key}: {exc}") from None


def build_model(model_table, path=None):
    """Components and model from the ``[model]`` table.

    Returns (model, {name: Component}, parameter settings {full name: dict}).
    """
    from .models.base import COMPONENTS, Component

    load_component_modules()
    if not isinstance(model_table, dict):
        raise ConfigError(path, "model: must be a table with 'absorbers', 'emission' (or "
                                "[[model.term]] tables) and 'components'")
    unknown = set(model_table) - {"absorbers", "emission", "term", "components"}
    if unknown:
        raise ConfigError(path, f"model.{sorted(unknown)[0]}: unknown key (use absorbers, "
                                "emission, term, components)")
    terms = model_terms(model_table, path)
    comps_table = model_table.get("components")
    if not isinstance(comps_table, dict) or not comps_table:
        raise ConfigError(path, "model.components: define at least one component table")
    components: dict[str, Component] = {}
    settings = {}
    for name, spec in comps_table.items():
        key = f"model.components.{name}"
        if not name.isidentifier():
            raise ConfigError(path, f"{key}: component name must be an identifier")
        if not isinstance(spec, dict):
            raise ConfigError(path, f"{key}: must be a table")
        bad = set(spec) - {"type", "options", "params"}
        if bad:
            raise ConfigError(path, f"{key}.{sorted(bad)[0]}: unknown key (use type, options, "
                                    "params)")
        ctype = spec.get("type")
        if ctype not in COMPONENTS:
            raise ConfigError(path, f"{key}.type: unknown component type {ctype!r}; known: "
                                    f"{sorted(COMPONENTS)}")
        cls = COMPONENTS[ctype]
        options = {k: _plain_value(v, path, f"{key}.options.{k}")
                   for k, v in (spec.get("options") or {}).items()}
        params = spec.get("params") or {}
        if not isinstance(params, dict):
            raise ConfigError(path, f"{key}.params: must be a table")
        # parameters can depend on options (ions of ion_lines, the size
        # family of dust_edge): read them from an instance built with the
        # options alone
        declared = {p.name for p in _make_component(cls, name, options, {}, (), path,
                                                     key, ctype).params}
        init, fixed = {}, []
        for pname, pval in params.items():
            pkey = f"{key}.params.{pname}"
            if pname not in declared:
                raise ConfigError(path, f"{pkey}: {ctype} has no parameter {pname!r}; it has "
                                        f"{sorted(declared)}")
            if isinstance(pval, bool):
                raise ConfigError(path, f"{pkey}: a number or a table is needed")
            if isinstance(pval, (int, float)):
                pval = {"value": pval}
            if not isinstance(pval, dict):
                raise ConfigError(path, f"{pkey}: a number or a table is needed")
            bad = set(pval) - _PARAM_KEYS
            if bad:
                raise ConfigError(path, f"{pkey}.{sorted(bad)[0]}: unknown key (allowed: "
                                        f"{sorted(_PARAM_KEYS)})")
            for k in ("value", "min", "max", "factor"):
                if k in pval and (isinstance(pval[k], bool) or
                                  not isinstance(pval[k], (int, float))
                                  or not math.isfinite(pval[k])):
                    raise ConfigError(path, f"{pkey}.{k}: must be a finite number")
            if "value" in pval:
                init[pname] = (float(pval["value"]) * u.Unit(pval["unit"])
                               if "unit" in pval else float(pval["value"]))
            if pval.get("fixed"):
                fixed.append(pname)
            settings[f"{name}_{pname}"] = dict(pval, _key=pkey)
        components[name] = _make_component(cls, name, options, init, fixed, path, key, ctype)
    try:
        model, used = model_from_terms(terms, components, path)
    except ModelError as exc:   # e.g. clashing parameter names
        raise ConfigError(path, f"model: {exc}") from None
    unused = set(components) - used
    if unused:
        raise ConfigError(path, f"model.components.{sorted(unused)[0]}: defined but not used "
                                "in model.absorbers/emission")
    return model, components, settings


def apply_parameter_settings(params, settings, model=None, path=None):
    """Apply bounds, fixed flags and ties from the config to lmfit
    Parameters (values were already set on the components).  Bounds are in
    the parameter's own unit, or in ``unit`` when the table gives one."""
    decl = model.parameters() if model is not None else {}
    for full, s in settings.items():
        key = s["_key"]
        p = params[full]
        unit = s.get("unit")

        def conv(x):
            if unit and full in decl:
                comp, par = decl[full]
                try:
                    return par.convert(float(x) * u.Unit(unit), comp.name)
                except (ValueError, EdgefitError) as exc:
                    raise ConfigError(path, f"{key}.unit: {exc}") from None
            return float(x)

        if "min" in s:
            p.min = conv(s["min"])
        if "max" in s:
            p.max = conv(s["max"])
        if p.min > p.max:
            raise ConfigError(path, f"{key}: min is larger than max")
        if not (p.min <= p.value <= p.max):
            raise ConfigError(path, f"{key}: value {p.value} lies outside [{p.min}, {p.max}]")
        if s.get("fixed"):
            p.vary = False
        if "tie" in s:
            other = s["tie"]
            if not isinstance(other, str) or other not in params or other == full:
                raise ConfigError(path, f"{key}.tie: {other!r} is not another parameter of "
                                        f"this model (full names like 'pl_index')")
            factor = float(s.get("factor", 1.0))
            p.expr = other if factor == 1.0 else f"{factor!r} * {other}"
        elif "factor" in s:
            raise ConfigError(path, f"{key}.factor: only meaningful with 'tie'")
    return params


# ---------------------------------------------------------------------------
@dataclass
class SightlineConfig:
    """A parsed configuration file (format: README, "Configuration files")."""

    path: Path
    name: str
    output: Path
    spectra: list
    model: object
    components: dict
    param_settings: dict
    fit: dict = field(default_factory=dict)
    errors: dict = field(default_factory=dict)
    mcmc: dict = field(default_factory=dict)
    derived: dict = field(default_factory=dict)
    goodness: dict = field(default_factory=dict)
    plots: dict = field(default_factory=dict)

    def error(self, key, problem):
        return ConfigError(self.path, f"{key}: {problem}")

    def load_datasets(self):
        """Read every spectrum (with response and background) and prepare
        it for fitting.  File problems name the file; config problems name
        the key."""
        from .data import load_spectrum
        from .inference.dataset import Dataset

        out = []
        for i, s in enumerate(self.spectra):
            key = f"spectrum[{i}]"
            base = self.path.parent

            def rel(k):
                return str(base / s[k]) if s.get(k) else None

            spec = load_spectrum(rel("pha"), rmf=rel("rmf"), arf=rel("arf"),
                                 background=rel("background"), row=s.get("row"),
                                 order=s.get("order"), arm=s.get("arm"))
            if spec.response is None:
                raise self.error(f"{key}.rmf", f"no response for {s['pha']} (give rmf = ...)")
            grouping = s.get("group_min_counts")
            if s.get("grouping") == "file":
                grouping = "file"
            try:
                out.append(Dataset(spec, ranges=s.get("range"),
                                   unit=s.get("range_unit", "keV"), grouping=grouping,
                                   channels_per_group=s.get("channels_per_group"),
                                   label=s.get("label") or f"{Path(s['pha']).name}"
                                   + (f"[{s['row']}]" if s.get("row") is not None else "")))
            except EdgefitError as exc:
                if isinstance(exc, InputFileError):
                    raise
                raise self.error(key, str(exc)) from None
        return out


def _check_table(data, key, allowed, path):
    if not isinstance(data, dict):
        raise ConfigError(path, f"{key}: must be a table")
    bad = set(data) - set(allowed)
    if bad:
        raise ConfigError(path, f"{key}.{sorted(bad)[0]}: unknown key (allowed: "
                                f"{sorted(allowed)})")
    return data


def load_config(path):
    """Read and check a sightline TOML file.  Returns a SightlineConfig."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(path, "configuration file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, f"not valid TOML: {exc}") from None
    bad = set(data) - _TOP_KEYS
    if bad:
        raise ConfigError(path, f"{sorted(bad)[0]}: unknown section (known: "
                                f"{sorted(_TOP_KEYS)})")
    sl = _check_table(data.get("sightline", {}), "sightline", {"name", "output"}, path)
    name = str(sl.get("name", path.stem))
    output = path.parent / str(sl.get("output", f"{path.stem}_results"))
    spectra = data.get("spectrum")
    if not isinstance(spectra, list) or not spectra:
        raise ConfigError(path, "spectrum: give at least one [[spectrum]] table")
    for i, s in enumerate(spectra):
        _check_table(s, f"spectrum[{i}]", _SPECTRUM_KEYS, path)
        if not isinstance(s.get("pha"), str):
            raise ConfigError(path, f"spectrum[{i}].pha: a file name is required")
        if s.get("range_unit", "keV") not in ("keV", "Angstrom", "angstrom", "AA"):
            raise ConfigError(path, f"spectrum[{i}].range_unit: use 'keV' or 'Angstrom'")
        if "range" in s:
            r = s["range"]
            flat = r if (len(r) == 2 and not isinstance(r[0], list)) else None
            pairs = [flat] if flat is not None else r
            if not all(isinstance(p, list) and len(p) == 2 and
                       all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in p)
                       for p in pairs):
                raise ConfigError(path, f"spectrum[{i}].range: use [lo, hi] or a list of "
                                        "[lo, hi] pairs of numbers")
        g = s.get("grouping")
        if g is not None and g != "file":
            raise ConfigError(path, f"spectrum[{i}].grouping: only \"file\" is allowed "
                                    "(or use group_min_counts)")
    model, components, settings = build_model(data.get("model"), path)
    cfg = SightlineConfig(
        path=path, name=name, output=output, spectra=spectra, model=model,
        components=components, param_settings=settings,
        fit=_check_table(data.get("fit", {}), "fit",
                         {"statistic", "method", "chi2_variance", "xnorm_free"}, path),
        errors=_check_table(data.get("errors", {}), "errors", {"profile", "levels"}, path),
        mcmc=_check_table(data.get("mcmc", {}), "mcmc",
                          {"enabled", "walkers", "steps", "burn", "thin", "seed", "processes",
                           "progress", "priors"}, path),
        derived=_check_table(data.get("derived", {}), "derived",
                             {"reference_energy", "reference_unit", "levels"}, path),
        goodness=_check_table(data.get("goodness", {}), "goodness", {"ppc_draws", "seed"},
                              path),
        plots=_check_table(data.get("plots", {}), "plots",
                           {"enabled", "unit", "window", "display_min_counts", "format"},
                           path),
    )
    if cfg.fit.get("statistic", "poisson") not in ("poisson", "chi2"):
        raise ConfigError(path, "fit.statistic: use \"poisson\" or \"chi2\"")
    for lev in cfg.errors.get("levels", []):
        if not (isinstance(lev, (int, float)) and 0 < lev < 1):
            raise ConfigError(path, f"errors.levels: {lev!r} is not a probability in (0, 1)")
    return cfg
