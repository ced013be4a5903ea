"""One grain population across edges (edgefit.models.multi_edge).

Outside references: the chemical formulas of the materials (olivine
MgFeSiO4, enstatite MgSiO3, metallic Fe; the stoichiometry is the formula
itself) and xraydb 4.5's atomic masses for the hand-computed mixture
sums; the single-edge dust component (whose own tests check it against
xraydb's Chantler f2 and closed-form MRN moments) for the one-edge
reduction; seeded Poisson simulations through the package's own
gaussian_response + simulate_spectrum for the recovery check (a
likelihood-ratio interval at 95 % covers the truth in 95 % of
realisations, Wilks 1938).  Tables are built with a small size grid into
the session's temporary cache.
"""
from __future__ import annotations

import pickle

import numpy as np
import pytest
import xraydb

from edgefit.dust import SizeGrid
from edgefit.errors import ConfigError, ModelError
from edgefit.models import (COMPONENTS, DustEdge, EnergyGrid, GasEdge, MultiEdgeDust,
                            PhotonPowerLaw, SmoothISM)

N_A = 6.02214076e23          # CODATA 2018 (exact since the 2019 SI)
SIZES = SizeGrid.log(0.002, 3.0, 40)


def _mass(formula_counts):
    """Formula mass (g/mol) from xraydb's atomic masses."""
    return sum(c * xraydb.atomic_mass(el) for el, c in formula_counts.items())


def test_registered_and_picklable():
    comp = MultiEdgeDust(materials="olivine", size_grid=SIZES)
    assert COMPONENTS["multi_edge_dust"] is MultiEdgeDust
    grid = EnergyGrid.linear(1.75, 1.95, 50)
    back = pickle.loads(pickle.dumps(comp))
    np.testing.assert_array_equal(back(grid), comp(grid))
    # zero column: transmission exactly 1 (all four elements tied: nothing subtracted)
    assert np.all(comp(grid, grains_col=0.0) == 1.0)


def test_precompute_never_builds_or_writes_a_table(tmp_path, monkeypatch):
    # tables are made at construction / prepare(); precompute only reads
    # them (the cache writer and the computation are made to fail)
    from edgefit.dust import cache

    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    comp = MultiEdgeDust(materials="olivine", elements=("Si", "Mg"), size_grid=SIZES)
    grid = EnergyGrid.linear(1.2, 2.2, 40)            # inside the tied regions
    before = sorted(tmp_path.iterdir())
    assert before                                     # construction stored them

    def forbidden(*args, **kw):
        raise AssertionError("a dust table was built or written during precompute")

    monkeypatch.setattr(cache, "save", forbidden)
    monkeypatch.setattr(cache, "compute_table", forbidden)
    assert np.all(np.isfinite(comp.precompute(grid)["materials"][0]["abs"]))
    # a grid past the prepared span is refused with a pointer to prepare()
    with pytest.raises(ModelError, match=r"prepare\(grid\).*dust-tables build"):
        comp.precompute(EnergyGrid.linear(1.2, 2.6, 40))
    assert sorted(tmp_path.iterdir()) == before
    monkeypatch.undo()
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    comp.prepare(EnergyGrid.linear(1.2, 2.6, 40))      # now it is available
    assert np.all(np.isfinite(comp.precompute(EnergyGrid.linear(1.2, 2.6, 40))["a3"]))


@pytest.mark.parametrize("col", [0.3, 6.5, 250.0])
@pytest.mark.parametrize("amax", [0.01, 0.25, 2.5])
def test_olivine_columns_stand_1_1_1_4(col, amax):
    # MgFeSiO4: one Mg, one Fe, one Si and four O per formula unit, whatever
    # the column, the grain size or which element the column names.
    # Tolerance 1e-12 relative (rounding only).
    for ref in ("Si", "O", "Fe"):
        comp = MultiEdgeDust(materials="olivine", column_element=ref, size_grid=SIZES,
                             col=col, amax=amax)
        d = comp.derived()
        n = {el: d[f"col_{el}_cm2"][0] for el in ("Mg", "Fe", "Si", "O")}
        base = col * 1e16 / (4.0 if ref == "O" else 1.0)
        for el, c in {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}.items():
            assert n[el] == pytest.approx(c * base, rel=1e-12, abs=0)
        # dust mass column: N_Si M / N_A with M from xraydb's masses (1e-4:
        # the package's and xraydb's atomic masses differ in the 5th digit)
        m = _mass({"Mg": 1, "Fe": 1, "Si": 1, "O": 4})
        assert d["dust_mass_column"][0] == pytest.approx(base * m / N_A, rel=1e-4, abs=0)


