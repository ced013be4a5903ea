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
"""
from __future__ import annotations

import math
import warnings

import numpy as np

from ..errors import ConvergenceWarning, FitError, ModelError
from .likelihood import JointLikelihood
from .result import FitResult

__all__ = ["fit_sightline", "minimise", "LeastSquaresObjective", "BOUND_TOLERANCE"]

#: A parameter within this fraction of its allowed range from a bound is
#: reported as "at bound".
BOUND_TOLERANCE = 1e-6


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


def minimise(likelihood, params, method="least_squares", fallback=True, max_nfev=None):
    """Minimise ``likelihood`` from ``params`` (lmfit Parameters).

    Returns (lmfit MinimizerResult, statistic, list of flags).  Exposed
    for profile scans, which call it with one parameter fixed.
    """
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


def _bound_flags(params, free):
    """Names of free parameters sitting on a bound: closer than
    BOUND_TOLERANCE x max(|value|, |bound|), or than 1 % of their
    covariance error."""
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
                flags.append(f"at_bound:{name}")
                break
    return flags


def fit_sightline(model, datasets, *, statistic="poisson", method="least_squares",
                  params=None, chi2_variance="data", fallback=True, xnorm_free=True,
                  goodness=True, warn=True):
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

    Returns
    -------
    FitResult
    """
    from .dataset import Dataset

    if isinstance(datasets, Dataset):
        datasets = [datasets]
    like = JointLikelihood(model, datasets, statistic=statistic, chi2_variance=chi2_variance)
    if params is None:
        params = like.make_params(xnorm_free=xnorm_free)
    else:
        missing = set(like.names) - set(params)
        if missing:
            base = like.make_params(xnorm_free=xnorm_free)
            for n in like.names:
                if n in missing:
                    params.add(base[n])
    out, stat, flags = minimise(like, params, method=method, fallback=fallback)
    free = [n for n, p in out.params.items() if p.vary and not p.expr]
    flags += _bound_flags(out.params, free)
    covar = getattr(out, "covar", None)
    if covar is None:
        flags.append("no_covariance")
    elif not np.all(np.isfinite(covar)) or np.any(np.diag(covar) <= 0):
        flags.append("nonfinite_covariance")
        covar = None
    var_names = list(getattr(out, "var_names", free) or free)
    result = FitResult(likelihood=like, params=out.params, statistic=stat,
                       covariance=covar, covariance_names=var_names, flags=flags,
                       method=method, nfev=int(getattr(out, "nfev", 0) or 0))
    if goodness and statistic == "poisson" and math.isfinite(stat):
        from .goodness import c_statistic_goodness

        result.goodness = c_statistic_goodness(result)
    if flags and warn:
        warnings.warn(f"fit convergence is doubtful: {', '.join(flags)}", ConvergenceWarning,
                      stacklevel=2)
    return result
