"""Straight-line regressions between two columns of a sample table.

:func:`regress` fits ``y = intercept + slope * x`` (or ``y = slope * x``
through the origin) to two quantities of a sample table, each with errors
and possibly upper limits, in three ways:

1. **Orthogonal distance regression** (ODR) through the ``odrpack``
   package (the ODRPACK95 library; Boggs et al.), using the detected points
   only (a limit has no position to measure a distance from).  Weights are
   1/σ² in each coordinate.  The reported errors are ODRPACK's ``sd_beta``:
   the square roots of the covariance diagonal scaled by the residual
   variance (the reduced chi-square), so scatter beyond the stated errors
   widens them.

2. **A Bayesian straight line with intrinsic scatter** after Kelly 2007
   (ApJ 665, 1489) with a single Gaussian for the distribution of the true
   x (his model with K = 1 mixture component):

   .. math::

       \\xi_i \\sim N(\\mu, \\tau^2), \\quad
       \\eta_i \\mid \\xi_i \\sim N(\\alpha + \\beta\\xi_i, \\sigma^2), \\quad
       x_i \\sim N(\\xi_i, \\sigma_{x,i}^2), \\quad
       y_i \\sim N(\\eta_i, \\sigma_{y,i}^2).

   The true values are integrated out analytically, so each detected point
   contributes a bivariate normal density of (x_i, y_i) with means
   (μ, α + βμ) and covariance [[τ² + σx², βτ²], [βτ², β²τ² + σ² + σy²]]
   (Kelly 2007, section 4).  An upper limit U on y contributes the
   probability that the observed y lies below U given the observed x (the
   conditional normal of y given x, integrated up to U); an upper limit on
   x likewise; a point limited in both coordinates the bivariate normal
   probability of the quadrant below (U_x, U_y) (computed with Owen's T
   function).  The error of a limit is taken as zero unless the table gives
   one.  Priors: flat in α, β, μ; flat in σ ≥ 0; flat in ln τ.  The
   posterior is sampled with ``emcee`` (Foreman-Mackey et al. 2013) after a
   maximum-a-posteriori start from several points; the chain is extended
   until it is at least 50 autocorrelation times long (or ``max_steps``).
   Internally x and y are centred and scaled to order one; results are
   given in the table's units.  Limitation: when the x errors are as large
   as the spread of the x values, the width of the true-x distribution can
   shrink towards zero and the slope is then barely identified (it is only
   held by the bound |slope| < 1000 in scaled units); the chain becomes
   very slow to mix and a ShortChainWarning says so.  The intervals of such
   a fit should not be trusted.  The recovery test in the suite and
   ``benchmarks/validate_regression.py`` (68 % coverage over repeats) show
   that this variant recovers known lines with censored points.

3. **Rank correlations**: Spearman's ρ and Kendall's τ_b with their
   p-values (``scipy.stats``; limits are ranked at their limit values), and
   the generalised Kendall's τ for censored data of Brown, Hollander &
   Korwar (1974) as presented by Isobe, Feigelson & Nelson 1986 (ApJ 306,
   490, section IIIa), :func:`censored_kendall`.

Input columns (for a quantity ``Q``)
------------------------------------
``Q`` the value, with a unit (use the unit ``''`` for dimensionless
quantities; a column without any unit is refused); its error from either
``Q_lo`` and ``Q_hi``, the bounds of the 68 % interval (the sample-table
convention), or ``Q_err``, a symmetric 1σ error (the manifest's hydrogen
columns); optionally ``Q_upper`` (bool): the row is an upper limit whose
value is ``Q``.  Rows whose value (or, for a detection, error) is not
finite, and rows whose ``status`` column says ``failed``, are left out and
listed in the result.

**Symmetrisation rule.**  Both fits use one Gaussian error per point:
σ = (Q_hi − Q_lo)/2, the half-width of the 68 % interval, centred on the
value ``Q``.  The figure shows the asymmetric interval itself.
"""
from __future__ import annotations

import json
import math
import os
import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from astropy import units as u

if TYPE_CHECKING:
    from astropy.table import Table

from ..errors import (ArgumentError, FitError, InputFileError, MissingColumnError,
                      ShortChainWarning)

__all__ = ["SYMMETRISATION_RULE", "SampleColumnError", "Measurements", "RegressionResult",
           "read_quantity", "regress", "odr_line", "ODR_SETTINGS", "bayes_line", "censored_kendall",
           "bivariate_normal_cdf", "read_sample", "regress_sample", "write_json",
           "simulate_line_table"]

