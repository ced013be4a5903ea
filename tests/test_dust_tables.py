"""Per-size dust cross-section tables, their cache, self-shielding and halos.

Outside references named beside each check: miepython 3.3 (exact Mie,
efficiencies_mx returns qext, qsca, qback, g), xraydb 4.5 Chantler f2
(sigma = 2 r_e lambda f2, Henke, Gullikson & Davis 1993), scipy quad,
and the exact Rayleigh-Gans form factor of a sphere
F(u) = 3 (sin u - u cos u) / u^3 (van de Hulst 1957, ch. 7; Bohren &
Huffman 1983, sec. 6.1).
"""
from __future__ import annotations

import os

import miepython
import numpy as np
import pytest
import xraydb
from scipy.integrate import quad

from edgefit._units import HC_KEV_ANGSTROM
from edgefit.dust import (MRN, SingleSize, SizeGrid, compute_table, edge_energy_grid,
                          fraction_in_region, get_material, list_cached_tables, load_or_build,
                          rg_gaussian_width_arcmin, shielding_table)
from edgefit.dust import cache as tables_mod
from edgefit.dust.efficiencies import efficiencies

R_E = 2.8179403262e-13  # cm, CODATA 2018


def _sigma_atomic_xraydb(element, e_kev):
    """2 r_e lambda f2 from xraydb's Chantler f2 (cm^2 per atom)."""
    lam_cm = HC_KEV_ANGSTROM / e_kev * 1e-8
    return 2 * R_E * lam_cm * xraydb.f2_chantler(element, e_kev * 1e3)


OLIVINE_FORMULA = {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}   # MgFeSiO4, 3.8 g/cm^3


def _adt_shielding(a_um, e_kev):
    """Anomalous-diffraction absorption of a sphere over its thin (volume)
    limit, 3 K(w) / w with w = 4 x beta and K(w) = 1/2 + e^-w/w + (e^-w - 1)/w^2
    (van de Hulst 1957 §11.22); beta of olivine from xraydb.xray_delta_beta."""
    e_kev = np.atleast_1d(e_kev)
    beta = np.array([xraydb.xray_delta_beta("MgFeSiO4", 3.8, ei * 1e3)[1] for ei in e_kev])
    w = 4 * (2 * np.pi * a_um * 1e4 / (HC_KEV_ANGSTROM / e_kev)) * beta
    return 3 * (0.5 + np.exp(-w) / w + np.expm1(-w) / w ** 2) / w


@pytest.fixture(scope="module")
def small_table():
    energies = np.array([1.75, 1.80, 1.82, 1.86, 1.88, 1.95])
    return compute_table("olivine", energies, SizeGrid.log(0.002, 3.0, 48), method="auto")


def test_table_entries_against_miepython():
    # sigma = pi a^2 Q with Q from miepython's exact Mie (method="mie");
    # Q_ext and Q_sca to 1e-8 relative; absorption = ext - sca.
    olivine = get_material("olivine")
    e = np.array([1.80, 1.86])
    sizes = np.array([0.01, 0.05, 0.2])
    tab = compute_table(olivine, e, SizeGrid(np.r_[0.005, sizes, 0.3]), method="mie")
    for i, ei in enumerate(e):
        m = olivine.refractive_index(ei)
        for j, a in enumerate(sizes, start=1):
            x = 2 * np.pi * a * 1e4 / (HC_KEV_ANGSTROM / ei)
            qext, qsca, _, _ = miepython.efficiencies_mx(m, x)
            area = np.pi * (a * 1e-4) ** 2
            # abs=0: cross sections are ~1e-14 cm^2, below pytest.approx's
            # default absolute tolerance of 1e-12
            assert tab.sigma_ext[i, j] == pytest.approx(qext * area, rel=1e-8, abs=0)
            assert tab.sigma_sca[i, j] == pytest.approx(qsca * area, rel=1e-8, abs=0)
            assert tab.sigma_abs[i, j] == pytest.approx((qext - qsca) * area, rel=1e-6, abs=0)


