"""Grain-size-distribution comparison (edgefit.analysis.sizes_compare,
``edgefit sizes``).

What is checked against what:

* AIC = C + 2k (Akaike 1974, IEEE Trans. Autom. Control 19, 716), BIC =
  C + k ln n (Schwarz 1978, Ann. Stat. 6, 461) and Akaike weights
  exp(-dAIC/2)/sum (Burnham & Anderson 2002, Model Selection and
  Multimodel Inference, sec. 2.9) against values computed by hand below;
  the likelihood-ratio p-value (Wilks 1938, Ann. Math. Stat. 9, 60: dC ~
  chi2 with dk dof) against the closed forms P(chi2_1 >= x) = erfc(sqrt(x/2))
  and P(chi2_2 >= x) = exp(-x/2) (e.g. Abramowitz & Stegun 1964, 26.4.4
  and 26.4.21 with nu = 2), tolerance 1e-12 relative.
* SPEC parsing and every bad SPEC: one line naming --try, exit status 2.
* The issue's check, reduced: SIMULATED sightlines (edgefit's own
  simulator, invented values) with an MRN power law of known upper size
  0.1 or 1 um at high counts, refitted under four fixed-size candidates.
"""
from __future__ import annotations

import json
import math
import sys

import numpy as np
import pytest
from astropy.table import Table

from edgefit.analysis.sizes_compare import (akaike_weights, compare_pair, information_criteria,
                                            is_nested, likelihood_ratio_test, parse_spec)
from edgefit.cli import main
from edgefit.errors import ArgumentError


# --- arithmetic ---------------------------------------------------------------
def test_information_criteria_by_hand():
    # C = 100, k = 3, n = 50: AIC = 106 (Akaike 1974), BIC = 100 + 3 ln 50 =
    # 111.7360680 (Schwarz 1978; ln 50 = 3.91202300543 by hand from ln 2 + 2 ln 5).
    aic, bic = information_criteria([100.0, 96.0], [3, 5], [50, 50])
    assert aic[0] == pytest.approx(106.0, rel=1e-14, abs=0)
    assert bic[0] == pytest.approx(100.0 + 3 * 3.91202300543, rel=1e-11, abs=0)
    assert aic[1] == pytest.approx(106.0, rel=1e-14, abs=0)
    assert bic[1] == pytest.approx(96.0 + 5 * 3.91202300543, rel=1e-11, abs=0)


def test_akaike_weights_by_hand():
    # dAIC = 0, 2, 4: weights 1, e^-1, e^-2 over their sum 1.50321472...
    # (Burnham & Anderson 2002, sec. 2.9): 0.665241, 0.244728, 0.090031.
    w = akaike_weights([10.0, 12.0, 14.0])
    np.testing.assert_allclose(w, [0.66524096, 0.24472847, 0.09003057], rtol=1e-7, atol=0)
    assert w.sum() == pytest.approx(1.0, rel=1e-14, abs=0)
    w2 = akaike_weights([5.0, np.nan, 5.0])      # failed fits are left out
    assert w2[0] == pytest.approx(0.5, rel=1e-14, abs=0) and np.isnan(w2[1])


def test_likelihood_ratio_by_hand():
    # Wilks 1938: dC ~ chi2_dk.  dk = 1: p = erfc(sqrt(dC/2)); dk = 2: p = exp(-dC/2).
    dc, dk, p = likelihood_ratio_test(110.0, 106.0, 3, 4)
    assert (dc, dk) == (4.0, 1)
    assert p == pytest.approx(math.erfc(math.sqrt(2.0)), rel=1e-12, abs=0)   # 0.0455003
    _, _, p2 = likelihood_ratio_test(110.0, 104.0, 3, 5)
    assert p2 == pytest.approx(math.exp(-3.0), rel=1e-12, abs=0)
    # a larger fit that stopped short (dC < 0) is no evidence: p = 1
    assert likelihood_ratio_test(100.0, 100.5, 3, 4)[2] == 1.0
    with pytest.raises(ArgumentError):
        likelihood_ratio_test(100.0, 99.0, 4, 4)


def test_comparison_sentences():
    fixed, free = parse_spec("mrn"), parse_spec("mrn:amax=free")
    single = parse_spec("single:size=0.3")
    assert is_nested(fixed, free) and not is_nested(free, fixed)
    assert not is_nested(single, free)
    assert not is_nested(parse_spec("mrn:amax=0.5,index=free"), free)
    s = {"statistic": 110.0, "n_free": 3, "n_bins": 50}
    l_ = {"statistic": 100.0, "n_free": 4, "n_bins": 50}
    for d in (s, l_):
        d["aic"], d["bic"] = (float(x) for x in information_criteria(d["statistic"],
                                                                     d["n_free"], 50))
    c = compare_pair(fixed, free, s, l_)
    assert c["test"] == "likelihood ratio" and c["preferred"] == free.describe()
    assert c["p_value"] == pytest.approx(math.erfc(math.sqrt(5.0)), rel=1e-12, abs=0)
    assert "prefer power_law:amax=free" in c["sentence"]
    c2 = compare_pair(single, free, s, l_)
    # dAIC = 106 - 116 = -10 -> favoured (Burnham & Anderson 2002, sec. 2.6 scale)
    assert c2["test"] == "information criteria"
    assert c2["delta_aic"] == pytest.approx(-8.0, rel=1e-14, abs=0)
    assert c2["preferred"] == free.describe() and "favour" in c2["sentence"]


