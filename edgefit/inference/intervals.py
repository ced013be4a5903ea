"""Profile-likelihood confidence intervals.

For a parameter p with best fit p0 and minimum statistic S0, the profile
S_prof(x) = min over the other free parameters of S(p = x).  The interval
at confidence level L is {x : S_prof(x) - S0 <= Delta}, with Delta the L
quantile of chi-square with one degree of freedom (Wilks 1938; e.g.
Delta = 1.0 for 68.3 %, 2.706 for 90 %, 6.63 for 99 %).

The profile is a true minimum over the nuisance parameters
----------------------------------------------------------
With grain sizes free the statistic can have separate valleys (small
grains and more dust, large grains and more gas); a minimisation started
from the neighbouring profile point stays in the valley it starts in.  So
every profile point is minimised from several starts and the lowest end
kept (``multistart=True``, the default):

* the nearest point already profiled (the warm start);
* every distinct minimum of the multi-start fit (``result.minima``, see
  :func:`~edgefit.inference.fit.fit_sightline`) within Delta C <= 10
  (:data:`MINIMA_DELTA`) of the best;
* the warm start with the free grain-size parameters moved to points near
  both ends of their bounds (``n_size_starts`` log-spaced values).

Starts whose size parameters coincide (|Delta ln a| <= 0.15) with one
already taken are skipped.  Each start begins a chain of warm-started
minimisations: at each x every chain is minimised from its own nearest
point between the best fit and x (the profile is traced outward, so
refinements between an inside and an outside point continue the inside
point's valley), so it follows its valley cheaply; chains that arrive at
the same point merge.  Each minimisation is SciPy's trust-region least
squares on the free-parameter vector
(:func:`~edgefit.inference.fit.local_minimum`: steps scaled by the
Jacobian's columns, then restarted with unit scaling until a restart
gains no more than 1e-3; BLAS on one thread), with lmfit and its
fallback minimisers only where that fails.

The scan
--------
From p0 the profile is stepped outward on each side (first step one
covariance sigma, or 10 % of |p0| without one; steps grow by 1.6x, 2.5x
while Delta S_prof < 0.1 of the level, 10x while it is below 1e-3) until
it exceeds the largest requested Delta by :data:`SCAN_MARGIN` *and* the
scan has passed the parameter's value at every distinct minimum within
Delta C <= 10 (those that seed chains), or until the parameter's bound.
The points form the profile curve (:class:`ProfileCurve`, stored in
``result.profiles``).  For each level, every crossing of Delta between
neighbouring points is refined by regula falsi in sqrt(Delta S_prof), to
:data:`CROSSING_TOL` in Delta S_prof, and the interval is the set
{Delta S_prof <= Delta}:
usually one piece, but a profile with a second dip below the level gives
a union of pieces (``Interval.pieces``; ``lower``/``upper`` are the outer
ends).  A second dip of the curve is noted (``second_dip``) whether or not
it reaches the level.  Where the bound is reached with the profile still
below the level, the bound is reported as a limit
(``lower_at_bound``/``upper_at_bound``): the data do not exclude it.

If a profile point has a lower statistic than the best fit (the fit had
stopped short), the fit is redone from that point, the result updated
(flag ``refit_after_profile``, informational) and the scan restarted (at
most twice).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np
from scipy import stats as sps

from ..errors import ArgumentError, UnknownParameterError
from ..stats import ONE_SIGMA
from .result import Interval

if TYPE_CHECKING:
    from .result import FitResult

__all__ = ["delta_statistic", "profile_interval", "profile_intervals", "ProfileScan",
           "ProfileCurve", "SCAN_MARGIN", "PROFILE_SIZE_STARTS"]

#: The scan continues until the profile exceeds the largest level's Delta
#: by this much (so the curve shows where it turns).
SCAN_MARGIN = 1.0
#: Size-parameter starts per profile point (near both ends of the bounds).
PROFILE_SIZE_STARTS = 2
#: Distinct minima of the fit up to this Delta C seed profile chains.
MINIMA_DELTA = 10.0
#: The interval ends are refined until Delta S_prof is within this of the
#: level: an end error of about CROSSING_TOL / (dDelta/dx), 5e-6 sigma at the
#: 1-sigma level of a parabolic profile, below the scatter the inner
#: minimisations' own tolerance leaves in Delta S_prof.
CROSSING_TOL = 1e-5
#: While Delta S_prof stays below this the scan's steps grow tenfold.
FLAT_DELTA = 1e-3
#: A local minimum of the profile curve at least this much below the
#: highest point between it and the best fit is a "second dip".
DIP_DEPTH = 0.3


def delta_statistic(level: float) -> float:
    """Delta S for a confidence ``level`` with one parameter of interest:
    the chi-square(1 dof) quantile (1.0 at 0.6827, 2.706 at 0.90)."""
    if not 0 < level < 1:
        raise ArgumentError(f"confidence level must be between 0 and 1, got {level}")
    return float(sps.chi2.ppf(level, 1))


@dataclass
class ProfileCurve:
    """The profile Delta S_prof(x) = S_prof(x) - S0 of one parameter at the
    scanned points (sorted), with the levels' thresholds."""

    name: str
    best: float
    s0: float
    x: np.ndarray
    delta: np.ndarray
    thresholds: dict = field(default_factory=dict)  # level -> Delta
    minima_x: list = field(default_factory=list)     # the parameter at known minima
    notes: list = field(default_factory=list)

    def as_dict(self):
        return {"name": self.name, "best": self.best, "s0": self.s0,
                "x": np.asarray(self.x).tolist(), "delta": np.asarray(self.delta).tolist(),
                "thresholds": {str(k): v for k, v in self.thresholds.items()},
                "minima_x": list(self.minima_x), "notes": list(self.notes)}