def test_small_grains_absorb_like_free_atoms(small_table):
    # 5 nm grains are optically thin: absorption per Si atom equals the
    # unshielded sum of the formula unit's atomic cross sections,
    # sum_j c_j 2 r_e lambda f2_j (xraydb Chantler f2), within 1 %.  Large
    # (1 um) grains absorb less (self-shielding): per atom, the anomalous-
    # diffraction ratio Q_abs / Q_abs,thin = 2 K(w) / (2 w / 3) = 3 K(w) / w,
    # w = 4 x beta (van de Hulst 1957 §11.22), with beta from
    # xraydb.xray_delta_beta -- 5e-3 (0.5 % agreement of beta with xraydb,
    # test_optical; ADT within 1e-3 of Mie, test_adt; observed 3e-8).
    olivine = get_material("olivine")
    e = small_table.energy_kev
    atomic = sum(c * _sigma_atomic_xraydb(el, e) for el, c in olivine.composition.items())
    small = small_table.average(SingleSize(0.005), "abs") / olivine.atoms_per_grain("Si", 0.005)
    np.testing.assert_allclose(small, atomic, rtol=0.01)
    big = small_table.average(SingleSize(1.0), "abs") / olivine.atoms_per_grain("Si", 1.0)
    np.testing.assert_allclose(big, atomic * _adt_shielding(1.0, e), rtol=5e-3)
    assert np.all(_adt_shielding(1.0, e[e > 1.85]) < 0.7)   # a real shielding effect


def test_weighted_sum_equals_direct_integration():
    # <sigma_ext> over MRN from the table's weighted sum equals a direct
    # scipy quad over a of p(a) pi a^2 Q_ext(a) with exact Mie efficiencies
    # at three energies, to 1e-3.
    olivine = get_material("olivine")
    energies = np.array([1.80, 1.85, 1.90])
    tab = compute_table(olivine, energies, SizeGrid.log(0.004, 0.3, 100), method="mie")
    got = tab.average(MRN, "ext")
    norm = quad(lambda a: a ** -3.5, 0.005, 0.25)[0]
    for e, g in zip(energies, got):
        mm1 = olivine.m_minus_1(e)
        k = 2 * np.pi * 1e4 / (HC_KEV_ANGSTROM / e)

        def integrand(a):
            q = efficiencies(1 + mm1, k * a, method="mie", m_minus_1=mm1).qext
            return a ** -3.5 * np.pi * (a * 1e-4) ** 2 * q

        ref = quad(integrand, 0.005, 0.25, limit=200, epsrel=1e-6)[0] / norm
        assert g == pytest.approx(ref, rel=1e-3, abs=0)


def test_energy_grid_resolves_edges():
    # every atomic node of Si near the K edge is in the grid, and the step is
    # at most 0.1 % (1.8 eV at 1.84 keV)
    from edgefit.physics import atomic

    grid = edge_energy_grid("olivine", 1.6, 2.3)
    nodes = atomic.table("Si")[0]
    nodes = nodes[(nodes > 1.6) & (nodes < 2.3)]
    assert np.all(np.min(np.abs(grid[:, None] - nodes[None, :]), axis=0) < 1e-9 * nodes)
    assert np.max(np.diff(np.log(grid))) <= 1.0001e-3


