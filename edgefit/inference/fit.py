"""Best fit by maximum likelihood.

:func:`fit_sightline` minimises the Poisson deviance (or chi-square) of one
model against one or more datasets jointly.  The signed deviance
residuals (:meth:`JointLikelihood.residuals`) go to an lmfit least-squares
minimiser (their sum of squares *is* the C statistic, so least squares on
them maximises the Poisson likelihood exactly).  If that fails (no success,
non-finite statistic) the fit falls back to a scalar minimiser on the
statistic (Nelder--Mead, then L-BFGS-B) and polishes the result with
least squares again to obtain a covariance.

Covariance: lmfit's (J^T J)^-1 of the deviance residuals with
``scale_covar=False``; for Poisson data near the optimum J^T J is the
Fisher information, so no rescaling by the reduced statistic is applied.

Doubtful convergence is never silent: the result's ``flags`` list names
every problem (``no_success``, ``at_bound:<name>``, ``no_covariance``,
``nonfinite_covariance``, ``model_not_finite``, ``fallback:<method>``) and
a :class:`~edgefit.errors.ConvergenceWarning` repeats them.

Global best fit over the grain sizes
------------------------------------
With grain sizes free, the statistic often has two valleys (small grains
with more dust, large grains with more gas and N_H) that a local
minimiser cannot leave.  So by default (``starts="auto"``) the fit is
made from the user's values (restarted once with a fresh trust region,
since on the continuum's ridge it can stop short) and then *scanned*
across the sizes: at
``n_size_starts`` points spread over the bounds of every free size
parameter (model parameters in µm; log-spaced values inset 5 % from each
bound; with several size parameters the grids are paired in a seeded
random order, a Latin hypercube) the other parameters are fitted with
the sizes held (:func:`size_scan`).  Each of these fits starts from the
nearest point already fitted (the user's fit first; or from the user's
own values where those are lower), so it follows the valley floor and
costs a few iterations; together they are a coarse profile of the
statistic over the sizes.  Every point of that profile no
higher than its two nearest neighbours (a local minimum of the coarse
profile) is then minimised with the sizes free, and the lowest end
polished once more and kept, so the answer does not depend on the
user's starting values.  (A free-size fit from every grid point, as
this module once did, found the same lowest statistic within 0.002 on
85 simulated Si K, Mg K, Fe L and O K sightlines at about 3x the cost,
since a start far up a flat valley crawls along its floor; it also
reported those crawls' end points as extra minima.  Five grid points
instead of nine missed a narrow dip between them by up to ΔC = 0.3.)

End points are grouped into distinct minima by their size parameters
(|Δ ln a| > :data:`SAME_MINIMUM_LOG_SIZE` for some size parameter); the
user's own end point counts as a minimum only where the coarse profile
does not fall away from it (it is no higher than its nearest grid
points).  Every distinct minimum is kept in ``result.minima``
(statistic, ΔC from the best, values) and the coarse profile in
``result.size_scan``; when a second minimum lies within
``multimodal_delta`` (default :data:`MULTIMODAL_DELTA`, the 99 %
one-parameter ΔC = 6.63) of the best the result is flagged
``multimodal`` (an informational flag: the best fit is still the best).

Gas and dust that the data cannot separate are said so: when a gas-phase
and a dust-phase component of one element both have a free column and
the covariance correlation of the two columns is beyond
:data:`DEGENERACY_CORRELATION` in magnitude, the informational flag
``gas_dust_degenerate:<element>`` is added.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from .._threads import single_blas_thread
from ..errors import ConvergenceWarning, FitError, ModelError
from .likelihood import JointLikelihood
from .result import FitResult

if TYPE_CHECKING:
    from ..models.base import ModelNode
    from .dataset import Dataset

__all__ = ["fit_sightline", "minimise", "LeastSquaresObjective", "BOUND_TOLERANCE",
           "Minimum", "size_parameter_names", "size_start_values", "MULTIMODAL_DELTA",
           "DEGENERACY_CORRELATION", "SAME_MINIMUM_LOG_SIZE", "reparametrise",
           "distinct_minima", "degeneracy_flags", "size_scan", "scan_minima", "ScanPoint",
           "SCAN_FTOL"]

#: A parameter within this fraction of its allowed range from a bound is
#: reported as "at bound".
BOUND_TOLERANCE = 1e-6
#: A second minimum within this Delta C of the best makes a fit
#: ``multimodal``: the chi-square(1 dof) 99 % quantile (Wilks 1938), so any
#: such minimum can matter to an interval up to 99 %.
MULTIMODAL_DELTA = 6.634896601021214
#: |correlation| of a gas and a dust column beyond which the fit says the
#: data do not separate them (common practice threshold).
DEGENERACY_CORRELATION = 0.95
#: End points whose size parameters all agree within this |Delta ln a| are
#: one minimum.
SAME_MINIMUM_LOG_SIZE = 0.15
#: Number of starts spread over the size parameters' bounds.
N_SIZE_STARTS = 9
#: Inset of the start grid from each bound (fraction, in log).
_START_INSET = 1.05


@dataclass
class Minimum:
    """One distinct minimum met by the multi-start fit."""

    statistic: float
    params: Any = field(repr=False)  # lmfit Parameters at the minimum
    start: str = ""
    delta: float = 0.0

    def values(self):
        return {n: float(p.value) for n, p in self.params.items()}

    def as_dict(self, free=None):
        vals = self.values()
        if free is not None:
            vals = {n: vals[n] for n in free if n in vals}
        return {"statistic": self.statistic, "delta": self.delta, "start": self.start,
                "values": vals}


def size_parameter_names(model, params):
    """Free model parameters that are grain radii (unit ``um``), in model
    order: the size-distribution parameters the global fit spreads its
    starts over."""
    out = []
    for full, (_, p) in model.parameters().items():
        if p.unit == "um" and full in params and params[full].vary and not params[full].expr:
            out.append(full)
    return out


def size_start_values(params, names, n=N_SIZE_STARTS, seed=0):
    """``n`` starting points (dicts name -> value) spread log-uniformly
    across the bounds of the size parameters ``names`` (inset 5 % from each
    bound); several parameters are paired in a seeded random order."""
    if not names or n <= 0:
        return []
    rng = np.random.default_rng(seed)
    grids = []
    for k, name in enumerate(names):
        p = params[name]
        lo = float(p.min) if np.isfinite(p.min) and p.min > 0 else 1e-3
        hi = float(p.max) if np.isfinite(p.max) else 10.0
        lo_i, hi_i = lo * _START_INSET, hi / _START_INSET
        if hi_i <= lo_i:
            lo_i, hi_i = lo, hi
        g = np.geomspace(lo_i, hi_i, n)
        grids.append(g if k == 0 else rng.permutation(g))
    return [{name: float(grids[k][i]) for k, name in enumerate(names)} for i in range(n)]


class LeastSquaresObjective:
    """Picklable callable lmfit hands Parameters to: returns the residual
    vector of the likelihood.  Only the free values are read from the
    Parameters; fixed values and ties were compiled once from ``params``
    (:meth:`JointLikelihood.compile`), so every call after the first is
    the vector path."""

    def __init__(self, likelihood: JointLikelihood, params=None):
        self.likelihood = likelihood
        self.evaluator = likelihood.compile(params) if params is not None else None

    def __call__(self, params):
        if self.evaluator is None:
            self.evaluator = self.likelihood.compile(params)
        ev = self.evaluator
        return ev.residuals([params[n].value for n in ev.free])


def _finite_stat(likelihood, params):
    return likelihood.statistic(params.valuesdict())


#: Relative tolerances of :func:`local_minimum` (scipy's ``ftol``/``xtol``).
LOCAL_FTOL = 1e-8
LOCAL_XTOL = 1e-8
#: :func:`local_minimum` restarts while a restart lowers the statistic by
#: more than this (at most :data:`LOCAL_RESTARTS` restarts).
LOCAL_RESTART_GAIN = 1e-3
LOCAL_RESTARTS = 3


def local_minimum(likelihood, params, *, ftol=LOCAL_FTOL, xtol=LOCAL_XTOL, max_nfev=None):
    """Minimise ``likelihood`` from ``params`` with SciPy's trust-region
    least squares called directly on the free-parameter vector.

    The lean path for the many inner minimisations of profile scans and
    the extra starts of a global fit: no lmfit objects are built per
    evaluation and no covariance is computed.  Bounds are SciPy's own
    (the same ones lmfit hands to ``least_squares``).

    The first pass scales its steps by the Jacobian's column norms
    (``x_scale="jac"``), which halves the iterations down the flat
    gas/dust/size valley but can stall where the valley bends towards a
    bound (a grain size near the end of its table): it stops with the
    statistic still several tenths, at worst a few units, above the
    minimum.  So the minimisation is restarted from its end point with
    unit scaling (a fresh trust region) while a restart lowers the
    statistic by more than :data:`LOCAL_RESTART_GAIN`; a converged end
    costs one Jacobian and a step or two to confirm.  Returns
    ``(Parameters at the end point, statistic, success)``; the statistic
    is ``inf`` where the model is not finite.
    """
    from scipy.optimize import least_squares

    ev = likelihood.compile(params)
    out = params.copy()
    if not ev.free:
        return out, ev.statistic([]), True
    lower, upper = ev.lower, ev.upper
    theta = np.clip(ev.vector(params), lower, upper)
    stat = math.inf
    success = False
    with single_blas_thread():
        for attempt in range(1 + LOCAL_RESTARTS):
            sol = least_squares(ev.residuals, theta, bounds=(lower, upper), method="trf",
                                x_scale="jac" if attempt == 0 else 1.0, ftol=ftol,
                                xtol=xtol, gtol=1e-10, max_nfev=max_nfev)
            end = np.clip(sol.x, lower, upper)
            s_end = ev.statistic(end)
            gain = stat - s_end
            if s_end < stat or not math.isfinite(stat):
                theta, stat, success = end, s_end, bool(sol.success)
            if not (gain > LOCAL_RESTART_GAIN) or max_nfev is not None:
                break
    for n, v in zip(ev.free, theta):
        out[n].set(value=float(v))
    return out, stat, success and math.isfinite(stat)


#: Start label of the user's end point where the size scan falls away
#: from it (kept as a start, not reported as a minimum).
NOT_A_MINIMUM = "user (not a minimum of the size scan)"
#: Start label of the user's end point improved by a restart.
RESTARTED = "user (restarted)"
#: Relative tolerance (SciPy's ``ftol``) of the held-size fits of the
#: size scan: about 2e-3 in C for C ~ 1000, well below the ΔC that tells
#: one valley from another; the minima found are then refined to
#: :data:`LOCAL_FTOL`.
SCAN_FTOL = 1e-6


@dataclass
class ScanPoint:
    """One point of the coarse profile over the grain sizes."""

    sizes: dict
    statistic: float
    params: Any = field(repr=False)  # lmfit Parameters (sizes free again)
    label: str = "grid"

    def log_sizes(self, names):
        return np.log([max(float(self.sizes[n]), 1e-300) for n in names])


def _moved(params, values):
    """A copy of ``params`` with ``values`` (name -> value) set, each
    clipped to its parameter's bounds."""
    q = params.copy()
    for n, v in values.items():
        q[n].set(value=min(max(float(v), q[n].min), q[n].max))
    return q