class ProfileScan:
    """S_prof(x) for one parameter as the lowest of several chains of
    warm-started minimisations, with a memo of every point.

    Chain 0 starts at the best fit; one chain starts at each other
    distinct minimum of the fit and one at each size start (the best fit
    with the free grain sizes moved near their bounds).  At each x every
    chain is minimised from its own nearest point (so each follows its
    valley cheaply) and the lowest end is the profile; chains that reach
    the same point (same sizes, same statistic) merge.
    """

    def __init__(self, result, name, method="least_squares", multistart=True,
                 n_size_starts=PROFILE_SIZE_STARTS):
        if name not in result.free_names:
            raise UnknownParameterError(f"cannot profile {name!r}: it is not a free parameter "
                                        f"(free: {result.free_names})")
        from .fit import size_parameter_names, size_start_values

        self.result = result
        self.name = name
        self.method = method
        self.best = float(result.params[name].value)
        self.s0 = result.statistic
        self.points: dict[float, tuple[float, object]] = {self.best: (self.s0, result.params)}
        self.notes: list[str] = []
        self.better = None  # (stat, params) of the best point below s0
        self.multistart = bool(multistart)
        self.size_names = [n for n in size_parameter_names(result.model, result.params)
                           if n != name]
        # each chain: {x: params}; seeds are free starts (x not yet fixed)
        self.chains: list[dict] = [{self.best: result.params}]
        self.seeds: list = []
        if self.multistart:
            from .fit import _same_minimum

            cands = [m.params for m in getattr(result, "minima", [])[1:]
                     if m.delta <= max(getattr(result, "multimodal_delta", None) or 0.0,
                                       MINIMA_DELTA)]
            for values in (size_start_values(result.params, self.size_names, n_size_starts)
                           if n_size_starts > 0 else []):
                p = result.params.copy()
                for n, v in values.items():
                    p[n].set(value=v)
                cands.append(p)
            # one chain per distinct set of sizes (the best fit's included)
            for p in cands:
                if self.size_names and any(_same_minimum(p, q, self.size_names)
                                           for q in [result.params] + self.seeds):
                    continue
                self.seeds.append(p)
            self.chains += [{} for _ in self.seeds]
        self.n_minimisations = 0

    def _minimise_at(self, start, x, fallback):
        from .fit import local_minimum, minimise

        start = start.copy()
        start[self.name].set(value=x, vary=False)
        if not any(p.vary and not p.expr for p in start.values()):
            return self.result.likelihood.statistic(start.valuesdict()), start
        self.n_minimisations += 1
        if self.method == "least_squares":
            # the lean vector path; the lmfit path with its fallbacks only
            # where it fails
            params, stat, ok = local_minimum(self.result.likelihood, start)
            if ok or not fallback:
                return stat, params
        out, stat, _ = minimise(self.result.likelihood, start, method=self.method,
                                fallback=fallback)
        return stat, out.params

    def __call__(self, x):
        x = float(x)
        if x in self.points:
            return self.points[x][0]
        ends = []
        for k, chain in enumerate(self.chains):
            if chain:
                start = chain[_warm_start_point(chain, x, self.best)]
            else:
                start = self.seeds[k - 1]
            try:
                stat, params = self._minimise_at(start, x, fallback=(k == 0))
            except Exception:  # a start the model cannot evaluate: drop the chain
                if k == 0:
                    raise
                stat, params = math.inf, None
            if params is not None:
                chain[x] = params
            ends.append((stat, params, k))
        # merge chains that arrived at the same point (every free value
        # equal to 1e-6 relative) as a lower-numbered one: they would stay
        # together from here on
        keep = []
        for stat, params, k in ends:
            if params is None and k > 0:
                continue
            if k > 0 and any(_same_point(params, q) for s, q, j in ends if j in keep):
                continue
            keep.append(k)
        self.chains = [self.chains[k] for k in keep]
        self.seeds = [self.seeds[k - 1] for k in keep if k > 0]
        stat, params, _ = min(ends, key=lambda e: e[0])
        if stat < self.s0 - 1e-3:
            if "better_minimum_found" not in self.notes:
                self.notes.append("better_minimum_found")
            if self.better is None or stat < self.better[0]:
                self.better = (stat, params)
        self.points[x] = (stat, params)
        return stat

    def delta(self, x):
        return self(x) - self.s0

    def curve(self):
        xs = np.array(sorted(self.points))
        return xs, np.array([self.points[x][0] - self.s0 for x in xs])


