"""Reduced coverage run of the gas/dust separation with the grain size free.

Thirty seeded single-arm Si K sightlines (N_H 0.5-5 x 10^22 cm^-2, dust
fraction 0.6-0.95, MRN olivine upper size 0.1-1 um, 150-600 counts per
2.5 mA channel), each fitted with the global fit, bounded by profile
intervals of the gas, dust and total Si columns and the dust fraction,
and sampled by MCMC (valley proposal, 32 walkers x 2000 steps, central
credible intervals), as ``benchmarks/validate_coverage.py --edges
--mcmc`` does for hundreds of sightlines.

References and rules:

- Profile-likelihood intervals cover at their nominal level
  asymptotically (Wilks 1938, Ann. Math. Stat. 9, 60); near the physical
  bounds they over-cover.  With 30 sightlines the count of hits is
  binomial: the check fails when it lies below the 99 % central binomial
  band of the nominal level (scipy.stats.binom), i.e. when the intervals
  are confidently wrong.
- Credible intervals: the same floor at 95 % for all four quantities and
  at 68 % for the dust and total columns.  For the gas column and the
  dust fraction at 68 %: a posterior makes a frequentist promise only
  where the data, not the flat prior, set it (Bernstein-von Mises; e.g.
  van der Vaart 1998, Asymptotic Statistics, ch. 10).  On one arm with
  the size free the dust fraction's posterior is mostly its prior on
  nearly every sightline (28 of these 30), so its central 68 % interval
  is about the prior's middle [0.16, 0.84] and misses the truths above
  0.84 -- and the package says so (``McmcResult.prior_dominated``, a
  PriorDominatedWarning).  The check there: the sightlines flagged
  neither prior-dominated nor unconverged (split-R-hat / ESS) cover at
  least at the band's floor, i.e. every miss beyond that carries a flag.
  (On these 30 none is both data-led and converged, so this part is the
  flag check alone; ``benchmarks/validate_coverage.py --edges --mcmc``
  has the larger samples.)

Marker ``long`` (about 15 CPU-minutes; CI runs it in its second step).
"""
from __future__ import annotations

import multiprocessing

import pytest
from scipy import stats as sps

from edgefit.inference._edge_coverage import (LEVELS, QUANTITIES, _converged, _data_led,
                                              draw_tasks, run_one)
from edgefit.stats import ONE_SIGMA

N_SIGHTLINES = 30


def _floor(n, level):
    return sps.binom.ppf(0.005, n, level) if n else 0


def coverage_failures(records):
    """The reasons the records fail the checks of the module docstring
    (empty when they pass)."""
    n = len(records)
    bad = []
    for q in QUANTITIES:
        for level in LEVELS:
            hits = sum(r["hits"][f"profile_{q}_{level}"] for r in records)
            if hits < _floor(n, level):
                bad.append(f"profile {q} at {level}: {hits}/{n}, floor {_floor(n, level):.0f}")
        for level in (LEVELS if q in ("dust", "total") else (0.95,)):
            hits = sum(r["mcmc_hits"][f"mcmc_{q}_{level}"] for r in records)
            if hits < _floor(n, level):
                bad.append(f"mcmc {q} at {level}: {hits}/{n}, floor {_floor(n, level):.0f}")
    clear = [r for r in records if _data_led(r) and _converged(r)]
    for q in ("gas", "depletion"):
        key = f"mcmc_{q}_{ONE_SIGMA}"
        unexplained = [r["task"]["index"] for r in clear if not r["mcmc_hits"][key]]
        hits = sum(r["mcmc_hits"][key] for r in clear)
        if hits < _floor(len(clear), ONE_SIGMA):
            bad.append(f"mcmc {q} at 68 % on {len(clear)} unflagged sightlines: {hits} hits "
                       f"(misses {unexplained})")
    return bad


@pytest.mark.long
def test_profile_and_mcmc_intervals_cover_on_thirty_si_sightlines():
    tasks = draw_tasks(N_SIGHTLINES, "Si", 31, arms=(1,), mcmc=True)
    with multiprocessing.get_context("fork").Pool(2) as pool:
        records = pool.map(run_one, tasks)
    assert len(records) == N_SIGHTLINES
    assert all(r["mcmc_fraction_contraction"] is not None for r in records)
    bad = coverage_failures(records)
    assert not bad, "; ".join(bad)
