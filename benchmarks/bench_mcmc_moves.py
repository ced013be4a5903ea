"""Benchmark: walker proposals of ``run_mcmc`` on the demo's sightlines.

For every sightline of the demo that the full demo samples with MCMC
(grain size fixed, six free parameters; SIMULATED spectra written by
``edgefit.demo.sample.write_sample`` with the demo's seeds), this fits the
sightline once and then runs ``run_mcmc`` side by side, in one process,
with each proposal (``"stretch"``: emcee's stretch move; ``"differential"``:
the differential-evolution / snooker mixture) and each walker count, all
chains ``--steps`` long and seeded alike.  It prints per run:

* ``tau``: the largest integrated autocorrelation time (steps), emcee's
  estimator with ``tol=0`` as ``run_mcmc`` computes it;
* ``ESS/eval``: effective samples per log-posterior evaluation, both
  walkers x (steps - burn) / tau_max and arviz's smallest bulk ESS, each
  divided by the evaluations of the whole run (walkers x steps);
* ``need``: the chain length that meets the short-chain rule
  (``MIN_TAU_MULTIPLE`` x tau) with a ``--margin`` (default 20 %), the
  evaluations it costs, and the smallest bulk ESS expected at that length
  (the measured bulk ESS per post-burn-in sample scaled);
* ms per evaluation (wall clock after one untimed short run, informational: a shared machine's clock
  is noisy; the decision rests on evaluation counts).

Then, per proposal and walker count, the worst sightline's needs and their
ratio to the stretch move at the demo's former setting (16 walkers).  No
assertions.

Run:  python benchmarks/bench_mcmc_moves.py [--steps 4000] [--walkers 12 16 32]
          [--proposals stretch differential] [--processes 2] [--only NAME ...]
"""
from __future__ import annotations

import argparse
import math
import tempfile
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np


def _fit(cfg):
    from edgefit.inference import fit_sightline

    datasets = cfg.load_datasets()
    _, params = cfg.likelihood(datasets)
    f = cfg.fit
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_sightline(cfg.model, datasets, params=params, statistic=f.statistic,
                             method=f.method, chi2_variance=f.chi2_variance)


def _one_sightline(job):
    """All runs of one sightline: a list of row dicts."""
    manifest, name, proposals, walkers, steps, seed, margin = job
    from edgefit.analysis.manifest import load_manifest
    from edgefit.inference import run_mcmc
    from edgefit.inference.mcmc import MIN_TAU_MULTIPLE

    cfg = load_manifest(manifest)[name].config
    result = _fit(cfg)
    with warnings.catch_warnings():   # untimed: loads kernels and caches once
        warnings.simplefilter("ignore")
        run_mcmc(result, nwalkers=walkers[0], nsteps=20, seed=seed, store=False)
    rows = []
    for nw in walkers:
        for prop in proposals:
            t0 = time.perf_counter()
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                mc = run_mcmc(result, nwalkers=nw, nsteps=steps, seed=seed, store=False,
                              proposal=prop)
            wall = time.perf_counter() - t0
            evals = mc.nwalkers * mc.nsteps
            tau = float(np.nanmax(mc.tau))
            post = mc.nsteps - mc.burn
            ess_min = float(np.nanmin(mc.ess))
            need = int(math.ceil((1 + margin) * MIN_TAU_MULTIPLE * tau))
            # burn-in at the needed length: max(2 tau, need/4)
            post_need = need - max(2 * tau, need / 4)
            rows.append({
                "sightline": name, "proposal": prop, "walkers": mc.nwalkers, "tau": tau,
                "acceptance": float(np.mean(mc.acceptance)),
                "ess_tau_per_eval": mc.nwalkers * post / tau / evals,
                "ess_bulk_per_eval": ess_min / evals,
                "need_steps": need, "need_evals": mc.nwalkers * need,
                "ess_bulk_at_need": ess_min / post * post_need,
                "ms_per_eval": 1e3 * wall / evals,
                "warnings": sorted({w.category.__name__ for w in caught}),
            })
    return rows


