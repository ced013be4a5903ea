"""Fits: Poisson-likelihood identities, injection-recovery (bias and
coverage), joint versus single-arm fits, the NaN policy, convergence flags,
datasets, exports.

The statistical checks stand on Poisson/chi-square theory: for a correct
model and many counts the maximum-likelihood estimate is unbiased to
O(1/N) and the covariance (Fisher) 68.3 % intervals cover the truth with
probability 0.683 (Wilks 1938; Cash 1979); coverage counts are compared
with the 99 % central binomial interval for the number of simulations.
"""
import json
import math
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.table import QTable, Table
from scipy import stats as sps

from edgefit import stats
from edgefit.data.spectrum import Spectrum
from edgefit.errors import ConvergenceWarning, ModelError
from edgefit.inference import Dataset, JointLikelihood, fit_sightline
from edgefit.inference._testing import (TOY_TRUTH, ToyEdgeAbsorber, simulate_counts,
                                        toy_model, toy_response)
from edgefit.models.base import ADDITIVE, Component, Param
from edgefit.models.continuum import PhotonPowerLaw

TRUTH = TOY_TRUTH
cheap_model = toy_model


@pytest.fixture(scope="module")
def response():
    return toy_response(1.6, 2.2, n_channels=150)


def test_sum_of_squared_deviance_residuals_is_cash_deviance(response):
    # Cash 1979 deviance form; identity to 1e-10 (relative)
    model = cheap_model()
    spec = simulate_counts(model, response, 20.0, seed=11)
    like = JointLikelihood(model, [Dataset(spec)])
    vals = {"pl_index": 2.1, "pl_norm": 0.45, "abs_step": 0.2}
    r = like.residuals(vals)
    mu = like.source_counts(vals)[0]
    assert np.sum(r ** 2) == pytest.approx(stats.c_statistic(mu, spec.counts), rel=1e-10)
    assert (spec.counts == 0).any()  # low counts, so n ln n = 0 is exercised


def test_injection_recovery_bias_and_coverage(response):
    """200 seeded simulations of a 3-parameter model (~1.4e5 counts each,
    about 10 ms per fit): mean bias per parameter < 0.2 sigma (the standard
    error of that mean is 0.07 sigma) and 68.3 % covariance-interval
    coverage inside the 99 % binomial interval for 200 trials."""
    model = cheap_model()
    n_sim = 200
    pulls = {k: [] for k in TRUTH}
    covered = {k: 0 for k in TRUTH}
    rng = np.random.default_rng(20240601)
    for _ in range(n_sim):
        spec = simulate_counts(model, response, 3e4, values=TRUTH, seed=rng)
        model.components()[0].values["step"] = 0.3  # start at defaults each time
        res = fit_sightline(model, Dataset(spec, ranges=(1.65, 2.15)), goodness=False)
        assert res.converged
        for k, truth in TRUTH.items():
            pull = (res.values[k] - truth) / res.error(k)
            pulls[k].append(pull)
            covered[k] += abs(pull) <= 1.0
    lo, hi = sps.binom.interval(0.99, n_sim, 0.6827)
    for k in TRUTH:
        assert abs(np.mean(pulls[k])) < 0.2, (k, np.mean(pulls[k]))
        assert lo <= covered[k] <= hi, (k, covered[k], (lo, hi))
        # pulls have unit spread (0.85-1.15 holds the chi-square 99 % band for 200)
        assert 0.85 < np.std(pulls[k], ddof=1) < 1.15, k


