"""Total element columns N_gas + N_dust in the sample table, on SIMULATED
sightlines (edgefit's own simulator; invented names and columns).

Outside references:

* Wilks (1938, Ann. Math. Stat. 9, 60): for one parameter of interest the
  likelihood-ratio statistic is asymptotically chi-square with one degree
  of freedom, so the 68.27 % interval is where the profile of the C
  statistic (Cash 1979, ApJ 228, 939: -2 ln L up to a constant) rises by 1.
  The reference profile is built independently of edgefit's profiler: at
  each fixed total N_tot = N_gas + N_dust on a grid, every other parameter
  is minimised by scipy's L-BFGS-B from several starts of the dust share,
  and the crossings of Delta C = 1 are solved with scipy's brentq.
* Olivine MgFeSiO4 holds one Mg atom per Si atom (the chemical formula),
  so a grain population tied across the Mg and Si edges carries the same
  dust column of both.
"""
import math
import os
import sys

import numpy as np
import pytest
from scipy import optimize

from edgefit.analysis import load_manifest, run_batch
from edgefit.analysis.config import apply_parameter_settings
from edgefit.inference.likelihood import JointLikelihood

sys.path.insert(0, os.path.dirname(__file__))
from _batch_sim import write_sample  # noqa: E402

SHARE_STARTS = (0.15, 0.5, 0.85)


def _statistic_at_total(ev, x0, bounds, i_gas, i_dust, total):
    """min over every other parameter of the statistic with N_gas + N_dust
    fixed at ``total`` (1e16 cm^-2): the dust share f in [0, 1] gives
    N_gas = total (1 - f), N_dust = total f."""
    others = [i for i in range(len(x0)) if i not in (i_gas, i_dust)]

    def fun(z):
        th = x0.copy()
        th[i_gas], th[i_dust] = total * (1.0 - z[0]), total * z[0]
        th[others] = z[1:]
        return ev.statistic(th)

    best = math.inf
    for f0 in SHARE_STARTS + (x0[i_dust] / (x0[i_gas] + x0[i_dust]),):
        r = optimize.minimize(fun, np.r_[f0, x0[others]], method="L-BFGS-B",
                              bounds=[(0.0, 1.0)] + [bounds[i] for i in others],
                              options={"ftol": 1e-13, "gtol": 1e-9, "maxiter": 2000})
        best = min(best, float(r.fun))
    return best


def test_total_profile_matches_grid_of_fits_at_fixed_totals(tmp_path):
    m = write_sample(tmp_path, n=1, draws=200)      # [errors] profile = gas and dust columns
    t = run_batch(m, tmp_path / "out", workers=0, progress=False, mcmc=False)
    assert t.meta["interval_source"]["total_Si_cm2"] == "profile"
    assert t.meta["interval_source"]["total_column_Si"] == "covariance"   # the draws
    lo, hi = float(t["total_Si_cm2_lo"][0]), float(t["total_Si_cm2_hi"][0])
    best = float(t["total_Si_cm2"][0])
    assert best == pytest.approx(float(t["gas_si_col_cm2"][0] + t["dust_col_cm2"][0]),
                                 rel=1e-12, abs=0)
    assert lo < best < hi

    # the reference: the same likelihood, minimised by scipy at fixed totals
    cfg = load_manifest(m).sightlines[0].config
    like = JointLikelihood(cfg.model, cfg.load_datasets(), statistic=cfg.fit.statistic,
                           chi2_variance=cfg.fit.chi2_variance)
    params = apply_parameter_settings(like.make_params(xnorm_free=cfg.fit.xnorm_free),
                                      cfg.param_settings, cfg.model, cfg.path)
    ev = like.compile(params)
    free = list(ev.free)
    x0 = np.array([float(t[n][0]) for n in free])
    bounds = [(params[n].min, params[n].max) for n in free]
    assert ev.statistic(x0) == pytest.approx(float(t["statistic"][0]), rel=1e-9, abs=0)
    glob = optimize.minimize(ev.statistic, x0, method="L-BFGS-B", bounds=bounds,
                             options={"ftol": 1e-13, "gtol": 1e-9})
    c_min = min(float(glob.fun), float(t["statistic"][0]))
    i_gas, i_dust = free.index("gas_si_col"), free.index("dust_col")

    def delta(total_cm2):
        return _statistic_at_total(ev, x0, bounds, i_gas, i_dust, total_cm2 / 1e16) \
            - c_min - 1.0   # Delta C = 1: 68.27 % for one parameter (Wilks 1938)

    half = 0.5 * (hi - lo)
    ends = []
    for sign in (-1.0, 1.0):
        # a grid of fixed totals outward from the best fit until Delta C > 1
        inner, step = best, 0.25 * half
        for k in range(1, 21):
            outer = best + sign * k * step
            if delta(outer) > 0:
                break
            inner = outer
        else:
            pytest.fail("Delta C never reached 1 on the grid")
        ends.append(optimize.brentq(delta, min(inner, outer), max(inner, outer),
                                    xtol=1e-5 * half))
    ref_lo, ref_hi = ends
    # agreement to 2 % of the interval's half-width (the profiler's own
    # tolerance is finer; this leaves room for the minimisers' precision)
    assert lo == pytest.approx(ref_lo, abs=0.02 * half)
    assert hi == pytest.approx(ref_hi, abs=0.02 * half)
    # and not the covariance draws' interval of the same quantity
    assert t["total_column_Si_lo"][0] != pytest.approx(lo, rel=1e-9, abs=0)