def _warm_start_point(chain, x, best):
    """The chain's point to start the minimisation at ``x`` from: the
    nearest one between the best fit and ``x`` (the profile is traced
    outward from the best fit, so a refinement between an inside and an
    outside point continues the inner one's valley instead of inheriting
    a stalled outer one), or the nearest of all when the chain has none
    on that side."""
    inner = [c for c in chain if min(best, x) <= c <= max(best, x)]
    return min(inner or chain, key=lambda c: abs(c - x))


def _same_point(a, b, rtol=1e-6):
    if a is None or b is None:
        return False
    for n, p in a.items():
        if p.vary and not p.expr:
            va, vb = float(p.value), float(b[n].value)
            if abs(va - vb) > rtol * max(abs(va), abs(vb), 1e-12):
                return False
    return True


def _step_side(scan, sign, step0, bound, stop_delta, must_pass, max_steps=40):
    """Step from the best fit in direction ``sign`` until the profile
    exceeds ``stop_delta`` beyond every value in ``must_pass``, or the
    bound.  Returns (reached bound, bracketed)."""
    step = step0
    targets = [v for v in must_pass if (v - scan.best) * sign > 0]
    for _ in range(max_steps):
        x = scan.best + sign * step
        if (sign > 0 and x >= bound) or (sign < 0 and x <= bound):
            x = bound
        d = scan.delta(x)
        passed = all((x - v) * sign >= 0 for v in targets)
        if d >= stop_delta and passed:
            return False, True
        if x == bound:
            return True, True
        # grow fast while the profile is flat: a best fit a hair above its
        # bound with no covariance error starts with a step of ~1e-17
        step *= 10.0 if d < FLAT_DELTA else 2.5 if d < 0.1 * stop_delta else 1.6
    return False, False