def test_joint_fit_matches_inverse_variance_mean_of_single_arms(response):
    """Two arms of one source: the joint fit of a shared parameter agrees
    with the inverse-variance weighted mean of the two single-arm fits
    within 0.15 sigma of the joint fit (for a linear-Gaussian problem they
    are identical; the small remainder is the model's non-linearity)."""
    model = cheap_model()
    r2 = toy_response(1.6, 2.2, n_channels=120, area_cm2=60.0, area_slope=1.0)
    a = Dataset(simulate_counts(model, response, 2e4, seed=1), label="arm A")
    b = Dataset(simulate_counts(model, r2, 2e4, seed=2), label="arm B")
    # the cross-normalisation is fixed so that the single-arm fits are the same model
    joint = fit_sightline(model, [a, b], xnorm_free=False)
    singles = [fit_sightline(model, d) for d in (a, b)]
    for k in ("abs_step", "pl_index"):
        w = np.array([1 / s.error(k) ** 2 for s in singles])
        mean = np.sum(w * [s.values[k] for s in singles]) / w.sum()
        assert abs(joint.values[k] - mean) < 0.15 * joint.error(k), k
        assert joint.error(k) == pytest.approx(1 / math.sqrt(w.sum()), rel=0.05)


def test_cross_normalisation_recovered(response):
    model = cheap_model()
    s1 = simulate_counts(model, response, 3e4, seed=5)
    s2 = simulate_counts(model, response, 3e4 * 1.2, seed=6)
    s2.exposure = 3e4  # 20 % more counts than the exposure says: xnorm_2 = 1.2
    res = fit_sightline(model, [Dataset(s1), Dataset(s2)])
    assert res.params["xnorm_1"].value == 1.0 and not res.params["xnorm_1"].vary
    assert res.values["xnorm_2"] == pytest.approx(1.2, abs=3 * res.error("xnorm_2"))


class NaNAbove(Component):
    """Test continuum that returns NaN when its index exceeds 2.5."""

    kind = ADDITIVE
    params = (Param("index", 2.0, 0.0, 5.0), Param("norm", 1.0, 0.0, 100.0))
    default_name = "nanpl"

    def _evaluate(self, grid, pre, index, norm):
        out = norm * grid.mid ** -index * grid.width
        return out * np.nan if index > 2.5 else out


def test_nan_model_never_reaches_optimiser(response):
    model = NaNAbove("pl", index=2.0, norm=0.4)
    spec = simulate_counts(model, response, 1e3, seed=3)
    like = JointLikelihood(model, [Dataset(spec)])
    r = like.residuals({"pl_index": 3.0})
    assert np.all(np.isfinite(r)) and like.n_bad_evaluations == 1
    assert like.statistic({"pl_index": 3.0}) == math.inf
    assert like.log_likelihood({"pl_index": 3.0}) == -math.inf
    # a fit whose steps wander into the NaN region flags it; one that starts
    # there (no finite point to move from) flags it and ends with inf
    model.values["index"] = 2.8
    with pytest.warns(ConvergenceWarning, match="model_not_finite"):
        res = fit_sightline(model, Dataset(spec))
    assert "model_not_finite" in res.flags and not res.converged
    assert res.statistic == math.inf and res.goodness is None


def test_parameter_at_bound_is_flagged(response):
    model = cheap_model()
    truth = dict(TRUTH, abs_step=0.0)
    spec = simulate_counts(model, response, 5e3, values=truth, seed=9)
    params = JointLikelihood(model, [Dataset(spec)]).make_params()
    params["abs_step"].set(min=0.25, value=0.3)  # truth lies below the allowed range
    with pytest.warns(ConvergenceWarning, match="at_bound:abs_step"):
        res = fit_sightline(model, Dataset(spec), params=params)
    assert "at_bound:abs_step" in res.flags


