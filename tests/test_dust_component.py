"""The dust edge component: each element counted once, derived quantities,
parameters, halo mode.

Outside references: xraydb 4.5 Chantler f2 (sigma = 2 r_e lambda f2,
Henke, Gullikson & Davis 1993) and atomic masses; closed-form MRN moments
(Mathis, Rumpl & Nordsieck 1977).  Tables are small and built once per
module; the disk cache goes to a temporary folder (EDGEFIT_CACHE_DIR).
"""
from __future__ import annotations

import pickle

import numpy as np
import pytest
import xraydb
from astropy import units as u
from scipy.integrate import quad

from edgefit._units import HC_KEV_ANGSTROM
from edgefit.dust import HaloGeometry, SizeGrid, TabulatedSizes, compute_table, edge_energy_grid
from edgefit.errors import ModelError
from edgefit.models.base import COMPONENTS, EnergyGrid
from edgefit.models.absorption import GasEdge
from edgefit.models.dust import DustEdge

R_E = 2.8179403262e-13  # cm, CODATA 2018
N_A = 6.02214076e23
OLIVINE = {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}


def _sigma(element, e_kev):
    """2 r_e lambda f2 from xraydb's Chantler f2, cm^2 per atom."""
    return 2 * R_E * HC_KEV_ANGSTROM / e_kev * 1e-8 * xraydb.f2_chantler(element, e_kev * 1e3)


@pytest.fixture(autouse=True)
def _tmp_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))


@pytest.fixture(scope="module")
def table():
    energy = edge_energy_grid("olivine", 1.70, 2.05, rel_step=3e-3)
    return compute_table("olivine", energy, SizeGrid.log(0.002, 3.0, 48), progress=False)


@pytest.fixture(scope="module")
def grid():
    return EnergyGrid.linear(1.76, 1.99, 300)


def _olivine_beta(e_kev):
    """beta of olivine (MgFeSiO4, 3.8 g/cm^3) from xraydb.xray_delta_beta."""
    return np.array([xraydb.xray_delta_beta("MgFeSiO4", 3.8, e * 1e3)[1]
                     for e in np.atleast_1d(e_kev)])


def _adt_shielding(a_um, e_kev, beta):
    """Anomalous-diffraction absorption of a sphere over its thin (volume)
    limit, 3 K(w) / w, w = 4 x beta, K(w) = 1/2 + e^-w/w + (e^-w - 1)/w^2
    (van de Hulst 1957 §11.22).  Arguments broadcast."""
    w = 4 * (2 * np.pi * np.asarray(a_um) * 1e4 / (HC_KEV_ANGSTROM / np.asarray(e_kev))) * beta
    return 3 * (0.5 + np.exp(-w) / w + np.expm1(-w) / w ** 2) / w


def _away_from_edge(e):
    return np.abs(e - 1.8425) > 0.006  # the Chantler step lies at 1.8388-1.846 keV


def test_each_element_counted_once(table, grid):
    # SmoothISM(exclude Si) * GasEdge(Si) * DustEdge(olivine, 5 nm grains,
    # absorption only): the gas and dust edges together must absorb like
    # N_Si,gas + N_Si,dust free Si atoms (hand computation with xraydb's
    # Chantler f2; small grains are unshielded), while the grains' O, Mg, Fe
    # stay counted by the smooth component only.  Tolerance: 1 % of the grains'
    # own atomic absorption N_Si,dust sum_j c_j sigma_j (below the edge the
    # grains' O, Mg, Fe absorb ~10x more than their Si, and 5 nm grains are
    # already 0.2 % self-shielded).
    from edgefit.models.absorption import GasEdge, SmoothISM

    ism = SmoothISM(exclude=["Si"], nh=1.0)
    gas = GasEdge(element="Si", col=2.0)
    dust = DustEdge(table=table, sizes="single", size=0.005, col=15.0, fin=1.0)
    model = ism * gas * dust
    e = grid.mid
    tau_model = -np.log(model(grid)) + np.log(ism(grid))
    tau_hand = (2.0 + 15.0) * 1e16 * _sigma("Si", e)
    ok = _away_from_edge(e)
    grain_atomic = 15e16 * sum(c * _sigma(el, e) for el, c in OLIVINE.items())
    assert np.all(np.abs(tau_model - tau_hand)[ok] < 0.01 * grain_atomic[ok])
    above = ok & (e > 1.85)
    np.testing.assert_allclose(tau_model[above], tau_hand[above], rtol=0.01)
    # without the subtraction the grains' other atoms are counted twice: the
    # excess is N_Si,dust * sum_Y c_Y sigma_Y (xraydb), within 1 %
    twice = DustEdge(table=table, sizes="single", size=0.005, col=15.0, fin=1.0,
                     count_once=False)
    excess = -np.log(twice(grid)) + np.log(dust(grid))
    other = 15e16 * sum(c * _sigma(el, e) for el, c in OLIVINE.items() if el != "Si")
    np.testing.assert_allclose(excess, other, rtol=0.01)


