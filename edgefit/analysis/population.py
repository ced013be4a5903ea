"""A population fit of a sample from each sightline's saved posterior samples.

Each sightline i was sampled once (by ``edgefit fit`` / the batch) under an
interim prior p0.  A population model says that one quantity q (a fitted
parameter, e.g. the dust column or an upper grain size, optionally on a log
scale) is distributed across the sample as

    q_i ~ N(c0 + c1 (x_i − x_ref), s²)

with x_i an optional covariate (e.g. log N_H, for a depletion–N_H
relation with intrinsic scatter s; without a covariate only c0 and s).
Following Hogg, Myers & Bovy 2010 (ApJ 725, 2166, eq. 9), the likelihood of
the hyper-parameters α = (c0, c1, s) is estimated from the K samples q_ik
of each sightline by importance reweighting,

    L(α) = Π_i (1/K) Σ_k p(q_ik | α) / p0(q_ik),

which is exact as K → ∞ if the samples cover the population distribution
(so the population must be broad compared with the spacing of the
samples; it suits population distributions, not a parameter shared
exactly by all sightlines).  α is sampled with emcee (flat priors in c0,
c1 and s > 0), the chain extended to 50 autocorrelation times.

Each sightline under the population prior: its samples reweighted by
w_ik ∝ ⟨p(q_ik | α)⟩_α / p0(q_ik) (averaged over hyper-posterior draws),
which gives the quantiles of q and of every other sampled column (e.g. the
gas and dust columns) "shrunk" towards the population.  The effective
number of samples n_eff = (Σw)²/Σw² says whether that reweighting can be
trusted; below ``min_effective`` (default 50, our rule of thumb) a
:class:`~edgefit.errors.ShortChainWarning` names the sightlines.

Interim priors: edgefit's sampler is flat within the parameter bounds
unless a configuration sets a prior; ``interim="flat"`` (default) or
``"log-uniform"`` states which, for the sampled quantity; with
``log=True`` the population is modelled in ln q and the Jacobian of the
change of variable is included.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import ArgumentError, ShortChainWarning
from ..stats import ONE_SIGMA

__all__ = ["population_fit", "PopulationResult", "weighted_quantiles", "population_from_batch"]

_MIN_TAU_MULTIPLE = 50
_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


def weighted_quantiles(values, weights, probs):
    """Quantiles of weighted samples (linear interpolation of the weighted
    empirical CDF at the mid-points of the sorted samples' weights)."""
    v = np.asarray(values, float)
    w = np.asarray(weights, float)
    order = np.argsort(v)
    v, w = v[order], w[order]
    cdf = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return np.interp(probs, cdf, v)


class _HyperPosterior:
    """Vectorised ln posterior of (c0, [c1,] s) from padded sample arrays."""

    def __init__(self, q, logp0, x, with_slope):
        self.q = q            # (N, K)
        self.logp0 = logp0    # (N, K)
        self.x = x            # (N,)
        self.with_slope = with_slope
        self.log_k = math.log(q.shape[1])
        # -ln p0 shifted to a maximum of 0 per sightline (the shifts add back as a constant)
        m = np.max(-logp0, axis=1, keepdims=True)
        self.neg_logp0 = -logp0 - m
        self.shift = float(np.sum(m))

    def mean_scale(self, theta):
        theta = np.atleast_2d(theta)
        if self.with_slope:
            c0, c1, s = theta.T
            mu = c0[:, None] + c1[:, None] * self.x[None, :]
        else:
            c0, s = theta.T
            mu = np.repeat(c0[:, None], self.x.size, axis=1)
        return mu, s

    def __call__(self, theta):
        mu, s = self.mean_scale(theta)
        ok = s > 0
        s_safe = np.where(ok, s, 1.0)
        inv = (1.0 / s_safe)[:, None, None]
        z = self.q[None, :, :] - mu[:, :, None]
        z *= inv
        z *= z
        z *= -0.5
        z += self.neg_logp0[None]            # shifted so its largest value is 0
        total = np.exp(z, out=z).sum(axis=2)          # (W, N)
        with np.errstate(divide="ignore"):
            lp = np.log(total)
        bad = ~(total > 0)
        if bad.any():  # every sample of a sightline far in the tail: exact log-sum-exp
            from scipy.special import logsumexp

            for w, i in zip(*np.nonzero(bad)):
                zz = -0.5 * ((self.q[i] - mu[w, i]) / s_safe[w]) ** 2 + self.neg_logp0[i]
                lp[w, i] = logsumexp(zz)
        lp = (np.sum(lp, axis=1) + self.shift - self.q.shape[0] * (self.log_k + _LOG_SQRT_2PI)
              - self.q.shape[0] * np.log(s_safe))
        return np.where(ok & np.isfinite(lp), lp, -np.inf)


@dataclass
class PopulationResult:
    """Hyper-parameters and per-sightline intervals of :func:`population_fit`."""

    quantity: str
    log: bool
    covariate_ref: float | None
    hyper: dict
    hyper_samples: np.ndarray
    hyper_names: list
    sightlines: list
    n_steps: int
    autocorr_steps: list
    warnings: list = field(default_factory=list)
    skipped: list = field(default_factory=list)
    output: str | None = None

    def to_dict(self):
        return {"quantity": self.quantity, "log": self.log,
                "covariate_ref": self.covariate_ref, "hyper": self.hyper,
                "sightlines": self.sightlines, "n_steps": self.n_steps,
                "autocorr_steps": self.autocorr_steps, "warnings": self.warnings,
                "method": "importance reweighting of per-sightline posterior samples "
                          "(Hogg, Myers & Bovy 2010, eq. 9)"}


def _interval(values, weights=None):
    p = [0.5 * (1 - ONE_SIGMA), 0.5, 0.5 * (1 + ONE_SIGMA)]
    if weights is None:
        lo, med, hi = np.quantile(values, p)
    else:
        lo, med, hi = weighted_quantiles(values, weights, p)
    return {"median": float(med), "lo": float(lo), "hi": float(hi)}


def population_fit(samples, quantity, *, covariate=None, log=False, interim="flat",
                   columns=None, max_samples=2000, n_walkers=16, n_steps=1500,
                   max_steps=15000, n_hyper_draws=400, min_effective=50, seed=0,
                   progress=False) -> PopulationResult:
    """Fit a normal population of ``quantity`` (module docstring).

    Parameters
    ----------
    samples : mapping name -> (column names, array (K_i, n_columns)) or Table
        Each sightline's posterior samples (e.g. from
        :func:`edgefit.analysis.pipeline.read_samples`).
    quantity : str
        Column whose population is modelled.
    covariate : mapping name -> float, optional
        x_i for the population mean c0 + c1 (x_i − x_ref), x_ref the mean of
        the x_i (e.g. log10 N_H).  Sightlines without a finite x are left out.
    log : bool
        Model ln(quantity) (all samples must be positive).
    interim : {"flat", "log-uniform"}
        The prior the samples were drawn under, in ``quantity``.
    columns : list of str, optional
        Other columns to report under the population prior (default all).
    max_samples : int
        Samples used per sightline (a seeded random subset when more).
    min_effective : float
        Warn when a sightline's effective number of reweighted samples is
        below this.

    Returns
    -------
    PopulationResult
        ``hyper``: {c0, [c1,] s: {median, lo, hi}} (68 % intervals) in the
        modelled scale; ``sightlines``: per sightline the single-fit and
        population intervals of ``quantity`` and ``columns``, the shrink
        factor (population / single 68 % width) and n_eff.
    """
    import emcee

    if interim not in ("flat", "log-uniform"):
        raise ArgumentError(f"interim must be 'flat' or 'log-uniform', not {interim!r}")
    rng = np.random.default_rng(seed)
    names, tables = [], []
    for name, s in samples.items():
        if hasattr(s, "colnames"):
            cols, arr = list(s.colnames), np.column_stack([np.asarray(s[c], float)
                                                           for c in s.colnames])
        else:
            cols, arr = list(s[0]), np.asarray(s[1], float)
        if quantity not in cols:
            raise ArgumentError(f"sightline {name!r}: no sampled column {quantity!r} "
                                f"(have {', '.join(cols)})")
        if covariate is not None and not np.isfinite(covariate.get(name, np.nan)):
            continue
        names.append(name)
        tables.append((cols, arr))
    if len(names) < 3:
        raise ArgumentError(f"a population fit needs at least 3 sightlines with samples of "
                            f"{quantity!r}, have {len(names)}")
    k = min(max_samples, min(a.shape[0] for _, a in tables))
    q = np.empty((len(names), k))
    logp0 = np.zeros((len(names), k))
    kept = []
    for i, (cols, arr) in enumerate(tables):
        take = rng.choice(arr.shape[0], k, replace=False) if arr.shape[0] > k else slice(None)
        sub = arr[take]
        kept.append((cols, sub))
        v = sub[:, cols.index(quantity)]
        if log:
            if np.any(v <= 0):
                raise ArgumentError(f"sightline {names[i]!r}: {quantity!r} has samples <= 0; "
                                    "cannot model its logarithm")
            q[i] = np.log(v)
            # density of ln q under the interim prior: flat in q -> p0(ln q) ∝ q
            logp0[i] = np.log(v) if interim == "flat" else 0.0
        else:
            q[i] = v
            logp0[i] = 0.0 if interim == "flat" else -np.log(np.where(v > 0, v, np.nan))
    if not np.all(np.isfinite(logp0)):
        raise ArgumentError(f"log-uniform interim prior needs positive samples of {quantity!r}")
    with_slope = covariate is not None
    if with_slope:
        xv = np.array([float(covariate[n]) for n in names])
        x_ref = float(np.mean(xv))
        x = xv - x_ref
    else:
        x_ref = None
        x = np.zeros(len(names))
    post = _HyperPosterior(q, logp0, x, with_slope)
    # start: per-sightline means, their spread, a least-squares slope
    m = q.mean(axis=1)
    sd = float(max(np.std(m), 0.1 * float(np.mean(q.std(axis=1))), 1e-6))
    if with_slope:
        c1, c0 = np.polyfit(x, m, 1) if np.ptp(x) > 0 else (0.0, float(np.mean(m)))
        start = np.array([c0, c1, sd])
        hyper_names = ["c0", "c1", "s"]
    else:
        start = np.array([float(np.mean(m)), sd])
        hyper_names = ["c0", "s"]
    ndim = start.size
    scale = np.array([sd / math.sqrt(len(names))] * ndim)
    if with_slope:
        scale[1] = sd / (np.std(x) * math.sqrt(len(names)) + 1e-30) if np.std(x) > 0 else 1.0
    scale[-1] = 0.1 * sd
    p0 = start + 0.1 * scale * rng.standard_normal((n_walkers, ndim))
    p0[:, -1] = np.abs(p0[:, -1])
    sampler = emcee.EnsembleSampler(n_walkers, ndim, post, vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2 ** 31))).get_state()
    state = sampler.run_mcmc(p0, 500, progress=progress)
    sampler.reset()
    total, chunk = 0, n_steps
    while True:
        state = sampler.run_mcmc(state, chunk, progress=progress)
        total += chunk
        tau = emcee.autocorr.integrated_time(sampler.get_chain(), tol=0)
        if total >= _MIN_TAU_MULTIPLE * float(np.max(tau)) or total >= max_steps:
            break
        chunk = min(max(int(_MIN_TAU_MULTIPLE * np.max(tau)) - total, 500), max_steps - total)
    notes = []
    if total < _MIN_TAU_MULTIPLE * float(np.max(tau)):
        msg = (f"population chain of {total} steps is shorter than {_MIN_TAU_MULTIPLE} "
               f"autocorrelation times ({float(np.max(tau)):.0f})")
        notes.append(msg)
        warnings.warn(ShortChainWarning(msg), stacklevel=2)
    flat = sampler.get_chain(flat=True, thin=max(1, int(np.min(tau) / 2)))
    hyper = {n: _interval(flat[:, j]) for j, n in enumerate(hyper_names)}
    # per-sightline reweighting, averaged over hyper-posterior draws
    draws = flat[rng.choice(flat.shape[0], min(n_hyper_draws, flat.shape[0]), replace=False)]
    mu, s = post.mean_scale(draws)                          # (J, N), (J,)
    out, few = [], []
    for i, name in enumerate(names):
        z = (q[i][None, :] - mu[:, i][:, None]) / s[:, None]
        lw = -0.5 * z * z - np.log(s)[:, None] - logp0[i][None, :]
        lw = lw - lw.max()
        w = np.mean(np.exp(lw), axis=0)
        w = w / w.sum()
        n_eff = float(1.0 / np.sum(w * w))
        cols, sub = kept[i]
        report = [quantity] + [c for c in (columns if columns is not None else cols)
                               if c != quantity and c in cols]
        entry = {"name": name, "n_samples": int(k), "n_eff": n_eff, "columns": {}}
        if with_slope:
            entry["covariate"] = float(x[i] + x_ref)
        for c in report:
            v = sub[:, cols.index(c)]
            single, pop = _interval(v), _interval(v, w)
            width = single["hi"] - single["lo"]
            entry["columns"][c] = {"single": single, "population": pop,
                                   "shrink": (float((pop["hi"] - pop["lo"]) / width)
                                              if width > 0 else float("nan"))}
        out.append(entry)
        if n_eff < min_effective:
            few.append(f"{name} ({n_eff:.0f})")
    if few:
        msg = (f"too few effective samples after reweighting (< {min_effective:g}) for: "
               f"{', '.join(few)}; their population intervals are not reliable")
        notes.append(msg)
        warnings.warn(ShortChainWarning(msg), stacklevel=2)
    return PopulationResult(quantity=quantity, log=bool(log), covariate_ref=x_ref,
                            hyper=hyper, hyper_samples=flat, hyper_names=hyper_names,
                            sightlines=out, n_steps=int(total),
                            autocorr_steps=[float(t) for t in tau], warnings=notes)


