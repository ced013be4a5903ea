"""Derived quantities with uncertainties.

Quantities are computed for every posterior draw (MCMC samples; without
MCMC, draws from the covariance Gaussian of the best fit, clipped to the
bounds, which is only as good as that approximation) and summarised by
the median and central intervals.  They are collected generically from
each component of the model:

* ``<component>_tau``: the optical depth of every multiplicative
  component that defines ``optical_depth(energy_kev, **values)``, at a
  reference energy.  The reference is, in order: a value given by the
  caller (one energy for all, or per component name), else the
  component's :meth:`~edgefit.models.base.Component.reference_energy`
  (for edges: just above the edge, 20 eV, the same rule as their
  ``tau_above``).  Components with neither are skipped.
* ``<component>_<key>``: every entry of the component's
  ``derived(**values)`` dict (e.g. element column, grain column density,
  dust mass column, self-shielding ratio, N_H), with the unit it states.
* ``total_column_<element>`` = N_gas + N_dust (cm^-2) for the same
  elements as the depletion below;
* ``depletion_<element>`` = N_dust / (N_gas + N_dust) for every element
  that has both a gas-phase and a dust component.  A component takes part
  when it declares (:class:`~edgefit.models.base.Component` attributes)
  ``phase = "gas"`` or ``phase = "dust"`` and an ``element`` (e.g. "Si"),
  and its ``derived`` dict has an element column
  in cm^-2 under :data:`~edgefit.models.base.COLUMN_KEY` (``col_cm2``); several components of one
  phase add up.  A component carrying several elements (class attributes
  ``phase`` and ``elements``) states each element's column under
  :func:`~edgefit.models.base.element_column_key` (``col_Si_cm2`` ...).  No name is guessed: a
  component without ``phase`` never enters a depletion.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..models.base import ADDITIVE, COLUMN_KEY, element_column_key
from ..stats import ONE_SIGMA

if TYPE_CHECKING:
    from .result import FitResult

__all__ = ["DerivedQuantity", "DerivedSummary", "derived_quantities", "COLUMN_KEY",
           "PHASES"]


@dataclass
class DerivedQuantity:
    """One derived quantity: its value at the best fit and its draws."""

    name: str
    unit: str
    best: float
    samples: np.ndarray = field(repr=False)
    description: str = ""

    @property
    def median(self):
        s = self.samples[np.isfinite(self.samples)]
        return float(np.median(s)) if s.size else math.nan

    def interval(self, level=ONE_SIGMA):
        s = self.samples[np.isfinite(self.samples)]
        if not s.size:
            return math.nan, math.nan
        lo, hi = np.quantile(s, [0.5 - level / 2, 0.5 + level / 2])
        return float(lo), float(hi)

    def lower(self, level=ONE_SIGMA):
        return self.interval(level)[0]

    def upper(self, level=ONE_SIGMA):
        return self.interval(level)[1]


class DerivedSummary:
    """The derived quantities of one fit."""

    def __init__(self, quantities, levels, n_draws, source, reference_energies):
        self.quantities = list(quantities)
        self.levels = tuple(levels)
        self.n_draws = n_draws
        self.source = source
        self.reference_energies = dict(reference_energies)

    def __getitem__(self, name):
        for q in self.quantities:
            if q.name == name:
                return q
        raise KeyError(name)

    def names(self):
        return [q.name for q in self.quantities]

    def summary(self):
        lines = [f"derived quantities ({self.n_draws} draws from {self.source}; "
                 "median and central intervals)"]
        for q in self.quantities:
            ivs = "  ".join(f"{100 * lev:.0f}% [{q.lower(lev):.4g}, {q.upper(lev):.4g}]"
                            for lev in self.levels)
            lines.append(f"  {q.name:<30} {q.median:.5g} {q.unit:<10} {ivs}")
        return "\n".join(lines)

    def to_dict(self):
        out = {"source": self.source, "n_draws": self.n_draws,
               "reference_energy_kev": self.reference_energies, "quantities": []}
        for q in self.quantities:
            d = {"name": q.name, "unit": q.unit, "best": q.best, "median": q.median,
                 "description": q.description}
            for lev in self.levels:
                lo, hi = q.interval(lev)
                d[f"lo{100 * lev:.0f}"] = lo
                d[f"hi{100 * lev:.0f}"] = hi
            out["quantities"].append(d)
        return out


#: Phases that enter a depletion.
PHASES = ("gas", "dust")


def _phase(comp):
    """'gas', 'dust' or None, from the component's declared ``phase``."""
    return comp.phase if comp.phase in PHASES else None


def _reference_energy(comp, reference_energy):
    if isinstance(reference_energy, dict):
        if comp.name in reference_energy:
            return float(reference_energy[comp.name])
    elif reference_energy is not None:
        return float(reference_energy)
    ref = comp.reference_energy()
    return None if ref is None else float(ref)


