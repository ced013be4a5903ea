"""A proposal density laid along the grain-size valley, for MCMC.

With the upper grain size free, one edge constrains the gas and dust
columns only along a long, bent valley: large grains with more gas and
more smooth absorption fit almost as well as small grains with less.
Local walker moves (stretch, differential evolution) crawl along it and
cannot cross the funnel where the dust fraction goes to zero and the size
stops mattering.

This module builds a global map of the valley and turns it into a
proposal density:

1. **A grid of fits.**  The fit is repeated with the size parameter held
   at :data:`VALLEY_SLICES` cell centres spread log-uniformly across its
   bounds and, when the fit is in the total/fraction form, the dust
   fraction held at :data:`VALLEY_FRACTIONS` cell centres of [0, 1]
   (each started from the known minimum nearest in size and from the
   previous grid point's solution, keeping the lower statistic); the
   fit's known minima are added as points of their own.
2. **Local shape.**  At each point the Gauss–Newton curvature of the
   statistic (J^T J of the deviance residuals, by finite differences in
   the sampler coordinates) gives a covariance; a weak diagonal term
   1/w^2 (w = the coordinate's range within its bounds) keeps it finite
   where a direction is unconstrained (the funnel).  The held
   coordinates are spread over their cell (or their own, narrower,
   posterior width), the others follow them along the Gauss–Newton
   conditional slope, and a spread is halved while one step of it along
   that slope loses more than :data:`VALLEY_TRUST_DROP` in ln p (where the
   valley bends).
3. **Mixture.**  A mixture of multivariate Student-t densities
   (:data:`VALLEY_DOF` degrees of freedom), one per point, weighted by
   each point's Laplace estimate of its share of the posterior,
   exp(-C_k/2) sqrt(det Sigma_k) (Tierney & Kadane 1986, JASA 81, 82),
   blended with equal weights (:data:`VALLEY_DEFENSIVE`) so that no point
   is starved -- a "defensive" mixture (Hesterberg 1995, Technometrics
   37, 185) -- and restricted to the box of the parameter bounds.

The normalisation of a continuum is best sampled in its logarithm (the
log of the flux is linear in ln(norm), the photon index and N_H);
:class:`~edgefit.inference.mcmc.SamplerCoordinates` does so for this
proposal.

:class:`ValleyMixture` is the density; called as emcee's ``MHMove``
proposal function it draws an independent point for every walker and
returns ln q(x) - ln q(x'), the Hastings factor of an independence
Metropolis–Hastings step (Tierney 1994, Annals of Statistics 22, 1701,
section 2.3.3).  The move is exact whatever the mixture's quality; the
mixture only sets how often jumps are accepted.  Pure computation: no
I/O.
"""
from __future__ import annotations

import math

import numpy as np
from scipy.special import gammaln

from ..errors import ArgumentError, FitError

__all__ = ["ValleyMixture", "has_size_grid", "valley_points", "valley_mixture",
           "VALLEY_SLICES", "VALLEY_FRACTIONS", "VALLEY_DOF", "VALLEY_DEFENSIVE",
           "VALLEY_SCALE", "VALLEY_SAMPLE_SHARE", "VALLEY_SAMPLE_POINTS"]

#: Number of grain-size cells laid across the size parameter's bounds.
VALLEY_SLICES = 8
#: Number of dust-fraction cells across [0, 1] (total/fraction form).
VALLEY_FRACTIONS = 5
#: Degrees of freedom of each Student-t component (heavier tails than a
#: Gaussian so that the proposal is not narrower than the posterior).
VALLEY_DOF = 5.0
#: Share of the mixture weight spread equally over the slices.
VALLEY_DEFENSIVE = 0.3
#: Each component's covariance is the Gauss-Newton one times this squared.
VALLEY_SCALE = 1.25
#: Share of the adapted mixture's weight on the kernel density of the
#: first stage's samples, and the most sample points it keeps.
VALLEY_SAMPLE_SHARE = 0.5
VALLEY_SAMPLE_POINTS = 300