def _held_size_fit(likelihood, start, sizes):
    """Minimise with the size parameters held at ``sizes`` (a dict), from
    ``start``; returns (Parameters with the sizes free again, statistic).
    The statistic is ``inf`` where the model is not finite."""
    from scipy.optimize import least_squares

    p = _moved(start, sizes)
    for n in sizes:
        p[n].set(vary=False)
    ev = likelihood.compile(p)
    if ev.free:
        theta = np.clip(ev.vector(p), ev.lower, ev.upper)
        with single_blas_thread():
            sol = least_squares(ev.residuals, theta, bounds=(ev.lower, ev.upper),
                                method="trf", x_scale="jac", ftol=SCAN_FTOL, xtol=LOCAL_XTOL,
                                gtol=1e-10)
        theta = np.clip(sol.x, ev.lower, ev.upper)
        for n, v in zip(ev.free, theta):
            p[n].set(value=float(v))
    else:
        theta = np.empty(0)
    stat = float(ev.statistic(theta))
    for n in sizes:
        p[n].set(vary=True)
    return p, stat if math.isfinite(stat) else math.inf


def size_scan(likelihood, start, size_names, grid, start_statistic=None, raw=None):
    """The coarse profile of the statistic over the size parameters.

    ``start`` (lmfit Parameters; with ``start_statistic`` it is a fitted
    point and joins the profile as label ``"user"``) seeds the first fit;
    each point of ``grid`` (dicts name -> value) is fitted with its sizes
    held, taken in order of distance from the start (in Σ|Δ ln a|).  Each
    fit begins at whichever is lower, with the sizes moved to the grid
    point: the nearest point already fitted (a warm start that follows the
    valley floor) or ``raw`` (the user's own values; a cold start that
    keeps one failed fit from spoiling every later one).  Grid points
    within :data:`SAME_MINIMUM_LOG_SIZE` of a fitted start in every size
    are the start itself and are skipped.  Returns the list of
    :class:`ScanPoint`.
    """
    def sizes_of(p):
        return {n: float(p[n].value) for n in size_names}

    def dist(a, b):
        return float(np.abs(a.log_sizes(size_names) - b.log_sizes(size_names)).sum())

    points = []
    if start_statistic is not None and math.isfinite(start_statistic):
        points.append(ScanPoint(sizes_of(start), float(start_statistic), start, "user"))
    origin = ScanPoint(sizes_of(start), math.inf, start, "start")
    todo = []
    for g in grid:
        pt = ScanPoint(dict(g), math.inf, None)
        d = np.abs(pt.log_sizes(size_names) - origin.log_sizes(size_names))
        if points and np.all(d <= SAME_MINIMUM_LOG_SIZE):
            continue
        todo.append((float(d.sum()), pt))
    for _, pt in sorted(todo, key=lambda t: t[0]):
        done = [q for q in points if q.params is not None] or [origin]
        near = min(done, key=lambda q: dist(q, pt))
        seeds = [_moved(near.params, pt.sizes)]
        if raw is not None:
            seeds.append(_moved(raw, pt.sizes))
        first = min(seeds, key=lambda q: _seed_statistic(likelihood, q))
        try:
            pt.params, pt.statistic = _held_size_fit(likelihood, first, pt.sizes)
        except (FitError, ModelError, ValueError, FloatingPointError, np.linalg.LinAlgError):
            pt.params, pt.statistic = None, math.inf
        points.append(pt)
    return points


