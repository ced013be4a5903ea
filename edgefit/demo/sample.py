"""The sample demo: simulate the Brindle Cloud's eight sightlines, fit
them in batch, relate them to hydrogen, and write the report.

``run_sample_demo(output, quick=...)`` writes into ``output``:

* ``spectra/<sightline>/``: the SIMULATED OGIP files of each sightline
  (two arms: PHA, RMF, ARF, background) and its ``truth.json``
  (:mod:`edgefit.analysis.simulate`);
* ``sample.toml``: the batch manifest (README "Many sightlines");
* ``batch/``: what ``edgefit batch`` writes (one folder per sightline,
  ``sample.ecsv``/``sample.fits``);
* ``analysis/``: the regressions (``regression_total.json``,
  ``regression_dust.json`` and figures), grain columns
  (``sample_grains.ecsv``), the shielded tau-N_H relation
  (``shielded_relation.json``), the self-shielding table and curve, the
  truth comparison (``truth_comparison.ecsv``) and, in the full run, the
  population fit of the dust columns (``population.json``,
  ``population_sightlines.ecsv``);
* ``sizes/``: the size-distribution comparison
  (:mod:`edgefit.analysis.sizes_compare`: ``sizes.ecsv``, ``sizes.json``,
  ``sizes.png`` and one batch folder per candidate): the sightlines refitted
  under :data:`SIZE_CANDIDATES` (MRN with the upper size free, MRN fixed at
  its small-grain default, one grain size), compared by C, AIC and
  likelihood-ratio tests.  The full run compares every sightline; ``quick``
  only :data:`QUICK_SIZE_SIGHTLINES` (the large-grain one and two others);
* ``report.html``: everything on one page (:mod:`edgefit.report.html`).

``quick`` fits without MCMC (profile-likelihood intervals for the gas and
dust columns at 68.27 and 95 %, covariance draws for derived quantities)
and runs the Bayesian line with a shorter chain; the full demo samples
each sightline's posterior long enough for emcee's 50-autocorrelation-time
rule (so it raises no short-chain warning).
"""
from __future__ import annotations

import json
import math
import time
from typing import Any
from pathlib import Path

import numpy as np

from .region import (AMAX_FIT_UM, FIT_RANGE_KEV, REGION, SIGHTLINES, fit_model,
                     si_abundance, simulation_dict, tracer_columns, truth_of)

__all__ = ["SEED", "write_sample", "run_sample_demo", "analyse_sample", "truth_table",
           "MCMC_FULL", "SIZE_CANDIDATES", "QUICK_SIZE_SIGHTLINES", "compare_sample_sizes"]

SEED = 20261202
#: MCMC of the full demo: walkers, steps, proposal.  With the continuum
#: norm given at a pivot inside the band and the differential-evolution
#: proposal the six-parameter posteriors have autocorrelation times of
#: 27-37 steps whether 12, 16 or 32 walkers run (the stretch move with 16
#: walkers: 84-116; ``benchmarks/bench_mcmc_moves.py``, 4000-step chains),
#: so 2400 steps meet the 50-autocorrelation-time rule with 30 % to spare
#: on the worst sightline; 12 walkers (2 x the six parameters) x 2400 steps
#: cost 30 % of the stretch move's former 16 x 6000 evaluations and left a
#: bulk ESS of at least 530 per parameter (ESS_MIN is 400).
MCMC_FULL = (12, 2400, "differential")
#: Size distributions the demo compares (``edgefit sizes`` syntax): MRN
#: with the upper size fitted, MRN with every size fixed at the defaults
#: (0.005-0.25 um, index 3.5: what the batch assumes), and grains of one
#: radius, 0.1 um.
SIZE_CANDIDATES = ("mrn:amax=free", "mrn", "single:size=0.1")
#: Sightlines compared by ``--quick``: the large-grain one between two with
#: small grains (a low and a high column).
QUICK_SIZE_SIGHTLINES = ("Tallow Reach", "Cinder Ford", "Hazel Weir")


def folder_of(name):
    return name.lower().replace(" ", "_")