class ValleyMixture:
    """Mixture of multivariate Student-t densities.

    Parameters
    ----------
    means : (K, d) array
    covs : (K, d, d) array, symmetric positive definite
    weights : (K,) array, non-negative (normalised here)
    dof : float
    lower, upper : (d,) arrays, optional
        A box the draws are confined to (out-of-box draws are drawn
        again).  The density inside the box is then the mixture's divided
        by one constant -- its mass inside the box -- which cancels from
        every Hastings factor, so :meth:`logpdf` leaves it out.
    """

    #: Rounds of redrawing out-of-box points before giving up on a box
    #: that holds almost none of the mixture's mass.
    MAX_ROUNDS = 200

    def __init__(self, means, covs, weights, dof=VALLEY_DOF, lower=None, upper=None):
        self.means = np.atleast_2d(np.asarray(means, dtype=float))
        covs = np.asarray(covs, dtype=float)
        self.covs = covs.reshape(len(self.means), self.means.shape[1], self.means.shape[1])
        w = np.asarray(weights, dtype=float)
        if w.shape != (len(self.means),) or np.any(w < 0) or not np.sum(w) > 0:
            raise ArgumentError("ValleyMixture: weights must be non-negative, one per "
                                "component, not all zero")
        self.weights = w / np.sum(w)
        self.dof = float(dof)
        self.chol = np.linalg.cholesky(self.covs)
        d = self.means.shape[1]
        logdet = 2.0 * np.sum(np.log(np.diagonal(self.chol, axis1=1, axis2=2)), axis=1)
        nu = self.dof
        self.lower = np.full(d, -np.inf) if lower is None else np.asarray(lower, dtype=float)
        self.upper = np.full(d, np.inf) if upper is None else np.asarray(upper, dtype=float)
        self._shape_groups = None
        self._const = (np.log(self.weights) + gammaln(0.5 * (nu + d)) - gammaln(0.5 * nu)
                       - 0.5 * d * math.log(nu * math.pi) - 0.5 * logdet)

    @property
    def ndim(self):
        return self.means.shape[1]

    def _groups(self):
        """Components sharing one shape (a kernel density's points) are
        whitened together: list of (Cholesky factor, component indices)."""
        if self._shape_groups is None:
            groups: dict[bytes, list[int]] = {}
            for k, L in enumerate(self.chol):
                groups.setdefault(L.tobytes(), []).append(k)
            self._shape_groups = [(self.chol[idx[0]], np.asarray(idx))
                                  for idx in groups.values()]
        return self._shape_groups

    def logpdf(self, y):
        """ln q(y) for points ``y`` of shape (n, d) (or (d,))."""
        y = np.asarray(y, dtype=float)
        single = y.ndim == 1
        y = np.atleast_2d(y)
        d, nu = self.ndim, self.dof
        terms = np.empty((len(y), len(self.means)))
        for L, idx in self._groups():
            c = self.means[idx].mean(axis=0)      # centred: no cancellation
            zy = np.linalg.solve(L, (y - c).T).T                  # (n, d)
            zm = np.linalg.solve(L, (self.means[idx] - c).T).T    # (k, d)
            maha = ((zy * zy).sum(axis=1)[:, None] - 2.0 * zy @ zm.T
                    + (zm * zm).sum(axis=1)[None, :])
            maha = np.maximum(maha, 0.0)
            terms[:, idx] = self._const[idx] - 0.5 * (nu + d) * np.log1p(maha / nu)
        top = np.max(terms, axis=1)
        with np.errstate(invalid="ignore"):
            out = top + np.log(np.sum(np.exp(terms - top[:, None]), axis=1))
        out = np.where(np.isfinite(top), out, -np.inf)
        return out[0] if single else out

    def _draw_free(self, random, n):
        k = random.choice(len(self.means), size=n, p=self.weights)
        z = random.standard_normal((n, self.ndim))
        s = np.sqrt(random.chisquare(self.dof, size=n) / self.dof)
        return self.means[k] + np.einsum("nij,nj->ni", self.chol[k], z) / s[:, None]

    def with_samples(self, samples, share=VALLEY_SAMPLE_SHARE, max_points=VALLEY_SAMPLE_POINTS):
        """This mixture blended with a kernel density of ``samples`` (rows
        in the same coordinates): one Student-t kernel per sample point
        (at most ``max_points``, evenly thinned), all with the samples'
        covariance times Scott's factor squared, n^(-2/(d+4)) (Scott 1992,
        Multivariate Density Estimation, eq. 6.42), carrying ``share`` of
        the weight."""
        x = np.asarray(samples, dtype=float)
        x = x[np.all(np.isfinite(x), axis=1)]
        if len(x) > max_points:
            x = x[np.linspace(0, len(x) - 1, max_points).astype(int)]
        d = self.ndim
        if len(x) < d + 2:
            return self
        cov = np.cov(x, rowvar=False) * len(x) ** (-2.0 / (d + 4))
        cov = 0.5 * (cov + cov.T)
        vals, vecs = np.linalg.eigh(cov)
        if not np.all(np.isfinite(vals)) or vals.max() <= 0:
            return self
        cov = (vecs * np.maximum(vals, 1e-12 * vals.max())) @ vecs.T
        means = np.vstack([self.means, x])
        covs = np.concatenate([self.covs, np.broadcast_to(cov, (len(x), d, d))])
        weights = np.r_[(1.0 - share) * self.weights, np.full(len(x), share / len(x))]
        return ValleyMixture(means, covs, weights, self.dof, self.lower, self.upper)

    def inside(self, y):
        """Which rows of ``y`` lie in the box."""
        return np.all((y >= self.lower) & (y <= self.upper), axis=-1)

    def draw(self, random, n):
        """``n`` points from the mixture restricted to the box; ``random``
        is a NumPy ``Generator`` or ``RandomState``."""
        out = self._draw_free(random, n)
        todo = ~self.inside(out)
        for _ in range(self.MAX_ROUNDS):
            if not todo.any():
                return out
            out[todo] = self._draw_free(random, int(todo.sum()))
            todo[todo] = ~self.inside(out[todo])
        raise FitError("valley proposal: the mixture has almost no mass inside the "
                       "parameter bounds")

    def __call__(self, coords, random):
        """emcee ``MHMove`` proposal: independent draws for every walker
        and the log Hastings factors ln q(x) - ln q(x')."""
        new = self.draw(random, len(coords))
        return new, self.logpdf(coords) - self.logpdf(new)