def _seed_statistic(likelihood, params):
    try:
        stat = float(_finite_stat(likelihood, params))
    except (ModelError, ValueError, FloatingPointError):
        return math.inf
    return stat if math.isfinite(stat) else math.inf


def scan_minima(points, size_names):
    """Points of a size scan no higher than each of their two nearest
    neighbours (in Σ|Δ ln a|): the local minima of the coarse profile,
    from which the free-size minimisations start."""
    ok = [q for q in points if q.params is not None and math.isfinite(q.statistic)]
    out = []
    for q in ok:
        x = q.log_sizes(size_names)
        others = sorted((r for r in ok if r is not q),
                        key=lambda r: float(np.abs(r.log_sizes(size_names) - x).sum()))
        if all(q.statistic <= r.statistic for r in others[:2]):
            out.append(q)
    return out


def minimise(likelihood, params, method="least_squares", fallback=True, max_nfev=None):
    """Minimise ``likelihood`` from ``params`` (lmfit Parameters).

    Returns (lmfit MinimizerResult, statistic, list of flags).  Exposed
    for profile scans, which call it with one parameter fixed.  BLAS runs
    on one thread meanwhile (:mod:`edgefit._threads`).
    """
    with single_blas_thread():
        return _minimise(likelihood, params, method, fallback, max_nfev)