def test_total_includes_a_grain_population_across_edges():
    """total_<El>_cm2 of every element a MultiEdgeDust carries: gas plus its
    stoichiometric dust column; the column element's interval is a
    profile, the other's the draws of the same joint fit."""
    from edgefit.analysis.sample_table import (TOTAL_PROFILES_KEY, sample_table,
                                               sightline_row, total_column_profiles)
    from edgefit.data import gaussian_response, simulate_spectrum
    from edgefit.dust import SizeGrid
    from edgefit.inference import Dataset, derived_quantities, fit_sightline
    from edgefit.models import GasEdge, MultiEdgeDust, PhotonPowerLaw

    sizes = SizeGrid.log(0.002, 3.0, 40)     # small grid: quick tables

    def model(gas_mg, gas_si, grains):
        return (GasEdge("gas_mg", element="Mg", col=gas_mg)
                * GasEdge("gas_si", element="Si", col=gas_si)
                * MultiEdgeDust("grains", materials="olivine", elements=["Mg", "Si"],
                                size_grid=sizes, col=grains, amax=0.25, count_once=False,
                                fixed=["amin", "amax", "index", "fin"])
                * PhotonPowerLaw("pl", index=1.8, norm=8.0))

    resp = gaussian_response(np.linspace(1.15, 2.25, 441), np.linspace(1.2, 2.2, 401),
                             fwhm=0.02, area_cm2=40.0)
    truth = model(12.0, 10.0, 25.0)          # invented columns, 1e16 cm^-2
    rng = np.random.default_rng(20261202)
    spec = simulate_spectrum(truth.evaluate(resp.grid), resp, 6e4, rng)
    ds = [Dataset(spec)]
    fitted = model(8.0, 8.0, 20.0)
    res = fit_sightline(fitted, ds, goodness=False, warn=False, starts="single")
    derived_quantities(res, max_draws=300)
    res.meta[TOTAL_PROFILES_KEY] = total_column_profiles(res)
    assert set(res.meta[TOTAL_PROFILES_KEY]) == {"Si"}      # the column element
    row = sightline_row(res, "SIM-TIED")
    q = {r[0]: r for r in row["quantities"]}
    v = res.values
    # MgFeSiO4: one Mg per Si, so both elements' dust column is grains_col
    for el in ("Mg", "Si"):
        name, best, lo, hi, unit, src = q[f"total_{el}_cm2"]
        assert unit == "cm-2" and lo < best < hi
        assert best == pytest.approx((v[f"gas_{el.lower()}_col"] + v["grains_col"]) * 1e16,
                                     rel=1e-12, abs=0)
    assert q["total_Si_cm2"][5] == "profile"
    prof = res.meta[TOTAL_PROFILES_KEY]["Si"]
    assert (q["total_Si_cm2"][2], q["total_Si_cm2"][3]) == (prof["lower"], prof["upper"])
    # Mg: the joint draws of gas_mg and the tied dust column, as derived
    assert q["total_Mg_cm2"][5] == "covariance"
    draws = res.derived["total_column_Mg"].samples
    central = np.quantile(draws[np.isfinite(draws)], [0.5 - 0.6827 / 2, 0.5 + 0.6827 / 2])
    assert [q["total_Mg_cm2"][2], q["total_Mg_cm2"][3]] == pytest.approx(central, rel=1e-12,
                                                                         abs=0)
    table = sample_table([row])
    assert table.meta["interval_source"]["total_Si_cm2"] == "profile"
    assert table.meta["interval_source"]["total_Mg_cm2"] == "covariance"
    assert table["total_Mg_cm2"].unit == "cm-2"