def write_sample(output, quick=False, say=print):
    """Simulate every sightline and write the batch manifest; returns
    (manifest path, {name: truth dict})."""
    from ..analysis.simulate import simulation_from_dict, toml_text, write_simulation

    output = Path(output)
    tracers = tracer_columns()
    truths, entries = {}, []
    for i, row in enumerate(SIGHTLINES):
        name = row[0]
        setup = simulation_from_dict(simulation_dict(row, SEED + i))
        folder = output / "spectra" / folder_of(name)
        write_simulation(setup, folder)
        truths[name] = dict(truth_of(row))
        tr = tracers[name]
        nh_tracer = (tr["nh_hi"] + 2 * tr["n_h2"]) / 1e22
        entries.append({
            "name": name,
            "pha": [f"spectra/{folder_of(name)}/{setup.stem}_{tag}.pha"
                    for tag, _, _ in setup.responses],
            **tr,
            "model": {"components": {"ism": {"params": {
                "nh": {"value": round(nh_tracer, 5), "min": 0.1, "max": 10.0}}}}},
        })
        if row[3] > AMAX_FIT_UM:
            # the large-grain sightline: its size is not assumed but fitted
            # (the price is a much wider gas-dust split; see `edgefit plan`)
            entries[-1]["model"]["components"]["dust"] = {"params": {
                "amax": {"value": AMAX_FIT_UM, "min": 0.05, "max": 3.0, "fixed": False}}}
            # with the size free the posterior is a long curved ridge
            # (autocorrelation times of ~500 steps): profile intervals only
            entries[-1]["mcmc"] = {"enabled": False}
        say(f"  simulated {name} (N_H {row[1]:g}e22 cm-2, depletion {row[2]:g}, "
            f"grains up to {row[3]:g} um)")
    walkers, steps, proposal = MCMC_FULL
    manifest = {
        "defaults": {
            "model": fit_model(),
            "spectrum": {"range": list(FIT_RANGE_KEV)},
            "errors": {"profile": ["gas_si_col", "dust_col"], "levels": [0.6827, 0.95]},
            "mcmc": {"enabled": not quick, "walkers": walkers, "steps": steps, "seed": 1,
                     "proposal": proposal},
            "goodness": {"ppc_draws": 0 if quick else 100},
            "plots": {"unit": "Angstrom", "window": [6.2, 7.2], "display_min_counts": 400},
        },
        "sightline": entries,
    }
    path = output / "sample.toml"
    path.write_text(toml_text(manifest, header=(
        f"# SIMULATED sample: eight invented sightlines through the {REGION}.\n"
        "# Written by `edgefit demo`; fit with:  edgefit batch sample.toml\n")))
    return path, truths


def _profile(fit_json, name, level):
    """(lower, upper) of a profile interval at ``level`` from a sightline's
    fit.json, or None (not computed, or an end not found)."""
    for par in fit_json.get("parameters", []):
        if par.get("name") != name:
            continue
        for iv in par.get("profile") or []:
            if abs(float(iv["level"]) - level) < 1e-3 and iv.get("lower") is not None \
                    and iv.get("upper") is not None:
                return iv["lower"], iv["upper"]
    return None


def truth_table(batch_dir, table, truths):
    """Per sightline and column (gas, dust, total): truth, estimate, 68 %
    and 95 % intervals, and whether the 95 % interval covers the truth."""
    from astropy import units as u
    from astropy.table import Table

    from ..analysis.manifest import folder_name

    rows = []
    for r in table:
        name = str(r["name"])
        t = truths[name]
        p = Path(batch_dir) / "sightlines" / folder_name(name) / "fit.json"
        fj = json.loads(p.read_text()) if p.is_file() else {}
        for q in ("gas_si_col", "dust_col"):
            p68 = _profile(fj, q, 0.6827)
            p95 = _profile(fj, q, 0.95)
            est = float(r[q]) if q in r.colnames else math.nan
            lo68, hi68 = p68 if p68 else (float(r[f"{q}_lo"]), float(r[f"{q}_hi"]))
            lo95, hi95 = p95 if p95 else (math.nan, math.nan)
            covered = bool(lo95 <= t[q] <= hi95) if p95 else False
            rows.append((name, q, t[q], est, lo68, hi68, lo95, hi95, covered))
    tab = Table(rows=rows, names=("name", "quantity", "truth", "estimate", "lo68", "hi68",
                                  "lo95", "hi95", "covered95"))
    for c in ("truth", "estimate", "lo68", "hi68", "lo95", "hi95"):
        tab[c].unit = u.Unit("1e16 cm-2")
    tab.meta["note"] = ("SIMULATED sample: fitted Si columns against the invented truth; "
                        "profile-likelihood intervals")
    return tab