def test_small_grain_limit_and_large_grain_shielding(table, grid):
    # 5 nm grains, count_once=False, absorption only: tau = N_Si sum_j c_j
    # sigma_j (xraydb) within 1 %; 1 um grains fall below it by the
    # anomalous-diffraction factor 3 K(w)/w (van de Hulst 1957, xraydb beta)
    # -- 5e-3 (beta agrees with xraydb to 0.5 %, test_optical; ADT with Mie to
    # 1e-3, test_adt; observed 3e-6 above the edge).
    e = grid.mid
    atomic = 10e16 * sum(c * _sigma(el, e) for el, c in OLIVINE.items())
    small = DustEdge(table=table, sizes="single", size=0.005, fin=1.0, count_once=False)
    big = DustEdge(table=table, sizes="single", size=1.0, fin=1.0, count_once=False)
    ok = _away_from_edge(e)
    np.testing.assert_allclose(small.optical_depth(e)[ok], atomic[ok], rtol=0.01)
    sel = np.flatnonzero(ok)[::6]   # every 6th energy keeps the xraydb calls quick
    shield = _adt_shielding(1.0, e[sel], _olivine_beta(e[sel]))
    np.testing.assert_allclose(big.optical_depth(e[sel]), atomic[sel] * shield, rtol=5e-3)
    assert np.all(shield[e[sel] > 1.86] < 0.8)   # a real shielding effect


