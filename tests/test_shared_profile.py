"""A parameter shared by every sightline: the summed profile statistic on a
grid (edgefit.analysis.shared_profile, ``edgefit population --shared``).

What is checked against what:

* Thresholds: the chi-square quantile of one degree of freedom (Wilks 1938,
  Ann. Math. Stat. 9, 60) from ``scipy.stats.chi2.ppf``, and 3.841 at 95 %
  (Abramowitz & Stegun 1964, Table 26.8, nu = 1, Q = 0.05: 3.84146), to 1e-5.
* The set {ΔS ≤ Δ} of a sampled parabola ΔS = ((x − 2)/0.5)²: its ends are
  2 ± 0.5 √Δ (exact for a parabola; linear interpolation on a 0.001 grid is
  good to 1e-5).
* The envelope of column profiles over a coarse grid of the shared
  parameter, on the linear-Gaussian case: statistic (a − a0)²/σa² + (x −
  m0 − b a)²/σx², whose profile in x is Gaussian with variance σx² + b² σa²
  (the marginal of a linear Gaussian model; e.g. Bishop 2006, Pattern
  Recognition and Machine Learning, eq. 2.115); 68.27 % half-width to 3 %.
* On a SIMULATED sample (edgefit's own simulator, tests/_batch_sim.py:
  invented sightlines, one upper grain size 0.25 um for all): the summed
  curve equals the sum of per-sightline fits made here independently with
  the public fitting API (to 1e-9), and the true shared value lies inside
  the 95 % set (one seeded realisation; Wilks' 95 % coverage).
"""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from edgefit.analysis.shared_profile import (LEVELS, envelope_profile, make_grid,
                                             refine_minimum, refinement_points,
                                             shared_parameter_profile, threshold_intervals,
                                             wilks_threshold)
from edgefit.errors import ArgumentError

TRUE_AMAX = 0.25   # um: the simulator's upper grain size (tests/_batch_sim.py build_model)
GRID = (0.08, 1.2, 5)
COLUMNS = ["gas_si_col"]


# --- pure arithmetic ----------------------------------------------------------
def test_thresholds_are_chi2_quantiles():
    # Wilks 1938: -2 Δ ln L of one parameter ~ chi2 with 1 dof.
    for lv in (0.6827, 0.9, 0.95, 0.99):
        assert wilks_threshold(lv) == pytest.approx(stats.chi2.ppf(lv, 1), rel=1e-12, abs=0)
    # Abramowitz & Stegun 1964, Table 26.8: chi2_{0.05}(1) = 3.84146
    assert wilks_threshold(0.95) == pytest.approx(3.84146, abs=1e-5)
    with pytest.raises(ArgumentError):
        wilks_threshold(1.0)


def test_threshold_intervals_of_a_parabola_and_a_union():
    x = np.arange(0.0, 4.0005, 0.001)
    d = ((x - 2.0) / 0.5) ** 2
    thr = wilks_threshold(0.95)
    iv = threshold_intervals(x, d, thr)
    assert len(iv["pieces"]) == 1 and not iv["lower_at_bound"] and not iv["upper_at_bound"]
    assert iv["lower"] == pytest.approx(2.0 - 0.5 * math.sqrt(thr), abs=1e-5)
    assert iv["upper"] == pytest.approx(2.0 + 0.5 * math.sqrt(thr), abs=1e-5)
    # two dips: a union of two pieces; a set reaching the last sample is flagged
    d2 = np.minimum(((x - 1.0) / 0.2) ** 2, ((x - 3.0) / 0.2) ** 2 + 0.5)
    iv2 = threshold_intervals(x, d2, 1.0)
    assert len(iv2["pieces"]) == 2
    assert iv2["pieces"][0] == pytest.approx([0.8, 1.2], abs=1e-5)
    half = 0.2 * math.sqrt(0.5)
    assert iv2["pieces"][1] == pytest.approx([3.0 - half, 3.0 + half], abs=1e-5)
    iv3 = threshold_intervals(x, (x - 4.0) ** 2, 1.0)
    assert iv3["upper_at_bound"] and iv3["upper"] == 4.0 and iv3["lower"] == pytest.approx(3.0)
    # in ln x on a logarithmic grid: ΔS = (ln x)^2 / 0.25 gives exp(±0.5)
    xl = make_grid(0.1, 10.0, 2001)
    iv4 = threshold_intervals(xl, np.log(xl) ** 2 / 0.25, 1.0, log=True)
    assert iv4["pieces"][0] == pytest.approx([math.exp(-0.5), math.exp(0.5)], rel=1e-5)


