"""Size distributions and their normalisation by an element column.

References: closed-form power-law integrals (MRN: Mathis, Rumpl & Nordsieck
1977, ApJ 217, 425, n(a) ∝ a^-3.5 from 0.005 to 0.25 um), moments of the
log-normal distribution <a^k> = a0^k exp(k^2 w^2 / 2) (standard; e.g.
Aitchison & Brown 1957), scipy.integrate.quad for the Weingartner & Draine
2001 cut-off form, and xraydb atomic masses for the stoichiometry.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import xraydb
from astropy import units as u
from scipy.integrate import quad

from edgefit.dust import (MRN, CutoffPowerLaw, LogNormal, PowerLaw, SingleSize, SizeGrid,
                          TabulatedSizes, dust_mass_column, get_material, grain_column,
                          make_distribution, mean_atoms_per_grain, read_size_table)
from edgefit.errors import InputFileError, PhysicsDataError


def _powerlaw_integral(k, q, lo, hi):
    """∫_lo^hi a^(k - q) da in closed form."""
    p = k + 1 - q
    return (hi ** p - lo ** p) / p if p != 0 else math.log(hi / lo)


def test_mrn_moments_closed_form():
    # <a^3> = ∫ a^-3.5 a^3 da / ∫ a^-3.5 da = [2 a^0.5] / [-(2/5) a^-2.5]; 1e-9
    for k in (0, 1, 2, 3):
        ref = _powerlaw_integral(k, 3.5, 0.005, 0.25) / _powerlaw_integral(0, 3.5, 0.005, 0.25)
        # abs=0 throughout: moments in um^k reach ~1e-5, where pytest.approx's
        # default absolute tolerance (1e-12) would loosen the stated bars
        assert MRN.moment(k) == pytest.approx(ref, rel=1e-9, abs=0)
    assert MRN.mean_volume() == pytest.approx(
        4 * np.pi / 3 * 2 * (0.25 ** 0.5 - 0.005 ** 0.5) /
        (0.4 * (0.005 ** -2.5 - 0.25 ** -2.5)), rel=1e-9, abs=0)


def test_grain_column_and_mass_column_by_hand():
    # N_grains = N_Si / <N_Si per grain>, <N_Si> = (4π/3)<a^3> ρ N_A x_Si / M with the
    # MRN closed form and xraydb masses; dust mass = N_Si M / (N_A x_Si); 1e-6.
    olivine = get_material("olivine")
    mass = sum(xraydb.atomic_mass(el) * n for el, n in
               {"Mg": 1, "Fe": 1, "Si": 1, "O": 4}.items())
    a3 = _powerlaw_integral(3, 3.5, 0.005, 0.25) / _powerlaw_integral(0, 3.5, 0.005, 0.25)
    per_grain = 4 * np.pi / 3 * a3 * 1e-12 * 3.8 * 6.02214076e23 / mass
    n_si = 3e17
    assert mean_atoms_per_grain(MRN, olivine, "Si") == pytest.approx(per_grain, rel=1e-6)
    assert grain_column(n_si, MRN, olivine, "Si") == pytest.approx(n_si / per_grain, rel=1e-6)
    assert grain_column(n_si / u.cm ** 2, MRN, olivine, "Si") == pytest.approx(
        n_si / per_grain, rel=1e-6)
    assert dust_mass_column(n_si, olivine, "Si") == pytest.approx(
        n_si * mass / 6.02214076e23, rel=1e-6)
    # per O atom: four O per formula unit
    assert dust_mass_column(n_si, olivine, "O") == pytest.approx(
        n_si * mass / 6.02214076e23 / 4, rel=1e-6)


def test_lognormal_moments():
    # untruncated log-normal: <a^k> = a0^k exp(k^2 w^2 / 2); bounds far in the
    # tails (>= 7 w) so truncation is < 1e-9; tolerance 1e-7.
    d = LogNormal(center=0.05, width=0.3, amin=0.005, amax=2.0)
    for k in (1, 2, 3):
        assert d.moment(k) == pytest.approx(0.05 ** k * math.exp(k * k * 0.09 / 2), rel=1e-7,
                                            abs=0)


def test_cutoff_powerlaw_against_quad():
    # Weingartner & Draine 2001 eq. 4-5 form (without F): a^-q, times
    # exp(-((a - a_t)/a_c)^3) above a_t; direct scipy quad; 1e-7.
    d = CutoffPowerLaw(index=3.5, amin=0.005, atrans=0.2, acut=0.1, amax=3.0)

    def n(a):
        return a ** -3.5 * (math.exp(-((a - 0.2) / 0.1) ** 3) if a > 0.2 else 1.0)

    norm = quad(n, 0.005, 3.0, points=[0.2], limit=200, epsrel=1e-12)[0]
    a3 = quad(lambda a: a ** 3 * n(a), 0.005, 3.0, points=[0.2], limit=200, epsrel=1e-12)[0]
    assert d.moment(3) == pytest.approx(a3 / norm, rel=1e-7, abs=0)


def test_size_grid_weights_reproduce_moments():
    # The spline weights integrate a smooth tabulated g(a) over the distribution:
    # g = a^3 and a^2 against the MRN closed form (1e-5), a single size exactly.
    grid = SizeGrid.log(0.001, 5.0, 160)
    w = grid.weights(MRN)
    for k in (2, 3):
        ref = _powerlaw_integral(k, 3.5, 0.005, 0.25) / _powerlaw_integral(0, 3.5, 0.005, 0.25)
        assert w @ grid.a ** k == pytest.approx(ref, rel=1e-5, abs=0)
    ws = grid.weights(SingleSize(123 * u.nm))
    assert ws @ grid.a ** 3 == pytest.approx(0.123 ** 3, rel=1e-10, abs=0)
    assert ws @ grid.a ** 2 == pytest.approx(0.123 ** 2, rel=1e-5, abs=0)
    with pytest.raises(PhysicsDataError, match="table covers"):
        grid.weights(PowerLaw(3.5, 0.0005, 0.25))


def test_weights_smooth_in_amax():
    # Continuous first derivative of <a^2> in amax across grid nodes: the exact
    # derivative is n(amax) (amax^2 - <a^2>) / ∫n (Leibniz rule); compare
    # centred finite differences at points straddling a node, 1e-3.
    grid = SizeGrid.log(0.001, 5.0, 160)
    node = grid.a[np.searchsorted(grid.a, 0.25)]
    for amax in (node * (1 - 1e-4), node, node * (1 + 1e-4)):
        h = amax * 1e-5
        f = [grid.weights(PowerLaw(3.5, 0.005, a)) @ grid.a ** 2 for a in (amax - h, amax + h)]
        num = (f[1] - f[0]) / (2 * h)
        z = _powerlaw_integral(0, 3.5, 0.005, amax)
        m2 = _powerlaw_integral(2, 3.5, 0.005, amax) / z
        exact = amax ** -3.5 * (amax ** 2 - m2) / z
        assert num == pytest.approx(exact, rel=1e-3)


def test_tabulated_sizes_and_reader(tmp_path):
    # A table sampled from MRN is interpolated exactly (log-log linear), so its
    # moments equal the closed form (1e-7).
    a = np.geomspace(0.005, 0.25, 30)
    tab = TabulatedSizes(a, 7.0 * a ** -3.5)
    ref = _powerlaw_integral(3, 3.5, 0.005, 0.25) / _powerlaw_integral(0, 3.5, 0.005, 0.25)
    assert tab.moment(3) == pytest.approx(ref, rel=1e-7, abs=0)
    path = tmp_path / "sizes.txt"
    path.write_text("# radius um, n (simulated)\n" + "\n".join(f"{x} {7 * x ** -3.5}" for x in a))
    assert read_size_table(path).moment(3) == pytest.approx(ref, rel=1e-6, abs=0)
    bad = tmp_path / "bad.txt"
    bad.write_text("0.01 1\n0.02 x\n")
    with pytest.raises(InputFileError, match="bad.txt.*line 2"):
        read_size_table(bad)
    neg = tmp_path / "neg.txt"
    neg.write_text("0.01 1\n0.02 -1\n")
    with pytest.raises(InputFileError, match="neg.txt"):
        read_size_table(neg)


def test_families_and_quantities():
    d = make_distribution("power_law", index=3.5, amin=5 * u.nm, amax=0.25 * u.um)
    assert d.support() == pytest.approx((0.005, 0.25))
    assert make_distribution("single", size=0.1).moment(3) == pytest.approx(1e-3)
    # MRN density normalised in closed form (1e-12)
    assert MRN.pdf(0.01) == pytest.approx(0.01 ** -3.5 / _powerlaw_integral(0, 3.5, 0.005, 0.25),
                                          rel=1e-12)
    assert MRN.pdf(0.3) == 0.0
    with pytest.raises(PhysicsDataError):
        make_distribution("fractal")
    with pytest.raises(PhysicsDataError):
        PowerLaw(3.5, 0.3, 0.25)