def _evaluate_all(model, values, refs):
    """name -> (value, unit, description) for one set of full values."""
    out = {}
    columns: dict[str, Any] = {}
    to_model = getattr(model, "model_values", None)
    if to_model is not None:  # e.g. TotalAndFraction: gas and dust columns from its pair
        values = to_model(values)
    for comp in model.components():
        short = {p.name: values[f"{comp.name}_{p.name}"] for p in comp.params
                 if f"{comp.name}_{p.name}" in values}
        if comp.kind != ADDITIVE and comp.name in refs:
            try:
                with np.errstate(all="ignore"):
                    tau = float(np.asarray(comp.optical_depth(refs[comp.name], **short)))
                out[f"{comp.name}_tau"] = (tau, "", f"optical depth at "
                                           f"{refs[comp.name]:.4f} keV")
            except NotImplementedError:
                pass
        with np.errstate(all="ignore"):
            der = comp.derived(**short)
        for key, (val, unit) in der.items():
            out[f"{comp.name}_{key}"] = (float(val), unit, f"{type(comp).__name__}.{key}")
        element = comp.element
        phase = _phase(comp)
        if element and phase and COLUMN_KEY in der:
            columns.setdefault(element, {}).setdefault(phase, 0.0)
            columns[element][phase] += float(der[COLUMN_KEY][0])
        # a component carrying several elements (one grain population across
        # edges) states each one's column under element_column_key(element)
        multi = (getattr(comp, "elements", None) or ()) if phase else ()
        for el in multi:
            key = element_column_key(el)
            if key in der:
                columns.setdefault(el, {}).setdefault(phase, 0.0)
                columns[el][phase] += float(der[key][0])
    for element, by_phase in columns.items():
        if "gas" in by_phase and "dust" in by_phase:
            tot = by_phase["gas"] + by_phase["dust"]
            dep = by_phase["dust"] / tot if tot > 0 else math.nan
            out[f"depletion_{element}"] = (dep, "", f"{element} dust share "
                                           "N_dust/(N_gas+N_dust)")
            out[f"total_column_{element}"] = (tot, "cm-2", f"{element} column in gas and "
                                              "dust, N_gas + N_dust")
    return out


def derived_quantities(result: FitResult, reference_energy: Any = None,
                       levels: Sequence[float] = (ONE_SIGMA, 0.90), max_draws: int = 2000,
                       seed: int | None = 0, store: bool = True) -> DerivedSummary:
    """Derived quantities of a fit with posterior intervals.

    Parameters
    ----------
    result : FitResult
    reference_energy : float, Quantity or dict, optional
        Energy (keV) at which optical depths are reported; one value or
        {component name: energy}.  Default: just above each edge.
    levels : sequence of float
        Central interval levels reported.
    max_draws : int
        Posterior draws used (randomly chosen, seeded by ``seed``).

    Returns
    -------
    DerivedSummary (also stored as ``result.derived``).
    """
    from .._units import as_kev
    from .likelihood import ParameterVector

    if reference_energy is not None and not isinstance(reference_energy, dict):
        reference_energy = as_kev(reference_energy, "reference energy")
    elif isinstance(reference_energy, dict):
        reference_energy = {k: as_kev(v, "reference energy") for k, v in
                            reference_energy.items()}
    model = result.model
    refs = {}
    for comp in model.components():
        if comp.kind != ADDITIVE:
            ref = _reference_energy(comp, reference_energy)
            if ref is not None:
                refs[comp.name] = ref
    rng = np.random.default_rng(seed)
    pv = ParameterVector(result.params)
    if result.mcmc is not None:
        samples = result.mcmc.flat_samples(pv.free)
        source = "MCMC posterior"
    elif len(pv) and (cov := result.covariance_of(pv.free)) is not None:
        samples = np.clip(rng.multivariate_normal(pv.vector(), cov, size=max_draws),
                          pv.lower, pv.upper)
        source = "covariance Gaussian"
    else:
        samples = pv.vector()[None, :]
        source = "best fit only"
    if len(samples) > max_draws:
        samples = samples[rng.choice(len(samples), size=max_draws, replace=False)]
    best = _evaluate_all(model, result.values, refs)
    draws = {k: np.full(len(samples), np.nan) for k in best}
    for i, theta in enumerate(samples):
        vals = _evaluate_all(model, pv.values(theta), refs)
        for k, (v, _, _) in vals.items():
            if k in draws:
                draws[k][i] = v
    quantities = [DerivedQuantity(k, unit, v, draws[k], desc)
                  for k, (v, unit, desc) in best.items()]
    summary = DerivedSummary(quantities, levels, len(samples), source, refs)
    if store:
        result.derived = summary
    return summary
