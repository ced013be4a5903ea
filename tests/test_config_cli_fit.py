"""Configuration parser (structured model lists, errors naming file and
key) and the ``edgefit fit`` command end to end on simulated OGIP files.

Reference for the model checks: the product/sum identities are evaluated
directly with the components' own outputs (NumPy arithmetic, rtol 1e-14),
so the configuration layer must add nothing and lose nothing.  The end-to-end
fit is checked against the simulated truth within 4 sigma of its 68 %
profile-likelihood interval (Delta C = 1, Wilks 1938, Ann. Math. Stat. 9, 60)."""
import json
import textwrap

import numpy as np
import pytest
from astropy import units as u
from astropy.table import QTable

from edgefit.cli import main
from edgefit.config import build_model, load_config, model_from_terms, model_terms
from edgefit.data import gaussian_response, simulate_spectrum, write_pha, write_response
from edgefit.errors import ConfigError
from edgefit.models.base import ADDITIVE
from edgefit.models.continuum import LineGaussian, PhotonPowerLaw
from edgefit.inference._testing import ToyEdgeAbsorber

GRID = np.linspace(1.6, 2.2, 21)


def comps():
    return {"a": ToyEdgeAbsorber("a"), "b": ToyEdgeAbsorber("b", tau0=0.2),
            "pl": PhotonPowerLaw("pl"), "ln": LineGaussian("ln", center=1.9)}


def test_one_term_is_product_of_absorbers_times_sum_of_emission():
    c = comps()
    terms = model_terms({"absorbers": ["a", "b"], "emission": ["pl", "ln"]})
    m, used = model_from_terms(terms, c)
    assert m.kind == ADDITIVE and used == {"a", "b", "pl", "ln"}
    ref = c["a"](GRID) * c["b"](GRID) * (c["pl"](GRID) + c["ln"](GRID))
    np.testing.assert_allclose(m(GRID), ref, rtol=1e-14)
    # no absorbers at all is allowed: a bare continuum
    m2, _ = model_from_terms(model_terms({"emission": ["pl"]}), c)
    np.testing.assert_allclose(m2(GRID), c["pl"](GRID), rtol=1e-14)


def test_terms_are_summed_and_share_components():
    c = comps()
    table = {"term": [{"absorbers": ["a"], "emission": ["pl"]},
                      {"absorbers": ["a", "b"], "emission": ["ln"]}]}
    m, used = model_from_terms(model_terms(table), c)
    ref = c["a"](GRID) * c["pl"](GRID) + c["a"](GRID) * c["b"](GRID) * c["ln"](GRID)
    np.testing.assert_allclose(m(GRID), ref, rtol=1e-14)
    # "a" is one object with one set of parameters in both terms
    names = [comp.name for comp in m.components()]
    assert names.count("a") == 1 and list(m.parameters()).count("a_tau0") == 1
    changed = m(GRID, a_step=0.9)
    c["a"].values["step"] = 0.9
    np.testing.assert_allclose(changed, c["a"](GRID) * c["pl"](GRID) + c["a"](GRID)
                               * c["b"](GRID) * c["ln"](GRID), rtol=1e-14)


@pytest.mark.parametrize("table,key", [
    ({"absorbers": ["a"], "emission": ["nope"]}, "model.emission[0]: component 'nope'"),
    ({"absorbers": ["a * b"], "emission": ["pl"]}, "model.absorbers[0]: component 'a * b'"),
    ({"absorbers": ["__import__('os')"], "emission": ["pl"]}, "model.absorbers[0]"),
    ({"absorbers": ["a", "a"], "emission": ["pl"]}, "model.absorbers[1]: 'a' is listed twice"),
    ({"absorbers": ["a"], "emission": []}, "model.emission: empty"),
    ({"absorbers": ["pl"], "emission": ["ln"]}, "model.absorbers[0]: 'pl' is additive"),
    ({"absorbers": ["a"], "emission": ["pl", "b"]}, "model.emission[1]: 'b' is multiplicative"),
    ({"absorbers": ["a"]}, "model.emission: missing"),
    ({"absorbers": "a", "emission": ["pl"]}, "model.absorbers: must be a list"),
    ({"emission": "pl + ln"}, "model.emission: must be a list"),
    ({"emission": ["pl"], "term": [{"emission": ["ln"]}]}, "model.term: give either"),
    ({"term": []}, "model.term: use one or more"),
    ({"term": [{"emission": ["pl"]}, {"absorbers": ["a"]}]}, "model.term[1].emission: missing"),
    ({"term": [{"emission": ["pl"], "op": "*"}]}, "model.term[0].op: unknown key"),
    ({"term": [{"absorbers": ["ln"], "emission": ["pl"]}]},
     "model.term[0].absorbers[0]: 'ln' is additive"),
])
def test_malformed_model_lists_rejected_with_file_and_key(table, key):
    with pytest.raises(ConfigError) as err:
        model_from_terms(model_terms(table, "cfg.toml"), comps(), "cfg.toml")
    assert str(err.value).startswith(f"cfg.toml: {key}"), str(err.value)