def test_mixture_columns_equal_hand_sums():
    # olivine MgFeSiO4 + enstatite MgSiO3 + metallic Fe with mass fractions
    # 0.5 / 0.3 / 0.2 and the Si dust column 8e16 cm^-2.  By hand: dust mass
    # D = N_Si / (N_A sum_k f_k c_Si,k / M_k); formula units n_k = D f_k N_A / M_k;
    # N_Y = sum_k n_k c_Y,k.  Masses from xraydb; tolerance 1e-4 (masses).
    ol = {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}
    py = {"Mg": 1, "Si": 1, "O": 3}
    fe = {"Fe": 1}
    f = {"olivine": 0.5, "pyroxene": 0.3, "iron": 0.2}
    comp = MultiEdgeDust(materials=["olivine", "pyroxene", "iron"], fractions=f,
                         size_grid=SIZES, col=8.0)
    assert [p.name for p in comp.params[:3]] == ["col", "frac_pyroxene", "frac_iron"]
    m = {"olivine": _mass(ol), "pyroxene": _mass(py), "iron": _mass(fe)}
    n_si = 8e16
    dmass = n_si / sum(f[k] * {"olivine": 1, "pyroxene": 1, "iron": 0}[k] / m[k] for k in f)
    n = {k: dmass * f[k] / m[k] for k in f}
    expect = {"Mg": n["olivine"] + n["pyroxene"], "Si": n["olivine"] + n["pyroxene"],
              "Fe": n["olivine"] + n["iron"], "O": 4 * n["olivine"] + 3 * n["pyroxene"]}
    d = comp.derived()
    for el, val in expect.items():
        assert d[f"col_{el}_cm2"][0] == pytest.approx(val, rel=1e-4, abs=0), el
    for k in f:
        assert d[f"fraction_{k}"][0] == pytest.approx(f[k], rel=1e-12, abs=0)
    assert d["dust_mass_column"][0] == pytest.approx(dmass / N_A, rel=1e-4, abs=0)
    # the mixture's optical depth is the sum of its materials' at the same
    # formula-unit columns (pure olivine / pyroxene / iron populations with
    # the same sizes; iron has no Si, so its column names Fe)
    grid = EnergyGrid.linear(0.66, 0.80, 80)
    tau = -np.log(comp(grid))
    parts = 0.0
    for mat, ref, col in (("olivine", "Si", n["olivine"]), ("pyroxene", "Si", n["pyroxene"]),
                          ("iron", "Fe", n["iron"])):
        one = MultiEdgeDust(materials=mat, column_element=ref,
                            size_grid=SIZES, col=col / 1e16)
        parts = parts - np.log(one(grid))
    np.testing.assert_allclose(tau, parts, rtol=2e-4, atol=0)


@pytest.mark.parametrize("element,lo,hi", [("Si", 1.76, 1.99), ("Mg", 1.25, 1.40),
                                           ("O", 0.50, 0.62)])
def test_one_edge_reduces_to_dust_edge(element, lo, hi):
    # Tied to one element only, the component is the single-edge dust
    # component: same tables, same count-once subtraction of the grains'
    # other atoms.  Transmissions agree to 1e-10 (absolute) over amax, fin.
    grid = EnergyGrid.linear(lo, hi, 400)
    for amax, fin in ((0.05, 0.0), (0.4, 0.0), (1.5, 0.3)):
        single = DustEdge(material="olivine", element=element, size_grid=SIZES, amax=amax,
                          fin=fin, col=20.0)
        tied = MultiEdgeDust(materials="olivine", elements=[element], column_element=element,
                             size_grid=SIZES, col=20.0, amax=amax, fin=fin)
        a, b = single(grid), tied(grid)
        assert np.max(np.abs(a - b)) < 1e-10
        assert a.min() < 0.99   # not a trivially transparent case