def main():
    from edgefit.demo.region import AMAX_FIT_UM, SIGHTLINES

    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--steps", type=int, default=4000)
    ap.add_argument("--walkers", type=int, nargs="+", default=[12, 16, 32])
    ap.add_argument("--proposals", nargs="+", default=["stretch", "differential"])
    ap.add_argument("--margin", type=float, default=0.2)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--processes", type=int, default=1,
                    help="sightlines run in this many processes (each run stays in one)")
    ap.add_argument("--only", nargs="+", help="sightline names (default: every MCMC one)")
    a = ap.parse_args()

    from edgefit.demo.sample import write_sample

    names = [r[0] for r in SIGHTLINES if r[3] <= AMAX_FIT_UM]   # size fixed: MCMC in the demo
    if a.only:
        names = [n for n in names if n in a.only]
    with tempfile.TemporaryDirectory(prefix="bench_moves_") as tmp:
        manifest, _ = write_sample(Path(tmp), say=lambda m: None)
        jobs = [(manifest, n, a.proposals, a.walkers, a.steps, a.seed, a.margin)
                for n in names]
        if a.processes > 1:
            with ProcessPoolExecutor(a.processes) as ex:
                per = list(ex.map(_one_sightline, jobs))
        else:
            per = [_one_sightline(j) for j in jobs]
    rows = [r for rs in per for r in rs]

    print(f"{a.steps} steps per run, seed {a.seed}; need = {1 + a.margin:.2f} x "
          "MIN_TAU_MULTIPLE x tau_max")
    print(f"{'sightline':<14} {'proposal':<12} {'walk':>4} {'tau':>6} {'acc':>5} "
          f"{'ESS/eval(tau)':>13} {'ESS/eval(bulk)':>14} {'need steps':>10} "
          f"{'need evals':>10} {'bulkESS@need':>12} {'ms/eval':>7}  warnings")
    for r in rows:
        print(f"{r['sightline']:<14} {r['proposal']:<12} {r['walkers']:>4} {r['tau']:>6.1f} "
              f"{r['acceptance']:>5.2f} {r['ess_tau_per_eval']:>13.2e} "
              f"{r['ess_bulk_per_eval']:>14.2e} {r['need_steps']:>10} {r['need_evals']:>10} "
              f"{r['ess_bulk_at_need']:>12.0f} {r['ms_per_eval']:>7.3f}  "
              f"{','.join(r['warnings']) or '-'}")

    print("\nworst sightline per setting (need = steps for the rule with margin on all):")
    ref = None
    summary = []
    for prop in a.proposals:
        for nw in a.walkers:
            sel = [r for r in rows if r["proposal"] == prop and r["walkers"] == nw + nw % 2]
            if not sel:
                continue
            s = {"proposal": prop, "walkers": sel[0]["walkers"],
                 "tau": max(r["tau"] for r in sel),
                 "need_steps": max(r["need_steps"] for r in sel),
                 "ess_bulk_at_need": min(r["ess_bulk_at_need"] for r in sel),
                 "ess_tau_per_eval": min(r["ess_tau_per_eval"] for r in sel),
                 "ms_per_eval": float(np.median([r["ms_per_eval"] for r in sel]))}
            s["need_evals"] = s["walkers"] * s["need_steps"]
            summary.append(s)
            if prop == "stretch" and s["walkers"] == 16:
                ref = s
    print(f"{'proposal':<12} {'walk':>4} {'max tau':>7} {'need steps':>10} {'need evals':>10} "
          f"{'evals/ref':>9} {'min ESS/eval(tau)':>17} {'ratio/ref':>9} {'min bulkESS@need':>16} "
          f"{'ms/eval':>7} {'ratio/ref':>9}")
    for s in summary:
        ratio = s["need_evals"] / ref["need_evals"] if ref else float("nan")
        eratio = s["ess_tau_per_eval"] / ref["ess_tau_per_eval"] if ref else float("nan")
        tratio = s["ms_per_eval"] / ref["ms_per_eval"] if ref else float("nan")
        print(f"{s['proposal']:<12} {s['walkers']:>4} {s['tau']:>7.1f} {s['need_steps']:>10} "
              f"{s['need_evals']:>10} {ratio:>9.2f} {s['ess_tau_per_eval']:>17.2e} "
              f"{eratio:>9.2f} {s['ess_bulk_at_need']:>16.0f} {s['ms_per_eval']:>7.3f} "
              f"{tratio:>9.2f}")
    if ref is None:
        print("(no stretch run with 16 walkers: ratios not shown)")


if __name__ == "__main__":
    main()