def _minimise(likelihood, params, method, fallback, max_nfev):
    import lmfit

    flags = []
    objective = LeastSquaresObjective(likelihood, params)
    bad_before = likelihood.n_bad_evaluations
    kws = {}
    if max_nfev:
        kws["max_nfev"] = max_nfev
    if method not in ("least_squares", "leastsq", "nelder", "lbfgsb", "powell"):
        raise ModelError(f"unknown fit method {method!r}; use least_squares, leastsq, "
                         "nelder, lbfgsb or powell")
    try:
        out = lmfit.minimize(objective, params, method=method, scale_covar=False,
                             nan_policy="raise", **kws)
        stat = _finite_stat(likelihood, out.params)
        ok = bool(out.success) and math.isfinite(stat)
    except (ValueError, np.linalg.LinAlgError) as exc:  # lmfit raises ValueError on NaN
        out, stat, ok = None, math.inf, False
        flags.append(f"error:{type(exc).__name__}")
    if not ok and fallback:
        start = out.params if out is not None and math.isfinite(stat) else params
        best = (out, stat)
        for alt in ("nelder", "lbfgsb"):
            try:
                alt_out = lmfit.minimize(objective, start.copy(), method=alt,
                                         scale_covar=False, nan_policy="raise")
            except (ValueError, np.linalg.LinAlgError):
                continue
            alt_stat = _finite_stat(likelihood, alt_out.params)
            if alt_stat < best[1]:
                best = (alt_out, alt_stat)
            if math.isfinite(alt_stat):
                flags.append(f"fallback:{alt}")
                # polish with least squares for the covariance
                try:
                    pol = lmfit.minimize(objective, alt_out.params, method="least_squares",
                                         scale_covar=False, nan_policy="raise")
                    pol_stat = _finite_stat(likelihood, pol.params)
                    if pol_stat <= alt_stat + 1e-6:
                        best = (pol, pol_stat)
                        ok = bool(pol.success)
                except (ValueError, np.linalg.LinAlgError):
                    pass
                break
        out, stat = best
    if out is None:
        raise FitError("every minimiser failed; the model is not finite near the starting "
                       "values (check initial values and bounds)", partial=None)
    if not ok:
        flags.append("no_success")
    if not math.isfinite(stat) and likelihood.n_bad_evaluations == bad_before:
        likelihood.n_bad_evaluations += 1  # the end point itself is not finite
    if likelihood.n_bad_evaluations > bad_before:
        flags.append("model_not_finite")
    return out, stat, flags


