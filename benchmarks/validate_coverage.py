"""Coverage validation: injection-recovery over many simulations.

For N seeded simulations (default 300) of one model through a synthetic
grating-like response, fit each by maximum Poisson likelihood and print,
per parameter: the mean bias in units of the covariance sigma, the spread
of the pulls, and the coverage of the covariance (1 sigma) intervals,
with the 99 % central binomial interval expected for 68.27 % coverage.
With --profile the profile-likelihood 68.27 % intervals are checked too
(slower).

Statistical basis (not a published table): for a correct model and many
counts the ML estimate is asymptotically unbiased and Gaussian with the
Fisher covariance (Cash 1979; Wilks 1938).

With --sightline the simulated demo sightline is used instead of the toy
model: smooth ISM x gas-phase Si edge x olivine dust edge (Mie tables) x
Si XIII/XIV lines x power law through the demo's four grating-like
responses with backgrounds (edgefit.demo), with the demo's fixed
parameters; the gas and dust Si columns are the quantities of interest.

With --edges the gas/dust separation is checked with the grain size
free: seeded sightlines through the model
SmoothISM x GasEdge x DustEdge(MRN olivine, upper size free) x power law
at the Si K edge (--n-si, default 200) and the Mg K, Fe L and O K edges
(--n-other each, default 50), drawn from N_H 0.5-5 x 10^22 cm^-2 (Si;
Mg 0.5-3, Fe and O 0.3-1, where more absorption leaves no counts), dust
fraction 0.6-0.95, upper grain size 0.1/0.25/0.5/1 um, 150-600 counts per
2.5 mA channel, one or two arms.  Each is fitted with the global
(multi-start) fit; the gas and dust columns are profiled in the gas/dust
parametrisation, the total column and the dust fraction (depletion) in
the total/fraction one; with --mcmc, posterior intervals of the four come
from an MCMC run too (valley proposal, 32 walkers x 2000 steps; the table
adds a row for the chains that passed the R-hat and ESS checks).  Coverage at 68.27 % and 95 % is printed per upper
size and overall with the 99 % binomial band.  The run uses a process
pool (--workers, default 2), is seeded (--seed) and resumable: each
finished sightline is one line of --out (JSON lines); a rerun skips the
sightlines already there.  --report only prints the table of --out.
--elements limits which edges get new sightlines (e.g. ``--elements O
--n-other 100`` extends the O K sample alone; draws are sequential, so
the first 50 of 100 are the 50 already run).

Run:  python benchmarks/validate_coverage.py [--n 300] [--profile] [--sightline]
      python benchmarks/validate_coverage.py --edges [--n-si 200] [--n-other 50]
             [--elements Si,Mg,Fe,O] [--mcmc] [--mcmc-steps 2000] [--workers 2] [--out coverage_edges.jsonl]
"""
from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import stats as sps

from edgefit.inference import Dataset, fit_sightline, profile_intervals
from edgefit.inference._testing import ToyEdgeAbsorber, simulate_counts, toy_response
from edgefit.models.continuum import LineGaussian, PhotonPowerLaw

TRUTH = {"abs_step": 0.3, "pl_index": 1.8, "pl_norm": 0.5, "ln_norm": 2e-3}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=300)
    ap.add_argument("--exposure", type=float, default=3e4)
    ap.add_argument("--profile", action="store_true")
    ap.add_argument("--seed", type=int, default=12345)
    ap.add_argument("--sightline", action="store_true",
                    help="use the simulated demo sightline (gas + dust Si edge) instead of "
                         "the toy model")
    ap.add_argument("--edges", action="store_true",
                    help="gas/dust separation with the grain size free at Si K, Mg K, Fe L, O K")
    ap.add_argument("--n-si", type=int, default=200)
    ap.add_argument("--n-other", type=int, default=50)
    ap.add_argument("--elements", default="Si,Mg,Fe,O",
                    help="edges that get new sightlines (comma-separated)")
    ap.add_argument("--mcmc", action="store_true", help="also MCMC intervals (slow)")
    ap.add_argument("--mcmc-steps", type=int, default=2000,
                    help="steps per walker of each chain (32 walkers; default 2000)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--out", default="coverage_edges.jsonl")
    ap.add_argument("--report", action="store_true", help="only print the table of --out")
    args = ap.parse_args(argv)
    if args.edges:
        from edge_coverage import run_edges

        return run_edges(args)
    if args.sightline:
        return sightline_coverage(args)

    model = ToyEdgeAbsorber("abs", tau0=0.4, step=0.3, fixed=["tau0"]) * (
        PhotonPowerLaw("pl", index=1.8, norm=0.5)
        + LineGaussian("ln", center=1.95, sigma=0.004, norm=2e-3, fixed=["center", "sigma"]))
    resp = toy_response(1.6, 2.2, n_channels=300)

    def simulate(rng):
        spec = simulate_counts(model, resp, args.exposure, values=TRUTH, seed=rng)
        return Dataset(spec, ranges=(1.65, 2.15))

    _coverage(args, model, None, TRUTH, list(TRUTH), list(TRUTH), simulate)