def test_bad_input_names_the_key():
    with pytest.raises(ModelError, match="elements: .*Ca.* none of the materials"):
        MultiEdgeDust(materials="olivine", elements=["Si", "Ca"])
    with pytest.raises(ModelError, match="fractions: .*sum to one"):
        MultiEdgeDust(materials=["olivine", "iron"], fractions={"olivine": 0.7, "iron": 0.4})
    with pytest.raises(ModelError, match="fractions: .*not among"):
        MultiEdgeDust(materials=["olivine", "iron"], fractions={"graphite": 0.1})
    with pytest.raises(ModelError, match="column_element"):
        MultiEdgeDust(materials="pyroxene", column_element="Fe")
    with pytest.raises(ModelError, match="materials: .*unknown material"):
        MultiEdgeDust(materials=["olivine", "kryptonite"])
    # fractions that overshoot give a non-finite transmission (the likelihood's NaN policy)
    comp = MultiEdgeDust(materials=["olivine", "iron"], size_grid=SIZES)
    assert np.all(np.isnan(comp(EnergyGrid.linear(1.8, 1.9, 5), grains_frac_iron=1.0)))


def test_edge_outside_every_spectrum_and_double_counting_refused(small_response):
    # small_response covers 1.6-2.1 keV: Si K only
    from edgefit.data import simulate_spectrum
    from edgefit.inference import Dataset
    from edgefit.inference.likelihood import JointLikelihood

    dust = MultiEdgeDust(materials="olivine", elements=["Si", "Mg"], size_grid=SIZES)
    model = SmoothISM(exclude=["Si", "Mg"]) * GasEdge(element="Si") * GasEdge(
        element="Mg") * dust * PhotonPowerLaw("pl")
    spec = simulate_spectrum(model.evaluate(small_response.grid), small_response, 1e4, 1)
    ds = Dataset(spec)
    with pytest.raises(ModelError, match="elements: the Mg edge at 1.30.* outside every"):
        JointLikelihood(model, [ds])
    dust_si = MultiEdgeDust(materials="olivine", elements=["Si"], size_grid=SIZES)
    twice = SmoothISM(exclude=[]) * GasEdge(element="Si") * dust_si * PhotonPowerLaw("pl")
    with pytest.raises(ModelError, match="elements: the smooth component 'ism' still counts Si"):
        JointLikelihood(twice, [ds])
    no_gas = SmoothISM(exclude=["Si"]) * dust_si * PhotonPowerLaw("pl")
    with pytest.raises(ModelError, match="elements: Si has no gas component"):
        JointLikelihood(no_gas, [ds])


@pytest.mark.slow
def test_four_edge_sightline_recovered_within_95_percent():
    # Seeded simulation of the invented four-edge sightline of
    # edgefit.inference._testing (two arms 5.6-10.6 A, one 15-25 A), fitted
    # with the tied model from a start away from the truth; every element's
    # gas and dust column and the upper grain size must lie inside their
    # 95 % profile-likelihood intervals (Wilks 1938; a single seed, so this
    # fails by chance with probability ~5 % per quantity -- the seed is fixed,
    # and the coverage over many seeds is what benchmarks/bench_multi_edge.py
    # measures).
    from edgefit.inference import Dataset, derived_quantities, fit_sightline, profile_intervals
    from edgefit.inference._testing import (FOUR_EDGE_ARMS, four_edge_model,
                                            four_edge_responses, four_edge_spectra,
                                            four_edge_truth)
    from edgefit.inference.likelihood import JointLikelihood

    truth, cols = four_edge_truth()
    model = four_edge_model(size_grid=SIZES)
    specs = four_edge_spectra(model, truth, four_edge_responses(), 1e5, 20261202)
    ds = [Dataset(s, ranges=arm[1], unit="Angstrom") for s, arm in zip(specs, FOUR_EDGE_ARMS)]
    params = JointLikelihood(model, ds).make_params(xnorm_free=False)
    start = dict(truth, grains_col=10.0, grains_amax=0.6, ism_nh=0.4)
    for k, v in start.items():
        params[k].value = v * (1.2 if k.startswith("gas_") else 1.0)
    res = fit_sightline(model, ds, params=params, goodness=False, warn=False)
    names = [f"gas_{el}_col" for el in ("o", "fe", "mg", "si")] + ["grains_col", "grains_amax"]
    ivs = profile_intervals(res, names, [0.95])
    for name in names:
        iv = ivs[name][0.95]
        lo = iv.lower if iv.lower is not None else res.params[name].min
        hi = iv.upper if iv.upper is not None else res.params[name].max
        assert lo <= truth[name] <= hi, (name, lo, hi, truth[name])
    # every element's dust column: the olivine column's interval times its
    # atoms per formula unit (exact for one material)
    iv = ivs["grains_col"][0.95]
    for el, c in {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}.items():
        assert c * iv.lower <= cols[el][1] <= c * iv.upper
    # derived: per-element gas, dust, total and depletion are reported and consistent
    der = derived_quantities(res, max_draws=50)
    for el in ("O", "Fe", "Mg", "Si"):
        gas = der[f"gas_{el.lower()}_col_cm2"].best
        dust = der[f"grains_col_{el}_cm2"].best
        assert der[f"total_column_{el}"].best == pytest.approx(gas + dust, rel=1e-12, abs=0)
        assert der[f"depletion_{el}"].best == pytest.approx(dust / (gas + dust), rel=1e-12,
                                                            abs=0)