def test_cache_roundtrip_and_key(tmp_path, monkeypatch):
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    e = np.array([1.80, 1.85, 1.90])
    sizes = SizeGrid.log(0.002, 1.0, 12)
    t1 = load_or_build("olivine", e, sizes, progress=False)
    files = list(tmp_path.glob("dust_olivine_*.npz"))
    assert len(files) == 1 and t1.meta["path"] == str(files[0])

    def fail(*args, **kw):
        raise AssertionError("table recomputed although cached")

    monkeypatch.setattr(tables_mod, "compute_table", fail)
    t2 = load_or_build("olivine", e, sizes)
    np.testing.assert_array_equal(t1.sigma_abs, t2.sigma_abs)
    np.testing.assert_array_equal(t1.sigma_sca, t2.sigma_sca)
    monkeypatch.undo()
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    # any changed input gives another file: density, energies, sizes, method
    load_or_build(get_material("MgFeSiO4", 3.5), e, sizes)
    load_or_build("olivine", e[:2], sizes)
    load_or_build("olivine", e, SizeGrid.log(0.002, 1.0, 13))
    load_or_build("olivine", e, sizes, method="mie")
    assert len(list(tmp_path.glob("dust_*.npz"))) == 5
    assert len(list_cached_tables(tmp_path)) == 5
    # a corrupt file is rebuilt, not trusted
    files[0].write_bytes(b"not a table")
    t3 = load_or_build("olivine", e, sizes)
    np.testing.assert_allclose(t3.sigma_abs, t1.sigma_abs)
    assert os.path.getsize(files[0]) > 100


def test_reading_a_cached_table_again_reuses_it_until_its_bytes_change(tmp_path, monkeypatch):
    """A table file read twice in one process is parsed once (the second
    table shares the arrays, and its own size grid copy); the same file
    rewritten with other numbers -- size and header unchanged -- is read
    again, and its content digest is that of the new numbers."""
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    e = np.array([1.80, 1.85, 1.90])
    sizes = SizeGrid.log(0.002, 1.0, 12)
    load_or_build("olivine", e, sizes, progress=False)
    t1 = load_or_build("olivine", e, sizes)
    t2 = load_or_build("olivine", e, sizes)
    assert t2.sigma_abs is t1.sigma_abs and t2.g is t1.g
    assert t2.sizes is not t1.sizes and t2.sizes.a is t1.sizes.a
    ident = tables_mod.table_identity(t1)
    expect = tables_mod._content_digest(t1.energy_kev, t1.sizes.a, t1.sigma_abs,
                                        t1.sigma_sca, t1.g)
    assert ident["content"] == expect and tables_mod.table_identity(t2) == ident

    path = t1.meta["path"]
    with np.load(path) as f:
        arrays = {k: f[k] for k in f.files}
    arrays["sigma_abs"] = arrays["sigma_abs"] * 1.02
    np.savez(path, **arrays)   # uncompressed: same size for arrays of the same shapes
    size = os.path.getsize(path)
    t3 = load_or_build("olivine", e, sizes)
    assert t3.sigma_abs is not t1.sigma_abs
    np.testing.assert_array_equal(t3.sigma_abs, t1.sigma_abs * 1.02)
    assert tables_mod.table_identity(t3)["content"] != ident["content"]
    np.savez(path, **dict(arrays, sigma_abs=arrays["sigma_abs"] / 1.02 * 1.03))
    assert os.path.getsize(path) == size
    t4 = load_or_build("olivine", e, sizes)
    np.testing.assert_allclose(t4.sigma_abs, t1.sigma_abs * 1.03, rtol=1e-12, atol=0)


def test_shielding_table():
    # Small grains: ratio -> 1 (no shielding; 1 %); the ratio falls with size
    # for absorption; at 3 um it is far below 1 (grain optically thick at the
    # edge: 4 pi beta / lambda * 2a ~ 4).  Every ratio against anomalous
    # diffraction: the jump of sum_j c_j sigma_j (xraydb Chantler f2) x
    # 3 K(w)/w (van de Hulst 1957; beta from xraydb) across E -/+ 20 eV over
    # the unshielded jump -- 5e-3 (as above; observed 4e-4, Mie vs ADT for
    # the smallest grains).
    radii = np.array([0.001, 0.01, 0.1, 0.3, 1.0, 3.0])
    tab = shielding_table("olivine", "Si", radii)
    assert tab["radius"].unit == "um"
    assert tab["ratio_abs"][0] == pytest.approx(1.0, abs=0.01)
    assert np.all(np.diff(tab["ratio_abs"]) < 0)
    assert tab["ratio_abs"][-1] < 0.2
    e_pm = np.array([tab.meta["e_minus_kev"], tab.meta["e_plus_kev"]])
    atomic = sum(c * _sigma_atomic_xraydb(el, e_pm) for el, c in OLIVINE_FORMULA.items())
    shielded = np.array([atomic * _adt_shielding(a, e_pm) for a in radii])
    ref = (shielded[:, 1] - shielded[:, 0]) / (atomic[1] - atomic[0])
    np.testing.assert_allclose(tab["ratio_abs"], ref, rtol=5e-3)
    assert tab.meta["element"] == "Si"


