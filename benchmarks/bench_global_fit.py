"""Benchmark: the global (multi-start) fit and a two-parameter profile
against the single-start fit, on the four-spectrum sightline of
``bench_fit.py`` (the same model, data, free parameters and start).

The first fit of a process pays about 1 s for loading compiled kernels
and caches, several times a warm single fit, so one untimed fit comes
first (before, the timed single fit held that cost, which made every
ratio look several times smaller).

Prints times measured side by side in one run (this thread's CPU time,
steadier than the wall clock on a shared machine; --wall for the wall
clock) and their ratios to the single-start fit (target: each <= 10x).
No assertions.

With --draws N it also compares, on the first N seeded sightlines of
each edge of the coverage harness (``validate_coverage.py --edges``), the
global fit (a held-size scan, then free-size fits from the scan's local
minima) with free-size fits started from every point of the same grid
(``starts=`` the grid, this module's method before the scan): the
difference of their best statistics (the scan must not miss a lower
minimum) and the wall time of each, on --workers processes.

Data: invented, SIMULATED values (no real source).  Run:
    python benchmarks/bench_global_fit.py [--repeat 1] [--draws 15 --workers 2]
"""
from __future__ import annotations

import argparse
import time
import warnings

from bench_fit import TRUTH, build_model, make_datasets, make_grid_probe

from edgefit.errors import EdgefitWarning
from edgefit.inference import JointLikelihood, fit_sightline, profile_intervals


def _params(model, datasets):
    like = JointLikelihood(model, datasets)
    params = like.make_params()
    for name in ("gas_si_shift", "dust_index", "dust_shift"):
        params[name].vary = True
    start = {"ism_nh": 1.5, "gas_si_col": 10.0, "dust_col": 20.0, "dust_amax": 0.2,
             "dust_index": 3.3, "continuum_index": 2.0, "continuum_norm": 1.0}
    for k, v in start.items():
        params[k].value = v
    return params


def _compare_one(task):
    """Best statistic and wall time of the scan and of the grid of free
    starts on one coverage sightline."""
    from edgefit.inference._edge_coverage import prepare_sightline
    from edgefit.inference.fit import size_parameter_names, size_start_values

    el = task["element"]
    model, datasets, _, params, _ = prepare_sightline(task)
    grid = size_start_values(params, size_parameter_names(model, params))
    out = {"element": el}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for label, starts in (("scan", "auto"), ("grid", grid), ("single", "single")):
            t0 = time.perf_counter()
            r = fit_sightline(model, datasets, params=params, goodness=False, warn=False,
                              starts=starts)
            out[label] = (r.statistic, time.perf_counter() - t0, len(r.minima))
    return out


def compare_on_draws(n, workers, seed=2026):
    import multiprocessing
    import statistics

    from edgefit.inference._edge_coverage import EDGE_NH_RANGES, draw_tasks

    tasks = [t for el in EDGE_NH_RANGES for t in draw_tasks(n, el, seed)]
    with multiprocessing.get_context("fork").Pool(workers) as pool:
        recs = pool.map(_compare_one, tasks)
    print(f"\nscan against free starts at every grid point, first {n} coverage draws "
          f"(seed {seed}) per edge, {workers} workers:")
    print("edge  n   max dC(scan-grid)  min dC   median wall s: scan / grid / single   "
          "median scan/grid   mean minima scan / grid")
    for el in EDGE_NH_RANGES:
        r = [x for x in recs if x["element"] == el]
        d = [x["scan"][0] - x["grid"][0] for x in r]
        med = [statistics.median(x[k][1] for x in r) for k in ("scan", "grid", "single")]
        ratio = statistics.median(x["scan"][1] / x["grid"][1] for x in r)
        mins = [statistics.mean(x[k][2] for x in r) for k in ("scan", "grid")]
        print(f"{el:<4} {len(r):>3}   {max(d):>+12.4f}   {min(d):>+9.4f}   "
              f"{med[0]:.2f} / {med[1]:.2f} / {med[2]:.2f}{'':>20}{ratio:.2f}{'':>12}"
              f"{mins[0]:.2f} / {mins[1]:.2f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--wall", action="store_true", help="wall clock instead of CPU time")
    ap.add_argument("--draws", type=int, default=0,
                    help="also compare scan and grid starts on this many coverage draws per edge")
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)
    clock = time.perf_counter if args.wall else time.thread_time
    model = build_model()
    model.evaluate(make_grid_probe(), TRUTH)  # build/load dust tables once
    datasets = make_datasets(model)
    params = _params(model, datasets)
    times = {"single": [], "global": [], "profile": []}
    with warnings.catch_warnings():
        # one untimed fit first: the first call pays for compiled-kernel
        # loading and caches (about 1 s, six times a warm single fit)
        warnings.simplefilter("ignore", EdgefitWarning)
        fit_sightline(model, datasets, params=params, starts="single", goodness=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EdgefitWarning)
        for _ in range(args.repeat):
            t0 = clock()
            single = fit_sightline(model, datasets, params=params, starts="single",
                                   goodness=False)
            times["single"].append(clock() - t0)
            t0 = clock()
            best = fit_sightline(model, datasets, params=params, goodness=False)
            times["global"].append(clock() - t0)
            t0 = clock()
            profile_intervals(best, ["gas_si_col", "dust_col"], [0.6827])
            times["profile"].append(clock() - t0)
    t1 = min(times["single"])
    print(f"single-start fit: {t1:.2f} s, C = {single.statistic:.3f}, "
          f"dust_amax = {single.values['dust_amax']:.3g}")
    tg = min(times["global"])
    print(f"global fit ({best.n_starts} starts): {tg:.2f} s = {tg / t1:.1f}x the single fit "
          f"(target <= 10x), C = {best.statistic:.3f}, {len(best.minima)} distinct minima, "
          f"flags: {', '.join(best.flags) or 'none'}")
    tp = min(times["profile"])
    print(f"two-parameter profile (gas_si_col, dust_col at 68 %): {tp:.2f} s = "
          f"{tp / t1:.1f}x the single fit (target <= 10x)")
    for n in ("gas_si_col", "dust_col"):
        iv = best.intervals[n][0.6827]
        print(f"   {n:<11} 68 % [{iv.lower}, {iv.upper}]  (simulated truth {TRUTH[n]})")
    if args.draws:
        compare_on_draws(args.draws, args.workers)


if __name__ == "__main__":
    main()
