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

:class:`CompiledLikelihood` (from :meth:`JointLikelihood.compile`) is the
fast path used by the minimiser, profiles and samplers: it evaluates the
same statistic from a plain NumPy vector of free-parameter values, with
fixed values and ties resolved once into index maps, the model compiled
per grid (:class:`~edgefit.models.base.CompiledModel`) and folding plus
Poisson deviance done in one pass per dataset (:mod:`edgefit._foldstat`).
lmfit Parameters remain the user's interface; the hot loop never builds
them.

:class:`ParameterVector` maps the free-parameter vector of a sampler or
profile scan to full parameter values, evaluating lmfit ``expr`` ties.
"""
from __future__ import annotations

import ast
import math
from typing import TYPE_CHECKING, Any, Mapping, Sequence

import numpy as np

from .. import _foldstat, stats
from ..errors import ModelError, ParameterClashError, UnknownParameterError

if TYPE_CHECKING:
    from ..models.base import ModelNode
    from .dataset import Dataset

__all__ = ["JointLikelihood", "CompiledLikelihood", "ParameterVector", "BAD_RESIDUAL",
           "XNORM_PREFIX"]

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

    def __init__(self, model: ModelNode, datasets: Sequence[Dataset], statistic: str = "poisson",
                 chi2_variance: str = "data") -> None:
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
        # components that must see the whole model and every spectrum's
        # energy range (e.g. a dust population tied across edges) check them
        grids = [d.grid for d in self.datasets]
        for comp in model.components():
            check = getattr(comp, "validate", None)
            if callable(check):
                check(model, grids)
        self._plan_evaluations()
        self.n_bad_evaluations = 0
        self.n_evaluations = 0

    def _plan_evaluations(self):
        """Datasets whose energy grids are slices of one parent grid (the
        orders/arms of one response family) share a single model evaluation
        on the union of their slices."""
        from ..models.base import EnergyGrid

        groups: dict[Any, list[int]] = {}
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
    def names(self) -> list[str]:
        return self.model_names + self.xnorm_names

    def make_params(self, xnorm_free: bool = True) -> Any:  # lmfit.Parameters
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

    def source_counts(self, values: Mapping[str, float]) -> list[np.ndarray]:
        """Expected source counts per group for each dataset (list of
        arrays), cross-normalisation applied.  No NaN check here."""
        model_vals, xn = self._split(values)
        out: list[Any] = [None] * len(self.datasets)  # every slot filled by the plan
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

    def residuals(self, values: Mapping[str, float]) -> np.ndarray:
        """Signed residuals of all datasets, concatenated; their sum of
        squares is the statistic.  Model failures give BAD_RESIDUAL."""
        mus = self._checked(values)
        if mus is None:
            return np.full(self.n_bins, BAD_RESIDUAL)
        return np.concatenate([self._residual_one(ds, mu) for ds, mu in zip(self.datasets, mus)])

    def statistic(self, values: Mapping[str, float]) -> float:
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

    def log_likelihood(self, values: Mapping[str, float]) -> float:
        """-statistic/2 (up to a constant); -inf when the model fails."""
        s = self.statistic(values)
        return -0.5 * s if math.isfinite(s) else -math.inf

    def compile(self, params=None, free=None, values=None) -> "CompiledLikelihood":
        """The statistic as a function of a free-parameter vector.

        ``params`` (lmfit Parameters) gives the free parameters (``vary``
        and no ``expr``, in their order), the values of the fixed ones and
        the ``expr`` ties, as :class:`ParameterVector` reads them.  Without
        ``params``, ``free`` names the free parameters and ``values``
        (full names) the others; missing ones take the model's stored
        values and 1 for ``xnorm_i``.  See :class:`CompiledLikelihood`.
        """
        return CompiledLikelihood(self, params=params, free=free, values=values)

    def __getstate__(self):
        return self.__dict__.copy()


def _linear_tie(expr):
    """(source name, a, d, b) when the lmfit expression ``expr`` reads
    ``x``, ``a*x``, ``x*a``, ``x/d`` or ``-x``, optionally ``+ b`` or
    ``- b`` (numbers a, d, b), so that value = a * x / d + b is the same
    floating-point arithmetic; None for any other expression (the
    expression is parsed, never evaluated)."""
    try:
        tree = ast.parse(expr.strip(), mode="eval").body
    except SyntaxError:
        return None

    def num(node):
        if (isinstance(node, ast.Constant) and isinstance(node.value, (int, float))
                and not isinstance(node.value, bool)):
            return float(node.value)
        if (isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd))
                and isinstance(node.operand, ast.Constant)
                and isinstance(node.operand.value, (int, float))
                and not isinstance(node.operand.value, bool)):
            v = float(node.operand.value)
            return -v if isinstance(node.op, ast.USub) else v
        return None

    def scaled(node):
        if isinstance(node, ast.Name):
            return node.id, 1.0, 1.0
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub) and \
                isinstance(node.operand, ast.Name):
            return node.operand.id, -1.0, 1.0
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mult):
            if isinstance(node.right, ast.Name) and num(node.left) is not None:
                return node.right.id, num(node.left), 1.0
            if isinstance(node.left, ast.Name) and num(node.right) is not None:
                return node.left.id, num(node.right), 1.0
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div) and \
                isinstance(node.left, ast.Name) and num(node.right):
            return node.left.id, 1.0, num(node.right)
        return None

    base = scaled(tree)
    if base is not None:
        return base + (0.0,)
    if isinstance(tree, ast.BinOp) and isinstance(tree.op, (ast.Add, ast.Sub)):
        sign = 1.0 if isinstance(tree.op, ast.Add) else -1.0
        lhs, rhs = scaled(tree.left), num(tree.right)
        if lhs is not None and rhs is not None:
            return lhs + (sign * rhs,)
        if isinstance(tree.op, ast.Add):
            lhs, rhs = scaled(tree.right), num(tree.left)
            if lhs is not None and rhs is not None:
                return lhs + (rhs,)
    return None


class CompiledLikelihood:
    """A :class:`JointLikelihood` evaluated from a free-parameter vector.

    Build it with :meth:`JointLikelihood.compile`.  ``theta`` is a 1-d
    array (or sequence) of the free parameters in the order of
    :attr:`free`; fixed values are stored once, ties that are linear in one
    other parameter (``a * x``, ``x / d``, ``+ b``: everything the
    configuration files can write) are applied by precomputed index maps,
    any other lmfit expression through lmfit's own interpreter (slower,
    same numbers).

    Methods mirror the likelihood's: :meth:`statistic`, :meth:`residuals`
    (signed deviance residuals for least squares, formed only here),
    :meth:`log_likelihood`, :meth:`source_counts`; the same NaN policy
    (``inf`` / :data:`BAD_RESIDUAL` / ``-inf``, counted in the
    likelihood's :attr:`~JointLikelihood.n_bad_evaluations`).  Results
    equal those of the values-dict methods of :class:`JointLikelihood` to
    rounding.  Calling the object returns the statistic.

    Picklable: compiled models and buffers are dropped when pickled and
    rebuilt on first use.  Not thread-safe (it reuses buffers): give each
    thread its own copy.
    """

    def __init__(self, likelihood, params=None, free=None, values=None):
        self.likelihood = like = likelihood
        names = list(like.names)
        index = {n: i for i, n in enumerate(names)}
        base = [float(v) for v in like.model.default_values().values()]
        base += [1.0] * len(like.xnorm_names)
        ties = {}
        if params is not None:
            if free is not None or values is not None:
                raise ModelError("give either lmfit Parameters or free names and values")
            unknown = set(params) - set(names)
            if unknown:
                raise UnknownParameterError(f"unknown parameter(s) {sorted(unknown)}")
            free = [n for n, p in params.items() if p.vary and not p.expr]
            for n, p in params.items():
                base[index[n]] = float(p.value)
                if p.expr:
                    ties[n] = p.expr
            self._params = params.copy() if ties else None
        else:
            free = list(free or [])
            for n, v in (values or {}).items():
                if n not in index:
                    raise UnknownParameterError(f"unknown parameter {n!r}")
                base[index[n]] = float(v)
            self._params = None
            unknown = set(free) - set(names)
            if unknown:
                raise UnknownParameterError(f"unknown parameter(s) {sorted(unknown)}")
            if params is None and len(set(free)) != len(free):
                raise ModelError("a free parameter is named twice")
        self.names = names
        self.free = list(free)
        self._free_idx = np.array([index[n] for n in self.free], dtype=np.intp)
        self._base = np.array(base, dtype=float)
        if params is not None:
            self.lower = np.array([params[n].min for n in self.free], dtype=float)
            self.upper = np.array([params[n].max for n in self.free], dtype=float)
        else:
            decl = like.model.parameters()
            self.lower = np.array([decl[n][1].min if n in decl else 0.2 for n in self.free])
            self.upper = np.array([decl[n][1].max if n in decl else 5.0 for n in self.free])
        # ties: index maps in dependency order, or lmfit for the rest
        self._ties: list[tuple] = []    # (target, source, a, d, b)
        self._expr_ties = []  # target names evaluated by lmfit
        linear = {n: _linear_tie(e) for n, e in ties.items()}
        if any(v is None or v[0] not in index for v in linear.values()):
            self._expr_ties = list(ties)
        else:
            done = set()

            def place(n, stack=()):
                if n in done or n not in linear:
                    return
                if n in stack:
                    raise ModelError(f"parameter ties form a loop through {n!r}")
                src, a, d, b = linear[n]
                place(src, stack + (n,))
                self._ties.append((index[n], index[src], a, d, b))
                done.add(n)

            for n in linear:
                place(n)
        self._xn_index = [index[n] for n in like.xnorm_names]
        self._plan = None

    # -- lazily built hot-loop state (dropped when pickled) --------------
    def __getstate__(self):
        state = self.__dict__.copy()
        state["_plan"] = None
        return state

    def _ready(self):
        """Per shared grid: the compiled model, the Poisson datasets without
        background stacked into one :class:`~edgefit._foldstat.FoldingGroup`
        (their cross-normalisation slots and residual offsets), and the
        other datasets (folded by the kernel, statistic by
        :meth:`JointLikelihood._residual_one`)."""
        like = self.likelihood
        starts = np.cumsum([0] + [d.n_groups for d in like.datasets])
        self._starts = [int(x) for x in starts]
        plan = []
        for union, members in like._plan:
            cm = like.model.compile(union, self.names)
            fast = [(i, off) for i, off, _n in members
                    if like.statistic_name == "poisson" and not like.datasets[i].has_background]
            slow = [(i, off, _foldstat.Folding(like.datasets[i].matrix), self._xn_index[i])
                    for i, off, _n in members if (i, off) not in fast]
            group = xn_idx = group_starts = None
            if fast:
                ds = [like.datasets[i] for i, _ in fast]
                group = _foldstat.FoldingGroup([d.matrix for d in ds], [o for _, o in fast],
                                               [d.counts for d in ds])
                xn_idx = np.array([self._xn_index[i] for i, _ in fast], dtype=np.intp)
                group_starts = np.array([self._starts[i] for i, _ in fast], dtype=np.int64)
            plan.append((cm, group, xn_idx, group_starts, slow))
        self._plan = plan
        return plan

    def __len__(self):
        return len(self.free)

    # -- parameter vectors -------------------------------------------------
    def full(self, theta) -> np.ndarray:
        """All parameter values (``names`` order) for free vector ``theta``."""
        v = self._base.copy()
        v[self._free_idx] = theta
        for t, src, a, d, b in self._ties:
            v[t] = a * v[src] / d + b
        if self._expr_ties:
            params = self._params
            assert params is not None  # kept whenever there are expression ties
            for n, x in zip(self.free, v[self._free_idx]):
                params[n].value = float(x)
            params.update_constraints()
            for n in self._expr_ties:
                v[self.names.index(n)] = float(params[n].value)
        return v

    def values(self, theta) -> dict:
        """Full values dict (the input of the dict-based methods)."""
        return dict(zip(self.names, self.full(theta).tolist()))

    def vector(self, params) -> np.ndarray:
        """The free vector read from lmfit Parameters (or a values dict)."""
        get = (lambda n: params[n].value) if hasattr(params, "valuesdict") else \
            (lambda n: params[n])
        return np.array([float(get(n)) for n in self.free])

    def in_bounds(self, theta) -> bool:
        theta = np.asarray(theta, dtype=float)
        return bool(np.all(theta >= self.lower) and np.all(theta <= self.upper))

    # -- evaluation ---------------------------------------------------------
    def source_counts(self, theta):
        """Expected source counts per group for each dataset (list of
        arrays), cross-normalisation applied.  No NaN check here."""
        vals = self.full(theta).tolist()
        like = self.likelihood
        out = [None] * len(like.datasets)
        with np.errstate(all="ignore"):
            for union, members in like._plan:
                flux = like.model.compile(union, self.names)(vals)
                for i, off, _n in members:
                    out[i] = vals[self._xn_index[i]] * like.datasets[i].fold(
                        flux[off:off + _n])
        return out

    def statistic(self, theta) -> float:
        """The fit statistic; ``inf`` when the model is not finite."""
        like = self.likelihood
        like.n_evaluations += 1
        v = self.full(theta)
        vals = v.tolist()
        plan = self._plan or self._ready()
        total = 0.0
        ok = True
        try:
            with np.errstate(all="ignore"):
                for cm, group, xn_idx, _starts, slow in plan:
                    flux = cm(vals)
                    if group is not None:
                        c, ok = group.deviance(flux, v[xn_idx])
                        if not ok:
                            break
                        total += c
                    for i, off, fm, xi in slow:
                        mu = _foldstat.fold(fm, flux, off, vals[xi])
                        ok = _finite_non_negative(mu)
                        if not ok:
                            break
                        total += float(np.sum(like._residual_one(like.datasets[i], mu) ** 2))
                    if not ok:
                        break
        except (FloatingPointError, ZeroDivisionError, OverflowError):
            ok = False
        if not ok:
            like.n_bad_evaluations += 1
            return math.inf
        return total

    __call__ = statistic

    def residuals(self, theta) -> np.ndarray:
        """Signed residuals of all datasets, concatenated (sum of squares =
        statistic); a vector of :data:`BAD_RESIDUAL` when the model fails."""
        like = self.likelihood
        like.n_evaluations += 1
        v = self.full(theta)
        vals = v.tolist()
        plan = self._plan or self._ready()
        starts = self._starts
        out = np.empty(like.n_bins)
        ok = True
        try:
            with np.errstate(all="ignore"):
                for cm, group, xn_idx, group_starts, slow in plan:
                    flux = cm(vals)
                    if group is not None:
                        ok = group.residuals(flux, v[xn_idx], out, group_starts)
                        if not ok:
                            break
                    for i, off, fm, xi in slow:
                        mu = _foldstat.fold(fm, flux, off, vals[xi])
                        ok = _finite_non_negative(mu)
                        if not ok:
                            break
                        out[starts[i]:starts[i + 1]] = like._residual_one(like.datasets[i], mu)
                    if not ok:
                        break
        except (FloatingPointError, ZeroDivisionError, OverflowError):
            ok = False
        if not ok:
            like.n_bad_evaluations += 1
            out.fill(BAD_RESIDUAL)
        return out

    def log_likelihood(self, theta) -> float:
        """-statistic/2; -inf when the model fails."""
        s = self.statistic(theta)
        return -0.5 * s if math.isfinite(s) else -math.inf


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
