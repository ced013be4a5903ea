"""``edgefit plan``: Fisher forecast against simulated fits, reproducible
simulated widths, the verdict and the command line.

References: the Fisher information of Poisson counts,
F_ij = sum_k d_i mu_k d_j mu_k / mu_k, and the Cramer-Rao bound that the
covariance of an efficient estimate reaches it (Cramer 1946, Mathematical
Methods of Statistics, ch. 32; Cash 1979, ApJ 228, 939 for the Poisson
likelihood).  Tolerances: the issue's 20 % for Fisher against the scatter
of >= 50 simulated fits (the sample standard deviation of 100 fits has a
relative standard error of 1/sqrt(2 x 99) = 7 %, so 20 % is about 3 of
those); 20 % between the simulated 68 % widths of two seeds (100 fits
each, what the suite's time allows; the relative standard error of a
16-84 % percentile width is about 1.1/sqrt(n) = 11 % for a Gaussian, so
the difference of two has 15 %: 20 % is only 1.3 of those, a loose check
made on all three widths reported)."""
import json

import numpy as np
import pytest

from edgefit.analysis.plan import fisher_forecast, plan_observation, simulate_fits
from edgefit.analysis.simulate import simulation_from_dict
from edgefit.cli import main

SIZES = [float(x) for x in np.geomspace(0.001, 5.0, 40)]


def setup_dict(size_free, exposure=4.0e5):
    amax = ({"value": 0.25, "min": 0.05, "max": 2.0} if size_free
            else {"value": 0.25, "fixed": True})
    return {
        "sightline": {"name": "Quill Hollow 2 (simulated)"},
        "simulate": {"exposure": exposure, "band": [1.78, 1.95], "energy_step": 0.002,
                     "background_rate": 1e-4, "seed": 3},
        "model": {
            "absorbers": ["ism", "gas_si", "dust"], "emission": ["continuum"],
            "components": {
                "ism": {"type": "smooth_ism", "options": {"exclude": ["Si"]},
                        "params": {"nh": {"value": 2.0, "fixed": True}}},
                "gas_si": {"type": "gas_edge", "options": {"element": "Si"},
                           "params": {"col": {"value": 12.0, "min": 0.0, "max": 200.0}}},
                "dust": {"type": "dust_edge",
                         "options": {"material": "olivine", "element": "Si",
                                     "size_grid": SIZES},
                         "params": {"col": {"value": 28.0, "min": 0.0, "max": 300.0},
                                    "amax": amax,
                                    "amin": {"value": 0.005, "fixed": True},
                                    "index": {"value": 3.5, "fixed": True}}},
                "continuum": {"type": "photon_power_law",
                              "params": {"index": {"value": 1.8, "min": 0.5, "max": 4.0},
                                         "norm": {"value": 8.0, "min": 0.01,
                                                  "max": 100.0}}}}}}


@pytest.mark.slow
def test_fisher_matches_scatter_of_simulated_fits_with_size_fixed():
    setup = simulation_from_dict(setup_dict(size_free=False))
    fc = fisher_forecast(setup)
    sg, sd, st, rho = fc.columns()
    sims = simulate_fits(setup, n_sims=100, seed=7, workers=2)
    assert sims.n_failed == 0 and len(sims.values) == 100
    for name, sig in ((fc.targets.gas, sg), (fc.targets.dust, sd), ("total_Si", st)):
        assert sig == pytest.approx(sims.std(name), rel=0.20), name
    # the correlation of the fitted gas and dust columns: Fisher's within
    # 0.1 (the standard error of a correlation near -0.95 from 100 pairs is
    # (1 - rho^2)/sqrt(n) = 0.01)
    r = np.corrcoef(sims.values[:, 0], sims.values[:, 1])[0, 1]
    assert abs(r - rho) < 0.1
    # sigma scales as 1/sqrt(exposure) (every expectation is proportional to t)
    assert fc.columns(4 * fc.exposure)[0] == pytest.approx(sg / 2, rel=1e-10)