def _adt_qext(delta, beta, x):
    """Anomalous-diffraction extinction efficiency of a sphere with
    m = 1 - delta + i beta (van de Hulst 1957 §11.22):
    Q = 2 - 4 e^(-rho tan b) (cos b / rho) sin(rho - b)
          - 4 e^(-rho tan b) (cos b / rho)^2 cos(rho - 2b) + 4 (cos b / rho)^2 cos 2b,
    rho = 2 x (n - 1), tan b = beta / (n - 1)."""
    rho = -2 * x * delta
    b = np.arctan(-beta / delta)
    cb, att = np.cos(b), np.exp(-rho * np.tan(b))
    return (2 - 4 * att * cb / rho * np.sin(rho - b)
            - 4 * att * (cb / rho) ** 2 * np.cos(rho - 2 * b) + 4 * (cb / rho) ** 2 * np.cos(2 * b))


def test_extinction_jump_turns_negative_for_micron_grains():
    # The extinction "jump ratio" of olivine at the Si K edge is negative for
    # radii of about 0.4-1.4 um: that is physics, not a sign error.  Across
    # the edge the refractive decrement delta falls (anomalous dispersion:
    # xraydb gives 2.216e-4 at E- and 2.124e-4 at E+), so the phase shift
    # rho = 2 x (n - 1) shrinks; for 2 < |rho| < 4, on the rising side of
    # van de Hulst's Q_ext(rho) (maximum near |rho| = 4.1), the fall of the
    # refractive (scattering) part of the extinction outweighs the rise of
    # the absorption.  Reference, independent of edgefit's optical
    # constants: Q_ext from van de Hulst 1957 §11.22 (anomalous diffraction)
    # with delta, beta of MgFeSiO4 at 3.8 g/cm^3 from xraydb.xray_delta_beta,
    # over the unshielded jump from xraydb's Chantler f2.  Tolerance 0.02 in
    # units of the unshielded jump (edgefit's delta matches xraydb to 0.1 %
    # here, test_optical; observed 4e-3).
    radii = np.array([0.05, 0.5, 0.77, 1.0, 1.6])
    tab = shielding_table("olivine", "Si", radii)
    e_pm = np.array([tab.meta["e_minus_kev"], tab.meta["e_plus_kev"]])
    atomic = sum(c * _sigma_atomic_xraydb(el, e_pm) for el, c in OLIVINE_FORMULA.items())
    db = np.array([xraydb.xray_delta_beta("MgFeSiO4", 3.8, e * 1e3)[:2] for e in e_pm])
    lam_cm = HC_KEV_ANGSTROM / e_pm * 1e-8
    ref = []
    for a in radii:
        x = 2 * np.pi * a * 1e-4 / lam_cm
        sig = np.pi * (a * 1e-4) ** 2 * _adt_qext(db[:, 0], db[:, 1], x)
        # Si atoms per grain: one per MgFeSiO4 unit, IUPAC standard atomic weights
        mass_u = 24.305 + 55.845 + 28.085 + 4 * 15.999
        n_si = 3.8 * 4 / 3 * np.pi * (a * 1e-4) ** 3 / (mass_u * 1.66053907e-24)
        ref.append((sig[1] - sig[0]) / (n_si * (atomic[1] - atomic[0])))
    ref = np.array(ref)
    np.testing.assert_allclose(tab["ratio_ext"], ref, atol=0.02, rtol=0)
    negative = (radii > 0.3) & (radii < 1.4)
    assert np.all(ref[negative] < -0.3) and np.all(tab["ratio_ext"][negative] < -0.3)
    assert np.all(tab["ratio_ext"][~negative] > 0)
    # the absorption jump stays positive at every size (only absorption
    # measures atoms; 3 K(w)/w > 0)
    assert np.all(tab["ratio_abs"] > 0)
    # exact Mie (miepython 3.3) agrees on the sign at 0.5 um: Q_ext falls
    # from E- to E+ (observed 1.659 -> 1.624)
    olivine = get_material("olivine")
    q = [miepython.efficiencies_mx(olivine.refractive_index(e), 2 * np.pi * 0.5e-4 / lc)[0]
         for e, lc in zip(e_pm, lam_cm)]
    assert q[1] < q[0]