def _crossing(f, a, b, xtol, ftol=CROSSING_TOL, maxiter=40):
    """x in [a, b] where ``f`` (of opposite signs at a and b) crosses zero, to |f| <= ``ftol`` or a bracket narrower than
    ``xtol``: regula falsi with the Illinois modification (Dowell &
    Jarratt 1971), which needs two or three profile points per crossing
    where bisection to a tight ``xtol`` needs a dozen."""
    fa, fb = f(a), f(b)
    if fa == 0:
        return a
    if fb == 0:
        return b
    if fa * fb > 0:
        raise ArgumentError("the profile crossing is not bracketed (same sign at both ends)")
    c = a
    for _ in range(maxiter):
        c = (a * fb - b * fa) / (fb - fa)
        if not (min(a, b) < c < max(a, b)):
            c = 0.5 * (a + b)
        fc = f(c)
        if abs(fc) <= ftol or abs(b - a) <= xtol:
            return c
        if fc * fb < 0:
            a, fa = b, fb
        else:
            fa *= 0.5
        b, fb = c, fc
    return c


def inside_runs(inside) -> list[tuple[int, int]]:
    """The runs of consecutive true entries of the boolean sequence
    ``inside``, in order, as inclusive index pairs ``(first, last)``: the
    sampled pieces of a set {x : delta(x) <= level} along a scanned curve."""
    runs = []
    n = len(inside)
    i = 0
    while i < n:
        if not inside[i]:
            i += 1
            continue
        j = i
        while j + 1 < n and inside[j + 1]:
            j += 1
        runs.append((i, j))
        i = j + 1
    return runs


def _pieces(scan, target, lower_bound, upper_bound, xtol):
    """Pieces of {delta <= target} along the scanned points, crossings
    refined by Brent's method.  Returns (pieces, lower_at_bound,
    upper_at_bound)."""
    xs, ds = scan.curve()
    pieces = []
    n = len(xs)

    # the crossing is sought in sqrt(Delta), nearly linear in x for a
    # near-parabolic profile (so regula falsi converges in a step or two)
    rt = math.sqrt(target)

    def root(a, b):
        return _crossing(lambda x: math.sqrt(max(scan.delta(x), 0.0)) - rt, a, b, xtol,
                         ftol=CROSSING_TOL / (2.0 * rt))

    for i, j in inside_runs(ds <= target):
        lo = xs[i] if i == 0 else root(xs[i - 1], xs[i])
        hi = xs[j] if j == n - 1 else root(xs[j], xs[j + 1])
        pieces.append([float(lo), float(hi), i == 0, j == n - 1])
    # roots may have added points inside; recompute nothing, the pieces hold
    lo_b = bool(pieces and pieces[0][2] and xs[0] <= lower_bound)
    hi_b = bool(pieces and pieces[-1][3] and xs[-1] >= upper_bound)
    return pieces, lo_b, hi_b


def _dips(xs, ds, best):
    """x of local minima of the curve (other than the best fit) whose
    depth below the highest point between them and the best fit exceeds
    DIP_DEPTH."""
    out = []
    ib = int(np.argmin(np.abs(xs - best)))
    for i in range(1, len(xs) - 1):
        if i == ib or not (ds[i] <= ds[i - 1] and ds[i] <= ds[i + 1]):
            continue
        between = ds[min(i, ib):max(i, ib) + 1]
        if between.max() - ds[i] > DIP_DEPTH:
            out.append((float(xs[i]), float(ds[i])))
    # an end point lower than its neighbour (a dip running into the bound)
    for i, j in ((0, 1), (len(xs) - 1, len(xs) - 2)):
        if len(xs) > 2 and i != ib and ds[i] < ds[j]:
            between = ds[min(i, ib):max(i, ib) + 1]
            if between.max() - ds[i] > DIP_DEPTH:
                out.append((float(xs[i]), float(ds[i])))
    return out


def profile_interval(result: FitResult, name: str, level: float = ONE_SIGMA,
                     method: str = "least_squares", **kw: Any) -> Interval:
    """Profile-likelihood interval of one parameter at one level
    (see module docstring).  Returns an :class:`Interval`."""
    return profile_intervals(result, [name], [level], method=method, **kw)[name][level]


