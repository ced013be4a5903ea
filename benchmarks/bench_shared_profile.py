"""What a shared upper grain size buys: the summed profile statistic of
``dust_amax`` over a SIMULATED sample, and each sightline's gas and dust
column intervals pooled (profiled over the shared size) against alone (its
own size free over the same grid) and at the best shared size.

The sample is tests/_batch_sim.py's (invented sightlines: Si gas edge x
olivine MRN dust edge with one upper size, 0.25 um, for all x power law
through two grating-like arms, edgefit's own simulator).  Every
(sightline, grid value) fit runs on the batch's process pool and is cached
in ``--out`` (a rerun only prints).  Printed, not asserted; the wall time
depends on the machine's load.

    python benchmarks/bench_shared_profile.py [--sightlines 8] [--exposure 2e5]
        [--grid 0.05,2,9] [--workers 2] [--out DIR]
"""
import argparse
import time

import numpy as np

from _sim_sample import TRUE_AMAX, add_sample_options, simulated_sample


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sightlines", type=int, default=8)
    ap.add_argument("--grid", default="0.05,2,9")
    add_sample_options(ap, exposure=2e5, seed=21)
    a = ap.parse_args()

    from edgefit.analysis.shared_profile import make_grid, shared_parameter_profile
    from edgefit.cli.population import parse_grid
    from edgefit.plotting.shared_profile import save_shared_figure

    out, manifest = simulated_sample(a, a.sightlines, "edgefit-shared-")
    lo, hi, n = parse_grid(a.grid)
    t0 = time.perf_counter()
    res = shared_parameter_profile(manifest, "dust_amax", make_grid(lo, hi, n),
                                   output=out / "shared", columns=["gas_si_col", "dust_col"],
                                   workers=a.workers, progress=True,
                                   figures=save_shared_figure)
    wall = time.perf_counter() - t0
    s = res.summary
    print(f"{len(res.names)} SIMULATED sightlines, exposure {a.exposure:g} s each, "
          f"grid {a.grid} um (+ {len(s['refinement_values'])} refinement values): {wall:.1f} s wall on {a.workers} workers")
    print(f"shared dust_amax: best {res.best:.4g} um (truth {TRUE_AMAX})")
    for lv, iv in res.intervals.items():
        inside = any(p[0] <= TRUE_AMAX <= p[1] for p in iv["pieces"])
        print(f"  {100 * float(lv):.4g} %: " + " or ".join(f"[{p[0]:.4g}, {p[1]:.4g}]"
                                                          for p in iv["pieces"])
              + f"  truth inside: {inside}")
    lv0 = str(s["levels"][0])
    for c in s["columns"]:
        print(f"\n{c} 68 % widths (1e16 cm-2): alone (size free) | pooled (profiled over the "
              "shared size) | at the best shared size; pooled / alone")
        ratios = []
        for name in res.names:
            e = s["sightlines"][name]["columns"][c]
            at = e["at_best"]["intervals"][lv0]
            w_at = (at["upper"] - at["lower"]) if at["upper"] is not None \
                and at["lower"] is not None else float("nan")
            ratios.append(e["shrink"])
            print(f"  {name:10s} {e['width_single']:8.2f} {e['width_pooled']:8.2f} "
                  f"{w_at:8.2f}   {e['shrink']:.2f}")
        print(f"  median pooled / alone: {np.median(ratios):.2f}")
    print(f"\nwrote {res.output}")


if __name__ == "__main__":
    main()