def test_chi_square_option_matches_scipy_least_squares(response):
    # chi-square with data variance max(n, 1): same minimum as scipy's
    # least_squares on (n - m)/sqrt(max(n,1)) (an outside optimiser), rtol 1e-4
    from scipy.optimize import least_squares

    model = cheap_model()
    spec = simulate_counts(model, response, 1e4, seed=4)
    ds = Dataset(spec)
    res = fit_sightline(model, ds, statistic="chi2")
    like = JointLikelihood(model, [ds], statistic="chi2")
    names = ["abs_step", "pl_index", "pl_norm"]

    def f(x):
        mu = like.source_counts(dict(zip(names, x)))[0]
        return (ds.counts - mu) / np.sqrt(np.maximum(ds.counts, 1.0))

    ref = least_squares(f, [0.2, 2.0, 0.4], xtol=1e-12, ftol=1e-12)
    for name, x in zip(names, ref.x):
        assert res.values[name] == pytest.approx(x, rel=1e-4)
    assert res.statistic == pytest.approx(np.sum(ref.fun ** 2), rel=1e-8)


def test_dataset_ranges_units_and_grouping(response):
    model = cheap_model()
    spec = simulate_counts(model, response, 2e3, seed=21)
    kev = Dataset(spec, ranges=(1.7, 2.0))
    ang = Dataset(spec, ranges=(12.398419843320026 / 2.0, 12.398419843320026 / 1.7),
                  unit="Angstrom")
    qty = Dataset(spec, ranges=[6.2, 7.3] * u.AA)
    np.testing.assert_array_equal(kev.channel_mask, ang.channel_mask)
    assert qty.channel_mask.sum() > 0
    # a minimum of 250 counts per group (single channels hold ~40-100 here,
    # so grouping really happens); the trailing remainder of each range is
    # merged into the range's last group, so every group reaches the minimum
    grp = Dataset(spec, ranges=[(1.65, 1.8), (1.9, 2.1)], grouping=250)
    assert grp.n_groups < grp.n_channels_used / 2
    assert grp.counts.sum() == spec.counts[grp.channel_mask].sum()
    assert np.all(grp.counts >= 250)
    # groups never straddle the gap between the two ranges
    assert np.all((grp.group_emax <= 1.8 + 1e-3) | (grp.group_emin >= 1.9 - 1e-3))
    # each group's counts are the sum of the selected channels inside its bounds
    mid = 0.5 * (response.channel_emin + response.channel_emax)
    for c, lo, hi in zip(grp.counts, grp.group_emin, grp.group_emax):
        assert c == spec.counts[grp.channel_mask & (mid > lo) & (mid < hi)].sum()
    # model evaluated only on the energy bins feeding the selected channels
    assert len(kev.grid) < len(response.grid)
    with pytest.raises(ModelError):
        Dataset(spec, ranges=(5.0, 6.0))


def test_background_uses_profiled_statistic(response):
    # with a background, residuals are the profiled-background deviance residuals
    # (Wachter, Leach & Kellogg 1979; edgefit.stats), summing to its statistic
    model = cheap_model()
    rng = np.random.default_rng(8)
    bkg = Spectrum(counts=rng.poisson(5.0, response.n_channels).astype(float), exposure=1e4,
                   channels=np.arange(1, response.n_channels + 1), backscal=4.0)
    spec = simulate_counts(model, response, 1e4, seed=7, background=bkg)
    ds = Dataset(spec)
    assert ds.has_background and ds.bkg_ratio[0] == pytest.approx(0.25)
    like = JointLikelihood(model, [ds])
    mu = like.source_counts({})[0]
    ref = stats.profiled_background_statistic(mu, ds.counts, ds.bkg_counts, ds.bkg_ratio)
    assert like.statistic({}) == pytest.approx(ref, rel=1e-12)
    res = fit_sightline(model, ds)
    assert res.converged


def test_result_exports(tmp_path, response):
    model = cheap_model()
    res = fit_sightline(model, Dataset(simulate_counts(model, response, 1e4, seed=31)))
    t = res.to_table()
    assert len(t) == 1 and t["pl_norm"].unit == u.Unit("ph cm-2 s-1 keV-1")
    paths = res.write(tmp_path)
    back = QTable.read(tmp_path / "fit.ecsv")
    assert back["pl_norm"].unit == u.Unit("ph cm-2 s-1 keV-1")
    assert float(back["pl_index"][0].value) == pytest.approx(res.values["pl_index"])
    fits = Table.read(tmp_path / "fit.fits")
    assert fits["pl_norm"][0] == pytest.approx(res.values["pl_norm"])
    d = json.loads((tmp_path / "fit.json").read_text())
    assert {p["name"] for p in d["parameters"]} >= set(TRUTH)
    assert "pl_index" in (tmp_path / "fit_summary.txt").read_text()
    assert len(paths) == 5
    assert "dof" in str(res) and res.dof == res.n_bins - 3


