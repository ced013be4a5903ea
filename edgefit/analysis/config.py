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

Every section other than ``[model]`` becomes a typed settings object
(:class:`FitSettings`, :class:`ErrorSettings`, :class:`McmcSettings`,
:class:`DerivedSettings`, :class:`GoodnessSettings`, :class:`PlotSettings`,
one :class:`SpectrumSettings` per ``[[spectrum]]``); their field defaults
are the only defaults of the configuration.  The one 1-sigma level is
:data:`edgefit.stats.ONE_SIGMA` (0.6827).  :func:`config_from_dict` builds
a :class:`SightlineConfig` from an already-parsed table, which is how a
batch manifest (:mod:`edgefit.analysis.manifest`) makes one per sightline.
"""
from __future__ import annotations

import importlib
import math
import os
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import TYPE_CHECKING, ClassVar

from astropy import units as u

from ..stats import ONE_SIGMA

from ..errors import (ConfigError, EdgefitError, InputFileError, ModelError,
                     UnknownParameterError)

if TYPE_CHECKING:
    from ..models.base import ModelNode

__all__ = ["SightlineConfig", "load_config", "config_from_dict", "model_terms",
           "model_from_terms", "build_model", "apply_parameter_settings",
           "load_component_modules", "SpectrumSettings", "FitSettings", "ErrorSettings",
           "McmcSettings", "DerivedSettings", "GoodnessSettings", "PlotSettings",
           "SECTIONS", "ONE_SIGMA"]

#: Modules whose import registers component types (absent ones are skipped).
COMPONENT_MODULES = ("edgefit.models.continuum", "edgefit.models.absorption",
                     "edgefit.models.dust", "edgefit.models.multi_edge")

_TOP_KEYS = {"sightline", "spectrum", "model", "fit", "errors", "mcmc", "derived",
             "goodness", "plots"}
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
    from ..models.base import ADDITIVE, MULTIPLICATIVE

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
    from ..models.base import COMPONENTS, Component

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
        if not isinstance(spec.get("options") or {}, dict):
            raise ConfigError(path, f"{key}.options: must be a table")
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
        if "fixed" in s:      # fixed = false frees a parameter fixed by default
            p.vary = not s["fixed"]
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
# ---------------------------------------------------------------------------
# typed sections
def _number(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _integer(v, lo=None):
    return isinstance(v, int) and not isinstance(v, bool) and (lo is None or v >= lo)


def _probabilities(v):
    return (isinstance(v, list) and bool(v)
            and all(_number(x) and 0 < x < 1 for x in v))


def _name_or_names(v):
    return v == "all" or (isinstance(v, list) and all(isinstance(x, str) for x in v))


@dataclass
class _Section:
    """Shared reading of one configuration table into a dataclass.

    ``KEY`` is the table's name in the file; ``CHECKS`` maps a field to
    (predicate, what the user must give); values are checked before the
    object is made, and ``_check`` adds checks across fields."""

    KEY: ClassVar[str] = ""
    CHECKS: ClassVar[dict] = {}

    @classmethod
    def keys(cls):
        return [f.name for f in fields(cls)]

    @classmethod
    def from_table(cls, table, path=None, key=None):
        key = key or cls.KEY
        if table is None:
            table = {}
        if not isinstance(table, dict):
            raise ConfigError(path, f"{key}: must be a table")
        allowed = cls.keys()
        bad = set(table) - set(allowed)
        if bad:
            raise ConfigError(path, f"{key}.{sorted(bad)[0]}: unknown key (allowed: "
                                    f"{sorted(allowed)})")
        for k, v in table.items():
            check = cls.CHECKS.get(k)
            if check is not None and not check[0](v):
                raise ConfigError(path, f"{key}.{k}: {check[1]} (got {v!r})")
        obj = cls(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in table.items()})
        obj._check(path, key)
        return obj

    def _check(self, path, key):
        pass


@dataclass
class SpectrumSettings(_Section):
    """One ``[[spectrum]]`` table: files (relative to the configuration or
    manifest), the row/order/arm of a multi-spectrum file, the fitted range
    and the grouping."""

    pha: str = ""   # required: from_table refuses a table without it
    label: str | None = None
    rmf: str | None = None
    arf: str | None = None
    background: str | None = None
    row: int | None = None
    order: int | None = None
    arm: str | None = None
    range: tuple | None = None
    range_unit: str = "keV"
    group_min_counts: int | None = None
    grouping: str | None = None
    channels_per_group: int | None = None

    KEY = "spectrum"
    CHECKS = {
        "pha": (lambda v: isinstance(v, str) and v != "", "a file name is required"),
        "label": (lambda v: isinstance(v, str), "a string"),
        "rmf": (lambda v: isinstance(v, str), "a file name"),
        "arf": (lambda v: isinstance(v, str), "a file name"),
        "background": (lambda v: isinstance(v, str), "a file name"),
        "row": (lambda v: _integer(v, 0), "a row number (integer >= 0)"),
        "order": (_integer, "an integer order"),
        "arm": (lambda v: isinstance(v, str), "a string"),
        "range_unit": (lambda v: v in ("keV", "Angstrom", "angstrom", "AA"),
                       "use 'keV' or 'Angstrom'"),
        "group_min_counts": (lambda v: _integer(v, 1), "a positive integer"),
        "grouping": (lambda v: v == "file", "only \"file\" is allowed (or use "
                                            "group_min_counts)"),
        "channels_per_group": (lambda v: _integer(v, 1), "a positive integer"),
    }

    @classmethod
    def from_table(cls, table, path=None, key=None):
        if isinstance(table, dict) and "range" in table:
            r = table["range"]
            ok = isinstance(r, list) and bool(r)
            if ok:
                flat = r if (len(r) == 2 and not isinstance(r[0], list)) else None
                pairs = [flat] if flat is not None else r
                ok = all(isinstance(p, list) and len(p) == 2 and all(_number(v) for v in p)
                         for p in pairs)
            if not ok:
                raise ConfigError(path, f"{key or cls.KEY}.range: use [lo, hi] or a list "
                                        "of [lo, hi] pairs of numbers")
            table = dict(table, range=[list(p) if isinstance(p, list) else p for p in r])
        if isinstance(table, dict) and not isinstance(table.get("pha"), str):
            raise ConfigError(path, f"{key or cls.KEY}.pha: a file name is required")
        obj = super().from_table(table, path, key)
        if obj.range is not None:   # keep the nested lists the Dataset expects
            obj.range = [list(p) if isinstance(p, (list, tuple)) else p for p in obj.range]
        return obj

    @property
    def display_label(self):
        return self.label or (Path(self.pha).name
                              + (f"[{self.row}]" if self.row is not None else ""))


@dataclass
class FitSettings(_Section):
    """``[fit]``: the statistic and the minimiser."""

    statistic: str = "poisson"
    method: str = "least_squares"
    chi2_variance: str = "data"
    xnorm_free: bool = True

    KEY = "fit"
    CHECKS = {
        "statistic": (lambda v: v in ("poisson", "chi2"), "use \"poisson\" or \"chi2\""),
        "method": (lambda v: isinstance(v, str), "a minimiser name"),
        "chi2_variance": (lambda v: v in ("data", "model", "gehrels"),
                          "use \"data\", \"model\" or \"gehrels\""),
        "xnorm_free": (lambda v: isinstance(v, bool), "true or false"),
    }


@dataclass
class ErrorSettings(_Section):
    """``[errors]``: which parameters get profile-likelihood intervals
    (a list of full names, or "all" free ones) and at which levels."""

    profile: tuple | str = ()
    levels: tuple = (ONE_SIGMA, 0.90)

    KEY = "errors"
    CHECKS = {
        "profile": (_name_or_names, "a list of parameter names or \"all\""),
        "levels": (_probabilities, "a list of probabilities in (0, 1)"),
    }


def _proposal_name(v):
    from ..inference.mcmc import PROPOSALS

    return isinstance(v, str) and v in PROPOSALS


@dataclass
class McmcSettings(_Section):
    """``[mcmc]``: emcee sampling after the best fit (off by default)."""

    enabled: bool = False
    walkers: int | None = None
    steps: int = 2000
    burn: int | None = None
    thin: int = 1
    seed: int = 1
    processes: int | None = None
    progress: bool = False
    proposal: str = "auto"
    priors: dict = field(default_factory=dict)

    KEY = "mcmc"
    CHECKS = {
        "enabled": (lambda v: isinstance(v, bool), "true or false"),
        "walkers": (lambda v: _integer(v, 2), "an integer >= 2"),
        "steps": (lambda v: _integer(v, 1), "a positive integer"),
        "burn": (lambda v: _integer(v, 0), "an integer >= 0"),
        "thin": (lambda v: _integer(v, 1), "a positive integer"),
        "seed": (lambda v: _integer(v, 0), "an integer >= 0"),
        "processes": (lambda v: _integer(v, 1), "a positive integer"),
        "progress": (lambda v: isinstance(v, bool), "true or false"),
        "proposal": (_proposal_name, "use \"auto\" (the default: \"valley\" with a free "
                                     "grain size, else \"stretch\"), \"stretch\" (emcee's stretch move), "
                                     "\"differential\" (differential-evolution moves) or "
                                     "\"valley\" (jumps along the grain-size valley)"),
        "priors": (lambda v: isinstance(v, dict), "a table of priors"),
    }

    def _check(self, path, key):
        for name, spec in self.priors.items():
            gaussian = (isinstance(spec, dict) and set(spec) == {"gaussian"}
                        and isinstance(spec["gaussian"], list) and len(spec["gaussian"]) == 2
                        and all(_number(x) for x in spec["gaussian"]))
            if not (gaussian or spec == "log_uniform"):
                raise ConfigError(path, f"{key}.priors.{name}: use {{ gaussian = [mean, "
                                        "sigma] } or \"log_uniform\"")

    def prior_objects(self):
        """{parameter name: prior callable} for :func:`edgefit.inference.run_mcmc`."""
        from ..inference.mcmc import GaussianPrior, LogUniformPrior

        return {name: (LogUniformPrior() if spec == "log_uniform"
                       else GaussianPrior(*spec["gaussian"]))
                for name, spec in self.priors.items()}


@dataclass
class DerivedSettings(_Section):
    """``[derived]``: reference energy of optical depths (default: just
    above each edge), the interval levels of derived quantities and the
    number of posterior (or covariance-Gaussian) draws they use."""

    reference_energy: float | None = None
    reference_unit: str = "keV"
    levels: tuple = (ONE_SIGMA, 0.90)
    draws: int = 2000

    KEY = "derived"
    CHECKS = {
        "reference_energy": (lambda v: _number(v) and v > 0, "a positive number"),
        "reference_unit": (lambda v: isinstance(v, str), "a unit such as \"keV\""),
        "levels": (_probabilities, "a list of probabilities in (0, 1)"),
        "draws": (lambda v: _integer(v, 1), "a positive integer"),
    }

    def reference(self):
        """The reference energy as a Quantity, or None."""
        if self.reference_energy is None:
            return None
        return float(self.reference_energy) * u.Unit(self.reference_unit)

    def _check(self, path, key):
        try:
            u.Unit(self.reference_unit)
        except ValueError:
            raise ConfigError(path, f"{key}.reference_unit: unknown unit "
                                    f"{self.reference_unit!r}") from None


@dataclass
class GoodnessSettings(_Section):
    """``[goodness]``: posterior predictive draws (default 200 when MCMC
    ran, else none) and their seed."""

    ppc_draws: int | None = None
    seed: int = 2

    KEY = "goodness"
    CHECKS = {
        "ppc_draws": (lambda v: _integer(v, 0), "an integer >= 0"),
        "seed": (lambda v: _integer(v, 0), "an integer >= 0"),
    }

    def draws(self, have_mcmc):
        if self.ppc_draws is not None:
            return int(self.ppc_draws)
        return 200 if have_mcmc else 0


@dataclass
class PlotSettings(_Section):
    """``[plots]``: figures of the fit."""

    enabled: bool = True
    unit: str = "keV"
    window: tuple | None = None
    display_min_counts: float = 20
    format: str = "png"

    KEY = "plots"
    CHECKS = {
        "enabled": (lambda v: isinstance(v, bool), "true or false"),
        "unit": (lambda v: v in ("keV", "Angstrom", "angstrom", "AA"),
                 "use 'keV' or 'Angstrom'"),
        "window": (lambda v: isinstance(v, list) and len(v) == 2
                   and all(_number(x) for x in v), "[lo, hi]"),
        "display_min_counts": (lambda v: _number(v) and v >= 0, "a number >= 0"),
        "format": (lambda v: isinstance(v, str), "a file format such as \"png\""),
    }


#: Configuration sections with a settings class: name -> class.
SECTIONS: dict[str, type[_Section]] = {
    "fit": FitSettings, "errors": ErrorSettings, "mcmc": McmcSettings,
    "derived": DerivedSettings, "goodness": GoodnessSettings, "plots": PlotSettings}


@dataclass
class SightlineConfig:
    """A parsed sightline configuration (format: README, "Configuration
    files").  ``base`` is the folder that file names are relative to (the
    configuration's or the manifest's); ``key_prefix`` starts every key in
    error messages (e.g. ``"sightline[2]."`` inside a manifest)."""

    path: Path
    name: str
    output: Path
    spectra: list
    model: ModelNode
    components: dict
    param_settings: dict
    fit: FitSettings = field(default_factory=FitSettings)
    errors: ErrorSettings = field(default_factory=ErrorSettings)
    mcmc: McmcSettings = field(default_factory=McmcSettings)
    derived: DerivedSettings = field(default_factory=DerivedSettings)
    goodness: GoodnessSettings = field(default_factory=GoodnessSettings)
    plots: PlotSettings = field(default_factory=PlotSettings)
    base: Path | None = None
    key_prefix: str = ""

    def __post_init__(self):
        self.path = Path(self.path)
        if self.base is None:
            self.base = self.path.parent

    def error(self, key, problem):
        return ConfigError(self.path, f"{self.key_prefix}{key}: {problem}")

    def spectrum_files(self):
        """Every file the spectra name explicitly, resolved (no header lookup)."""
        out = []
        for s in self.spectra:
            for k in ("pha", "rmf", "arf", "background"):
                if getattr(s, k):
                    out.append(self.base / getattr(s, k))
        return out

    def load_datasets(self):
        """Read every spectrum (with response and background) and prepare
        it for fitting.  File problems name the file; config problems name
        the key."""
        from ..data import load_spectrum
        from ..inference.dataset import Dataset

        out = []
        for i, s in enumerate(self.spectra):
            key = f"spectrum[{i}]"

            def rel(name):
                return str(self.base / name) if name else None

            spec = load_spectrum(rel(s.pha), rmf=rel(s.rmf), arf=rel(s.arf),
                                 background=rel(s.background), row=s.row, order=s.order,
                                 arm=s.arm)
            if spec.response is None:
                raise self.error(f"{key}.rmf", f"no response for {s.pha} (give rmf = ...)")
            grouping = s.group_min_counts
            if s.grouping == "file":
                grouping = "file"
            try:
                out.append(Dataset(spec, ranges=s.range, unit=s.range_unit, grouping=grouping,
                                   channels_per_group=s.channels_per_group,
                                   label=s.display_label))
            except EdgefitError as exc:
                if isinstance(exc, InputFileError):
                    raise
                raise self.error(key, str(exc)) from None
        return out

    def likelihood(self, datasets):
        """The joint likelihood of ``datasets`` (from :meth:`load_datasets`)
        under this configuration's model and ``[fit]`` statistic, and its
        starting Parameters: cross-normalisations as ``[fit]`` says, then
        the configuration's parameter settings applied.  Returns
        ``(likelihood, params)``."""
        from ..inference.likelihood import JointLikelihood

        fitc = self.fit
        like = JointLikelihood(self.model, datasets, statistic=fitc.statistic,
                               chi2_variance=fitc.chi2_variance)
        params = like.make_params(xnorm_free=fitc.xnorm_free)
        params = apply_parameter_settings(params, self.param_settings, self.model, self.path)
        return like, params


def _check_table(data, key, allowed, path):
    if not isinstance(data, dict):
        raise ConfigError(path, f"{key}: must be a table")
    bad = set(data) - set(allowed)
    if bad:
        raise ConfigError(path, f"{key}.{sorted(bad)[0]}: unknown key (allowed: "
                                f"{sorted(allowed)})")
    return data


def _prefixed(path, prefix):
    """Context that re-raises a ConfigError of ``path`` with ``prefix``
    before its key (no-op without a prefix)."""
    from contextlib import contextmanager

    @contextmanager
    def ctx():
        try:
            yield
        except ConfigError as exc:
            if not prefix or exc.path != str(path):
                raise
            raise ConfigError(path, f"{prefix}{exc.problem}") from None
    return ctx()


def config_from_dict(data: dict, path: str | os.PathLike, *,
                     base: str | os.PathLike | None = None, key_prefix: str = "",
                     name: str | None = None,
                     output: str | os.PathLike | None = None) -> SightlineConfig:
    """A :class:`SightlineConfig` from a parsed table with the layout of a
    configuration file.

    ``path`` is the file named in errors; ``base`` the folder of relative
    file names (default ``path``'s folder); ``key_prefix`` goes before every
    key in error messages; ``name``/``output`` replace the
    ``[sightline]`` table's."""
    path = Path(path)
    with _prefixed(path, key_prefix):
        if not isinstance(data, dict):
            raise ConfigError(path, "must be a table")
        bad = set(data) - _TOP_KEYS
        if bad:
            raise ConfigError(path, f"{sorted(bad)[0]}: unknown section (known: "
                                    f"{sorted(_TOP_KEYS)})")
        sl = _check_table(data.get("sightline", {}), "sightline", {"name", "output"}, path)
        base = Path(base) if base is not None else path.parent
        name = str(name if name is not None else sl.get("name", path.stem))
        output = Path(output) if output is not None else \
            base / str(sl.get("output", f"{path.stem}_results"))
        spectra = data.get("spectrum")
        if not isinstance(spectra, list) or not spectra:
            raise ConfigError(path, "spectrum: give at least one [[spectrum]] table")
        spectra = [SpectrumSettings.from_table(s, path, f"spectrum[{i}]")
                   for i, s in enumerate(spectra)]
        model, components, settings = build_model(data.get("model"), path)
        sections = {k: cls.from_table(data.get(k), path, k) for k, cls in SECTIONS.items()}
    return SightlineConfig(path=path, name=name, output=output, spectra=spectra, model=model,
                           components=components, param_settings=settings, base=base,
                           key_prefix=key_prefix, **sections)


def read_toml(path, what="configuration file"):
    """Parse a TOML file; a missing or malformed file is a ConfigError."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(path, f"{what} not found") from None
    except IsADirectoryError:
        raise ConfigError(path, f"{what} is a folder") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, f"not valid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise ConfigError(path, "not valid TOML: not UTF-8 text") from None


def load_config(path: str | os.PathLike) -> SightlineConfig:
    """Read and check a sightline TOML file.  Returns a SightlineConfig."""
    path = Path(path)
    return config_from_dict(read_toml(path), path)