def _population_table(result):
    """One row per sightline: n_eff and, per reported column, the single-fit
    and population medians and 68 % ranges and the shrink factor."""
    from astropy.table import Table

    t = Table()
    t["name"] = [e["name"] for e in result.sightlines]
    t["n_eff"] = [e["n_eff"] for e in result.sightlines]
    if result.covariate_ref is not None:
        t["covariate"] = [e["covariate"] for e in result.sightlines]
    cols = list(result.sightlines[0]["columns"])
    for c in cols:
        for kind in ("single", "population"):
            for part, suffix in (("median", ""), ("lo", "_lo"), ("hi", "_hi")):
                t[f"{c}_{kind}{suffix}"] = [e["columns"][c][kind][part]
                                            for e in result.sightlines]
        t[f"{c}_shrink"] = [e["columns"][c]["shrink"] for e in result.sightlines]
    return t


def population_from_batch(folder, quantity, *, covariate=None, log_covariate=True, log=False,
                          interim="flat", output=None, figures=None, seed=0, progress=False):
    """``edgefit population``: the population fit of a batch output folder.

    Reads ``folder/sample.ecsv`` and each usable sightline's saved posterior
    samples (``folder/sightlines/<name>/posterior_samples.npz``; sightlines
    that failed or ran without MCMC are listed and left out), takes the
    covariate from a sample-table column (log10 of it when
    ``log_covariate``; rows where it is an upper limit or not finite are
    left out), runs :func:`population_fit` and writes ``population.json``,
    ``population_sightlines.ecsv`` into ``output`` (default: ``folder``)
    and calls ``figures(result, output, covariate_label=..., unit=...)``
    when given (the command passes
    :func:`edgefit.plotting.population.save_population_figure`).  Returns the
    :class:`PopulationResult` (its ``skipped`` attribute lists the names
    left out and why).
    """
    import os
    from pathlib import Path

    from ..errors import InputFileError
    from .manifest import folder_name
    from .pipeline import SAMPLES_FILE, read_samples
    from .regression import write_json
    from .sample_table import open_sample_table

    table_path, table = open_sample_table(folder)
    folder = table_path.parent
    if covariate is not None and covariate not in table.colnames:
        raise InputFileError(table_path, f"no column {covariate!r} for the covariate")
    samples, cov, skipped = {}, {}, []
    for row in table:
        name = str(row["name"])
        if "status" in table.colnames and str(row["status"]) == "failed":
            skipped.append((name, "failed"))
            continue
        sdir = folder / "sightlines" / folder_name(name)
        if not (sdir / SAMPLES_FILE).exists():
            skipped.append((name, "no posterior samples (MCMC not run)"))
            continue
        if covariate is not None:
            val = float(row[covariate])
            upper = f"{covariate}_upper" in table.colnames and bool(row[f"{covariate}_upper"])
            if upper or not np.isfinite(val) or (log_covariate and val <= 0):
                skipped.append((name, f"{covariate} is an upper limit or not usable"))
                continue
            cov[name] = math.log10(val) if log_covariate else val
        try:
            samples[name] = read_samples(sdir)
        except (OSError, KeyError, ValueError) as exc:
            raise InputFileError(sdir / SAMPLES_FILE, f"cannot read samples ({exc})") from None
        if quantity not in samples[name][0]:
            raise InputFileError(sdir / SAMPLES_FILE,
                                 f"no sampled parameter {quantity!r} (have "
                                 f"{', '.join(samples[name][0])}); only free parameters "
                                 "are sampled")
    if len(samples) < 3:
        raise InputFileError(table_path, f"{len(samples)} sightline(s) with posterior samples "
                                         f"of {quantity!r}; a population needs at least 3")
    result = population_fit(samples, quantity, covariate=cov if covariate else None, log=log,
                            interim=interim, seed=seed, progress=progress)
    result.skipped = skipped
    out = Path(output) if output else folder
    os.makedirs(out, exist_ok=True)
    d = result.to_dict()
    d.update({"source": str(table_path), "covariate": covariate,
              "log_covariate": bool(log_covariate) if covariate else None,
              "interim_prior": interim, "skipped": [list(s) for s in skipped]})
    write_json(d, out / "population.json")
    t = _population_table(result)
    tmp = out / f".population_sightlines.ecsv.tmp{os.getpid()}"
    t.write(tmp, format="ascii.ecsv", overwrite=True)
    os.replace(tmp, out / "population_sightlines.ecsv")
    if figures is not None:
        unit = getattr(table[quantity], "unit", None) if quantity in table.colnames else None
        figures(result, out, covariate_label=(f"log10 {covariate}"
                                              if covariate and log_covariate else covariate),
                unit=str(unit) if unit is not None else None)
    result.output = str(out)
    return result