def test_configuration_builds_the_tied_model_and_names_bad_keys():
    # the [model] table of a sightline configuration (structured, no
    # expressions): a mixture with fractions as a list, tied elements, the
    # smooth component leaving them out
    from edgefit.analysis.config import build_model

    def table(**grain_options):
        opts = {"materials": ["olivine", "iron"], "elements": ["Fe", "Si"],
                "fractions": [0.8, 0.2], "size_grid": None}
        opts.update(grain_options)
        opts = {k: v for k, v in opts.items() if v is not None}
        return {"absorbers": ["ism", "gas_fe", "gas_si", "grains"], "emission": ["pl"],
                "components": {
                    "ism": {"type": "smooth_ism", "options": {"exclude": ["Fe", "Si"]}},
                    "gas_fe": {"type": "gas_edge", "options": {"element": "Fe", "edge": "L3"}},
                    "gas_si": {"type": "gas_edge", "options": {"element": "Si"}},
                    "grains": {"type": "multi_edge_dust", "options": opts,
                               "params": {"col": 5.0, "amax": {"value": 0.3, "min": 0.01}}},
                    "pl": {"type": "photon_power_law"}}}

    model, comps, settings = build_model(table(), "x.toml")
    grains = comps["grains"]
    assert isinstance(grains, MultiEdgeDust)
    assert grains.elements == ("Fe", "Si")
    assert grains.values["frac_iron"] == 0.2 and grains.values["col"] == 5.0
    assert "grains_amax" in settings and "grains_frac_iron" in model.parameters()
    for options, msg in (({"elements": ["Fe", "Ca"]}, "elements: Ca is in none"),
                         ({"fractions": [0.8, 0.3]}, "fractions: one per material must sum"),
                         ({"fractions": [1.0]}, "fractions: a list needs one fraction per"),
                         ({"materials": ["olivine", "unobtainium"]}, "materials:")):
        with pytest.raises(ConfigError) as err:
            build_model(table(**options), "x.toml")
        text = str(err.value)
        assert text.startswith("x.toml: model.components.grains: ") and msg in text, text


def test_readme_tied_edge_example_builds_the_documented_model():
    # the README's tied-edge block, up to the fit (which needs spectra)
    import re
    from pathlib import Path

    from edgefit.models import tied_edge_model

    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    block = next(b for b in re.findall(r"```python\n(.*?)```", text, re.S)
                 if "MultiEdgeDust" in b)
    setup = block.split("result = ")[0]
    ns = {}
    exec(compile(setup, "README.md", "exec"), ns)
    model = ns["model"]
    names = set(model.parameters())
    for n in ("grains_col", "grains_frac_iron", "grains_amax", "gas_o_col", "gas_fe_col",
              "gas_mg_col", "gas_si_col", "ism_nh"):
        assert n in names
    assert model.component("grains").values["frac_iron"] == pytest.approx(0.1, rel=1e-12)
    # tied_edge_model builds the same product (same parameter names)
    other = tied_edge_model(PhotonPowerLaw("pl"), materials=["olivine", "iron"],
                            elements=["O", "Fe", "Mg", "Si"])
    assert set(other.parameters()) == names
