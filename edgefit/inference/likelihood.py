"""The joint likelihood of one model and several spectra.

:class:`JointLikelihood` is the one place where model parameters meet
data.  It is a plain, picklable object (model + datasets + choices), so a
process pool can evaluate it.  It owns:

* the cross-normalisation constants, one per dataset, named
  ``xnorm_1 .. xnorm_N`` (the first fixed at 1 by default);
* the statistic: the Poisson likelihood as signed deviance residuals
  (Cash 1979; :func:`edgefit.stats.deviance_residuals`), the background-
  profiled Poisson likelihood when a dataset has a background (Wachter,
  Leach & Kellogg 1979; :func:`edgefit.stats.profiled_background_residuals`),
  or chi-square with a stated variance choice;
* one model evaluation per family of datasets whose energy grids are
  slices of one response grid (on the union of the slices);
* **the NaN policy**: expected counts that are not finite or are negative
  never reach an optimiser.  :meth:`residuals` returns a vector of
  :data:`BAD_RESIDUAL` instead (a statistic of about 1e12 per bin, which
  any minimiser backs away from), :meth:`statistic` returns ``inf`` and
  :meth:`log_likelihood` ``-inf``; each such event is counted in
  :attr:`n_bad_evaluations` so that a fit can flag it.

:class:`ParameterVector` maps the free-parameter vector of a sampler or
profile scan to full parameter values, evaluating lmfit ``expr`` ties.
"""
from __future__ import annotations

import math

import numpy as np

from .. import stats
from ..errors import ModelError, ParameterClashError, UnknownParameterError

__all__ = ["JointLikelihood", "ParameterVector", "BAD_RESIDUAL", "XNORM_PREFIX"]

#: Residual returned for every bin when the model is not finite/negative.
BAD_RESIDUAL = 1e6
#: Prefix of the cross-normalisation constants (``xnorm_1``, ``xnorm_2``...).
XNORM_PREFIX = "xnorm_"
STATISTICS = ("poisson", "chi2")


def _finite_non_negative(m):
    """True when every element is finite and >= 0 (NaN fails ``min >= 0``,
    +inf makes the sum infinite); two reductions, no temporaries."""
    return bool(m.min() >= 0.0 and np.isfinite(m.sum())) if m.size else True