@pytest.mark.long
def test_simulated_widths_with_size_free_are_reproducible():
    setup = simulation_from_dict(setup_dict(size_free=True))
    a = simulate_fits(setup, n_sims=100, seed=11, workers=2)
    b = simulate_fits(setup, n_sims=100, seed=12, workers=2)
    for name in a.names:
        assert a.width(name) == pytest.approx(b.width(name), rel=0.20), name
    # with one edge and the size free the Fisher bound on the gas column is
    # far wider than what the fits scatter (non-Gaussian, bounded at zero):
    # the reason plan simulates at all
    fc = fisher_forecast(setup)
    assert fc.columns()[0] > 5 * a.width(fc.targets.gas)
    assert fc.targets.size_params == ["dust_amax"]


def test_seeded_simulations_do_not_depend_on_worker_count():
    setup = simulation_from_dict(setup_dict(size_free=False, exposure=1e5))
    one = simulate_fits(setup, n_sims=6, seed=5, workers=1)
    two = simulate_fits(setup, n_sims=6, seed=5, workers=2)
    np.testing.assert_array_equal(one.values, two.values)


def test_verdict_says_what_would_separate_gas_from_dust():
    weak = plan_observation(simulation_from_dict(setup_dict(False, exposure=2e4)), n_sims=0)
    assert not weak.separable and "cannot separate gas from dust" in weak.text
    assert "longer exposure" in weak.text
    # the needed exposure brings both columns to 3 Fisher sigma
    sg, sd, _, _ = weak.forecast.columns(weak.needed_exposure)
    assert min(12.0 / sg, 28.0 / sd) == pytest.approx(3.0, rel=1e-6)
    strong = plan_observation(simulation_from_dict(setup_dict(False, exposure=4e6)),
                              n_sims=0)
    assert strong.separable and "separates gas from dust" in strong.text
    free = plan_observation(simulation_from_dict(setup_dict(True, exposure=4e5)), n_sims=0)
    assert "known size distribution" in free.text and "more edges" in free.text