# --- SPEC syntax ----------------------------------------------------------------
def test_parse_spec():
    s = parse_spec("mrn")
    assert s.family == "power_law" and s.free == frozenset()
    assert s.values == {"amin": 0.005, "amax": 0.25, "index": 3.5}   # MRN 1977 values
    f = parse_spec("mrn:amax=free")
    assert f.free == {"amax"} and f.n_free == 1 and f.describe() == "power_law:amax=free"
    g = parse_spec("single:size=0.3")
    assert g.values == {"size": 0.3} and g.label == "single_size-0.3"
    h = parse_spec(" lognormal:center=0.1, width=0.4 ")
    assert h.values["center"] == 0.1 and h.values["width"] == 0.4 and not h.free
    assert parse_spec("cutoff:acut=free,atrans=0.3").free == {"acut"}


@pytest.mark.parametrize("spec, words", [
    ("", "empty"),
    ("grains", "unknown family 'grains'"),
    ("mrn:", "nothing after"),
    ("mrn:amax", "not NAME=VALUE"),
    ("mrn:size=0.3", "has no parameter 'size'"),
    ("single:size=abc", "must be a number or 'free'"),
    ("single:size=1e400", "outside"),
    ("single:size=__import__('os')", "must be a number"),
    ("mrn:amax=9", "outside"),
    ("mrn:amax=0.3,amax=0.4", "given twice"),
    ("mrn:amin=0.2,amax=0.1", "must be below"),
])
def test_bad_spec(spec, words):
    with pytest.raises(ArgumentError, match="--try") as exc:
        parse_spec(spec)
    assert words in str(exc.value)


def test_bad_spec_cli(tmp_path, capsys):
    sys.path.insert(0, str(__import__("pathlib").Path(__file__).parent))
    from _batch_sim import write_sample

    manifest = write_sample(tmp_path, n=1, profile="[]", draws=50, hydrogen=False)
    capsys.readouterr()      # (a dust table's progress bar when first built)
    for argv, words in ((["--try", "mrn", "--try", "mrn:amax=nope"], "--try 'mrn:amax=nope'"),
                        (["--try", "mrn"], "at least two"),
                        (["--try", "mrn", "--try", "power_law"], "twice")):
        rc = main(["sizes", str(manifest), *argv, "-o", str(tmp_path / "never"), "-q"])
        err = capsys.readouterr().err.strip().splitlines()
        assert rc == 2 and len(err) == 1 and words in err[0], err
        assert not (tmp_path / "never").exists()


# --- the check, reduced ---------------------------------------------------
def _simulated_sizes_sample(folder, amaxes, exposure, seed):
    """SIMULATED: one-spectrum sightlines of an invented source behind Si gas
    (12e16 cm-2) and olivine dust (26e16 cm-2 of Si) with an MRN power law
    (q = 3.5, amin = 0.005 um) of the given upper sizes."""
    sys.path.insert(0, str(__import__("pathlib").Path(__file__).parent))
    from _batch_sim import MODEL_TOML

    from edgefit.data import gaussian_response, simulate_spectrum, write_pha, write_response
    from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw

    rng = np.random.default_rng(seed)
    resp = gaussian_response(np.linspace(1.60, 2.20, 241), np.linspace(1.65, 2.15, 121),
                             fwhm=0.02, area_cm2=30.0)
    write_response(resp, folder / "arm.rmf", folder / "arm.arf", overwrite=True,
                   simulated=True)
    text = [MODEL_TOML.format(profile="[]", draws=50)]
    for i, amax in enumerate(amaxes):
        name = f"SIM-Z{i + 1:02d}"
        flux = (GasEdge("gas_si", element="Si", col=12.0)
                * DustEdge("dust", material="olivine", element="Si", col=26.0, amin=0.005,
                           amax=amax, index=3.5, fin=0.0)
                * PhotonPowerLaw("pl", index=1.8, norm=8.0)).evaluate(resp.grid)
        spec = simulate_spectrum(flux, resp, exposure, rng,
                                 meta={"object": f"{name} (simulated)"})
        write_pha(folder / f"{name}.pha", spec, overwrite=True, respfile="arm.rmf",
                  ancrfile="arm.arf", object_name=f"{name} (simulated)")
        text.append(f'\n[[sightline]]\nname = "{name}"\npha = ["{name}.pha"]\n')
    (folder / "sample.toml").write_text("".join(text))
    return folder / "sample.toml"