def test_refined_minimum_is_the_parabola_vertex():
    x = np.array([0.0, 1.0, 2.0, 3.0])
    assert refine_minimum(x, 3.0 * (x - 1.3) ** 2) == pytest.approx(1.3, rel=1e-12)
    assert refine_minimum(x, (x - 5.0) ** 2) is None          # lowest at the grid's end
    xl = make_grid(0.1, 1.0, 5)
    assert refine_minimum(xl, (np.log(xl) - math.log(0.3)) ** 2, log=True) == \
        pytest.approx(0.3, rel=1e-12)
    # a steep rise across the 1.0 threshold between x = 1 and 2 (dS 0.5 -> 8):
    # the vertex and the step's mid-point are proposed; a gentle step is not
    s = np.array([30.0, 8.0, 0.5, 0.0, 0.6, 1.4])
    x6 = np.arange(6.0)
    pts = refinement_points(x6, s, [1.0, 3.84])
    assert pts[0] == refine_minimum(x6, s) and 1.5 in pts and 4.5 not in pts


def test_envelope_over_a_coarse_grid_matches_the_linear_gaussian_profile():
    # statistic (a - a0)^2/sa^2 + (x - m0 - b a)^2/sx^2: profiled over a, x has
    # variance sx^2 + b^2 sa^2 (linear Gaussian model, Bishop 2006 eq. 2.115).
    a0, sa, m0, b, sx = 0.5, 0.2, 1.0, 10.0, 0.3
    a = np.linspace(0.0, 1.0, 6)          # coarse: x's best moves by 2 per step, sx = 0.3
    xs = np.linspace(-8.0, 20.0, 4001)
    offsets = (a - a0) ** 2 / sa ** 2
    curves = [(xs, (xs - m0 - b * ak) ** 2 / sx ** 2) for ak in a]
    half = math.sqrt(sx ** 2 + b ** 2 * sa ** 2)
    env = envelope_profile(offsets, curves, xs, substeps=12)
    iv = threshold_intervals(xs, env - env.min(), 1.0)
    assert len(iv["pieces"]) == 1
    assert iv["upper"] - iv["lower"] == pytest.approx(2 * half, rel=0.03)
    assert 0.5 * (iv["upper"] + iv["lower"]) == pytest.approx(m0 + b * a0, abs=0.05 * half)
    # without the interpolation the coarse grid leaves gaps (several pieces)
    raw = envelope_profile(offsets, curves, xs)
    assert len(threshold_intervals(xs, raw - raw.min(), 1.0)["pieces"]) > 1


def test_grid_arguments():
    g = make_grid(0.1, 1.0, 3)
    assert g == pytest.approx([0.1, math.sqrt(0.1), 1.0], rel=1e-12)
    for args in ((1.0, 0.1, 5), (0.1, 1.0, 2), (0.0, 1.0, 5)):
        with pytest.raises(ArgumentError):
            make_grid(*args)


# --- on a simulated sample ----------------------------------------------------
# 2 sightlines x (5 grid values + one round of refinement) fits with one
# column profiled each, on two workers: about a minute on a two-core machine
# that other jobs keep busy (most of it waiting for the cores).
@pytest.fixture(scope="module")
def shared_run(tmp_path_factory):
    import _batch_sim

    folder = tmp_path_factory.mktemp("shared")
    manifest = _batch_sim.write_sample(folder, n=2, seed=5, exposure=1.5e5)
    res = shared_parameter_profile(manifest, "dust_amax", make_grid(*GRID),
                                   output=folder / "out", columns=COLUMNS, workers=2,
                                   refine=1, progress=False)
    return manifest, res


