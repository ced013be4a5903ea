"""The result of a sightline fit: numbers, a readable summary, tables, JSON.

:class:`FitResult` collects the best fit (values, covariance errors,
statistic, degrees of freedom, convergence flags), and whatever later steps
add: profile-likelihood intervals (:mod:`.intervals`), MCMC posteriors
(:mod:`.mcmc`), goodness of fit (:mod:`.goodness`) and derived quantities
(:mod:`.derived`).  It does no file I/O except in the explicit
``write_*`` methods and no plotting (see :mod:`edgefit.plotting.fit_plots`).

Tables
------
:meth:`FitResult.parameter_table` has one row per parameter (a ``unit``
string column, since units differ between rows); :meth:`FitResult.to_table`
has **one row** for the sightline and one column per quantity, each column
carrying its astropy unit, so that several sightlines stack into one table.
"""
from __future__ import annotations

import json
import math
import os
import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np
from astropy import units as u

from .._units import fits_ready_table, unit_or_none
from ..stats import ONE_SIGMA

if TYPE_CHECKING:
    from pathlib import Path

    from astropy.table import Table

    from ..models.base import ModelNode
    from .dataset import Dataset
    from .derived import DerivedSummary
    from .likelihood import JointLikelihood
    from .mcmc import McmcResult

__all__ = ["FitResult", "Interval", "level_label", "INFO_FLAGS"]

#: Flags that inform without casting doubt on the final fit
#: (``refit_after_profile``: a profile scan met a lower minimum and the fit
#: was redone from there).
INFO_FLAGS = {"refit_after_profile", "multimodal"}
#: Flag prefixes that inform (``gas_dust_degenerate:<element>``: the data
#: do not separate the gas and dust columns of that element;
#: ``at_limit:<name>``: the best fit lies at a physical limit of the
#: parameter, a column at zero, a grain size at the end of its range or
#: all/no dust, which the data allow).
INFO_PREFIXES = ("gas_dust_degenerate:", "at_limit:")


def level_label(level: float) -> str:
    """Short label of a confidence level: 0.6827 -> '68', 0.9 -> '90'."""
    pct = 100.0 * level
    return f"{pct:.0f}" if abs(pct - round(pct)) < 0.35 else f"{pct:.1f}".replace(".", "p")


@dataclass
class Interval:
    """A profile-likelihood interval at one confidence level.

    ``lower``/``upper`` are None when not found; ``lower_at_bound`` /
    ``upper_at_bound`` say the profile did not reach the threshold before
    the parameter's bound (then the bound is a limit, not an interval end).
    ``pieces`` lists the (lower, upper) pieces of the set
    {x : Delta S_prof(x) <= delta_stat} when the profile has more than one
    dip (a union of intervals); ``lower``/``upper`` are then the outermost
    ends.  Use :meth:`contains` to test a value against the pieces.
    """

    name: str
    level: float
    delta_stat: float
    best: float
    lower: float | None
    upper: float | None
    lower_at_bound: bool = False
    upper_at_bound: bool = False
    notes: list = field(default_factory=list)
    pieces: list = field(default_factory=list)

    def contains(self, x) -> bool:
        """True when ``x`` lies in the interval (in one of its pieces)."""
        if self.pieces:
            return any(lo <= x <= hi for lo, hi in self.pieces)
        if self.lower is None or self.upper is None:
            return False
        return self.lower <= x <= self.upper

    def as_dict(self) -> dict[str, Any]:
        d = {k: getattr(self, k) for k in ("name", "level", "delta_stat", "best", "lower",
                                           "upper", "lower_at_bound", "upper_at_bound",
                                           "notes")}
        d["pieces"] = [list(p) for p in self.pieces]
        return d



def _fmt(x, err=None):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "--"
    if err is None or not math.isfinite(err) or err <= 0:
        return f"{x:.5g}"
    return f"{x:.5g} +/- {err:.2g}"