def run_sample_demo(output="edgefit-demo", *, quick=False, quiet=False, workers=None):
    """Simulate, fit in batch, analyse and report (module docstring).
    Returns a dict of the products (tables, results, paths)."""
    from ..analysis import run_batch
    from ..plotting.fit_plots import save_configured

    output = Path(output)
    output.mkdir(parents=True, exist_ok=True)
    say = (lambda *a, **k: None) if quiet else (lambda m: print(m, flush=True))
    t0 = time.time()
    say(f"edgefit demo: a SIMULATED sample of {len(SIGHTLINES)} invented sightlines "
        f"through the {REGION}" + (" (quick: no MCMC)" if quick else ""))
    manifest, truths = write_sample(output, quick, say)
    say(f"fitting the sample in batch ({'profile intervals' if quick else 'MCMC'}) ...")
    batch_dir = output / "batch"
    table = run_batch(manifest, batch_dir, workers=workers, mcmc=not quick,
                      figures=save_configured, progress=not quiet, fresh=True)
    say(f"  {sum(str(s) != 'failed' for s in table['status'])} of {len(table)} fitted "
        f"({time.time() - t0:.0f} s so far)")
    products = analyse_sample(output, table, truths, quick=quick, say=say, workers=workers,
                              progress=not quiet, fresh=True)
    say(f"report: {products['report']}   ({time.time() - t0:.0f} s)")
    return products


def analyse_sample(output, table=None, truths=None, *, quick=False, say=print, workers=None,
                   progress=False, fresh=False):
    """Everything after the batch fits: regressions, grain columns, the
    shielded relation, the truth comparison, the self-shielding curve, the
    size-distribution comparison, the population fit (unless ``quick``)
    and the report.  ``table`` and ``truths`` default to what an earlier
    run wrote into ``output``, so the analysis can be redone without
    refitting (the size comparison then resumes its own fits unless
    ``fresh``).  Returns the products dict."""
    import warnings

    from ..analysis import grain_columns, read_sample_table, regress
    from ..analysis.grains import fit_shielded_relation

    output = Path(output)
    batch_dir = output / "batch"
    if table is None:
        table = read_sample_table(batch_dir)
    if truths is None:
        truths = {}
        for f in sorted((output / "spectra").glob("*/truth.json")):
            d = json.loads(f.read_text())
            truths[d["name"].replace(" (simulated)", "")] = d["truth"]
    ana = output / "analysis"
    ana.mkdir(exist_ok=True)
    products = {"table": table, "truths": truths, "manifest": output / "sample.toml",
                "batch": batch_dir, "analysis": ana}
    # regressions: total Si column (slope = Si abundance) and dust optical
    # depth against the tracer hydrogen column
    say("relations with hydrogen column, grain columns, self-shielding ...")
    bayes_steps: dict[str, Any] = (dict(n_burn=300, n_steps=1000, max_steps=4000) if quick
                                   else {})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reg_total = regress(table, y="total_Si_cm2", x="nh_hi_2h2", seed=1, **bayes_steps)
        reg_dust = regress(table, y="dust_tau_above", x="nh_hi_2h2", seed=2, **bayes_steps)
    products["regression_total"] = reg_total
    products["regression_dust"] = reg_dust
    (ana / "regression_total.json").write_text(json.dumps(_clean(reg_total.to_dict()),
                                                          indent=2) + "\n")
    (ana / "regression_dust.json").write_text(json.dumps(_clean(reg_dust.to_dict()),
                                                         indent=2) + "\n")
    from ..plotting.regression import plot_regression, plot_regression_corner

    plot_regression(reg_total, str(ana / "regression_total.png"))
    plot_regression(reg_dust, str(ana / "regression_dust.png"))
    if reg_total.bayes is not None:
        plot_regression_corner(reg_total, str(ana / "regression_total_corner.png"))
    grains = grain_columns(table, tau="dust_tau_above", material="olivine", element="Si",
                           sizes="power_law")
    grains.write(ana / "sample_grains.ecsv", overwrite=True)
    products["grains"] = grains
    shielded = fit_shielded_relation(table, tau="dust_tau_above", nh="nh_hi_2h2")
    (ana / "shielded_relation.json").write_text(json.dumps(_clean(shielded), indent=2) + "\n")
    products["shielded"] = shielded
    truth = truth_table(batch_dir, table, truths)
    truth.write(ana / "truth_comparison.ecsv", overwrite=True)
    products["truth"] = truth
    from ..dust.shielding import shielding_table
    from ..plotting.shielding import plot_shielding

    sh = shielding_table("olivine", "Si")
    sh.write(ana / "shielding.ecsv", overwrite=True)
    fig = plot_shielding(sh)
    fig.savefig(ana / "shielding.png", dpi=110)
    import matplotlib.pyplot as plt

    plt.close(fig)
    products["shielding"] = sh
    products["sizes"] = compare_sample_sizes(output, quick=quick, workers=workers,
                                             fresh=fresh, progress=progress, say=say)
    if not quick:
        products["population"] = _population(batch_dir, ana, say)
    from .report import demo_report

    report = demo_report(output, products, quick=quick)
    products["report"] = report
    n_cov = int(np.sum(truth["covered95"]))
    say(f"truth inside the 95 % intervals: {n_cov} of {len(truth)} gas and dust columns")
    return products