def test_halo_width_and_rg_form_factor():
    # sigma_theta at 1 keV, 0.1 um: the commonly quoted 10.4 arcmin (Mauche &
    # Gorenstein 1986, from memory) within 5 %; scaling 1/(E a).
    w = rg_gaussian_width_arcmin(1.0, 0.1)
    assert w == pytest.approx(10.4, rel=0.05)
    assert rg_gaussian_width_arcmin(2.0, 0.2) == pytest.approx(w / 4, rel=1e-12)
    # the Gaussian fraction in a circle against the exact Rayleigh-Gans form
    # factor, F(u) = 3 (sin u - u cos u)/u^3, u = k a theta: within 0.07 (the
    # accuracy of the Gaussian approximation, common practice)
    def f2(u):
        return (3 * (np.sin(u) - u * np.cos(u)) / u ** 3) ** 2 if u > 1e-3 else 1 - u * u / 5

    total = quad(lambda u: f2(u) * u, 0, 300, limit=500)[0]
    e, a = 1.5, 0.1
    k_per_arcsec = 2 * np.pi / (HC_KEV_ANGSTROM / e * 1e-4) * a * np.pi / (180 * 3600)
    for radius in (100.0, 300.0, 600.0):
        exact = quad(lambda u: f2(u) * u, 0, k_per_arcsec * radius, limit=200)[0] / total
        got = fraction_in_region(e, a, radius, position=0.0, geometry="circle")
        assert got == pytest.approx(exact, abs=0.07)
    # dust near the source keeps more of the halo; strip >= circle of same half-width
    f_near = fraction_in_region(1.8, 0.1, 5.0, position=0.9)
    f_mid = fraction_in_region(1.8, 0.1, 5.0, position=0.5)
    assert f_near > f_mid
    assert fraction_in_region(1.8, 0.1, 5.0, geometry="strip") >= \
        fraction_in_region(1.8, 0.1, 5.0, geometry="circle")


def test_cli_shielding_and_list(tmp_path, monkeypatch, capsys):
    # the command writes an ECSV table (read back with astropy) and a figure;
    # an element missing from the material is one error line, exit 2
    from astropy.table import Table

    from edgefit.cli import main

    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))
    out, fig = tmp_path / "sh.ecsv", tmp_path / "sh.png"
    assert main(["dust-tables", "shielding", "--n", "6", "--output", str(out),
                 "--plot", str(fig)]) == 0
    tab = Table.read(out, format="ascii.ecsv")
    assert len(tab) == 6 and tab["radius"].unit == "um" and fig.stat().st_size > 1000
    assert main(["dust-tables", "list"]) == 0
    assert "no dust tables" in capsys.readouterr().out
    assert main(["dust-tables", "shielding", "--element", "C"]) == 2
    assert "contains no C" in capsys.readouterr().err