def _bound_flags(params, free, model=None):
    """Flags of free parameters sitting on a bound: closer than
    BOUND_TOLERANCE x max(|value|, |bound|), or than 1 % of their
    covariance error.  ``at_limit:<name>`` (informational) where the bound
    is a physical limit of the model's own declaration
    (:func:`_physical_limit`): the data are consistent with it, and the
    parameter's interval reports it as a limit.  ``at_bound:<name>`` (a
    convergence flag) elsewhere: a range set by the user, or a shape
    parameter that ran to the end of its allowed range."""
    flags = []
    for name in free:
        p = params[name]
        for bound in (p.min, p.max):
            if not np.isfinite(bound):
                continue
            dist = abs(p.value - bound)
            tol = BOUND_TOLERANCE * max(abs(p.value), abs(bound))
            if p.stderr is not None and np.isfinite(p.stderr):
                tol = max(tol, 0.01 * p.stderr)
            if dist <= tol:
                limit = model is not None and _physical_limit(model, name, float(bound))
                flags.append(f"{'at_limit' if limit else 'at_bound'}:{name}")
                break
    return flags


def _physical_limit(model, name, bound):
    """True when ``bound`` is where the model's declaration of ``name`` ends
    at a physical limit: a column (cm-2) at zero, a grain radius (um) at
    either end of its tabulated range, the dust fraction of a total/fraction
    model at 0 or 1.  Bounds a user narrowed are not limits."""
    decl = model.parameters().get(name)
    if decl is None:
        return False
    d = decl[1]
    if bound not in (float(d.min), float(d.max)):
        return False
    if d.unit == "um" or name == getattr(model, "fraction_param", None):
        return True
    return "cm-2" in d.unit and bound == 0.0 == float(d.min)


def _same_minimum(a, b, size_names, stat_a=None, stat_b=None):
    """True when two end points are one minimum: their size parameters
    agree (|Delta ln a| <= SAME_MINIMUM_LOG_SIZE), or -- given both
    statistics -- the statistics agree to 1e-3 and every other free
    parameter to 1e-3 relative (the sizes then do not matter, e.g. with
    the dust column at zero)."""
    same_sizes = True
    for n in size_names:
        va, vb = float(a[n].value), float(b[n].value)
        if va <= 0 or vb <= 0:
            if abs(va - vb) > 1e-9:
                same_sizes = False
                break
        elif abs(math.log(va / vb)) > SAME_MINIMUM_LOG_SIZE:
            same_sizes = False
            break
    if same_sizes:
        return True
    if stat_a is None or stat_b is None or abs(stat_a - stat_b) > 1e-3:
        return False
    for n, p in a.items():
        if n in size_names or not p.vary or p.expr:
            continue
        va, vb = float(p.value), float(b[n].value)
        if abs(va - vb) > 1e-3 * max(abs(va), abs(vb), 1e-6):
            return False
    return True


def distinct_minima(ends, size_names):
    """Group end points [(statistic, params, start label)] into distinct
    minima (by their size parameters); sorted by statistic, ``delta``
    relative to the lowest."""
    minima: list[Minimum] = []
    for stat, params, label in sorted(ends, key=lambda e: e[0]):
        if not math.isfinite(stat):
            continue
        if any(_same_minimum(m.params, params, size_names, m.statistic, stat)
               for m in minima):
            continue
        minima.append(Minimum(float(stat), params, label))
    if minima:
        s0 = minima[0].statistic
        for m in minima:
            m.delta = m.statistic - s0
    return minima


def _column_pairs(model, params):
    """{element: (gas column names, dust column names)} of the free column
    parameters of components declaring ``phase`` gas/dust (their first
    parameter, in 1e16 cm^-2)."""
    out: dict[str, Any] = {}
    for comp in model.components():
        phase = getattr(comp, "phase", None)
        element = getattr(comp, "element", None)
        if phase not in ("gas", "dust") or not element or not comp.params:
            continue
        name = f"{comp.name}_{comp.params[0].name}"
        if name in params and params[name].vary and not params[name].expr:
            out.setdefault(element, ([], []))[0 if phase == "gas" else 1].append(name)
    return out