class FitResult:
    """Outcome of :func:`~edgefit.inference.fit.fit_sightline` and the
    uncertainty steps run on it."""

    def __init__(self, likelihood: JointLikelihood, params: Any, statistic: float,
                 covariance: np.ndarray | None, covariance_names: Sequence[str],
                 flags: Sequence[str], method: str, nfev: int = 0) -> None:
        self.likelihood = likelihood
        self.params = params
        self.statistic = float(statistic)
        self.covariance = covariance
        self.covariance_names = list(covariance_names)
        self.flags = list(flags)
        self.method = method
        self.nfev = nfev
        self.goodness: dict | None = None
        self.intervals: dict[str, dict[float, Interval]] = {}
        self.mcmc: McmcResult | None = None
        self.derived: DerivedSummary | None = None
        self.ppc: dict | None = None
        self.meta: dict = {}
        #: distinct minima of the multi-start fit (best first; see
        #: :func:`~edgefit.inference.fit.fit_sightline`)
        self.minima: list = []
        self.multimodal_delta: float | None = None
        self.n_starts = 1
        #: the global fit's coarse profile over the grain sizes: one dict
        #: per point (sizes, ``statistic``, ``label``)
        self.size_scan: list = []
        #: profile curves by parameter name (:class:`~.intervals.ProfileCurve`)
        self.profiles: dict = {}

    # -- basic numbers ---------------------------------------------------
    @property
    def model(self) -> ModelNode:
        return self.likelihood.model

    @property
    def datasets(self) -> list[Dataset]:
        return self.likelihood.datasets

    @property
    def statistic_name(self) -> str:
        return self.likelihood.statistic_name

    @property
    def free_names(self) -> list[str]:
        return [n for n, p in self.params.items() if p.vary and not p.expr]

    @property
    def n_bins(self) -> int:
        return self.likelihood.n_bins

    @property
    def n_free(self) -> int:
        return len(self.free_names)

    @property
    def dof(self) -> int:
        return self.n_bins - self.n_free

    @staticmethod
    def is_info_flag(flag: str) -> bool:
        """True for informational flags (:data:`INFO_FLAGS`,
        :data:`INFO_PREFIXES`)."""
        return flag in INFO_FLAGS or flag.startswith(INFO_PREFIXES)

    @property
    def converged(self) -> bool:
        """True when no convergence flag other than the informational ones
        (:data:`INFO_FLAGS`, :data:`INFO_PREFIXES`) was raised."""
        return all(self.is_info_flag(f) for f in self.flags)

    @property
    def multimodal(self) -> bool:
        """True when the multi-start fit met a second distinct minimum within
        ``multimodal_delta`` of the best (see ``minima``)."""
        return "multimodal" in self.flags

    @property
    def degenerate_elements(self) -> list[str]:
        """Elements whose gas and dust columns the data do not separate
        (``gas_dust_degenerate:<element>`` flags)."""
        return [f.split(":", 1)[1] for f in self.flags if f.startswith("gas_dust_degenerate:")]

    @property
    def values(self) -> dict[str, float]:
        return {n: float(p.value) for n, p in self.params.items()}

    def error(self, name: str) -> float | None:
        """Covariance (1 sigma) error of a free parameter, or None."""
        if self.covariance is None or name not in self.covariance_names:
            return None
        i = self.covariance_names.index(name)
        return float(math.sqrt(self.covariance[i, i]))

    def covariance_of(self, names: Sequence[str]) -> np.ndarray | None:
        """Covariance submatrix of the free parameters ``names`` (in that
        order), or None without a covariance."""
        if self.covariance is None:
            return None
        idx = [self.covariance_names.index(n) for n in names]
        return np.asarray(self.covariance)[np.ix_(idx, idx)]

    def unit(self, name: str) -> str:
        pars = self.model.parameters()
        if name in pars:
            return pars[name][1].unit
        return ""

    def description(self, name: str) -> str:
        pars = self.model.parameters()
        if name in pars:
            return pars[name][1].description
        return "cross-normalisation constant of dataset " + name.rsplit("_", 1)[-1]

    # -- summary ----------------------------------------------------------
    def summary(self) -> str:
        lines = []
        title = self.meta.get("sightline", "sightline fit")
        lines.append(f"== {title} ==")
        lines.append(f"model: {self.model.structure()}")
        for i, ds in enumerate(self.datasets):
            lines.append(f"data {i + 1}: {ds!r}")
        stat = "C (Poisson deviance)" if self.statistic_name == "poisson" else "chi-square"
        lines.append(f"statistic {stat} = {self.statistic:.3f} for {self.n_bins} bins, "
                     f"{self.n_free} free parameters, dof = {self.dof}")
        if self.goodness:
            g = self.goodness
            lines.append(f"goodness: expected C = {g['expected']:.2f} +/- "
                         f"{math.sqrt(g['variance']):.2f}, z = {g['z']:.2f}, "
                         f"p = {g['p_value']:.3g}")
        if self.ppc:
            lines.append(f"posterior predictive check: p = {self.ppc['p_value']:.3g} "
                         f"({self.ppc['n_draws']} draws)")
        lines.append("convergence: " + ("ok" + (f" (notes: {', '.join(self.flags)})"
                                                 if self.flags else "")
                                        if self.converged else
                                        "DOUBTFUL (" + ", ".join(self.flags) + ")"))
        if len(self.minima) > 1:
            lines.append(f"distinct minima from {self.n_starts} starts (Delta C from the best):")
            for m in self.minima:
                sizes = ", ".join(f"{n} = {m.params[n].value:.4g}" for n in self.free_names
                                  if self.unit(n) == "um")
                lines.append(f"  dC = {m.delta:8.3f}  ({sizes})")
            if self.multimodal:
                lines.append(f"  MULTIMODAL: a second minimum lies within dC = "
                             f"{self.multimodal_delta:.2f} of the best")
        for el in self.degenerate_elements:
            lines.append(f"GAS/DUST NOT SEPARATED for {el}: the gas and dust columns are "
                         f"degenerate (|correlation| >= 0.95); quote the total column and "
                         "read the profile intervals, which reach the physical bounds")
        lines.append("")
        hdr = f"{'parameter':<28}{'value':>26}  {'unit':<18}{'status':<10}"
        lines.append(hdr)
        lines.append("-" * len(hdr))
        for n, p in self.params.items():
            status = "tied" if p.expr else ("free" if p.vary else "fixed")
            lines.append(f"{n:<28}{_fmt(p.value, self.error(n)):>26}  {self.unit(n):<18}"
                         f"{status:<10}")
        if self.intervals:
            lines.append("")
            lines.append("profile-likelihood intervals")
            for n, by_level in self.intervals.items():
                for lev, iv in sorted(by_level.items()):
                    lo = _fmt(iv.lower) + (" (bound)" if iv.lower_at_bound else "")
                    hi = _fmt(iv.upper) + (" (bound)" if iv.upper_at_bound else "")
                    union = ("  pieces " + " U ".join(f"[{a:.5g}, {b:.5g}]"
                                                      for a, b in iv.pieces)
                             if len(iv.pieces) > 1 else "")
                    lines.append(f"  {n:<26} {level_label(lev):>4}%: [{lo}, {hi}]  "
                                 f"dStat = {iv.delta_stat:.3f}" + union
                                 + (f"  note: {'; '.join(iv.notes)}" if iv.notes else ""))
        if self.mcmc is not None:
            lines.append("")
            lines.append(self.mcmc.summary())
        if self.derived is not None:
            lines.append("")
            lines.append(self.derived.summary())
        return "\n".join(lines)

    def __str__(self):
        return self.summary()

    def __repr__(self):
        return (f"FitResult({self.statistic_name}={self.statistic:.4g}, dof={self.dof}, "
                f"converged={self.converged})")

    # -- tables -------------------------------------------------------------
    def parameter_table(self) -> Table:
        """One row per parameter: value, covariance error, profile and
        posterior intervals; ``unit`` is a string column."""
        from astropy.table import Table

        rows = []
        levels = sorted({lev for d in self.intervals.values() for lev in d})
        for n, p in self.params.items():
            row = {"name": n, "unit": self.unit(n), "value": float(p.value),
                   "error": self.error(n) if self.error(n) is not None else np.nan,
                   "status": "tied" if p.expr else ("free" if p.vary else "fixed"),
                   "min": float(p.min), "max": float(p.max)}
            for lev in levels:
                iv = self.intervals.get(n, {}).get(lev)
                lab = level_label(lev)
                row[f"profile_lo{lab}"] = iv.lower if iv and iv.lower is not None else np.nan
                row[f"profile_hi{lab}"] = iv.upper if iv and iv.upper is not None else np.nan
            if self.mcmc is not None and n in self.mcmc.names:
                med, lo, hi = self.mcmc.quantiles(n, ONE_SIGMA)
                row.update(posterior_median=med, posterior_lo68=lo, posterior_hi68=hi)
            rows.append(row)
        keys = []
        for r in rows:
            for k in r:
                if k not in keys:
                    keys.append(k)
        data = {k: [r.get(k, np.nan) for r in rows] for k in keys}
        t = Table(data)
        t.meta.update(self._meta_dict())
        return t

    def _meta_dict(self):
        meta = {"statistic": self.statistic_name, "stat_value": self.statistic,
                "n_bins": self.n_bins, "n_free": self.n_free, "dof": self.dof,
                "converged": self.converged, "flags": ",".join(self.flags) or "none",
                "method": self.method}
        if self.goodness:
            meta.update({f"gof_{k}": v for k, v in self.goodness.items()})
        if self.ppc:
            meta["ppc_p_value"] = self.ppc["p_value"]
        meta.update({k: v for k, v in self.meta.items() if isinstance(v, (str, int, float))})
        return meta

    def to_table(self) -> Table:
        """One-row astropy Table: a column per parameter (with its unit),
        ``<name>_err`` (covariance), ``<name>_lo<L>``/``_hi<L>`` (profile),
        ``<name>_med``/``_plo68``/``_phi68`` (posterior) and derived
        quantities (median and 68 % bounds), plus statistic columns."""
        from astropy.table import QTable

        cols = {}

        def put(key, value, unit):
            val = np.nan if value is None else float(value)
            cols[key] = [val] * (unit if unit is not None else u.dimensionless_unscaled)

        put("stat", self.statistic, None)
        put("dof", self.dof, None)
        for n, p in self.params.items():
            un = unit_or_none(self.unit(n))
            put(n, p.value, un)
            put(n + "_err", self.error(n), un)
            for lev, iv in sorted(self.intervals.get(n, {}).items()):
                lab = level_label(lev)
                put(f"{n}_lo{lab}", iv.lower, un)
                put(f"{n}_hi{lab}", iv.upper, un)
            if self.mcmc is not None and n in self.mcmc.names:
                med, lo, hi = self.mcmc.quantiles(n, ONE_SIGMA)
                put(n + "_med", med, un)
                put(n + "_plo68", lo, un)
                put(n + "_phi68", hi, un)
        if self.derived is not None:
            for q in self.derived.quantities:
                un = unit_or_none(q.unit)
                put(q.name, q.median, un)
                put(q.name + "_lo68", q.lower(ONE_SIGMA), un)
                put(q.name + "_hi68", q.upper(ONE_SIGMA), un)
        t = QTable(cols)
        t.meta.update(self._meta_dict())
        return t

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary of everything in the result."""
        d = {"meta": self._meta_dict(), "flags": self.flags,
             "datasets": [{"label": ds.label, "n_groups": ds.n_groups,
                           "n_channels": ds.n_channels_used,
                           "ranges_kev": ds.ranges_kev, "exposure_s": ds.exposure,
                           "background": ds.has_background} for ds in self.datasets],
             "parameters": []}
        for n, p in self.params.items():
            entry = {"name": n, "value": float(p.value), "error": self.error(n),
                     "unit": self.unit(n), "min": _json_num(p.min), "max": _json_num(p.max),
                     "status": "tied" if p.expr else ("free" if p.vary else "fixed"),
                     "description": self.description(n)}
            if p.expr:
                entry["tie"] = p.expr
            if n in self.intervals:
                entry["profile"] = [iv.as_dict() for iv in self.intervals[n].values()]
            if self.mcmc is not None and n in self.mcmc.names:
                med, lo, hi = self.mcmc.quantiles(n, ONE_SIGMA)
                entry["posterior"] = {"median": med, "lo68": lo, "hi68": hi}
            d["parameters"].append(entry)
        if self.covariance is not None:
            d["covariance"] = {"names": self.covariance_names,
                               "matrix": np.asarray(self.covariance).tolist()}
        if self.goodness:
            d["goodness"] = self.goodness
        if self.minima:
            d["minima"] = [m.as_dict(self.free_names) for m in self.minima]
            d["multimodal"] = self.multimodal
        if self.profiles:
            d["profiles"] = {n: c.as_dict() for n, c in self.profiles.items()}
        if self.ppc:
            d["posterior_predictive"] = {k: v for k, v in self.ppc.items()
                                         if not isinstance(v, np.ndarray)}
        if self.mcmc is not None:
            d["mcmc"] = self.mcmc.to_dict()
        if self.derived is not None:
            d["derived"] = self.derived.to_dict()
        return d

    def to_json(self, **kw: Any) -> str:
        return json.dumps(_jsonable(self.to_dict()), indent=kw.pop("indent", 2), **kw)

    # -- writing (explicit file I/O only here) --------------------------------
    def write(self, folder: str | os.PathLike, stem: str = "fit") -> list[Path]:
        """Write ``<stem>.ecsv`` (one-row table), ``<stem>_parameters.ecsv``,
        ``<stem>.fits``, ``<stem>.json`` and ``<stem>_summary.txt`` into
        ``folder``; returns the list of paths."""
        from pathlib import Path

        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        paths = []
        table = self.to_table()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", u.UnitsWarning)
            p = folder / f"{stem}.ecsv"
            table.write(p, format="ascii.ecsv", overwrite=True)
            paths.append(p)
            p = folder / f"{stem}_parameters.ecsv"
            self.parameter_table().write(p, format="ascii.ecsv", overwrite=True)
            paths.append(p)
            p = folder / f"{stem}.fits"
            fits_table = fits_ready_table(table)
            fits_table.meta = {k[:8].upper(): v for k, v in table.meta.items()
                               if isinstance(v, (int, float, str, bool))}
            fits_table.write(p, format="fits", overwrite=True)
            paths.append(p)
        p = folder / f"{stem}.json"
        p.write_text(self.to_json())
        paths.append(p)
        p = folder / f"{stem}_summary.txt"
        p.write_text(self.summary() + "\n")
        paths.append(p)
        return paths


def _json_num(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj
