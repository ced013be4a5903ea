"""Injection-recovery of gas and dust columns with the grain size free.

The pieces of the coverage check run by ``benchmarks/validate_coverage.py
--edges`` and by the test suite's reduced version: seeded draws of
simulated edge sightlines (:func:`draw_tasks`), the fit and intervals of
one sightline (:func:`run_one`, a plain function a process pool can call)
and the coverage table (:func:`coverage_table`).  No file I/O here.

Per sightline: :func:`~edgefit.inference.fit.fit_sightline` (global
multi-start fit), profile intervals of the gas and dust columns; the same
fit re-expressed in total/fraction form
(:func:`~edgefit.inference.fit.reparametrise`) and profile intervals of
the total column and the dust fraction (the depletion); optionally MCMC
intervals of all four (sampled in total, fraction, log upper size with
the valley proposal, 32 walkers x 2000 steps).
Interval hits use :meth:`~edgefit.inference.result.Interval.contains`
(a union of pieces counts as such).
"""
from __future__ import annotations

import math
import time
import warnings
from typing import Any

import numpy as np
from scipy import stats as sps

from ..stats import ONE_SIGMA
from .mcmc import ESS_MIN, PRIOR_CONTRACTION_MIN, RHAT_MAX

__all__ = ["draw_tasks", "run_one", "coverage_table", "QUANTITIES", "LEVELS",
           "AMAX_VALUES"]

#: Quantities whose coverage is tallied.
QUANTITIES = ("gas", "dust", "total", "depletion")
#: Confidence levels (the 1-sigma and the 95 % two-sided levels).
LEVELS = (ONE_SIGMA, 0.95)
#: Steps per walker of the coverage chains (32 walkers, valley proposal).
MCMC_STEPS = 2000
#: Upper grain sizes (µm) of the simulations.
AMAX_VALUES = (0.1, 0.25, 0.5, 1.0)


#: Hydrogen columns (1e22 cm^-2) drawn at each edge.  Si K: the range of
#: the issue that asked for this harness.  Below 1.3 keV the smooth
#: absorption of 5e22 cm^-2 leaves no counts (transmission < 1e-3 at Fe L
#: for N_H = 3e22; the continuum normalisation needed to give the asked
#: counts then runs to 1e11-1e19, beyond the fit's bound of 1e10, and the
#: truth would lie outside the parameter space), so Fe L and O K are drawn
#: at 0.3-1 x 10^22 (the N_H = 10^22 scenario these edges were first tried
#: at) and Mg K at 0.5-3 x 10^22.
EDGE_NH_RANGES = {"Si": (0.5, 5.0), "Mg": (0.5, 3.0), "Fe": (0.3, 1.0), "O": (0.3, 1.0)}


def draw_tasks(n, element, seed, *, nh=None, depletion=(0.6, 0.95),
               amax=AMAX_VALUES, counts=(150.0, 600.0), arms=(1, 2), mcmc=False,
               mcmc_steps=MCMC_STEPS,
               start=0, channel_angstrom=0.0025, total_fraction=True):
    """``n`` seeded task dicts for :func:`run_one` (index ``start`` ...);
    ``nh`` defaults to the element's :data:`EDGE_NH_RANGES`."""
    if nh is None:
        nh = EDGE_NH_RANGES[element]
    ss = np.random.SeedSequence([int(seed), sum(map(ord, element))])
    rng = np.random.default_rng(ss)
    tasks = []
    for i in range(n):
        tasks.append({"element": element, "index": start + i,
                      "seed": int(rng.integers(2 ** 31 - 1)),
                      "nh": float(rng.uniform(*nh)),
                      "depletion": float(rng.uniform(*depletion)),
                      "amax": float(rng.choice(amax)),
                      "counts": float(rng.uniform(*counts)),
                      "arms": int(rng.choice(arms)), "mcmc": bool(mcmc),
                      "mcmc_steps": int(mcmc_steps),
                      "channel_angstrom": float(channel_angstrom),
                      "total_fraction": bool(total_fraction)})
    return tasks


_MODELS: dict[str, Any] = {}


def _model(element):
    from ._testing import edge_sightline_model

    if element not in _MODELS:
        _MODELS[element] = edge_sightline_model(element)
    return _MODELS[element]


def prepare_sightline(task):
    """The simulated data and the user's start of one task: returns
    (model, datasets, true quantities {gas, dust, total, depletion},
    starting Parameters, name of the dust column)."""
    from ._testing import edge_sightline_truth, simulate_edge_sightline

    el = task["element"]
    model = _model(el)
    truth, total = edge_sightline_truth(model, el, task["nh"], task["depletion"], task["amax"])
    rng = np.random.default_rng(task["seed"])
    datasets, truth = simulate_edge_sightline(
        model, el, truth, rng, counts_per_channel=task["counts"], arms=task["arms"],
        channel_angstrom=task.get("channel_angstrom", 0.0025))
    dust_col = [n for n in truth if n.startswith("dust_") and n != "dust_amax"][0]
    true_q = {"gas": truth["gas_col"], "dust": truth[dust_col], "total": total,
              "depletion": task["depletion"]}
    params = model.make_params()
    # a user's start: typical values, the continuum level roughly known
    # (N_H and the continuum level known to a factor ~1.5, as from a
    # broad-band fit; columns and sizes not known)
    srng = np.random.default_rng(task["seed"] + 1)
    start = {"ism_nh": task["nh"] * float(srng.uniform(0.7, 1.4)), "gas_col": 0.3 * total,
             dust_col: 0.5 * total, "dust_amax": 0.3, "pl_index": 2.0,
             "pl_norm": float(srng.uniform(0.7, 1.4)) * truth["pl_norm"]}
    for n, v in start.items():
        params[n].set(value=v)
    return model, datasets, true_q, params, dust_col


def run_one(task):
    """Simulate, fit and bound one sightline; returns a JSON-ready dict
    with the truth, the intervals and the hits."""
    from ..errors import EdgefitWarning
    from .fit import fit_sightline, reparametrise
    from .intervals import profile_intervals

    t0 = time.perf_counter()
    model, datasets, true_q, params, dust_col = prepare_sightline(task)
    out = {"task": task, "truth": true_q, "intervals": {}, "hits": {}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EdgefitWarning)
        res = fit_sightline(model, datasets, params=params, goodness=False, warn=False)
        gd = profile_intervals(res, ["gas_col", dust_col], LEVELS, store=True)
        ivs = {"gas": gd["gas_col"], "dust": gd[dust_col]}
        tf = reparametrise(res, "total_fraction", gas="gas", dust="dust")
        tname, fname = tf.model.total_param, tf.model.fraction_param
        if task.get("total_fraction", True):
            tfi = profile_intervals(tf, [tname, fname], LEVELS, store=True)
            ivs.update(total=tfi[tname], depletion=tfi[fname])
    for q, by_level in ivs.items():
        for lev, iv in by_level.items():
            key = f"{q}_{lev}"
            out["intervals"][key] = {"lower": iv.lower, "upper": iv.upper,
                                     "pieces": [list(p) for p in iv.pieces],
                                     "lower_at_bound": iv.lower_at_bound,
                                     "upper_at_bound": iv.upper_at_bound}
            out["hits"][f"profile_{key}"] = bool(iv.contains(true_q[q]))
    out["best"] = {"gas": res.values["gas_col"], "dust": res.values[dust_col],
                   "total": tf.values[tname], "depletion": tf.values[fname],
                   "amax": res.values["dust_amax"], "statistic": res.statistic}
    out["flags"] = list(res.flags)
    out["n_minima"] = len(res.minima)
    if task.get("mcmc"):
        out.update(_mcmc_hits(tf, true_q, tname, fname,
                              nsteps=int(task.get("mcmc_steps", MCMC_STEPS))))
    out["seconds"] = time.perf_counter() - t0
    return out


def _mcmc_hits(tf, true_q, tname, fname, nsteps=MCMC_STEPS, nwalkers=32):
    from ..errors import EdgefitWarning
    from .mcmc import run_mcmc

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EdgefitWarning)
        mc = run_mcmc(tf, nwalkers=nwalkers, nsteps=nsteps, seed=1, store=False,
                      proposal="valley")
    s = mc.flat_samples([tname, fname])
    draws = {"total": s[:, 0], "depletion": s[:, 1], "gas": s[:, 0] * (1 - s[:, 1]),
             "dust": s[:, 0] * s[:, 1]}
    hits = {}
    for q, x in draws.items():
        for lev in LEVELS:
            lo, hi = np.quantile(x, [0.5 - lev / 2, 0.5 + lev / 2])
            hits[f"mcmc_{q}_{lev}"] = bool(lo <= true_q[q] <= hi)
    rhat = getattr(mc, "rhat", None)
    ess = getattr(mc, "ess", None)
    return {"mcmc_hits": hits, "mcmc_rhat_max": float(np.nanmax(rhat))
            if rhat is not None else None,
            "mcmc_ess_min": float(np.nanmin(ess)) if ess is not None else None,
            "mcmc_tau_max": float(np.nanmax(mc.tau)),
            "mcmc_mixing_warning": bool(getattr(mc, "unmixed_modes", False)),
            "mcmc_fraction_contraction": (mc.contraction or {}).get(fname)}


#: The edge each element's coverage sightlines are fitted at.
EDGE_SHELL = {"Si": "K", "Mg": "K", "Fe": "L", "O": "K"}


def _band(n, p):
    lo, hi = sps.binom.interval(0.99, n, p)
    return lo / n, hi / n


def coverage_table(records, methods=("profile", "mcmc")):
    """Text table: per element, per upper size and overall, the coverage
    of each quantity at each level for each interval method, with the 99 %
    binomial band around the nominal level and a verdict (95 % >= 93 %;
    68 % not below the band)."""
    lines = []
    by_el: dict[str, list] = {}
    for r in records:
        by_el.setdefault(r["task"]["element"], []).append(r)
    for el, recs in sorted(by_el.items()):
        groups = [(f"amax={a:g}", [r for r in recs if r["task"]["amax"] == a])
                  for a in sorted({r["task"]["amax"] for r in recs})]
        groups.append(("all", recs))
        for method in methods:
            key = "hits" if method == "profile" else "mcmc_hits"
            if not any(key in r for r in recs):
                continue
            rows = groups
            if method == "mcmc":
                rows = groups + [("converged", [r for r in recs if _converged(r)]),
                                 ("data-led", [r for r in recs if _data_led(r)])]
            lines.append(f"{el} {EDGE_SHELL.get(el, '')} edge, {method} intervals "
                         f"({len(recs)} sightlines)")
            hdr = f"  {'group':<12}{'n':>5}" + "".join(
                f"{q[:5] + ' ' + str(round(100 * lev)):>11}" for q in QUANTITIES for lev in LEVELS)
            lines.append(hdr)
            for label, grp in rows:
                grp = [r for r in grp if key in r]
                if not grp:
                    continue
                row = f"  {label:<12}{len(grp):>5}"
                for q in QUANTITIES:
                    for lev in LEVELS:
                        k = f"{method}_{q}_{lev}"
                        have = [r[key][k] for r in grp if k in r[key]]
                        row += (f"{100 * sum(have) / len(have):>10.1f}%" if have
                                else f"{'--':>11}")
                lines.append(row)
            n = len([r for r in recs if key in r])
            lo68, hi68 = _band(n, ONE_SIGMA)
            verdicts = []
            for q, (c68, c95, ok) in check_targets(recs, method).items():
                verdicts.append(f"{q[1]}: {'ok' if ok else 'FAIL'}")
            lines.append(f"  99 % binomial band for 68.27 % with n={n}: "
                         f"[{100 * lo68:.1f}, {100 * hi68:.1f}] %; " + ", ".join(verdicts))
            if method == "mcmc":
                n_ok = len([r for r in recs if key in r and _converged(r)])
                lines.append(f"  chains with split-R-hat <= {RHAT_MAX} and bulk ESS >= "
                             f"{ESS_MIN} ('converged' row): {n_ok} of {n}")
                have = [r for r in recs if r.get("mcmc_fraction_contraction") is not None]
                if have:
                    n_led = len([r for r in have if _data_led(r)])
                    lines.append(f"  dust fraction's posterior contraction >= "
                                 f"{PRIOR_CONTRACTION_MIN} ('data-led' row): {n_led} of "
                                 f"{len(have)}; the others' credible intervals mostly "
                                 "restate the flat prior")
            lines.append("")
    return "\n".join(lines)


def _converged(record):
    """Whether a record's chain passed the R-hat and ESS checks."""
    rhat, ess = record.get("mcmc_rhat_max"), record.get("mcmc_ess_min")
    return rhat is not None and ess is not None and rhat <= RHAT_MAX and ess >= ESS_MIN


def _data_led(record):
    """Whether a record's dust-fraction posterior contracted from its prior
    by at least :data:`~edgefit.inference.mcmc.PRIOR_CONTRACTION_MIN`."""
    c = record.get("mcmc_fraction_contraction")
    return c is not None and c >= PRIOR_CONTRACTION_MIN


def check_targets(records, method="profile"):
    """{(element, quantity): (c68, c95, ok)} against the targets."""
    out = {}
    key = "hits" if method == "profile" else "mcmc_hits"
    by_el: dict[str, list] = {}
    for r in records:
        if key in r:
            by_el.setdefault(r["task"]["element"], []).append(r)
    for el, recs in by_el.items():
        n = len(recs)
        lo68, _ = _band(n, ONE_SIGMA)
        for q in QUANTITIES:
            k68, k95 = f"{method}_{q}_{ONE_SIGMA}", f"{method}_{q}_0.95"
            if not all(k68 in r[key] for r in recs):
                continue
            c68 = sum(r[key][k68] for r in recs) / n
            c95 = sum(r[key][k95] for r in recs) / n
            out[(el, q)] = (c68, c95, bool(c95 >= 0.93 and c68 >= lo68))
    return out