def degeneracy_flags(result):
    """``gas_dust_degenerate:<element>`` for each element whose free gas and
    dust columns have a covariance correlation beyond
    :data:`DEGENERACY_CORRELATION` (or whose covariance is missing while
    both are free)."""
    flags = []
    model = result.model
    tp, fp = getattr(model, "total_param", None), getattr(model, "fraction_param", None)
    if tp and result.params[tp].vary and result.params[fp].vary:
        # total/fraction form: the gas-dust covariance through the Jacobian
        # of (N_gas, N_dust) = (T (1 - f), T f)
        names = [tp, fp]
        ok = result.covariance is not None and all(n in result.covariance_names
                                                   for n in names)
        if ok:
            t, f = float(result.params[tp].value), float(result.params[fp].value)
            jac = np.array([[1.0 - f, -t], [f, t]])
            c = jac @ result.covariance_of(names) @ jac.T
            rho = c[0, 1] / math.sqrt(c[0, 0] * c[1, 1]) if c[0, 0] > 0 and c[1, 1] > 0 else 1.0
        if not ok or abs(rho) >= DEGENERACY_CORRELATION:
            flags.append(f"gas_dust_degenerate:{model.element}")
    for element, (gas, dust) in _column_pairs(model, result.params).items():
        if not gas or not dust:
            continue
        names = gas + dust
        cov = (result.covariance_of(names)
               if result.covariance is not None and all(n in result.covariance_names
                                                        for n in names) else None)
        if cov is None:
            flags.append(f"gas_dust_degenerate:{element}")
            continue
        # correlation of the summed gas and summed dust columns
        w_g = np.r_[np.ones(len(gas)), np.zeros(len(dust))]
        w_d = 1.0 - w_g
        vg, vd, cgd = w_g @ cov @ w_g, w_d @ cov @ w_d, w_g @ cov @ w_d
        rho = cgd / math.sqrt(vg * vd) if vg > 0 and vd > 0 else 1.0
        if abs(rho) >= DEGENERACY_CORRELATION:
            flags.append(f"gas_dust_degenerate:{element}")
    return flags