def test_derived_quantities(table):
    # grain column = N_Si / <N_Si per grain> with the MRN closed form <a^3>
    # and xraydb masses; dust mass column = N_Si M / N_A; 1e-5.
    dust = DustEdge(table=table, col=20.0)
    d = dust.derived()
    mass = sum(xraydb.atomic_mass(el) * n for el, n in OLIVINE.items())
    a3 = (2 * (0.25 ** 0.5 - 0.005 ** 0.5)) / (0.4 * (0.005 ** -2.5 - 0.25 ** -2.5))
    per_grain = 4 * np.pi / 3 * a3 * 1e-12 * 3.8 * N_A / mass
    assert d["col_cm2"] == (pytest.approx(2e17), "cm-2")
    assert d["grain_column"][0] == pytest.approx(2e17 / per_grain, rel=1e-5)
    assert d["dust_mass_column"][0] == pytest.approx(2e17 * mass / N_A, rel=1e-5)
    e_plus = dust.edge_energy() + 0.02
    assert d["tau_above"][0] == pytest.approx(dust.optical_depth(e_plus), rel=1e-9)
    # gas and dust name the column and the edge quantities alike, and place
    # "just below / above the edge" by one rule (edge -/+ 20 eV, definition)
    assert d["tau_below"][0] == pytest.approx(dust.optical_depth(e_plus - 0.04), rel=1e-9)
    assert d["tau_jump"][0] == pytest.approx(d["tau_above"][0] - d["tau_below"][0], rel=1e-12)
    gas = GasEdge(element="Si")
    assert {"col_cm2", "tau_below", "tau_above", "tau_jump", "edge_energy"} <= \
        set(d) & set(gas.derived())
    assert gas.derived()["tau_above"][0] == pytest.approx(
        gas.optical_depth(gas.edge_kev + 0.02), rel=1e-12)
    assert [p.name for p in gas.params][0] == [p.name for p in dust.params][0] == "col"
    # shielding ratio of the MRN distribution: jump of the atom-weighted
    # average of sum_j c_j sigma_j x 3 K(w)/w (anomalous diffraction, van de
    # Hulst 1957; xraydb f2 and beta; weights a^3 n(a), scipy quad) across
    # E_edge -/+ 20 eV over the unshielded jump -- 1 % (0.5 % in beta, 1e-3
    # ADT against Mie, amplified by taking a difference; observed 4e-5)
    def per_atom(e_kev):
        beta = _olivine_beta(e_kev)[0]
        num = quad(lambda a: a ** -0.5 * _adt_shielding(a, e_kev, beta), 0.005, 0.25,
                   epsabs=0, epsrel=1e-10)[0]
        den = quad(lambda a: a ** -0.5, 0.005, 0.25, epsabs=0, epsrel=1e-10)[0]
        return num / den * sum(c * _sigma(el, e_kev) for el, c in OLIVINE.items())

    e0 = dust.edge_energy()
    atoms = [sum(c * _sigma(el, e) for el, c in OLIVINE.items()) for e in (e0 - 0.02, e0 + 0.02)]
    ref = (per_atom(e0 + 0.02) - per_atom(e0 - 0.02)) / (atoms[1] - atoms[0])
    assert d["shielding_ratio"][0] == pytest.approx(ref, rel=0.01)
    assert ref < 0.95   # MRN grains shield measurably at the Si K edge
    small = DustEdge(table=table, sizes="single", size=0.003).derived()
    assert small["shielding_ratio"][0] == pytest.approx(1.0, abs=0.01)


def test_parameters_and_physical_limits(table, grid):
    dust = DustEdge(table=table)
    assert COMPONENTS["dust_edge"] is DustEdge
    names = list(dust.make_params())
    assert names == ["dust_col", "dust_amin", "dust_amax", "dust_index", "dust_shift",
                     "dust_fin"]
    # zero column: transmission exactly 1
    assert np.all(dust(grid, dust_col=0.0) == 1.0)
    # optical depth linear in the column (thin or thick alike)
    t1, t3 = dust.optical_depth(grid.mid, col=1.0), dust.optical_depth(grid.mid, col=3.0)
    np.testing.assert_allclose(t3, 3 * t1, rtol=1e-12)
    # quantities as parameter values
    q = DustEdge(table=table, col=2e17 / u.cm ** 2, amax=300 * u.nm)
    assert q.values["col"] == pytest.approx(20.0) and q.values["amax"] == pytest.approx(0.3)
    # scattering lost from the beam adds to tau: fin=0 minus fin=1 is >= 0
    diff = dust.optical_depth(grid.mid, fin=0.0) - dust.optical_depth(grid.mid, fin=1.0)
    assert np.all(diff > 0)
    # the shift moves the dust tau rigidly in energy
    e = np.linspace(1.80, 1.90, 50)
    np.testing.assert_allclose(dust.optical_depth(e, shift=5.0),
                               dust.optical_depth(e - 0.005), rtol=1e-12)
    # sizes outside the table are refused with a model error
    with pytest.raises(ModelError, match="table covers"):
        dust.optical_depth(1.9, amax=4.0)


def test_transmission_smooth_in_amax(table, grid):
    # the fit needs continuous derivatives: the finite-difference derivative of
    # tau in amax changes little across a size-grid node (relative 1e-2)
    dust = DustEdge(table=table)
    node = table.sizes.a[np.searchsorted(table.sizes.a, 0.25)]
    e = np.array([1.85])
    h = node * 1e-4

    def slope(a):
        return (dust.optical_depth(e, amax=a + h) - dust.optical_depth(e, amax=a - h)) / (2 * h)

    left, right = slope(node * 0.995), slope(node * 1.005)
    assert right[0] == pytest.approx(left[0], rel=1e-2)