#: How asymmetric 68 % intervals become one Gaussian σ (quoted in outputs).
SYMMETRISATION_RULE = "sigma = (Q_hi - Q_lo) / 2 (half-width of the 68 % interval), centred on Q"

#: Chains shorter than this many autocorrelation times are extended (common practice,
#: emcee documentation).
_MIN_TAU_MULTIPLE = 50


class SampleColumnError(InputFileError):
    """A column of a sample table cannot be used for a regression."""


@dataclass
class Measurements:
    """One quantity of a sample table, ready for fitting.

    ``value`` the central value (or the limit), ``sigma`` the symmetrised
    1σ error, ``err_lo``/``err_hi`` the distances to the 68 % interval ends
    (for error bars), ``upper`` True for upper limits; ``unit`` an astropy
    unit; ``names`` the row labels.
    """

    name: str
    unit: u.UnitBase
    value: np.ndarray
    sigma: np.ndarray
    err_lo: np.ndarray
    err_hi: np.ndarray
    upper: np.ndarray

    def take(self, keep):
        return Measurements(self.name, self.unit, self.value[keep], self.sigma[keep],
                            self.err_lo[keep], self.err_hi[keep], self.upper[keep])


def _plain(col):
    """A column's data as a float array with masked entries as NaN."""
    data = np.ma.asarray(getattr(col, "value", col))
    return np.ma.filled(data.astype(float), np.nan)


def _column_unit(table, name, source):
    col = table[name]
    unit = getattr(col, "unit", None)
    if unit is None:
        raise SampleColumnError(source, f"column {name!r} has no unit (give dimensionless "
                                        "quantities the unit '' in ECSV)")
    return u.Unit(unit)


def read_quantity(table, name, source="<table>") -> Measurements:
    """Value, symmetrised error and limit flags of quantity ``name``.

    See the module docstring for the column conventions.  Errors name the
    table (``source``) and the column.
    """
    if name not in table.colnames:
        raise MissingColumnError(source, f"no column {name!r} (have: "
                                         f"{', '.join(table.colnames)})")
    unit = _column_unit(table, name, source)
    value = _plain(table[name])
    n = len(value)
    if f"{name}_upper" in table.colnames:
        upper = np.ma.filled(np.ma.asarray(table[f"{name}_upper"]).astype(bool), False)
    else:
        upper = np.zeros(n, bool)
    if f"{name}_lo" in table.colnames and f"{name}_hi" in table.colnames:
        lo, hi = (_plain(table[f"{name}{s}"]) for s in ("_lo", "_hi"))
        for suffix in ("_lo", "_hi"):
            cu = getattr(table[name + suffix], "unit", None)
            if cu is not None and u.Unit(cu) != unit:
                try:
                    conv = u.Unit(cu).to(unit)
                except u.UnitConversionError:
                    raise SampleColumnError(
                        source, f"column {name + suffix!r} has unit {cu}, not convertible "
                                f"to {name!r}'s {unit}") from None
                if suffix == "_lo":
                    lo = lo * conv
                else:
                    hi = hi * conv
        with np.errstate(invalid="ignore"):
            bad = np.isfinite(lo) & np.isfinite(hi) & ~upper & ((lo > value) | (hi < value))
        if np.any(bad):
            i = int(np.flatnonzero(bad)[0])
            raise SampleColumnError(source, f"column {name!r}: row {i} lies outside its "
                                            f"interval [{name}_lo, {name}_hi]")
        sigma = 0.5 * (hi - lo)
        err_lo, err_hi = value - lo, hi - value
    elif f"{name}_err" in table.colnames:
        sigma = np.abs(_plain(table[f"{name}_err"]))
        cu = getattr(table[f"{name}_err"], "unit", None)
        if cu is not None and u.Unit(cu) != unit:
            try:
                sigma = sigma * u.Unit(cu).to(unit)
            except u.UnitConversionError:
                raise SampleColumnError(source, f"column {name + '_err'!r} has unit {cu}, "
                                                f"not convertible to {unit}") from None
        err_lo, err_hi = sigma.copy(), sigma.copy()
    else:
        raise MissingColumnError(source, f"no error columns for {name!r} (need {name}_lo and "
                                         f"{name}_hi, or {name}_err)")
    return Measurements(name, unit, value, sigma, err_lo, err_hi, upper)