def fit_sightline(model: ModelNode, datasets: Sequence[Dataset], *, statistic: str = "poisson",
                  method: str = "least_squares", params: Any = None,
                  chi2_variance: str = "data", fallback: bool = True, xnorm_free: bool = True,
                  goodness: bool = True, warn: bool = True, starts: str = "auto",
                  n_size_starts: int = N_SIZE_STARTS,
                  multimodal_delta: float = MULTIMODAL_DELTA) -> FitResult:
    """Fit ``model`` jointly to ``datasets``.

    Parameters
    ----------
    model : ModelNode
        Additive model (continuum x absorbers).
    datasets : Dataset or sequence of Dataset
        Physical parameters are shared; each dataset gets a constant
        ``xnorm_i`` (the first fixed at 1).
    statistic : {"poisson", "chi2"}
    method : {"least_squares", "leastsq", "nelder", "lbfgsb", "powell"}
    params : lmfit.Parameters, optional
        Starting values, bounds, fixed flags and ``expr`` ties; default
        from the model (:meth:`JointLikelihood.make_params`).
    goodness : bool
        Compute the C-statistic goodness of fit (Kaastra 2017) for C fits.
    starts : {"auto", "single"} or sequence of dict
        ``"auto"`` (default): the user's start plus ``n_size_starts``
        starts spread over the free grain-size parameters' bounds (see the
        module docstring; a single start when no size parameter is free);
        ``"single"``: only the user's start (a local fit); a sequence of
        {name: value} dicts: the user's start plus these.
    n_size_starts : int
        Points of the size grid for ``starts="auto"``.
    multimodal_delta : float
        Distinct minima within this Delta C of the best set ``multimodal``.

    Returns
    -------
    FitResult  (``result.minima``: the distinct minima found, best first;
    ``result.multimodal``: more than one within ``multimodal_delta``)
    """
    from .dataset import Dataset

    if isinstance(datasets, Dataset):
        datasets = [datasets]
    like = JointLikelihood(model, datasets, statistic=statistic, chi2_variance=chi2_variance)
    if params is None:
        params = like.make_params(xnorm_free=xnorm_free)
    else:
        params = params.copy()
        missing = set(like.names) - set(params)
        if missing:
            base = like.make_params(xnorm_free=xnorm_free)
            for n in like.names:
                if n in missing:
                    params.add(base[n])
    size_names = size_parameter_names(model, params)
    if isinstance(starts, str):
        if starts not in ("auto", "single"):
            raise ModelError(f"starts must be 'auto', 'single' or a list of dicts, got {starts!r}")
        extra: list[dict] = []
        grid = (size_start_values(params, size_names, n_size_starts)
                if starts == "auto" else [])
    else:
        extra, grid = [dict(s) for s in starts], []
    ends = []
    out, stat, flags = None, math.inf, []
    try:
        out, stat, flags = minimise(like, params, method=method, fallback=fallback)
        ends.append((stat, out.params, "user"))
    except FitError:
        if not extra and not grid:
            raise

    def free_size_fit(p):
        if method == "least_squares":  # the lean path; the best end is polished below
            end, s_, _ = local_minimum(like, p)
            return end, s_
        o, s_, _ = minimise(like, p, method=method, fallback=False)
        return o.params, s_

    scan: list[ScanPoint] = []
    if grid:
        user_end, user_stat = (out.params, stat) if out is not None else (params, None)
        if out is not None and method == "least_squares":
            # restart the user's fit with a fresh trust region: on the
            # continuum's ridge it can stop short, and the scan would then
            # follow it from there
            end, s_, _ = local_minimum(like, out.params)
            if s_ < stat - LOCAL_RESTART_GAIN:
                user_end, user_stat = end, s_
                ends.append((s_, end, RESTARTED))
        # the coarse profile over the sizes, then a free-size fit from each
        # of its local minima (see the module docstring)
        scan = size_scan(like, user_end, size_names, grid, start_statistic=user_stat,
                         raw=params)
        lows = scan_minima(scan, size_names)
        if out is not None and not any(q.label == "user" for q in lows):
            # the coarse profile falls away from the user's end point:
            # it is not a minimum of its own (it still competes as a start)
            ends = [(s_, p_, NOT_A_MINIMUM) for s_, p_, _ in ends]
        for q in lows:
            if q.label == "user":
                continue
            try:
                end, s_ = free_size_fit(q.params)
            except FitError:
                continue
            label = ", ".join(f"{n}={v:.4g}" for n, v in q.sizes.items())
            ends.append((s_, end, label))
    for k, values in enumerate(extra):
        unknown = [n for n in values if n not in params]
        if unknown:
            raise ModelError(f"start {k + 1} names an unknown parameter {unknown[0]!r}")
        try:
            end, s_ = free_size_fit(_moved(params, values))
        except FitError:
            continue
        label = ", ".join(f"{n}={v:.4g}" for n, v in values.items())
        ends.append((s_, end, label))
    if not ends:
        raise FitError("every start failed; the model is not finite near the starting values "
                       "(check initial values and bounds)", partial=None)
    best_stat, best_params, best_label = min(ends, key=lambda e: e[0])
    if best_label != "user" or out is None:
        # polish the best end point with the full minimiser (covariance, flags)
        o, s_, fl = minimise(like, best_params, method=method, fallback=fallback)
        if s_ <= best_stat + 1e-9 or out is None or s_ < stat:
            out, stat, flags = o, s_, fl
        ends.append((s_, o.params, best_label))
    minima = (distinct_minima([e for e in ends if e[2] != NOT_A_MINIMUM or e[0] <= best_stat],
                              size_names) if size_names else [])
    flags = list(flags)
    free = [n for n, p in out.params.items() if p.vary and not p.expr]
    flags += _bound_flags(out.params, free, model)
    covar = getattr(out, "covar", None)
    if covar is None:
        flags.append("no_covariance")
    elif not np.all(np.isfinite(covar)) or np.any(np.diag(covar) <= 0):
        flags.append("nonfinite_covariance")
        covar = None
    close = [m for m in minima if m.delta <= multimodal_delta]
    if len(close) > 1:
        flags.append("multimodal")
    var_names = list(getattr(out, "var_names", free) or free)
    result = FitResult(likelihood=like, params=out.params, statistic=stat,
                       covariance=covar, covariance_names=var_names, flags=flags,
                       method=method, nfev=int(getattr(out, "nfev", 0) or 0))
    result.minima = minima
    result.multimodal_delta = float(multimodal_delta)
    result.n_starts = 1 + len(extra) + len(grid)
    result.size_scan = [{**q.sizes, "statistic": q.statistic, "label": q.label} for q in scan]
    result.flags += degeneracy_flags(result)
    if goodness and statistic == "poisson" and math.isfinite(stat):
        from .goodness import c_statistic_goodness

        result.goodness = c_statistic_goodness(result)
    doubtful = [f for f in result.flags if not result.is_info_flag(f)]
    if doubtful and warn:
        warnings.warn(f"fit convergence is doubtful: {', '.join(doubtful)}", ConvergenceWarning,
                      stacklevel=2)
    return result