def profile_intervals(result: FitResult, names: Sequence[str],
                      levels: Sequence[float] = (ONE_SIGMA, 0.90), method: str = "least_squares",
                      store: bool = True, multistart: bool = True,
                      n_size_starts: int = PROFILE_SIZE_STARTS
                      ) -> dict[str, dict[float, Interval]]:
    """Intervals for each parameter in ``names`` at each confidence level.

    Returns {name: {level: Interval}}; also stored in ``result.intervals``
    (and the curves in ``result.profiles``) when ``store``.
    ``multistart=False`` minimises each profile point from the nearest
    point only (faster; may stay in one valley).
    """
    curves = {}
    for attempt in range(3):
        out = {}
        refitted = False
        for name in names:
            by_level, scan, curve = _scan_levels(result, name, levels, method, multistart,
                                                 n_size_starts)
            if scan.better is not None and attempt < 2:
                _refit_from(result, scan.better[1], name, method)
                refitted = True
                break  # every interval restarts from the new minimum
            out[name] = by_level
            curves[name] = curve
        if not refitted:
            break
    if store:
        for name, by_level in out.items():
            result.intervals.setdefault(name, {}).update(by_level)
            result.profiles[name] = curves[name]
    return out


def _refit_from(result, params, name, method):
    """The profile met a lower statistic than the best fit: re-fit from
    there (all free parameters free again) and update ``result``."""
    from .fit import Minimum, distinct_minima, minimise, size_parameter_names

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
        result.profiles.clear()
        sizes = size_parameter_names(result.model, result.params)
        if sizes:
            ends = [(m.statistic, m.params, m.start) for m in result.minima]
            ends.append((stat, out.params, f"profile of {name}"))
            result.minima = distinct_minima(ends, sizes)
        else:
            result.minima = [Minimum(stat, out.params, f"profile of {name}")]


def _scan_levels(result, name, levels, method, multistart=True,
                 n_size_starts=PROFILE_SIZE_STARTS):
    scan = ProfileScan(result, name, method=method, multistart=multistart,
                       n_size_starts=n_size_starts)
    p = result.params[name]
    err = result.error(name)
    if err is None or not math.isfinite(err) or err <= 0:
        err = 0.1 * abs(scan.best) if scan.best != 0 else 0.1
    span = float(p.max - p.min) if np.isfinite(p.max - p.min) else math.inf
    step0 = min(err, 0.25 * span) if math.isfinite(span) else err
    targets = {level: delta_statistic(level) for level in levels}
    stop = max(targets.values()) + SCAN_MARGIN
    # the scan passes the parameter's value at every other distinct minimum
    # that seeds a chain (Delta C <= MINIMA_DELTA)
    minima_x = [float(m.params[name].value) for m in getattr(result, "minima", [])[1:]
                if m.delta <= max(getattr(result, "multimodal_delta", None) or 0.0,
                                  MINIMA_DELTA)]
    lo_reached, lo_ok = _step_side(scan, -1, step0, float(p.min), stop, minima_x)
    hi_reached, hi_ok = _step_side(scan, +1, step0, float(p.max), stop, minima_x)
    if not lo_ok:
        scan.notes.append("lower end not bracketed")
    if not hi_ok:
        scan.notes.append("upper end not bracketed")
    xtol = 1e-6 * max(abs(step0), 1e-300)
    by_level = {}
    for level in sorted(levels):
        target = targets[level]
        pieces, lo_b, hi_b = _pieces(scan, target, float(p.min), float(p.max), xtol)
        notes = list(dict.fromkeys(scan.notes))
        # the piece holding the best fit, and any others
        if not pieces:
            by_level[level] = Interval(name, level, target, scan.best, None, None, False,
                                       False, notes)
            continue
        lower = pieces[0][0] if (lo_ok or pieces[0][2] is False) else None
        upper = pieces[-1][1] if (hi_ok or pieces[-1][3] is False) else None
        if len(pieces) > 1:
            notes.append("union_of_pieces")
        by_level[level] = Interval(name, level, target, scan.best, lower, upper, lo_b, hi_b,
                                   notes, [(a, b) for a, b, _, _ in pieces])
    xs, ds = scan.curve()
    dips = _dips(xs, ds, scan.best)
    if dips:
        note = "second_dip:" + ",".join(f"{x:.4g}(dC={d:.2f})" for x, d in dips)
        scan.notes.append(note)
        for iv in by_level.values():
            iv.notes.append(note)
    curve = ProfileCurve(name, scan.best, scan.s0, xs, ds, dict(targets), minima_x,
                         list(dict.fromkeys(scan.notes)))
    return by_level, scan, curve