# ---------------------------------------------------------------------------
# rank correlations
# ---------------------------------------------------------------------------

def _pair_signs(value, upper):
    """a_ij of Isobe, Feigelson & Nelson 1986 (eq. 11 family) for data with
    upper limits: +1 if x_j is certainly larger than x_i, −1 if certainly
    smaller, 0 if the order cannot be told (or a tie).  x_i < x_j is certain
    when v_i < v_j and j is a detection (i may be a limit: x_i ≤ v_i)."""
    v = np.asarray(value, float)
    det = ~np.asarray(upper, bool)
    less = (v[:, None] < v[None, :]) & det[None, :]     # x_i < x_j certainly
    greater = (v[:, None] > v[None, :]) & det[:, None]  # x_i > x_j certainly
    return less.astype(float) - greater.astype(float)


def censored_kendall(x, y, x_upper=None, y_upper=None) -> dict:
    """Generalised Kendall's τ for data with upper limits in x and/or y.

    Brown, Hollander & Korwar (1974) as given by Isobe, Feigelson & Nelson
    1986 (ApJ 306, 490, section IIIa): with a_ij, b_ij the signs of the
    certain orderings of x and y (0 when censoring leaves the order open),
    S = Σ_{i≠j} a_ij b_ij and, under independence,

    .. math::

        \\mathrm{var}(S) = \\frac{4}{n(n-1)(n-2)}
            \\Big[\\sum_i\\Big(\\sum_j a_{ij}\\Big)^2 - \\sum_{ij} a_{ij}^2\\Big]
            \\Big[\\sum_i\\Big(\\sum_j b_{ij}\\Big)^2 - \\sum_{ij} b_{ij}^2\\Big]
            + \\frac{2}{n(n-1)} \\sum_{ij} a_{ij}^2 \\sum_{ij} b_{ij}^2 .

    Returns ``tau`` = S / sqrt(Σa² Σb²) (Kendall's τ_b when nothing is
    censored), ``z`` = S/sqrt(var S) and the two-sided normal ``p``.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    n = len(x)
    if n < 3:
        raise ArgumentError("censored Kendall's tau needs at least 3 points")
    xu = np.zeros(n, bool) if x_upper is None else np.asarray(x_upper, bool)
    yu = np.zeros(n, bool) if y_upper is None else np.asarray(y_upper, bool)
    a = _pair_signs(x, xu)
    b = _pair_signs(y, yu)
    s = float(np.sum(a * b))
    sa2, sb2 = float(np.sum(a * a)), float(np.sum(b * b))
    ra, rb = a.sum(axis=1), b.sum(axis=1)
    var = (4.0 / (n * (n - 1) * (n - 2)) * (float(ra @ ra) - sa2) * (float(rb @ rb) - sb2)
           + 2.0 / (n * (n - 1)) * sa2 * sb2)
    if sa2 == 0 or sb2 == 0 or var <= 0:
        return {"tau": float("nan"), "z": float("nan"), "p": float("nan"), "S": s, "var_S": var}
    from scipy.special import ndtr

    z = s / math.sqrt(var)
    return {"tau": s / math.sqrt(sa2 * sb2), "z": z, "p": float(2.0 * ndtr(-abs(z))),
            "S": s, "var_S": var}


# ---------------------------------------------------------------------------
# ODR
# ---------------------------------------------------------------------------

def _line(x, beta):
    return beta[0] + beta[1] * x


def _line_origin(x, beta):
    return beta[0] * x


#: ODRPACK settings: central differences and tight stopping tolerances, so the
#: answer is converged to ~1e-9 relative and does not depend on the start.
ODR_SETTINGS: dict[str, Any] = {"diff_scheme": "central", "sstol": 1e-15, "partol": 1e-15,
                                "maxit": 200}


def odr_line(x, y, sx, sy, through_origin=False) -> dict:
    """Orthogonal distance regression of a straight line with ``odrpack``.

    Weights 1/sx², 1/sy².  The problem is solved on centred, scaled
    coordinates ((x − x0)/s_x, (y − y0)/s_y with medians and standard
    deviations; no centring through the origin), from an ordinary
    least-squares start, with :data:`ODR_SETTINGS`; the line and its
    covariance are transformed back exactly (the weighted orthogonal
    distance is invariant under this change of variables).  Returns slope,
    intercept, their ``sd_beta`` errors (ODRPACK's standard errors: the
    covariance scaled by the residual variance), the unscaled errors, the
    scaled covariance of (intercept, slope), the residual variance and
    ODRPACK's stop reason.
    """
    from odrpack import odr_fit

    x, y, sx, sy = (np.asarray(v, float) for v in (x, y, sx, sy))
    if through_origin:
        x0 = y0 = 0.0
        xs = float(np.sqrt(np.mean(x ** 2))) or 1.0
        ys = float(np.sqrt(np.mean(y ** 2))) or 1.0
    else:
        x0, y0 = float(np.median(x)), float(np.median(y))
        xs, ys = float(np.std(x)) or 1.0, float(np.std(y)) or 1.0
    X, Y, SX, SY = (x - x0) / xs, (y - y0) / ys, sx / xs, sy / ys
    if through_origin:
        beta0 = [float(np.sum(X * Y) / np.sum(X * X))]
        res = odr_fit(_line_origin, X, Y, beta0, weight_x=1.0 / SX ** 2,
                      weight_y=1.0 / SY ** 2, **ODR_SETTINGS)
        jac = np.array([[0.0], [ys / xs]])          # (intercept, slope) from (b,)
        icpt0 = 0.0
    else:
        b1, b0 = np.polyfit(X, Y, 1)
        res = odr_fit(_line, X, Y, [b0, b1], weight_x=1.0 / SX ** 2, weight_y=1.0 / SY ** 2,
                      **ODR_SETTINGS)
        jac = np.array([[ys, -x0 * ys / xs], [0.0, ys / xs]])
        icpt0 = y0
    beta = np.asarray(res.beta, float)
    intercept, slope = icpt0 + jac[0] @ beta, jac[1] @ beta
    cov_unscaled = jac @ np.asarray(res.cov_beta, float) @ jac.T
    cov = cov_unscaled * res.res_var
    err = np.sqrt(np.diag(cov))
    err_unscaled = np.sqrt(np.diag(cov_unscaled))
    return {"slope": float(slope), "slope_err": float(err[1]), "intercept": float(intercept),
            "intercept_err": float(err[0]), "slope_err_unscaled": float(err_unscaled[1]),
            "intercept_err_unscaled": float(err_unscaled[0]),
            "covariance": cov.tolist(), "res_var": float(res.res_var),
            "n_used": int(len(x)), "success": bool(res.success),
            "stopreason": str(res.stopreason)}


# ---------------------------------------------------------------------------
# Bayesian line
# ---------------------------------------------------------------------------

_LOG2PI = math.log(2.0 * math.pi)


def bivariate_normal_cdf(h, k, rho):
    """P(X < h, Y < k) for standard normals with correlation ``rho``
    (arrays broadcast), from Owen's T function (Owen 1956, Ann. Math. Stat.
    27, 1075, eq. 2.1 / 3.1):
    Φ2(h, k; ρ) = ½Φ(h) + ½Φ(k) − T(h, a_h) − T(k, a_k) − β,
    a_h = (k − ρh)/(h√(1−ρ²)), a_k = (h − ρk)/(k√(1−ρ²)),
    β = 0 if hk > 0 or (hk = 0 and h + k ≥ 0), else ½."""
    from scipy.special import ndtr, owens_t

    h, k, rho = np.broadcast_arrays(*(np.asarray(v, float) for v in (h, k, rho)))
    tiny = 1e-12
    h = np.where(h == 0, tiny, h)
    k = np.where(k == 0, tiny, k)
    s = np.sqrt(np.maximum(1.0 - rho * rho, 1e-300))
    beta = np.where(h * k > 0, 0.0, 0.5)
    out = (0.5 * ndtr(h) + 0.5 * ndtr(k) - owens_t(h, (k - rho * h) / (h * s))
           - owens_t(k, (h - rho * k) / (k * s)) - beta)
    return np.clip(out, 0.0, 1.0)


class _LinePosterior:
    """Vectorised log-posterior of the Kelly (2007) K = 1 model in scaled
    units; ``theta`` rows are (alpha, beta, sigma, mu, ln tau), without
    alpha when the line goes through the origin.  Picklable."""

    BOUND = 1e3

    def __init__(self, x, y, sx, sy, xu, yu, through_origin):
        self.x, self.y = x, y
        self.sx2, self.sy2 = sx ** 2, sy ** 2
        self.det = ~xu & ~yu
        self.ylim = yu & ~xu
        self.xlim = xu & ~yu
        self.both = xu & yu
        self.through_origin = through_origin

    def unpack(self, theta):
        theta = np.atleast_2d(theta)
        if self.through_origin:
            alpha = np.zeros(theta.shape[0])
            beta, sigma, mu, ltau = theta.T
        else:
            alpha, beta, sigma, mu, ltau = theta.T
        return alpha, beta, sigma, mu, ltau

    def __call__(self, theta):
        from scipy.special import log_ndtr

        theta = np.atleast_2d(theta)
        alpha, beta, sigma, mu, ltau = (c[:, None] for c in self.unpack(theta))
        ok = ((sigma[:, 0] >= 0) & (np.abs(theta) < self.BOUND).all(axis=1)
              & (np.abs(ltau[:, 0]) < 12))
        tau2 = np.exp(2.0 * ltau)
        vx = tau2 + self.sx2
        vy = beta * beta * tau2 + sigma * sigma + self.sy2
        c = beta * tau2
        dx = self.x - mu
        dy = self.y - alpha - beta * mu
        out = np.zeros(vx.shape)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if self.det.any():
                m = self.det
                d = vx[:, m] * vy[:, m] - c * c
                q = (vy[:, m] * dx[:, m] ** 2 - 2 * c * dx[:, m] * dy[:, m]
                     + vx[:, m] * dy[:, m] ** 2) / d
                out[:, m] = -_LOG2PI - 0.5 * np.log(d) - 0.5 * q
            if self.ylim.any():
                m = self.ylim
                lx = -0.5 * (_LOG2PI + np.log(vx[:, m]) + dx[:, m] ** 2 / vx[:, m])
                mean = alpha + beta * mu + c / vx[:, m] * dx[:, m]
                var = vy[:, m] - c * c / vx[:, m]
                out[:, m] = lx + log_ndtr((self.y[m] - mean) / np.sqrt(var))
            if self.xlim.any():
                m = self.xlim
                ly = -0.5 * (_LOG2PI + np.log(vy[:, m]) + dy[:, m] ** 2 / vy[:, m])
                mean = mu + c / vy[:, m] * dy[:, m]
                var = vx[:, m] - c * c / vy[:, m]
                out[:, m] = ly + log_ndtr((self.x[m] - mean) / np.sqrt(var))
            if self.both.any():
                m = self.both
                hh = dx[:, m] / np.sqrt(vx[:, m])
                kk = dy[:, m] / np.sqrt(vy[:, m])
                rho = c / np.sqrt(vx[:, m] * vy[:, m])
                out[:, m] = np.log(np.maximum(bivariate_normal_cdf(hh, kk, rho), 1e-300))
            lp = out.sum(axis=1)
        lp = np.where(ok & np.isfinite(lp), lp, -np.inf)
        return lp

    def neg(self, theta):
        v = float(self(theta)[0])
        return 1e300 if not np.isfinite(v) else -v


def _quantiles(samples):
    lo, med, hi = np.percentile(samples, [15.865525393145708, 50.0, 84.13447460685429])
    return {"median": float(med), "lo": float(lo), "hi": float(hi)}


def bayes_line(x, y, sx, sy, x_upper=None, y_upper=None, *, through_origin=False,
               n_walkers=32, n_burn=1000, n_steps=3000, max_steps=30000, seed=None,
               progress=False) -> dict:
    """Sample the Kelly-type straight line with intrinsic scatter (module
    docstring) with emcee.

    Returns medians and 68 % intervals (16th-84th percentiles) of slope,
    intercept and scatter, the flat posterior samples (columns intercept,
    slope, scatter in the input units), the autocorrelation times, the
    chain length and the mean acceptance fraction.  A ShortChainWarning is
    issued if ``max_steps`` is reached before the chain is 50
    autocorrelation times long.
    """
    import emcee
    from scipy.optimize import minimize

    x, y, sx, sy = (np.asarray(v, float) for v in (x, y, sx, sy))
    n = len(x)
    xu = np.zeros(n, bool) if x_upper is None else np.asarray(x_upper, bool)
    yu = np.zeros(n, bool) if y_upper is None else np.asarray(y_upper, bool)
    sx = np.where(np.isfinite(sx), sx, 0.0)
    sy = np.where(np.isfinite(sy), sy, 0.0)
    # centre and scale to order one
    if through_origin:
        x0 = y0 = 0.0
        xs = float(np.sqrt(np.mean(x ** 2))) or 1.0
        ys = float(np.sqrt(np.mean(y ** 2))) or 1.0
    else:
        x0, y0 = float(np.median(x)), float(np.median(y))
        xs = float(np.std(x)) or 1.0
        ys = float(np.std(y)) or 1.0
    post = _LinePosterior((x - x0) / xs, (y - y0) / ys, sx / xs, sy / ys, xu, yu,
                          through_origin)
    rng = np.random.default_rng(seed)
    # starting points: least squares on the scaled values, then MAP from several starts
    xx, yy = post.x, post.y
    if through_origin:
        b_ls = float(np.sum(xx * yy) / np.sum(xx * xx))
        starts = [[b, 0.3, float(np.mean(xx)), math.log(max(float(np.std(xx)), 1e-3))]
                  for b in (b_ls, 0.5 * b_ls, 2 * b_ls + 0.5)]
    else:
        b_ls, a_ls = np.polyfit(xx, yy, 1)
        starts = [[a_ls + da, b_ls * f, 0.3, float(np.mean(xx)),
                   math.log(max(float(np.std(xx)), 1e-3))]
                  for da, f in ((0.0, 1.0), (0.5, 0.5), (-0.5, 1.5))]
    best = None
    for s0 in starts:
        r = minimize(post.neg, np.asarray(s0, float), method="Nelder-Mead",
                     options={"maxiter": 20000, "xatol": 1e-7, "fatol": 1e-9})
        if best is None or r.fun < best.fun:
            best = r
    if best is None or not np.isfinite(best.fun) or best.fun >= 1e299:
        raise FitError("the Bayesian line found no finite posterior value")
    ndim = len(best.x)
    p0 = best.x + 1e-3 * rng.standard_normal((n_walkers, ndim))
    p0[:, -3] = np.abs(p0[:, -3])  # sigma >= 0
    sampler = emcee.EnsembleSampler(n_walkers, ndim, post, vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2 ** 31))).get_state()
    state = sampler.run_mcmc(p0, n_burn, progress=progress)
    sampler.reset()
    total = 0
    chunk = n_steps
    while True:
        state = sampler.run_mcmc(state, chunk, progress=progress)
        total += chunk
        tau = emcee.autocorr.integrated_time(sampler.get_chain(), tol=0)
        if total >= _MIN_TAU_MULTIPLE * float(np.max(tau)) or total >= max_steps:
            break
        chunk = min(max(int(_MIN_TAU_MULTIPLE * np.max(tau)) - total, 500), max_steps - total)
    if total < _MIN_TAU_MULTIPLE * float(np.max(tau)):
        warnings.warn(ShortChainWarning(
            f"regression chain of {total} steps is shorter than {_MIN_TAU_MULTIPLE} "
            f"autocorrelation times ({float(np.max(tau)):.0f})"), stacklevel=2)
    thin = max(1, int(np.min(tau) / 2))
    flat = sampler.get_chain(flat=True, thin=thin)
    alpha_s, beta_s, sigma_s, _, _ = post.unpack(flat)
    slope = beta_s * ys / xs
    intercept = y0 + ys * alpha_s - slope * x0
    scatter = ys * sigma_s
    samples = np.column_stack([intercept, slope, scatter])
    out = {"slope": _quantiles(slope), "intercept": _quantiles(intercept),
           "scatter": _quantiles(scatter), "samples": samples,
           "autocorr_steps": [float(t) for t in tau], "n_steps": int(total),
           "n_walkers": int(n_walkers), "acceptance": float(np.mean(sampler.acceptance_fraction)),
           "model": "Kelly 2007 with one Gaussian for the true x; flat priors in intercept, "
                    "slope, scatter (>= 0) and x mean, flat in ln(x width)"}
    if through_origin:
        out["intercept"] = {"median": 0.0, "lo": 0.0, "hi": 0.0}
    return out


# ---------------------------------------------------------------------------
# the whole regression
# ---------------------------------------------------------------------------

@dataclass
class RegressionResult:
    """Everything :func:`regress` computed; ``to_dict()`` is the JSON form."""

    source: str
    x: Measurements
    y: Measurements
    names: list
    through_origin: bool
    odr: dict | None
    bayes: dict | None
    spearman: dict
    kendall: dict
    kendall_censored: dict
    excluded: list = field(default_factory=list)
    output: str | None = None

    @property
    def n_points(self):
        return int(len(self.x.value))

    @property
    def n_limits(self):
        return int(np.sum(self.x.upper | self.y.upper))

    def to_dict(self) -> dict:
        yu, xu = self.y.unit, self.x.unit
        bayes = (None if self.bayes is None
                 else {k: v for k, v in self.bayes.items() if k != "samples"})
        odr = None if self.odr is None else {k: v for k, v in self.odr.items()}
        return {
            "source": self.source,
            "x": {"name": self.x.name, "unit": xu.to_string()},
            "y": {"name": self.y.name, "unit": yu.to_string()},
            "units": {"slope": (yu / xu).to_string(), "intercept": yu.to_string(),
                      "scatter": yu.to_string()},
            "through_origin": self.through_origin,
            "symmetrisation": SYMMETRISATION_RULE,
            "n_points": self.n_points,
            "n_limits": self.n_limits,
            "n_limits_x": int(np.sum(self.x.upper)),
            "n_limits_y": int(np.sum(self.y.upper)),
            "excluded": self.excluded,
            "odr": odr,
            "bayes": bayes,
            "spearman": self.spearman,
            "kendall": self.kendall,
            "kendall_censored": self.kendall_censored,
        }


def _row_names(table):
    if "name" in table.colnames:
        return [str(v) for v in table["name"]]
    return [str(i) for i in range(len(table))]


def regress(table: Table, y: str, x: str, *, through_origin: bool = False, bayes: bool = True,
            seed: int | None = 0, n_walkers: int = 32, n_burn: int = 1000, n_steps: int = 3000,
            max_steps: int = 30000, progress: bool = False,
            source: str | None = None) -> RegressionResult:
    """Regress column ``y`` on column ``x`` of a sample table (module docstring).

    Parameters
    ----------
    table : astropy.table.Table
        One row per sightline; columns as described in the module docstring.
    y, x : str
        Quantity names (``Q`` with ``Q_lo``/``Q_hi`` or ``Q_err``).
    through_origin : bool
        Fit y = slope * x.
    bayes : bool
        Sample the Bayesian line (default True; False leaves ``bayes`` None).
    seed : int or None
        Seed of the sampler (fixed by default so reruns agree).
    n_walkers, n_burn, n_steps, max_steps, progress :
        emcee settings (the chain is extended to 50 autocorrelation times
        up to ``max_steps``).
    source : str, optional
        Name of the table in error messages (default ``table.meta['source']``
        or ``'<table>'``).

    Returns
    -------
    RegressionResult
    """
    from scipy import stats

    source = source or table.meta.get("source", "<table>")
    ym = read_quantity(table, y, source)
    xm = read_quantity(table, x, source)
    names = _row_names(table)
    keep = np.isfinite(xm.value) & np.isfinite(ym.value)
    keep &= (np.isfinite(xm.sigma) & (xm.sigma >= 0)) | xm.upper
    keep &= (np.isfinite(ym.sigma) & (ym.sigma >= 0)) | ym.upper
    if "status" in table.colnames:
        keep &= np.array([str(s) != "failed" for s in table["status"]])
    excluded = [names[i] for i in np.flatnonzero(~keep)]
    xm, ym = xm.take(keep), ym.take(keep)
    names = [nm for nm, k in zip(names, keep) if k]
    if len(names) < 3:
        raise SampleColumnError(source, f"columns {y!r} and {x!r}: {len(names)} usable "
                                        "point(s), a line needs at least 3")
    det = ~xm.upper & ~ym.upper
    if not det.any():
        which = y if ym.upper.all() else x
        raise SampleColumnError(source, f"column {which!r}: every point is an upper limit "
                                        "(a regression needs detections)")
    if np.count_nonzero(det) >= 3:
        for m in (xm, ym):
            zero = det & ~(m.sigma > 0)
            if zero.any():
                raise SampleColumnError(source, f"column {m.name!r}: detection "
                                                f"{names[int(np.flatnonzero(zero)[0])]!r} has "
                                                "a zero error (orthogonal distance regression "
                                                "needs positive errors)")
        odr = odr_line(xm.value[det], ym.value[det], xm.sigma[det], ym.sigma[det],
                       through_origin)
    else:
        odr = None
    bayes_fit = (bayes_line(xm.value, ym.value, xm.sigma, ym.sigma, xm.upper, ym.upper,
                            through_origin=through_origin, n_walkers=n_walkers, n_burn=n_burn,
                            n_steps=n_steps, max_steps=max_steps, seed=seed, progress=progress)
                 if bayes else None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # constant input: NaN is the answer
        rho = stats.spearmanr(xm.value, ym.value)
        kt = stats.kendalltau(xm.value, ym.value)
    ck = censored_kendall(xm.value, ym.value, xm.upper, ym.upper)
    return RegressionResult(
        source=str(source), x=xm, y=ym, names=names, through_origin=bool(through_origin),
        odr=odr, bayes=bayes_fit,
        spearman={"rho": float(rho.statistic), "p": float(rho.pvalue)},
        kendall={"tau": float(kt.statistic), "p": float(kt.pvalue)},
        kendall_censored=ck, excluded=excluded)


def simulate_line_table(n, slope, intercept, scatter, *, x_mean=0.0, x_width=1.0,
                        x_err=0.2, y_err=0.2, censored_fraction=0.0, seed=None,
                        x_unit="", y_unit="") -> "Table":
    """A simulated sample drawn from the model of :func:`bayes_line`.

    True x ~ N(x_mean, x_width²); true y = intercept + slope x + N(0,
    scatter²); observed values add N(0, x_err²), N(0, y_err²).  With
    ``censored_fraction`` > 0 a fixed threshold U is set where the observed
    y falls below U with that probability (from the true model), and every
    point whose observed y is below U becomes an upper limit at U (with
    error ``y_err``), as a detection threshold would do.  Columns ``name``,
    ``x``, ``x_err``, ``y``, ``y_err``, ``y_upper`` with the given units;
    meta ``simulated = True`` and the truth.
    """
    from astropy.table import Table
    from scipy.stats import norm

    rng = np.random.default_rng(seed)
    xt = x_mean + x_width * rng.standard_normal(n)
    yt = intercept + slope * xt + scatter * rng.standard_normal(n)
    xo = xt + x_err * rng.standard_normal(n)
    yo = yt + y_err * rng.standard_normal(n)
    upper = np.zeros(n, bool)
    if censored_fraction > 0:
        sd = math.sqrt(slope ** 2 * x_width ** 2 + scatter ** 2 + y_err ** 2)
        thresh = intercept + slope * x_mean + sd * float(norm.ppf(censored_fraction))
        upper = yo < thresh
        yo = np.where(upper, thresh, yo)
    t = Table()
    t["name"] = [f"sim-{i:04d}" for i in range(n)]
    t["x"] = xo * u.Unit(x_unit)
    t["x_err"] = np.full(n, float(x_err)) * u.Unit(x_unit)
    t["y"] = yo * u.Unit(y_unit)
    t["y_err"] = np.full(n, float(y_err)) * u.Unit(y_unit)
    t["y_upper"] = upper
    t.meta.update({"simulated": True, "slope": slope, "intercept": intercept,
                   "scatter": scatter})
    return t


# ---------------------------------------------------------------------------
# files
# ---------------------------------------------------------------------------

def read_sample(path):
    """Read a sample table (ECSV or FITS; a folder means its ``sample.ecsv``)."""
    from astropy.table import Table

    path = os.fspath(path)
    if os.path.isdir(path):
        path = os.path.join(path, "sample.ecsv")
    if not os.path.exists(path):
        raise InputFileError(path, "no such file")
    try:
        table = Table.read(path)
    except Exception as exc:  # astropy raises many kinds for unreadable files
        raise InputFileError(path, f"cannot read as a table ({type(exc).__name__}: "
                                   f"{str(exc).splitlines()[0] if str(exc) else ''})") from None
    table.meta["source"] = path
    return table


def write_json(obj, path):
    """Write ``obj`` as JSON atomically (temporary file, then rename)."""
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w") as fh:
        json.dump(obj, fh, indent=2, allow_nan=True)
        fh.write("\n")
    os.replace(tmp, path)


def regress_sample(path, y, x, *, through_origin=False, output=None, seed=0, figures=None,
                   progress=False) -> RegressionResult:
    """``edgefit regress``: read a sample table, regress, write
    ``regression.json`` into ``output`` (default: the table's folder) and
    call ``figures(result, output)`` when given (the command passes
    :func:`edgefit.plotting.regression.save_regression_figures`; analysis
    code does not import the plotting layer)."""
    table = read_sample(path)
    result = regress(table, y, x, through_origin=through_origin, seed=seed, progress=progress)
    out = output or os.path.dirname(os.path.abspath(table.meta["source"]))
    os.makedirs(out, exist_ok=True)
    write_json(result.to_dict(), os.path.join(out, "regression.json"))
    result.output = out
    if figures is not None:
        figures(result, out)
    return result