@pytest.mark.slow
def test_true_size_wins_on_simulated_sample(tmp_path, capsys):
    # Six SIMULATED sightlines, upper MRN size 0.1 um (three) and 1 um (three),
    # 2e6 s x 30 cm2 (about 4e5 counts each), refitted under four fixed-size
    # candidates (equal numbers of free parameters, so AIC order = C order).
    truth = [0.1, 1.0, 0.1, 1.0, 0.1, 1.0]
    manifest = _simulated_sizes_sample(tmp_path, truth, 2e6, seed=5)
    cands = ["mrn:amax=0.1", "mrn:amax=1", "single:size=0.1", "single:size=1"]
    argv = ["sizes", str(manifest), "-o", str(tmp_path / "out"), "--workers", "0", "-q"]
    for c in cands:
        argv += ["--try", c]
    assert main(argv) == 0, capsys.readouterr().err
    out = tmp_path / "out"
    summary = json.loads((out / "sizes.json").read_text())
    table = Table.read(out / "sizes.ecsv")
    assert (out / "sizes.png").is_file()
    assert set(table["sightline"]) == {f"SIM-Z{i:02d}" for i in range(1, 7)} | {"ALL"}
    assert str(table["aic"].unit) == ""                  # dimensionless, with a unit
    true_label = {0.1: "power_law:amax=0.1", 1.0: "power_law:amax=1"}
    other_mrn = {0.1: "power_law:amax=1", 1.0: "power_law:amax=0.1"}
    wins = size_wins = 0
    for i, amax in enumerate(truth):
        ent = summary["sightlines"][f"SIM-Z{i + 1:02d}"]
        wins += ent["best_aic"] == true_label[amax]
        size_wins += (ent["candidates"][true_label[amax]]["statistic"]
                      < ent["candidates"][other_mrn[amax]]["statistic"])
        # every sightline: weights sum to 1, dC >= 0 with one 0
        w = [c["akaike_weight"] for c in ent["candidates"].values()]
        assert sum(w) == pytest.approx(1.0, rel=1e-12, abs=0)
        assert min(c["delta_stat"] for c in ent["candidates"].values()) == 0.0
    # Measured on this seed: the true MRN size beats the other MRN size in 6 of
    # 6 sightlines; the true family AND size has the lowest C in 5 of 6 (all
    # three 1 um ones; at 0.1 um single 0.1 um grains give nearly the same
    # edge -- small grains are optically thin -- and won one sightline by
    # dC < 1).  Required: a clear majority for both (5 and 4 of 6).
    assert size_wins >= 5, size_wins
    assert wins >= 4, wins
    # summed over the sample the mixed truth still rejects single 1 um grains
    total = summary["sample"]["candidates"]
    assert total["single:size=1"]["delta_stat"] > 100.0
    # the table's ALL rows are the sums of the per-sightline statistics
    for c in table["candidate"][table["sightline"] == "ALL"]:
        sel = (table["candidate"] == c) & (table["sightline"] != "ALL")
        assert float(table["statistic"][(table["candidate"] == c)
                                        & (table["sightline"] == "ALL")][0]) == \
            pytest.approx(float(np.sum(table["statistic"][sel])), rel=1e-12, abs=0)


def test_apply_spec_profiles_free_sizes_unless_asked_not_to(tmp_path, capsys):
    # [errors] profile after applying a candidate: a free size parameter is
    # added (its interval is the profile's) unless profile_sizes=False, and a
    # size parameter the candidate holds fixed is never profiled.  The
    # manifest's own entries (here gas_si_col) are kept.
    sys.path.insert(0, str(__import__("pathlib").Path(__file__).parent))
    from _batch_sim import write_sample

    from edgefit.analysis.manifest import load_manifest
    from edgefit.analysis.sizes_compare import apply_spec

    manifest = load_manifest(write_sample(tmp_path, n=1, profile='["gas_si_col"]', draws=50,
                                          hydrogen=False))
    capsys.readouterr()
    free = parse_spec("mrn:amax=free")
    [e] = apply_spec(manifest, free)
    dust = next(n for n, c in e.table["model"]["components"].items()
                if c.get("type") == "dust_edge")
    assert e.table["errors"]["profile"] == ["gas_si_col", f"{dust}_amax"]
    assert tuple(e.config.errors.profile) == ("gas_si_col", f"{dust}_amax")
    [e] = apply_spec(manifest, free, profile_sizes=False)
    assert tuple(e.config.errors.profile) == ("gas_si_col",)
    [e] = apply_spec(manifest, parse_spec("single:size=0.1"))
    assert tuple(e.config.errors.profile) == ("gas_si_col",)