def _independent_statistic(entry, name, value):
    """The sightline's best statistic with ``name`` fixed at ``value``, by
    the public fitting API (no grid machinery)."""
    from edgefit.analysis.config import apply_parameter_settings
    from edgefit.inference import fit_sightline
    from edgefit.inference.likelihood import JointLikelihood

    cfg = entry.config
    data = cfg.load_datasets()
    like = JointLikelihood(cfg.model, data, statistic=cfg.fit.statistic)
    params = apply_parameter_settings(like.make_params(xnorm_free=cfg.fit.xnorm_free),
                                      cfg.param_settings, cfg.model, cfg.path)
    params[name].set(value=value, vary=False)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")     # at_bound flags of small sizes are expected
        return fit_sightline(cfg.model, data, params=params).statistic


@pytest.mark.slow
def test_summed_curve_is_the_sum_of_independent_fits(shared_run):
    from edgefit.analysis import load_manifest

    manifest, res = shared_run
    m = load_manifest(manifest)
    values = np.asarray(res.curve["value"].value)
    assert values.size > GRID[2]               # the grid and the refinement values
    total = np.zeros(values.size)
    for e in m:
        own = np.array([_independent_statistic(e, "dust_amax", v) for v in values])
        np.testing.assert_allclose(np.asarray(res.curve[f"C_{e.name}"]), own, rtol=0,
                                   atol=1e-9)
        total += own
    np.testing.assert_allclose(np.asarray(res.curve["statistic"]), total, rtol=0, atol=1e-9)
    d = np.asarray(res.curve["delta_stat"])
    assert d.min() == 0.0 and res.best == values[int(np.argmin(total))]


@pytest.mark.slow
def test_true_shared_size_inside_the_95_percent_set(shared_run):
    _, res = shared_run
    iv95 = res.intervals[str(LEVELS[1])]
    assert any(lo <= TRUE_AMAX <= hi for lo, hi in iv95["pieces"]), iv95
    # the 68.27 % set lies inside the 95 % set
    iv68 = res.intervals[str(LEVELS[0])]
    assert iv95["lower"] <= iv68["lower"] and iv68["upper"] <= iv95["upper"]
    t = res.sightlines
    assert len(t) == 2 and str(t["gas_si_col"].unit) == "1e+16 / cm2"
    assert np.all(t["gas_si_col_pooled_lo"] <= t["gas_si_col_pooled_hi"])
    assert np.all(np.isfinite(np.asarray(t["gas_si_col_shrink"])))


@pytest.mark.slow
def test_rerun_reads_the_cache_and_command_line(shared_run, capsys):
    from edgefit.analysis.shared_profile import POINTS_DIR
    from edgefit.cli import main

    manifest, res = shared_run
    files = sorted((res.output / POINTS_DIR).rglob("*.json"))
    assert len(files) == 2 * len(res.curve)
    stamps = [f.stat().st_mtime_ns for f in files]
    rc = main(["population", str(manifest.parent), "--shared", "dust_amax", "--grid",
               ",".join(str(g) for g in GRID), "--manifest", str(manifest), "--columns",
               *COLUMNS, "-o", str(res.output), "--workers", "0", "--refine", "1", "-q"])
    assert rc == 0
    assert [f.stat().st_mtime_ns for f in files] == stamps      # nothing refitted
    d = json.loads((res.output / "shared.json").read_text())
    assert d["best"] == res.best and d["intervals"] == json.loads(json.dumps(res.intervals))
    assert (res.output / "shared.png").stat().st_size > 10_000
    assert "shared dust_amax" in capsys.readouterr().out


def test_command_bad_input(shared_run, capsys):
    from edgefit.cli import main

    manifest, res = shared_run
    base = ["population", str(manifest.parent), "--manifest", str(manifest), "-o",
            str(res.output), "--workers", "0", "-q"]
    for extra, word in ((["--shared", "dust_amax", "--grid", "0.1,1"], "--grid"),
                        (["--shared", "dust_amax", "--grid", "0.1,1,__import__"], "--grid"),
                        (["--shared", "dust_size", "--grid", "0.1,1,5"], "dust_size"),
                        ([], "--quantity")):
        rc = main(base + extra)
        err = capsys.readouterr().err.strip()
        assert rc == 2 and len(err.splitlines()) == 1 and word in err, err