def reparametrise(result, columns="total_fraction", *, gas=None, dust=None, polish=True):
    """The same fit expressed in the other column parametrisation.

    ``columns="total_fraction"``: wrap the model in
    :class:`~edgefit.models.columns.TotalAndFraction` (``gas``/``dust``:
    component names; default the single gas- and dust-phase pair of the
    model); ``"gas_dust"``: unwrap a total/fraction model.  The values are
    mapped exactly (N_gas = N_tot (1 - f), N_dust = N_tot f and back), the
    bounds are those of the new parameters, the other parameters keep
    their values, bounds and fixed flags; with ``polish`` the new result is
    re-minimised from there (it stays put when the old fit was converged;
    this gives the covariance in the new coordinates).  The distinct
    minima are carried over.  Returns a new :class:`FitResult`; profile
    intervals of the new parameters are then computed on it.
    """
    from ..models.columns import TotalAndFraction

    model = result.model
    if columns == "total_fraction":
        if isinstance(model, TotalAndFraction):
            raise ModelError("the fit is already in total/fraction form")
        if gas is None or dust is None:
            pairs: dict[str, Any] = {}
            for comp in model.components():
                ph = getattr(comp, "phase", None)
                if ph in ("gas", "dust"):
                    pairs.setdefault(comp.element, {}).setdefault(ph, []).append(comp.name)
            ok = [(el, d) for el, d in pairs.items() if len(d.get("gas", [])) == 1
                  and len(d.get("dust", [])) == 1]
            if len(ok) != 1:
                raise ModelError("name the gas and dust components (gas=..., dust=...): the "
                                 "model has no single gas/dust pair of one element")
            gas = gas or ok[0][1]["gas"][0]
            dust = dust or ok[0][1]["dust"][0]
        wrapped = TotalAndFraction(model, gas, dust)
        new_model: ModelNode = wrapped

        def convert(values):
            v = dict(values)
            g, d = v.pop(wrapped.gas_param), v.pop(wrapped.dust_param)
            v[wrapped.total_param], v[wrapped.fraction_param] = \
                TotalAndFraction.from_columns(g, d)
            return v
        pair_old = (wrapped.gas_param, wrapped.dust_param)
        pair_new = (wrapped.total_param, wrapped.fraction_param)
    elif columns == "gas_dust":
        if not isinstance(model, TotalAndFraction):
            raise ModelError("the fit is already in gas/dust form")
        new_model = model.model

        def convert(values):
            v = model.model_values(values)
            v.pop(model.total_param)
            v.pop(model.fraction_param)
            return v
        pair_old = (model.total_param, model.fraction_param)
        pair_new = (model.gas_param, model.dust_param)
    else:
        raise ModelError(f"columns must be 'total_fraction' or 'gas_dust', got {columns!r}")
    like = JointLikelihood(new_model, result.datasets, statistic=result.statistic_name,
                           chi2_variance=result.likelihood.chi2_variance)
    base = like.make_params()

    def to_params(old):
        p = base.copy()
        vals = convert({n: float(q.value) for n, q in old.items()})
        vary_pair = any(old[n].vary and not old[n].expr for n in pair_old)
        for n in p:
            if n in pair_new:
                p[n].set(value=min(max(vals[n], p[n].min), p[n].max), vary=vary_pair)
            elif n in old:
                q = old[n]
                p[n].set(value=q.value, min=q.min, max=q.max, vary=q.vary)
        return p

    params = to_params(result.params)
    stat = like.statistic(params.valuesdict())
    covar, var_names, flags = None, [], []
    if polish:
        out, s_, fl = minimise(like, params, method=result.method)
        if s_ <= stat + 1e-9:
            params, stat = out.params, s_
        covar = getattr(out, "covar", None)
        var_names = list(getattr(out, "var_names", []) or [])
        if covar is not None and (not np.all(np.isfinite(covar)) or
                                  np.any(np.diag(covar) <= 0)):
            covar = None
        flags = [f for f in fl if f != "no_success"]
    free = [n for n, p in params.items() if p.vary and not p.expr]
    flags += _bound_flags(params, free, new_model)
    flags += [f for f in result.flags if f in ("multimodal",)]
    new = FitResult(likelihood=like, params=params, statistic=stat, covariance=covar,
                    covariance_names=var_names or free, flags=flags, method=result.method)
    new.minima = [Minimum(m.statistic, to_params(m.params), m.start, m.delta)
                  for m in result.minima]
    if new.minima:
        new.minima[0] = Minimum(stat, params, new.minima[0].start, 0.0)
    new.multimodal_delta = result.multimodal_delta
    new.n_starts = result.n_starts
    new.size_scan = list(result.size_scan)
    new.meta = dict(result.meta)
    new.flags += degeneracy_flags(new)
    return new