def compare_sample_sizes(output: str | Path, *, quick: bool = False, workers: int | None = None,
                         fresh: bool = False, progress: bool = False,
                         say: Any = print) -> Any:
    """Refit the sample's sightlines (all of them, or with ``quick`` only
    :data:`QUICK_SIZE_SIGHTLINES`) under :data:`SIZE_CANDIDATES` with
    :func:`edgefit.analysis.sizes_compare.compare_sizes` into
    ``output/sizes``.  The comparison needs best fits, not column
    intervals: the refits profile only the free size parameter (not even
    that with ``quick``: its covariance interval stands), skip the
    posterior-predictive draws and take 100 draws for derived quantities.  Returns the :class:`SizesResult`, or
    None (with a message) when it cannot run."""
    import copy
    import dataclasses
    import warnings

    from ..analysis.manifest import load_manifest
    from ..analysis.sizes_compare import compare_sizes
    from ..errors import EdgefitError
    from ..plotting.sizes import save_sizes_figure

    output = Path(output)
    manifest = load_manifest(output / "sample.toml")
    entries = []
    for e in manifest.select(list(QUICK_SIZE_SIGHTLINES) if quick else None):
        t = copy.deepcopy(e.table)
        t["errors"] = dict(t.get("errors") or {}, profile=[])
        t["goodness"] = dict(t.get("goodness") or {}, ppc_draws=0)
        t["mcmc"] = dict(t.get("mcmc") or {}, enabled=False)
        # derived quantities are not compared: a few draws keep them cheap
        t["derived"] = dict(t.get("derived") or {}, draws=100)
        entries.append(dataclasses.replace(e, table=t))
    manifest = dataclasses.replace(manifest, sightlines=entries)
    say(f"comparing size distributions ({', '.join(SIZE_CANDIDATES)}) on "
        f"{len(entries)} sightline{'s' if len(entries) != 1 else ''} ...")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return compare_sizes(manifest, list(SIZE_CANDIDATES), output / "sizes",
                                 workers=workers, fresh=fresh, mcmc=False, plots=False,
                                 figures=save_sizes_figure, progress=progress,
                                 profile_sizes=not quick)
    except EdgefitError as exc:
        say(f"  size comparison not possible: {exc}")
        return None


def _population(batch_dir, ana, say):
    """The dust column's population across the sample, ln N_dust linear in
    log10 N_H with intrinsic scatter, by importance reweighting of the
    saved posterior samples (edgefit.analysis.population); None (with a
    message) when it cannot run."""
    import warnings

    from ..analysis.population import population_from_batch
    from ..errors import EdgefitError

    say("population fit of the dust column (reweighted posterior samples) ...")
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = population_from_batch(batch_dir, "dust_col", covariate="nh_hi_2h2",
                                        log=True, output=ana, seed=3)
        res.warnings = list(res.warnings) + [str(w.message) for w in caught
                                             if "contour" not in str(w.message)]
        return res
    except EdgefitError as exc:
        say(f"  population fit not possible: {exc}")
        return None


def _clean(x):
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, np.ndarray):
        return _clean(x.tolist())
    if isinstance(x, (np.floating, float)):
        return float(x) if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    return x
