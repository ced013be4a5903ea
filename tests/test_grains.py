"""Grain columns through self-shielding (edgefit.analysis.grains) against
outside references: xraydb (Chantler f2, atomic masses, optical constants),
astropy constants, and the Wilms, Allen & McCray 2000 geometric-limit formula."""
from __future__ import annotations

import math

import numpy as np
import pytest
import xraydb
from astropy import constants as const
from astropy import units as u
from astropy.table import Table

from edgefit.analysis.grains import (fit_shielded_relation, geometric_shielding,
                                     grain_columns, reference_energy, shielding_factor)

from scipy.constants import physical_constants  # noqa: E402

R_E_CM = physical_constants["classical electron radius"][0] * 100.0   # CODATA, cm
HC_KEV_CM = (const.h * const.c).to_value(u.keV * u.cm)
OLIVINE = {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}     # MgFeSiO4, 3.8 g cm^-3 (package default)


def _sigma_atom(element, e_kev):
    """Unshielded photoabsorption per atom, cm^2, from the identity
    sigma = 2 r_e lambda f2 (Henke, Gullikson & Davis 1993) with xraydb's Chantler f2."""
    lam = HC_KEV_CM / e_kev
    return 2 * R_E_CM * lam * xraydb.f2_chantler(element, e_kev * 1e3)


def _atoms_per_grain(a_um, element="Si"):
    mass = sum(n * xraydb.atomic_mass(el) for el, n in OLIVINE.items())
    return (4 * math.pi / 3 * (a_um * 1e-4) ** 3 * 3.8 * const.N_A.value / mass
            * OLIVINE[element])


def test_small_grains_give_ndust_over_atoms_per_grain():
    # Thin-grain limit: 5 nm olivine grains absorb like their atoms spread out as gas,
    # so a dust optical depth made of unshielded atoms, tau = N_Si,dust sum_j c_j sigma_j
    # (xraydb Chantler f2), must give grain column = N_dust / <atoms per grain>
    # (atoms from xraydb masses, astropy N_A) to 1 % (the check).  The optical
    # depth is the absorption one (kind="abs"): at 1.86 keV a 5 nm grain has
    # 2 pi a / lambda = 47 and its scattering adds ~5 % to the extinction.
    e = reference_energy("Si")
    n_dust = np.array([2e16, 1e17, 4e17])
    per_si = sum(c * _sigma_atom(el, e) for el, c in OLIVINE.items())
    tau = n_dust * per_si
    t = Table()
    t["name"] = ["sim-a", "sim-b", "sim-c"]
    t["dust_tau_above"] = tau * u.dimensionless_unscaled
    t["dust_tau_above_lo"] = 0.9 * tau * u.dimensionless_unscaled
    t["dust_tau_above_hi"] = 1.2 * tau * u.dimensionless_unscaled
    out = grain_columns(t, material="olivine", element="Si", sizes=0.005 * u.um,
                        count_once=False, kind="abs")
    expect = n_dust / _atoms_per_grain(0.005)
    np.testing.assert_allclose(out["grain_column"].quantity.to_value(u.cm ** -2), expect, rtol=0.01)
    np.testing.assert_allclose(out["n_Si_dust"].quantity.to_value(u.cm ** -2), n_dust, rtol=0.01)
    # the interval maps linearly (same quantiles): lo/value = 0.9, hi/value = 1.2
    np.testing.assert_allclose(out["grain_column_lo"] / out["grain_column"], 0.9, rtol=1e-12)
    np.testing.assert_allclose(out["n_Si_dust_hi"] / out["n_Si_dust"], 1.2, rtol=1e-12)
    assert out["grain_column"].unit == u.cm ** -2
    assert "grain_column" not in t.colnames      # input untouched


@pytest.mark.parametrize("radius", [0.5, 1.0, 2.0])
def test_large_grain_shielding_matches_geometric_limit(radius):
    # Wilms, Allen & McCray 2000 (ApJ 542, 914) section 2.2, geometric limit (formula in
    # ../shared/REFERENCE-VALUES.md, "from memory" there; its limits derived): the
    # shielding factor [1 - (2/t^2)(1 - (1+t)e^-t)] / (2t/3), t = 2a 4 pi beta / lambda,
    # with beta of MgFeSiO4 (3.8 g cm^-3) from xraydb.  Exact Mie (method="mie") must
    # follow it within 0.5 % (the accuracy the docstring states) for a >= 0.5 um.
    e = reference_energy("Si")
    beta = xraydb.xray_delta_beta("MgFeSiO4", 3.8, e * 1e3)[1]
    t = 2 * radius * 1e-4 * 4 * math.pi * beta / (HC_KEV_CM / e)
    wam = (1 - 2 / t ** 2 * (1 - (1 + t) * math.exp(-t))) / (2 * t / 3)
    got, tau_d = shielding_factor("olivine", "Si", radius, method="mie")
    assert tau_d == pytest.approx(t, rel=1e-6)
    assert got == pytest.approx(wam, rel=5e-3)
    assert geometric_shielding(t) == pytest.approx(wam, rel=1e-12)


