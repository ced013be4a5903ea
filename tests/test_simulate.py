"""``edgefit simulate``: the built-in two-arm instrument, simulation
configurations, OGIP files written and read back, and errors.

References: the line-spread width of a Gaussian, FWHM = 2 sqrt(2 ln 2)
sigma (definition); Poisson counts have variance equal to their mean
(definition), so a total of N expected counts is checked within 5 sqrt(N);
the written configuration is read back with Python's own tomllib."""
import json
import textwrap
import tomllib

import numpy as np
import pytest

from edgefit.analysis.simulate import load_simulation, simulate_spectra, toml_text
from edgefit.cli import main
from edgefit.data import expected_counts, read_pha
from edgefit.data.instrument import ARMS, arm_response
from edgefit.errors import ConfigError

CONFIG = """\
[sightline]
name = "Tallow Reach 4 (simulated)"

[simulate]
exposure = 5.0e4
arms = ["high", "medium"]
band = [1.75, 2.0]
energy_step = 0.001
background_rate = 2e-4
background_area = 4.0
seed = 11

[model]
absorbers = ["ism", "gas_si"]
emission = ["continuum"]

[model.components.ism]
type = "smooth_ism"
options = { exclude = ["Si"] }
params.nh = { value = 2.0, fixed = true }

[model.components.gas_si]
type = "gas_edge"
options = { element = "Si" }
params.col = { value = 30.0, min = 0.0, max = 200.0 }

[model.components.continuum]
type = "photon_power_law"
params.index = { value = 1.8, min = 0.5, max = 4.0 }
params.norm = { value = 8.0, min = 0.01, max = 100.0 }
"""


@pytest.fixture
def sim_config(tmp_path):
    p = tmp_path / "reach.toml"
    p.write_text(CONFIG)
    return p


@pytest.mark.parametrize("arm", sorted(ARMS))
def test_builtin_arm_line_spread_width(arm):
    # a narrow line at 1.9 keV spreads over channels with the arm's FWHM
    # in wavelength: the channel-count standard deviation must equal
    # FWHM / (2 sqrt(2 ln 2)) (Gaussian definition) within 3 % (channel
    # binning adds w^2/12 to the variance, which is subtracted here)
    resp = arm_response(arm, (1.8, 2.0), 0.0005)
    flux = np.zeros(resp.n_energies)
    i = np.searchsorted(resp.grid.mid, 1.9)
    flux[i] = 1.0
    counts = resp.fold(flux)
    lam = 12.398419843320026 / resp.channel_mid
    mean = np.sum(counts * lam) / counts.sum()
    var = np.sum(counts * (lam - mean) ** 2) / counts.sum() - ARMS[arm].channel_angstrom ** 2 / 12
    sigma = ARMS[arm].fwhm_angstrom / (2 * np.sqrt(2 * np.log(2)))
    assert np.sqrt(var) == pytest.approx(sigma, rel=0.03)
    # the effective area at 1.9 keV is the arm's declared one, and
    # every photon of the line lands in some channel (5-sigma window)
    assert counts.sum() == pytest.approx(ARMS[arm].area(resp.grid.mid[i]), rel=1e-5)


def test_toml_text_round_trip():
    data = {"sightline": {"name": "A \"quoted\" name"},
            "spectrum": [{"pha": "a.pha", "range": [1.7, 2.0]}, {"pha": "b.pha"}],
            "model": {"absorbers": ["x"], "emission": ["y"],
                      "components": {"y": {"type": "t", "params": {"norm": {"value": 1e-3,
                                                                            "fixed": True}}}}}}
    assert tomllib.loads(toml_text(data, header="# comment")) == data


