"""Profile-likelihood confidence intervals.

For a parameter p with best fit p0 and minimum statistic S0, the profile
S_prof(x) = min over the other free parameters of S(p = x).  The interval
at confidence level L is {x : S_prof(x) - S0 <= Delta}, with Delta the L
quantile of chi-square with one degree of freedom (Wilks 1938; e.g.
Delta = 1.0 for 68.3 %, 2.706 for 90 %, 6.63 for 99 %).

Each end is found by stepping away from p0 (first step one covariance
sigma, or 10 % of |p0| without a covariance; steps grow by 1.6x) until
S_prof exceeds S0 + Delta (a bracket), then by Brent's root finder on
S_prof(x) - S0 - Delta.  Every evaluation re-minimises all other free
parameters, warm-started from the nearest point already profiled.  If a
profile point has a lower statistic than the best fit (the fit had
stopped short), the fit is redone from that point, the result updated
(flag ``refit_after_profile``, informational: the final fit is the better
one, so it does not make ``FitResult.converged`` False) and the scan
restarted (at most twice).  If the
parameter's bound is reached first, the bound is reported as a limit
(``lower_at_bound``/``upper_at_bound``).  A profile point below S0 (a
better fit than the "best" one) is noted on the interval.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import optimize
from scipy import stats as sps

from ..errors import ArgumentError, UnknownParameterError
from .result import Interval

__all__ = ["delta_statistic", "profile_interval", "profile_intervals", "ProfileScan"]


def delta_statistic(level: float) -> float:
    """Delta S for a confidence ``level`` with one parameter of interest:
    the chi-square(1 dof) quantile (1.0 at 0.6827, 2.706 at 0.90)."""
    if not 0 < level < 1:
        raise ArgumentError(f"confidence level must be between 0 and 1, got {level}")
    return float(sps.chi2.ppf(level, 1))


class ProfileScan:
    """S_prof(x) for one parameter, with warm starts and a memo."""

    def __init__(self, result, name, method="least_squares"):
        if name not in result.free_names:
            raise UnknownParameterError(f"cannot profile {name!r}: it is not a free parameter "
                                        f"(free: {result.free_names})")
        self.result = result
        self.name = name
        self.method = method
        self.best = float(result.params[name].value)
        self.s0 = result.statistic
        self.points: dict[float, tuple[float, object]] = {self.best: (self.s0, result.params)}
        self.notes: list[str] = []
        self.better = None  # (stat, params) of the best point below s0


    def __call__(self, x):
        from .fit import minimise

        x = float(x)
        if x in self.points:
            return self.points[x][0]
        near = min(self.points, key=lambda k: abs(k - x))
        start = self.points[near][1].copy()
        start[self.name].set(value=x, vary=False)
        others_free = any(p.vary and not p.expr for n, p in start.items())
        like = self.result.likelihood
        if others_free:
            out, stat, flags = minimise(like, start, method=self.method, fallback=True)
            params = out.params
        else:
            stat, params = like.statistic(start.valuesdict()), start
        if stat < self.s0 - 1e-3:
            if "better_minimum_found" not in self.notes:
                self.notes.append("better_minimum_found")
            if self.better is None or stat < self.better[0]:
                self.better = (stat, params)
        self.points[x] = (stat, params)
        return stat

    def delta(self, x):
        return self(x) - self.s0


def _one_side(scan, target, sign, step0, bound, max_steps=40):
    """Find where scan.delta crosses ``target`` going in direction ``sign``.
    Returns (value or None, at_bound)."""
    x_in = scan.best
    step = step0
    for _ in range(max_steps):
        x_out = scan.best + sign * step
        if (sign > 0 and x_out >= bound) or (sign < 0 and x_out <= bound):
            x_out = bound
        d = scan.delta(x_out)
        if d >= target:
            root = optimize.brentq(lambda x: scan.delta(x) - target, min(x_in, x_out),
                                   max(x_in, x_out), xtol=1e-6 * max(abs(step0), 1e-300),
                                   rtol=1e-8, maxiter=60)
            return root, False
        if x_out == bound:
            return bound, True
        x_in = x_out
        step *= 1.6
    return None, False


def profile_interval(result, name, level=0.6827, method="least_squares"):
    """Profile-likelihood interval of one parameter at one level
    (see module docstring).  Returns an :class:`Interval`."""
    return profile_intervals(result, [name], [level], method=method)[name][level]


def profile_intervals(result, names, levels=(0.6827, 0.90), method="least_squares",
                      store=True):
    """Intervals for each parameter in ``names`` at each confidence level.

    Returns {name: {level: Interval}}; also stored in ``result.intervals``
    when ``store``.
    """
    for attempt in range(3):
        out = {}
        refitted = False
        for name in names:
            by_level, scan = _scan_levels(result, name, levels, method)
            if scan.better is not None and attempt < 2:
                _refit_from(result, scan.better[1], name, method)
                refitted = True
                break  # every interval restarts from the new minimum
            out[name] = by_level
        if not refitted:
            break
    if store:
        for name, by_level in out.items():
            result.intervals.setdefault(name, {}).update(by_level)
    return out


def _refit_from(result, params, name, method):
    """The profile met a lower statistic than the best fit: re-fit from
    there (all free parameters free again) and update ``result``."""
    from .fit import minimise

    start = params.copy()
    start[name].set(vary=True)
    out, stat, flags = minimise(result.likelihood, start, method=method)
    if stat < result.statistic:
        result.params = out.params
        result.statistic = stat
        cov = getattr(out, "covar", None)
        if cov is not None and np.all(np.isfinite(cov)):
            result.covariance = cov
            result.covariance_names = list(out.var_names)
        note = "refit_after_profile"
        if note not in result.flags:
            result.flags.append(note)
        if result.goodness is not None:
            from .goodness import c_statistic_goodness

            result.goodness = c_statistic_goodness(result)
        result.intervals.clear()  # intervals stored earlier refer to the old minimum


def _scan_levels(result, name, levels, method):
    scan = ProfileScan(result, name, method=method)
    p = result.params[name]
    err = result.error(name)
    if err is None or not math.isfinite(err) or err <= 0:
        err = 0.1 * abs(scan.best) if scan.best != 0 else 0.1
    step0 = err
    by_level = {}
    for level in sorted(levels):
        target = delta_statistic(level)
        lo, lo_b = _one_side(scan, target, -1, step0, float(p.min))
        hi, hi_b = _one_side(scan, target, +1, step0, float(p.max))
        if lo is None:
            scan.notes.append("lower end not bracketed")
        if hi is None:
            scan.notes.append("upper end not bracketed")
        by_level[level] = Interval(name, level, target, scan.best, lo, hi, lo_b, hi_b,
                                   list(dict.fromkeys(scan.notes)))
        # later (wider) levels start stepping from the narrower interval
        if lo is not None and hi is not None and not (lo_b or hi_b):
            step0 = max(step0, 0.5 * (hi - lo))
    return by_level, scan