def test_geometric_shielding_limits():
    # Limits of the geometric-limit formula (derived): 1 - 3t/8 as t -> 0 (thin grain,
    # no shielding), 3/(2t) as t -> infinity (only the projected area absorbs).
    assert geometric_shielding(1e-5) == pytest.approx(1 - 3e-5 / 8, rel=1e-9)
    assert geometric_shielding(2e-3) == pytest.approx(1 - 3 * 2e-3 / 8 + 4e-6 / 10, rel=1e-7)
    assert geometric_shielding(1e4) == pytest.approx(3 / 2e4, rel=1e-3)


@pytest.mark.slow
def test_shielded_relation_recovers_grain_size():
    # Simulated sample: tau = N_H A_Si f_dust s(a) with a = 1 um (strongly shielded:
    # s(1 um) ~ 0.64 of the thin limit), 8 % errors on tau, 5 % on N_H.  The radius
    # profile's 95 % set (chi^2 within 4 of the minimum) must contain 1 um and exclude
    # the thin-grain limit (5 nm); AIC/BIC differences are finite.
    from edgefit.analysis.grains import _per_size
    from edgefit.dust.materials import get_material
    from edgefit.physics import abundances

    rng = np.random.default_rng(21)
    n = 25
    nh = rng.uniform(0.5e22, 3e22, n)
    e = reference_energy("Si")
    ext, _, natoms = _per_size(get_material("olivine"), "Si", e, np.array([1.0]), True)
    coef = abundances.abundance("Si") * (1 - abundances.gas_fraction("Si")) * ext[0] / natoms[0]
    tau = coef * nh
    t = Table()
    t["nh_total"] = (nh * (1 + 0.05 * rng.standard_normal(n))) * u.cm ** -2
    t["nh_total_err"] = 0.05 * nh * u.cm ** -2
    sig = 0.08 * tau
    t["dust_tau_above"] = (tau + sig * rng.standard_normal(n)) * u.dimensionless_unscaled
    t["dust_tau_above_err"] = sig * u.dimensionless_unscaled
    res = fit_shielded_relation(t, material="olivine", element="Si")
    a = np.array(res["shielded"]["profile_radius_um"])
    chi2 = np.array(res["shielded"]["profile_chi2"])
    ok = chi2 <= chi2.min() + 4.0
    assert ok[np.argmin(np.abs(np.log(a / 1.0)))]
    assert not ok[np.argmin(np.abs(np.log(a / 0.005)))]
    assert np.isfinite(res["delta_aic"]) and np.isfinite(res["delta_bic"])
    assert res["delta_bic"] - res["delta_aic"] == pytest.approx(-math.log(n) + 2, rel=1e-12)


def test_grains_command_writes_columns_and_rejects_bad_column(tmp_path, capsys):
    # The command adds grain_column / n_Si_dust with intervals to a copy of the table
    # (values checked against tau / sigma_grain from grains.json: a definition, 1e-12);
    # an optical-depth column with a unit gives one line naming table and column, exit 2.
    import json

    from edgefit.cli import main

    t = Table()
    t["name"] = ["sim-a", "sim-b", "sim-c"]
    t["dust_tau_above"] = np.array([0.1, 0.2, 0.05]) * u.dimensionless_unscaled
    t["dust_tau_above_lo"] = np.array([0.08, 0.17, 0.0]) * u.dimensionless_unscaled
    t["dust_tau_above_hi"] = np.array([0.12, 0.24, 0.09]) * u.dimensionless_unscaled
    t["bad_tau"] = [1.0, 2.0, 3.0] * u.cm ** -2
    t["bad_tau_err"] = [0.1, 0.1, 0.1] * u.cm ** -2
    path = tmp_path / "sample.ecsv"
    t.write(path)
    assert main(["grains", str(path), "--size", "0.2", "-o", str(tmp_path / "g")]) == 0
    out = Table.read(tmp_path / "g" / "sample_grains.ecsv")
    info = json.loads((tmp_path / "g" / "grains.json").read_text())["grain_columns"]["default"]
    np.testing.assert_allclose(out["grain_column"], np.array([0.1, 0.2, 0.05])
                               / info["sigma_grain"], rtol=1e-12)
    np.testing.assert_allclose(out["n_Si_dust_hi"], np.array([0.12, 0.24, 0.09])
                               * info["atoms_per_grain"] / info["sigma_grain"], rtol=1e-12)
    assert out["grain_column"].unit == u.cm ** -2
    rc = main(["grains", str(path), "--tau", "bad_tau", "-o", str(tmp_path / "h")])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and str(path) in err and "'bad_tau'" in err