def _grid_axes(result, pv, n_slices, n_fractions):
    """The fixed axes of the valley grid: a list of (name, index in the
    free vector, cell centres, cell width in the sampler coordinate) for
    the one free grain-size parameter (log-spaced
    across its bounds) and, in the total/fraction form, the dust fraction
    (evenly across [0, 1])."""
    from .fit import size_parameter_names

    axes: list = []
    model = getattr(result, "model", None)
    if model is None:
        return axes
    sizes = [n for n in size_parameter_names(model, result.params) if n in pv.free]
    if len(sizes) == 1 and n_slices > 0:
        i = pv.free.index(sizes[0])
        lo, hi = float(pv.lower[i]), float(pv.upper[i])
        if lo > 0 and np.isfinite(hi) and hi > lo:
            edges = np.linspace(math.log(lo), math.log(hi), n_slices + 1)
            axes.append((sizes[0], i, np.exp(0.5 * (edges[1:] + edges[:-1])),
                         float(edges[1] - edges[0])))
    frac = getattr(model, "fraction_param", None)
    if axes and frac and frac in pv.free and n_fractions > 0:
        edges = np.linspace(0.0, 1.0, n_fractions + 1)
        axes.append((frac, pv.free.index(frac), 0.5 * (edges[1:] + edges[:-1]),
                     float(edges[1] - edges[0])))
    return axes


def has_size_grid(result, pv):
    """Whether the fit has the one free grain-size parameter (with
    positive bounds) that the valley grid is laid along."""
    return bool(_grid_axes(result, pv, VALLEY_SLICES, 0))