def test_build_model_errors_name_the_key():
    base = {"emission": ["pl"], "components": {"pl": {"type": "photon_power_law"}}}
    model, _, _ = build_model(base, "x.toml")
    assert model.kind == ADDITIVE
    bad_cases = [
        ({"emission": ["pl"], "components": {"pl": {"type": "powerlaw"}}},
         "model.components.pl.type: unknown component type"),
        ({"emission": ["pl"], "components": {"pl": {"type": "photon_power_law",
                                                    "params": {"slope": 1}}}},
         "model.components.pl.params.slope"),
        ({"emission": ["pl"], "components": {"pl": {"type": "photon_power_law",
                                                    "params": {"index": {"value": "2"}}}}},
         "model.components.pl.params.index.value"),
        ({"emission": ["pl"], "components": {"pl": {"type": "photon_power_law",
                                                    "params": {"index": {"expr": "1+1"}}}}},
         "model.components.pl.params.index.expr: unknown key"),
        ({"emission": ["pl"], "components": {"pl": {"type": "photon_power_law"},
                                             "ln": {"type": "line_gaussian"}}},
         "model.components.ln: defined but not used"),
        ({"expression": "pl", "components": {"pl": {"type": "photon_power_law"}}},
         "model.expression: unknown key"),
        ({"emission": ["pl"], "components": {"pl": {"type": "photon_power_law",
                                                    "options": {"colour": "red"}}}},
         "model.components.pl.options"),
    ]
    for table, msg in bad_cases:
        with pytest.raises(ConfigError) as err:
            build_model(table, "x.toml")
        assert str(err.value).startswith("x.toml: ") and msg in str(err.value), str(err.value)


# --- end to end --------------------------------------------------------------
def _write_sim(folder, seed=3):
    """Two simulated spectra of an invented source (SIMULATED test data)."""
    model = PhotonPowerLaw("pl", index=1.7, norm=1.0) + LineGaussian(
        "ln", center=1.865, sigma=0.003, norm=4e-3)
    rng = np.random.default_rng(seed)
    for tag in ("m1", "p1"):
        resp = gaussian_response(np.linspace(1.55, 2.25, 351), np.linspace(1.6, 2.2, 201),
                                 fwhm=0.023, area_cm2=20.0)
        write_response(resp, folder / f"t_{tag}.rmf", folder / f"t_{tag}.arf",
                       overwrite=True, simulated=True)
        spec = simulate_spectrum(model.evaluate(resp.grid), resp, 2e4, rng,
                                 meta={"object": "SIM-TEST (simulated)"})
        write_pha(folder / f"t_{tag}.pha", spec, overwrite=True, respfile=f"t_{tag}.rmf",
                  ancrfile=f"t_{tag}.arf")


CONFIG = """
[sightline]
name = "SIM-TEST (simulated)"
output = "out"

[[spectrum]]
pha = "t_m1.pha"
range = [1.65, 2.15]

[[spectrum]]
pha = "t_p1.pha"
rmf = "t_p1.rmf"
arf = "t_p1.arf"
range = [[1.65, 1.85], [1.88, 2.15]]
group_min_counts = 10

[model]
emission = ["pl", "ln"]

[model.components.pl]
type = "photon_power_law"
params.index = {{ value = 2.0, min = 0.5, max = 4.0 }}

[model.components.ln]
type = "line_gaussian"
params.center = {{ value = 1.865, fixed = true }}
params.sigma = {{ value = 3.0, unit = "eV", fixed = true }}
params.norm = {{ value = 1e-3, min = 0.0, max = 1.0 }}

[errors]
profile = ["pl_index"]
levels = [0.6827]

[mcmc]
enabled = {mcmc}
walkers = 12
steps = 300
seed = 5
{priors}
[plots]
enabled = {plots}
unit = "Angstrom"
"""