SIGHTLINE_FREE = ("ism_nh", "gas_si_col", "dust_col", "ions_logn_si13", "ions_logn_si14",
                  "continuum_index", "continuum_norm")


def sightline_coverage(args):
    """Injection-recovery over Poisson realisations of the demo sightline."""
    from edgefit.demo import INSTRUMENT, TRUTH as DEMO_TRUTH, build_model
    from edgefit.demo import instrument_responses, simulate_observation

    model = build_model()
    params = model.make_params()
    for name, par in params.items():
        par.value = DEMO_TRUTH[name]
        par.vary = name in SIGHTLINE_FREE
    responses = instrument_responses()

    def simulate(rng):
        return [Dataset(simulate_observation(model, resp, rng, tag), resp, ranges=(1.6, 2.2))
                for (tag, *_), resp in zip(INSTRUMENT, responses)]

    _coverage(args, model, params, DEMO_TRUTH, list(SIGHTLINE_FREE),
              ["gas_si_col", "dust_col"], simulate, progress_every=25)


def _coverage(args, model, params, truth, names, profile_names, simulate, progress_every=None):
    """Simulate ``args.n`` data sets (``simulate(rng)`` -> Dataset or list of
    them), fit each from ``params`` (None: the model's own starting values),
    tally the pulls and covariance hits of ``names`` and, with
    ``args.profile``, the profile-interval hits of ``profile_names``; then
    print the report."""
    rng = np.random.default_rng(args.seed)
    pulls = {k: [] for k in names}
    cov_hits = {k: 0 for k in names}
    prof_hits = {k: 0 for k in profile_names}
    flagged = 0
    t0 = time.perf_counter()
    for i in range(args.n):
        res = fit_sightline(model, simulate(rng),
                            params=None if params is None else params.copy(),
                            goodness=False, warn=False)
        flagged += not res.converged
        for k in names:
            pull = (res.values[k] - truth[k]) / res.error(k)
            pulls[k].append(pull)
            cov_hits[k] += abs(pull) <= 1.0
        if args.profile:
            ivs = profile_intervals(res, profile_names, [0.6827], store=False)
            for k, by_level in ivs.items():
                iv = by_level[0.6827]
                prof_hits[k] += (iv.lower is not None and iv.upper is not None
                                 and iv.lower <= truth[k] <= iv.upper)
        if progress_every and (i + 1) % progress_every == 0:
            print(f"  {i + 1}/{args.n} fits, {time.perf_counter() - t0:.0f} s", flush=True)
    _report(args, names, pulls, cov_hits, prof_hits if args.profile else None, flagged,
            time.perf_counter() - t0)


def _report(args, names, pulls, cov_hits, prof_hits, flagged, dt):
    lo, hi = sps.binom.interval(0.99, args.n, 0.6827)
    print(f"{args.n} simulations in {dt:.1f} s ({dt / args.n * 1e3:.1f} ms each), "
          f"{flagged} with convergence flags")
    print(f"expected 68.27 % coverage count: 99 % binomial interval [{lo:.0f}, {hi:.0f}] "
          f"of {args.n}")
    hdr = f"{'parameter':<16}{'mean pull':>10}{'(+/- se)':>10}{'pull sd':>9}{'cov. hits':>11}"
    if prof_hits is not None:
        hdr += f"{'prof. hits':>12}"
    print(hdr)
    for k in names:
        p = np.asarray(pulls[k])
        line = (f"{k:<16}{p.mean():>10.3f}{p.std(ddof=1) / np.sqrt(p.size):>10.3f}"
                f"{p.std(ddof=1):>9.3f}{cov_hits[k]:>7d} "
                f"{'ok' if lo <= cov_hits[k] <= hi else 'OUT'}")
        if prof_hits is not None and k in prof_hits:
            line += f"{prof_hits[k]:>8d} {'ok' if lo <= prof_hits[k] <= hi else 'OUT'}"
        print(line)
    print("bar: |mean pull| < 0.2 and hits inside the binomial interval")


if __name__ == "__main__":
    main()