def valley_points(result, pv, evaluator, n_slices=VALLEY_SLICES,
                  n_fractions=VALLEY_FRACTIONS):
    """Points along the valley: a list of (theta, statistic, fixed) with
    ``fixed`` the indices of the free vector held during that point's fit.

    With one free grain-size parameter of positive bounds, the fit is
    repeated on a grid: the size at ``n_slices`` log-spaced cell centres
    across its bounds and, in the total/fraction form, the dust fraction
    at ``n_fractions`` even cell centres of [0, 1].  Each grid fit starts
    from the known minimum nearest in size and from the previous grid
    point's solution (a sweep), keeping the lower statistic; the fit's
    known minima follow, with the same ``fixed``.  Without a grid, the
    known minima alone (``fixed`` empty).  ``evaluator`` is the fit's
    compiled likelihood over ``pv.free``.
    """
    from .fit import local_minimum

    dmax = getattr(result, "multimodal_delta", None) or 0.0
    known = [result.params] + [m.params for m in getattr(result, "minima", [])[1:]
                               if m.delta <= dmax]
    axes = _grid_axes(result, pv, n_slices, n_fractions)
    if not axes:
        return [(pv.vector(p), float(evaluator.statistic(pv.vector(p))), ()) for p in known]
    size_name = axes[0][0]
    known_ln = np.array([math.log(p[size_name].value) for p in known])
    fixed = tuple(ax[1] for ax in axes)
    grids = np.meshgrid(*[ax[2] for ax in axes], indexing="ij")
    cells = np.stack([g.ravel() for g in grids], axis=1)   # size varies slowest
    points = []
    previous = None
    for row in cells:
        starts = [known[int(np.argmin(np.abs(known_ln - math.log(row[0]))))]]
        if previous is not None:
            starts.append(previous)
        best = None
        for s in starts:
            p = s.copy()
            for (name, *_), v in zip(axes, row):
                p[name].set(value=float(v), vary=False)
            end, stat, _ok = local_minimum(result.likelihood, p)
            if math.isfinite(stat) and (best is None or stat < best[1]):
                best = (end, stat)
        if best is None:
            continue
        previous = best[0]
        points.append((pv.vector(best[0]), float(best[1]), fixed))
    # the known minima themselves, spread like a grid point: a posterior
    # narrower than a cell has its peak between cell centres
    points += [(pv.vector(p), float(evaluator.statistic(pv.vector(p))), fixed)
               for p in known]
    return points


def _y_widths(pv, coords, y):
    """Range of each sampler coordinate within its bounds: ln(hi/lo) for a
    logarithmic coordinate with positive finite bounds (else 10 e-folds),
    1 for the dust fraction, hi - lo for a bounded linear coordinate, and
    100 times the value's size where a bound is infinite."""
    w = np.empty(len(y))
    logs = set(coords.ln_idx.tolist())
    pair = coords.pair or ()
    for j in range(len(y)):
        lo, hi = float(pv.lower[j]), float(pv.upper[j])
        if j in logs:
            w[j] = math.log(hi / lo) if lo > 0 and np.isfinite(hi) else 10.0
        elif pair and j == pair[1]:
            w[j] = 1.0
        elif np.isfinite(lo) and np.isfinite(hi) and j not in pair:
            w[j] = hi - lo
        else:
            w[j] = 100.0 * abs(y[j]) if y[j] != 0 else 1.0
    return w


def _gauss_newton_cov(evaluator, pv, coords, y, widths, rel_step=1e-5):
    """Covariance (J^T J + diag(1/w^2))^-1 of the deviance residuals in the
    sampler coordinates at ``y`` (forward differences, stepping inwards at
    a bound); None when the residuals cannot be evaluated."""
    r0 = evaluator.residuals(coords.to_theta(y))
    if not np.all(np.isfinite(r0)):
        return None
    jac = np.empty((len(r0), len(y)))
    for j in range(len(y)):
        h = rel_step * max(abs(y[j]), 1e-3 * widths[j])
        for step in (h, -h):
            yj = y.copy()
            yj[j] += step
            th = coords.to_theta(yj)
            if coords.in_bounds(yj) and pv.in_bounds(th):
                jac[:, j] = (evaluator.residuals(th) - r0) / step
                break
        else:
            jac[:, j] = 0.0
    if not np.all(np.isfinite(jac)):
        return None
    prec = jac.T @ jac + np.diag(1.0 / widths ** 2)
    cov = np.linalg.inv(prec)
    cov = 0.5 * (cov + cov.T)
    vals, vecs = np.linalg.eigh(cov)
    floor = 1e-12 * np.max(vals)
    return (vecs * np.maximum(vals, floor)) @ vecs.T