def _config(tmp_path, mcmc="false", plots="false", priors=""):
    p = tmp_path / "sl.toml"
    p.write_text(CONFIG.format(mcmc=mcmc, plots=plots, priors=priors))
    return p


def test_fit_command_end_to_end(tmp_path, capsys):
    _write_sim(tmp_path)
    cfg = _config(tmp_path, mcmc="true", plots="true", priors='proposal = "differential"\n')
    assert main(["fit", str(cfg), "-q"]) == 0
    out = tmp_path / "out"
    for name in ("fit.ecsv", "fit.fits", "fit.json", "fit_summary.txt",
                 "fit_parameters.ecsv", "spectra.png", "transmission.png", "corner.png"):
        assert (out / name).is_file(), name
    t = QTable.read(out / "fit.ecsv")
    assert t["pl_norm"].unit == u.Unit("ph cm-2 s-1 keV-1")
    d = json.loads((out / "fit.json").read_text())
    # simulated truth 1.7 (_write_sim) within 4 sigma of the profile interval
    # (Delta C = 1, Wilks 1938; normal tails, seeded, so deterministic)
    (iv,) = d["parameters"][0]["profile"]
    best = float(t["pl_index"][0].value)
    assert d["parameters"][0]["name"] == "pl_index" and iv["lower"] < best < iv["upper"]
    half = (best - iv["lower"]) if best > 1.7 else (iv["upper"] - best)
    assert abs(best - 1.7) < 4 * half and half < 0.05, (best, iv)
    assert d["mcmc"]["nsteps"] == 300 and "profile" in d["parameters"][0]
    assert d["mcmc"]["proposal"] == "differential"   # [mcmc] proposal reached run_mcmc
    # the unit-carrying sigma was converted from eV to keV
    assert d["parameters"][3]["name"] == "ln_sigma"
    assert d["parameters"][3]["value"] == pytest.approx(0.003)


def test_fit_command_errors_name_file_and_key(tmp_path, capsys):
    _write_sim(tmp_path)
    cfg = _config(tmp_path)
    text = cfg.read_text()
    cfg.write_text(text.replace('type = "photon_power_law"', 'type = "power_law_x"'))
    assert main(["fit", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert str(cfg) in err and "model.components.pl.type" in err and len(err.splitlines()) == 1
    cfg.write_text(text.replace('pha = "t_m1.pha"', 'pha = "missing.pha"'))
    assert main(["fit", str(cfg)]) == 2
    assert "missing.pha" in capsys.readouterr().err
    cfg.write_text(text + "\n[bogus]\nx = 1\n")
    assert main(["fit", str(cfg)]) == 2
    assert "bogus" in capsys.readouterr().err


def test_bad_prior_rejected_before_any_fit(tmp_path, capsys):
    _write_sim(tmp_path)
    cfg = _config(tmp_path, mcmc="true", priors='priors = { pl_index = "cauchy" }\n')
    assert main(["fit", str(cfg), "-q"]) == 2
    err = capsys.readouterr().err
    assert "mcmc.priors.pl_index" in err and str(cfg) in err and len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()  # checked with the file, nothing fitted


def test_bad_proposal_rejected_before_any_fit(tmp_path, capsys):
    _write_sim(tmp_path)
    cfg = _config(tmp_path, mcmc="true", priors='proposal = "leapfrog"\n')
    assert main(["fit", str(cfg), "-q"]) == 2
    err = capsys.readouterr().err
    assert "mcmc.proposal" in err and "differential" in err and "'leapfrog'" in err
    assert str(cfg) in err and len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_best_fit_written_before_a_failing_stage(tmp_path, capsys):
    _write_sim(tmp_path)
    cfg = _config(tmp_path)
    # ln_center is fixed: known only once the fit's free parameters exist
    cfg.write_text(cfg.read_text().replace('profile = ["pl_index"]',
                                           'profile = ["ln_center"]'))
    assert main(["fit", str(cfg), "-q"]) == 2
    assert "errors.profile" in capsys.readouterr().err
    assert (tmp_path / "out" / "fit.json").is_file()  # the best fit survived


def test_load_config_rejects_bad_ranges(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text(textwrap.dedent("""
        [[spectrum]]
        pha = "x.pha"
        range = [1.6, "2.2"]
        [model]
        emission = ["pl"]
        [model.components.pl]
        type = "photon_power_law"
    """))
    with pytest.raises(ConfigError, match=r"c.toml: spectrum\[0\].range"):
        load_config(cfg)
    cfg.write_text("not [valid toml")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(cfg)