def test_goodness_z_score_distribution(response):
    """For data drawn from the fitted model the C-statistic z-score
    (Kaastra 2017) is ~N(0, 1): over 30 seeded simulations its mean is
    within 0.6 of 0 and its spread between 0.6 and 1.5 (loose bands for 30
    draws)."""
    model = cheap_model()
    zs = []
    for seed in range(30):
        spec = simulate_counts(model, response, 2e3, values=TRUTH, seed=100 + seed)
        zs.append(fit_sightline(model, Dataset(spec)).goodness["z"])
    assert abs(np.mean(zs)) < 0.6 and 0.6 < np.std(zs, ddof=1) < 1.5


def test_wrong_model_gives_small_goodness_p_value(response):
    model = cheap_model()
    line_truth = ToyEdgeAbsorber("abs", tau0=0.4, step=1.5) * PhotonPowerLaw("pl", index=1.8,
                                                                              norm=0.5)
    spec = simulate_counts(line_truth, response, 3e4, seed=41)
    params = JointLikelihood(model, [Dataset(spec)]).make_params()
    params["abs_step"].set(value=0.0, vary=False)  # an edge-free model cannot fit
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        res = fit_sightline(model, Dataset(spec), params=params)
    assert res.goodness["p_value"] < 1e-3


@pytest.mark.parametrize("s,n,nb,r", [(5.0, 7.0, 3.0, 0.2), (20.0, 12.0, 40.0, 0.1),
                                      (0.5, 0.0, 4.0, 1.0), (3.0, 10.0, 0.0, 0.5)])
def test_profiled_background_level_maximises_the_likelihood(s, n, nb, r):
    """b-hat of stats.profiled_background_level against scipy's bounded
    scalar minimiser of the two-region Poisson deviance (Wachter, Leach &
    Kellogg 1979 likelihood): same b within 1e-6 (absolute + relative)."""
    from scipy.optimize import minimize_scalar

    def dev(b):
        return (stats.c_statistic([s + r * b], [n]) + stats.c_statistic([b], [nb]))

    ref = minimize_scalar(dev, bounds=(0.0, 10 * (n + nb + 10)), method="bounded",
                          options={"xatol": 1e-10}).x
    got = float(stats.profiled_background_level([s], [n], [nb], r)[0])
    assert got == pytest.approx(ref, rel=1e-6, abs=1e-6)


def test_column_at_zero_is_a_limit_not_a_convergence_flag(response):
    """A column fitted at zero is a physical limit the data allow (an upper
    limit, reported by the profile interval's lower_at_bound), not a
    failed fit: informational ``at_limit:``, so the fit stays converged.
    Bounds a user narrowed keep the ``at_bound:`` convergence flag (test
    above).  Data: no gas edge at all in the simulation (column 0)."""
    from edgefit.models.absorption import GasEdge

    model = GasEdge("gas", element="Si") * PhotonPowerLaw("pl", index=1.8, norm=0.5)
    spec = simulate_counts(model, toy_response(1.6, 2.2, n_channels=300), 3e4,
                           values={"gas_col": 0.0}, seed=4)
    res = fit_sightline(model, Dataset(spec, ranges=(1.65, 2.15)), warn=False)
    assert res.params["gas_col"].value < 1e-6 * res.error("gas_col")  # at the limit (this seed)
    assert "at_limit:gas_col" in res.flags and "at_bound:gas_col" not in res.flags
    assert res.converged