def _component(cov_full, fixed, cell_sd, centre=None, logp=None):
    """Joint covariance of a grid component: each fixed coordinate spread
    independently with the smaller of its cell's ``cell_sd`` and its own
    Gauss-Newton standard deviation (a posterior narrower than a cell is
    not smeared over the cell), the others Gaussian given them with the
    Gauss-Newton conditional mean slope and covariance."""
    d = len(cov_full)
    if not fixed:
        return cov_full
    prec = np.linalg.inv(cov_full)
    s_idx = np.asarray(fixed)
    o_idx = np.setdiff1d(np.arange(d), s_idx)
    cond = np.linalg.inv(prec[np.ix_(o_idx, o_idx)])
    cond = 0.5 * (cond + cond.T)
    slope = -cond @ prec[np.ix_(o_idx, s_idx)]
    own = np.sqrt(np.diag(cov_full)[s_idx])
    sd = np.minimum(np.asarray(cell_sd, dtype=float), own)
    if logp is not None:
        sd = _trusted_spread(centre, s_idx, o_idx, slope, sd, logp)
    c_ss = np.diag(sd ** 2)
    out = np.empty((d, d))
    out[np.ix_(s_idx, s_idx)] = c_ss
    out[np.ix_(o_idx, s_idx)] = slope @ c_ss
    out[np.ix_(s_idx, o_idx)] = (slope @ c_ss).T
    out[np.ix_(o_idx, o_idx)] = cond + slope @ c_ss @ slope.T
    return out


#: A fixed coordinate's spread is halved (at most
#: :data:`VALLEY_HALVINGS` times) while a step of one spread along it,
#: with the others following the linear slope, lowers ln p by more than
#: this (a Gaussian would lower it by 0.5).
VALLEY_TRUST_DROP = 2.0
VALLEY_HALVINGS = 5


def _trusted_spread(centre, s_idx, o_idx, slope, sd, logp):
    """Shrink each fixed coordinate's spread until the linear conditional
    mean still tracks the valley one spread away (the valley bends)."""
    sd = sd.copy()
    l0 = logp(centre)
    if not math.isfinite(l0):
        return sd
    for a, j in enumerate(s_idx):
        for _ in range(VALLEY_HALVINGS):
            drops = []
            for sign in (1.0, -1.0):
                y = centre.copy()
                y[j] += sign * sd[a]
                y[o_idx] += slope[:, a] * sign * sd[a]
                lp = logp(y)
                if math.isfinite(lp):
                    drops.append(l0 - lp)
            if not drops or min(drops) <= VALLEY_TRUST_DROP:
                break
            sd[a] *= 0.5
    return sd


def valley_mixture(result, pv, coords, evaluator, logp=None, n_slices=VALLEY_SLICES,
                   n_fractions=VALLEY_FRACTIONS, dof=VALLEY_DOF,
                   defensive=VALLEY_DEFENSIVE, scale=VALLEY_SCALE):
    """The :class:`ValleyMixture` of a fit in the sampler coordinates
    ``coords`` (module docstring); ``evaluator`` is the fit's compiled
    likelihood over ``pv.free``; ``logp``, the log posterior in the
    sampler coordinates, trims each component's spread where the valley
    bends (:data:`VALLEY_TRUST_DROP`)."""
    axes = _grid_axes(result, pv, n_slices, n_fractions)
    cell_sd = [ax[3] / 2.0 for ax in axes]
    means, covs, logw = [], [], []
    for theta, stat, fixed in valley_points(result, pv, evaluator, n_slices, n_fractions):
        y = coords.to_y(theta)
        cov = _gauss_newton_cov(evaluator, pv, coords, y, _y_widths(pv, coords, y))
        if cov is None:
            continue
        joint = _component(cov, fixed, cell_sd, y, logp)
        means.append(y)
        covs.append(joint * scale ** 2)
        logw.append(-0.5 * stat + 0.5 * np.linalg.slogdet(joint)[1])
    if not means:
        raise FitError("valley proposal: the likelihood could not be evaluated at any "
                       "point of the size grid")
    lw = np.asarray(logw)
    laplace = np.exp(lw - np.max(lw))
    laplace /= laplace.sum()
    weights = (1.0 - defensive) * laplace + defensive / len(laplace)
    lower, upper = coords.box(pv)
    return ValleyMixture(np.array(means), np.array(covs), weights, dof, lower, upper)
