"""Reduced coverage run of the gas/dust separation with the grain size free.

Thirty seeded single-arm Si K sightlines (N_H 0.5-5 x 10^22 cm^-2, dust
fraction 0.6-0.95, MRN olivine upper size 0.1-1 um, 150-600 counts per
2.5 mA channel), each fitted with the global fit and bounded by profile
intervals of the gas, dust and total Si columns and the dust fraction, as
``benchmarks/validate_coverage.py --edges`` does for 350 sightlines.

Reference: profile-likelihood intervals cover at their nominal level
asymptotically (Wilks 1938, Ann. Math. Stat. 9, 60); near the physical
bounds they over-cover, never under-cover by construction.  With 30
sightlines the count of hits is binomial: the check fails only when it
lies below the 99 % central binomial band of the nominal level
(scipy.stats.binom), i.e. when the intervals are confidently wrong.

Marker ``long`` (about five CPU-minutes; CI runs it in its second step).
"""
from __future__ import annotations

import multiprocessing

import pytest
from scipy import stats as sps

from edgefit.inference._edge_coverage import LEVELS, QUANTITIES, draw_tasks, run_one

N_SIGHTLINES = 30


@pytest.mark.long
def test_profile_intervals_cover_on_thirty_si_sightlines():
    tasks = draw_tasks(N_SIGHTLINES, "Si", 31, arms=(1,))
    with multiprocessing.get_context("fork").Pool(2) as pool:
        records = pool.map(run_one, tasks)
    assert len(records) == N_SIGHTLINES
    report = []
    for q in QUANTITIES:
        for level in LEVELS:
            hits = sum(r["hits"][f"profile_{q}_{level}"] for r in records)
            floor = sps.binom.ppf(0.005, N_SIGHTLINES, level)
            report.append((q, level, hits, floor))
    bad = [f"{q} at {lev}: {h}/{N_SIGHTLINES} hits, 99 % band floor {f:.0f}"
           for q, lev, h, f in report if h < f]
    assert not bad, "; ".join(bad)