class JointLikelihood:
    """Likelihood of ``model`` given ``datasets``.

    Parameters
    ----------
    model : ModelNode
        An additive model (photons cm^-2 s^-1 per bin).
    datasets : sequence of Dataset
    statistic : {"poisson", "chi2"}
        ``poisson``: Poisson deviance (profiled background where present);
        ``chi2``: chi-square with ``chi2_variance`` (see
        :func:`edgefit.stats.chi_square`; background, if any, is
        subtracted after scaling and its variance added).
    chi2_variance : {"data", "model", "gehrels"}
    """

    def __init__(self, model, datasets, statistic="poisson", chi2_variance="data"):
        from ..models.base import ADDITIVE

        if getattr(model, "kind", None) != ADDITIVE:
            raise ModelError("the fitted model must be additive (a continuum, possibly "
                             "multiplied by absorbers)")
        if statistic not in STATISTICS:
            raise ModelError(f"unknown statistic {statistic!r}; use one of {STATISTICS}")
        if chi2_variance not in ("data", "model", "gehrels"):
            raise ModelError(f"unknown chi-square variance {chi2_variance!r}")
        self.model = model
        self.datasets = list(datasets)
        if not self.datasets:
            raise ModelError("no data to fit")
        self.statistic_name = statistic
        self.chi2_variance = chi2_variance
        self.model_names = list(model.parameters())
        self.xnorm_names = [f"{XNORM_PREFIX}{i + 1}" for i in range(len(self.datasets))]
        clash = set(self.model_names) & set(self.xnorm_names)
        if clash:
            raise ParameterClashError(f"model parameter(s) {sorted(clash)} clash with the "
                                      "cross-normalisation constants; rename the component")
        self.n_bins = int(sum(d.n_groups for d in self.datasets))
        self._plan_evaluations()
        self.n_bad_evaluations = 0
        self.n_evaluations = 0

    def _plan_evaluations(self):
        """Datasets whose energy grids are slices of one parent grid (the
        orders/arms of one response family) share a single model evaluation
        on the union of their slices."""
        from ..models.base import EnergyGrid

        groups = {}
        for i, ds in enumerate(self.datasets):
            groups.setdefault(ds.response.grid.key, []).append(i)
        self._plan = []  # (union grid, [(dataset index, offset, length)])
        for idx in groups.values():
            parent = self.datasets[idx[0]].response.grid
            a = min(self.datasets[i].energy_slice[0] for i in idx)
            b = max(self.datasets[i].energy_slice[1] for i in idx)
            union = EnergyGrid(parent.lo[a:b], parent.hi[a:b])
            self._plan.append((union, [(i, self.datasets[i].energy_slice[0] - a,
                                        len(self.datasets[i].grid)) for i in idx]))

    # ------------------------------------------------------------------
    @property
    def names(self):
        return self.model_names + self.xnorm_names

    def make_params(self, xnorm_free=True):
        """lmfit Parameters: the model's, then ``xnorm_i`` (first fixed at 1;
        the others free in [0.2, 5] unless ``xnorm_free`` is False)."""
        params = self.model.make_params()
        for i, name in enumerate(self.xnorm_names):
            params.add(name, value=1.0, min=0.2, max=5.0, vary=bool(xnorm_free and i > 0))
        return params

    def _split(self, values):
        unknown = set(values) - set(self.model_names) - set(self.xnorm_names)
        if unknown:
            raise UnknownParameterError(f"unknown parameter(s) {sorted(unknown)}")
        model_vals = {k: v for k, v in values.items() if k in self.model_names or
                      not k.startswith(XNORM_PREFIX)}
        xn = [float(values.get(n, 1.0)) for n in self.xnorm_names]
        return model_vals, xn

    def source_counts(self, values):
        """Expected source counts per group for each dataset (list of
        arrays), cross-normalisation applied.  No NaN check here."""
        model_vals, xn = self._split(values)
        out = [None] * len(self.datasets)
        for union, members in self._plan:
            flux = self.model.evaluate(union, model_vals)
            for i, off, n in members:
                out[i] = xn[i] * self.datasets[i].fold(flux[off:off + n])
        return out

    def _checked(self, values):
        self.n_evaluations += 1
        with np.errstate(all="ignore"):
            try:
                mus = self.source_counts(values)
            except (FloatingPointError, ZeroDivisionError, OverflowError):
                mus = None
        if mus is None or not all(_finite_non_negative(m) for m in mus):
            self.n_bad_evaluations += 1
            return None
        return mus

    def _residual_one(self, ds, mu):
        if self.statistic_name == "poisson":
            if ds.has_background:
                return stats.profiled_background_residuals(mu, ds.counts, ds.bkg_counts,
                                                           ds.bkg_ratio)
            return stats.deviance_residuals(mu, ds.counts)
        n = ds.counts
        m = mu
        extra = 0.0
        if ds.has_background:
            n = ds.counts - ds.bkg_ratio * ds.bkg_counts
            extra = ds.bkg_ratio ** 2 * np.maximum(ds.bkg_counts, 1.0)
        if self.chi2_variance == "data":
            var = np.maximum(ds.counts, 1.0)
        elif self.chi2_variance == "model":
            var = np.maximum(mu, stats.MODEL_FLOOR)
        else:
            var = (1.0 + np.sqrt(ds.counts + 0.75)) ** 2
        return (n - m) / np.sqrt(var + extra)

    def residuals(self, values):
        """Signed residuals of all datasets, concatenated; their sum of
        squares is the statistic.  Model failures give BAD_RESIDUAL."""
        mus = self._checked(values)
        if mus is None:
            return np.full(self.n_bins, BAD_RESIDUAL)
        return np.concatenate([self._residual_one(ds, mu) for ds, mu in zip(self.datasets, mus)])

    def statistic(self, values):
        """The fit statistic (C deviance or chi-square); ``inf`` when the
        model is not finite."""
        mus = self._checked(values)
        if mus is None:
            return math.inf
        total = 0.0
        for ds, mu in zip(self.datasets, mus):
            if self.statistic_name == "poisson" and not ds.has_background:
                total += stats.c_statistic(mu, ds.counts)  # = sum of squared residuals
            else:
                total += float(np.sum(self._residual_one(ds, mu) ** 2))
        return total

    def log_likelihood(self, values):
        """-statistic/2 (up to a constant); -inf when the model fails."""
        s = self.statistic(values)
        return -0.5 * s if math.isfinite(s) else -math.inf

    def __getstate__(self):
        return self.__dict__.copy()


class ParameterVector:
    """Free-parameter vector <-> full parameter values.

    Built from lmfit Parameters: the free ones (``vary`` and no ``expr``)
    form the vector; fixed ones keep their value; tied ones (``expr``) are
    evaluated by lmfit's own expression machinery after the free values are
    set (lmfit's restricted interpreter, never Python's eval).
    """

    def __init__(self, params):
        self.params = params.copy()
        self.free = [n for n, p in params.items() if p.vary and not p.expr]
        self.tied = [n for n, p in params.items() if p.expr]
        self.lower = np.array([params[n].min for n in self.free], dtype=float)
        self.upper = np.array([params[n].max for n in self.free], dtype=float)
        self._base = {n: float(p.value) for n, p in params.items()}

    def __len__(self):
        return len(self.free)

    def vector(self, params=None):
        src = params if params is not None else self.params
        return np.array([float(src[n].value) for n in self.free])

    def in_bounds(self, theta):
        return bool(np.all(theta >= self.lower) and np.all(theta <= self.upper))

    def values(self, theta):
        """Full values dict for free vector ``theta``."""
        vals = dict(self._base)
        for n, x in zip(self.free, theta):
            vals[n] = float(x)
        if self.tied:
            for n, x in zip(self.free, theta):
                self.params[n].value = float(x)
            self.params.update_constraints()
            for n in self.tied:
                vals[n] = float(self.params[n].value)
        return vals