def test_plan_command_writes_tables_plot_and_json(tmp_path, capsys):
    from edgefit.analysis.simulate import toml_text

    cfg = tmp_path / "hollow.toml"
    cfg.write_text(toml_text(setup_dict(False, exposure=1e5)))
    out = tmp_path / "p"
    assert main(["plan", str(cfg), "--sims", "4", "--workers", "1", "-o", str(out),
                 "-q"]) == 0
    info = json.loads((out / "plan.json").read_text())
    assert info["simulated"]["n_fits"] == 4 and info["fisher"]["sigma_gas"] > 0
    from astropy.table import Table

    tab = Table.read(out / "plan.ecsv")
    assert str(tab["exposure"].unit) == "s" and str(tab["sigma_gas"].unit) == "1e+16 / cm2"
    assert (out / "plan.png").stat().st_size > 10000
    # errors: one line, exit 2
    assert main(["plan", str(cfg), "--sims", "1"]) == 2
    assert main(["plan", str(tmp_path / "missing.toml")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and "--sims" in err[0] and "missing.toml" in err[1]


def test_counts_per_channel_reproduce_the_requested_counts_at_the_edge():
    # The source level given as counts per channel near the edge (channel
    # centres within 20 eV of the Si K edge, README "Edges") instead of a
    # flux.  Checked by folding the scaled model independently: the dense
    # RMF times the ARF (OGIP: counts = t R A F, George et al. 1992,
    # CAL/GEN/92-002) rather than the response's prepared matrix, averaged
    # over those channels; the scaling is exact (the model is linear in the
    # norm), so the tolerance is 1e-9 relative (rounding only).
    import astropy.units as u

    from edgefit.analysis.simulate import edge_counts, set_source_level, simulate_spectra
    from edgefit.physics.atomic import edge_position

    d = setup_dict(False, exposure=1e5)
    d["simulate"]["background_rate"] = 0.0
    setup = simulation_from_dict(d)
    for target in (150 * u.count / u.chan, 40 * u.count, 2500.0):
        scaled = set_source_level(setup, counts_per_channel=target)
        _, _, resp = scaled.responses[0]
        flux = scaled.model.evaluate(resp.grid, scaled.truth)
        counts = scaled.exposure * (resp.rmf.toarray() @ (resp.specresp * flux))
        near = np.abs(resp.channel_mid - edge_position("Si", "K")) <= 0.020
        assert near.sum() >= 10
        want = target.value if isinstance(target, u.Quantity) else target
        assert counts[near].mean() == pytest.approx(want, rel=1e-9, abs=0)
        assert edge_counts(scaled) == pytest.approx(want, rel=1e-9, abs=0)
        # only the norm moved; the shape (index, columns) is the setup's
        assert {k for k in scaled.truth if scaled.truth[k] != setup.truth[k]} == \
            {"continuum_norm"}
    # Poisson realisations average to the request: 150 counts per channel in
    # n channels over 100 draws, standard error sqrt(150 / (100 n)); 4 of them
    scaled = set_source_level(setup, counts_per_channel=150 * u.count / u.chan)
    rng = np.random.default_rng(2)
    _, _, resp = scaled.responses[0]
    near = np.abs(resp.channel_mid - edge_position("Si", "K")) <= 0.020
    means = [simulate_spectra(scaled, rng)[0].counts[near].mean() for _ in range(100)]
    assert abs(np.mean(means) - 150) < 4 * np.sqrt(150 / (100 * near.sum()))
    # a flux instead: the unabsorbed photon flux density at the edge, for a
    # power law N(E) = norm E^-index (pivot 1 keV): norm = F E_edge^index
    f = set_source_level(setup, flux=0.5 * u.Unit("ph cm-2 s-1 keV-1"))
    e0 = edge_position("Si", "K")
    assert f.truth["continuum_norm"] == pytest.approx(0.5 * e0 ** 1.8, rel=1e-6, abs=0)


def test_source_level_errors_are_one_line(tmp_path, capsys):
    import astropy.units as u

    from edgefit.analysis.simulate import set_source_level, toml_text
    from edgefit.errors import ArgumentError

    setup = simulation_from_dict(setup_dict(False, exposure=1e5))
    with pytest.raises(ArgumentError, match="not both"):
        set_source_level(setup, flux=1.0, counts_per_channel=10)
    with pytest.raises(ArgumentError, match="give flux"):
        set_source_level(setup)
    with pytest.raises(ArgumentError, match="not a photon flux density"):
        set_source_level(setup, flux=3 * u.m)
    with pytest.raises(ArgumentError, match="not both"):
        plan_observation(setup, n_sims=0, flux=1.0, counts_per_channel=10)
    # the configuration: both (norm and counts_per_channel) or neither
    both = setup_dict(False, exposure=1e5)
    both["simulate"]["counts_per_channel"] = 100
    neither = setup_dict(False, exposure=1e5)
    del neither["model"]["components"]["continuum"]["params"]["norm"]
    for name, d, words in (("both", both, "not both"), ("neither", neither, "how bright")):
        cfg = tmp_path / f"{name}.toml"
        cfg.write_text(toml_text(d))
        assert main(["plan", str(cfg), "--sims", "0", "-o", str(tmp_path / name)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and f"{name}.toml" in err[0] and words in err[0], err
    # counts only: plans, and the fit configuration simulate writes starts
    # at the scaled norm
    del both["model"]["components"]["continuum"]["params"]["norm"]
    cfg = tmp_path / "counts.toml"
    cfg.write_text(toml_text(both))
    plan = plan_observation(simulation_from_dict(both, cfg), n_sims=0)
    assert plan.forecast.columns()[0] > 0
    assert main(["simulate", str(cfg), "-o", str(tmp_path / "sim"), "-q"]) == 0
    import tomllib

    written = tomllib.loads(next((tmp_path / "sim").glob("*.toml")).read_text())
    norm = written["model"]["components"]["continuum"]["params"]["norm"]["value"]
    assert norm == pytest.approx(simulation_from_dict(both, cfg).truth["continuum_norm"],
                                 rel=1e-12, abs=0)