def test_families_pickle_and_halo(table, grid):
    for kw in ({"sizes": "lognormal", "center": 0.08, "amin": 0.003, "amax": 2.0},
               {"sizes": "cutoff", "acut": 0.1, "amax": 2.0},
               {"sizes": TabulatedSizes([0.005, 0.05, 0.25], [1.0, 1e-3, 1e-6])}):
        t = DustEdge(table=table, **kw)(grid)
        assert np.all(np.isfinite(t)) and np.all(t > 0) and np.all(t < 1.2)
    dust = DustEdge(table=table, col=30.0, amax=0.4)
    again = pickle.loads(pickle.dumps(dust))
    np.testing.assert_array_equal(again(grid), dust(grid))
    # halo mode: a huge extraction keeps all scattered light (= fin 1), a tiny
    # one none (= fin 0); the fin parameter is then held fixed
    wide = DustEdge(table=table, halo=HaloGeometry(1e6, 0.5))
    narrow = DustEdge(table=table, halo=HaloGeometry(1e-4, 0.0))
    assert not wide.make_params()["dust_fin"].vary
    np.testing.assert_allclose(wide(grid), dust(grid, dust_fin=1.0, dust_col=10.0,
                                                dust_amax=0.25), rtol=1e-9)
    np.testing.assert_allclose(narrow(grid), dust(grid, dust_fin=0.0, dust_col=10.0,
                                                  dust_amax=0.25), rtol=1e-6)


def test_precompute_never_builds_or_writes_a_table(tmp_path, monkeypatch):
    # tables are made at construction / prepare(); precompute only reads the
    # prepared table (the cache writer and the computation are made to fail)
    from edgefit.dust import cache

    sizes = SizeGrid.log(0.002, 3.0, 16)
    grid = EnergyGrid.linear(1.55, 2.4, 30)
    dust = DustEdge(size_grid=sizes).prepare(grid)
    before = sorted(tmp_path.iterdir())

    def forbidden(*args, **kw):
        raise AssertionError("a dust table was built or written during precompute")

    monkeypatch.setattr(cache, "save", forbidden)
    monkeypatch.setattr(cache, "compute_table", forbidden)
    pre = dust.precompute(grid)
    assert pre["table"].covers(grid.mid[0], grid.mid[-1])
    assert np.all(np.isfinite(dust(grid)))
    assert sorted(tmp_path.iterdir()) == before
    # a grid outside every prepared (and cached) table is refused by
    # precompute with a pointer to prepare(), not built behind the scenes
    wider = EnergyGrid.linear(1.2, 2.4, 30)
    with pytest.raises(ModelError, match=r"prepare\(grid\).*dust-tables build"):
        dust.precompute(wider)
    assert sorted(tmp_path.iterdir()) == before


def test_table_is_extended_to_the_grid(tmp_path):
    # a grid reaching beyond the default Si region gets a wider table, built
    # once (when the grid is prepared, next to the default region's table
    # prepared at construction) and cached
    sizes = SizeGrid.log(0.002, 3.0, 24)
    dust = DustEdge(size_grid=sizes)
    assert len(list(tmp_path.glob("dust_olivine_*.npz"))) == 1
    t = dust(EnergyGrid.linear(1.55, 2.4, 40))
    assert np.all(np.isfinite(t))
    assert len(dust._tables) == 2
    table = max((item[0] for item in dust._tables.values()), key=lambda t: t.energy_kev.size)
    assert table.energy_kev[0] <= 1.50 and table.energy_kev[-1] >= 2.45
    assert len(list(tmp_path.glob("dust_olivine_*.npz"))) == 2
    dust(EnergyGrid.linear(1.56, 2.39, 30))          # covered: nothing new
    assert len(list(tmp_path.glob("dust_olivine_*.npz"))) == 2