def test_simulate_writes_ogip_files_that_read_back(sim_config, tmp_path):
    out = tmp_path / "out"
    assert main(["simulate", str(sim_config), "-o", str(out), "--seed", "5", "-q"]) == 0
    truth = json.loads((out / "truth.json").read_text())
    assert truth["seed"] == 5 and truth["truth"]["gas_si_col"] == 30.0
    setup = load_simulation(sim_config, seed=5)
    direct = simulate_spectra(setup)
    for arm, spec_direct in zip(("high", "medium"), direct):
        spec = read_pha(out / f"tallow_reach_4_{arm}.pha")
        # counts, exposure and background survive the files exactly
        np.testing.assert_array_equal(spec.counts, spec_direct.counts)
        assert spec.exposure == 5.0e4 and spec.background is not None
        np.testing.assert_array_equal(spec.background.counts, spec_direct.background.counts)
        assert spec.background.backscal == 4.0
        # Poisson: the total is within 5 sqrt(N) of its expectation
        mu = expected_counts(setup.model.evaluate(spec.response.grid, setup.truth),
                             spec.response, 5.0e4, np.full(spec.n_channels, 2e-4 * 4.0),
                             1.0, 4.0)
        assert abs(spec.counts.sum() - mu.sum()) < 5 * np.sqrt(mu.sum())
    # the written fit configuration loads and points at the new files
    cfg = tomllib.loads((out / "tallow_reach_4.toml").read_text())
    assert [s["pha"] for s in cfg["spectrum"]] == ["tallow_reach_4_high.pha",
                                                   "tallow_reach_4_medium.pha"]
    from edgefit.config import load_config

    loaded = load_config(out / "tallow_reach_4.toml")
    assert len(loaded.load_datasets()) == 2


def test_simulate_then_fit_recovers_the_column(sim_config, tmp_path):
    # a strong gas edge (30e16 cm^-2) in 50 ks: the fitted column must lie
    # within 4 of its covariance standard errors of the simulated truth
    # (Gaussian limit of the Poisson likelihood, Cash 1979)
    out = tmp_path / "out"
    assert main(["simulate", str(sim_config), "-o", str(out), "-q"]) == 0
    from edgefit.config import load_config
    from edgefit.inference import fit_sightline

    cfg = load_config(out / "tallow_reach_4.toml")
    res = fit_sightline(cfg.model, cfg.load_datasets())
    assert abs(res.values["gas_si_col"] - 30.0) < 4 * res.error("gas_si_col")
    assert res.error("gas_si_col") < 10.0


@pytest.mark.parametrize("edit, message", [
    (lambda s: s.replace("exposure = 5.0e4\n", ""), "simulate.exposure: missing"),
    (lambda s: s.replace("exposure = 5.0e4", "exposure = -1.0"), "simulate.exposure: must be"),
    (lambda s: s.replace("seed = 11", "seed = 11\ncolour = 3"), "simulate.colour: unknown key"),
    (lambda s: s.replace('arms = ["high", "medium"]', 'arms = ["low"]'), "unknown instrument arm"),
    (lambda s: s.replace("band = [1.75, 2.0]", "band = [2.0, 1.75]"), "simulate.band"),
    (lambda s: s + '\n[[spectrum]]\npha = "x.pha"\n', "spectrum: not allowed"),
    (lambda s: s.replace("[simulate]", "[simulation]"), "simulation: not allowed"),
    (lambda s: s.replace('type = "gas_edge"', 'type = "gas_edgy"'), "unknown component type"),
])
def test_bad_simulation_config_is_one_line(tmp_path, capsys, edit, message):
    p = tmp_path / "bad.toml"
    p.write_text(edit(CONFIG))
    with pytest.raises(ConfigError, match=message):
        load_simulation(p)
    assert main(["simulate", str(p), "-o", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "bad.toml" in err and message.split(":")[0] in err


def test_simulate_help_and_missing_file(tmp_path, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["simulate", "--help"])
    assert exc.value.code == 0 and "--seed" in capsys.readouterr().out
    assert main(["simulate", str(tmp_path / "none.toml")]) == 2
    assert "none.toml" in capsys.readouterr().err
