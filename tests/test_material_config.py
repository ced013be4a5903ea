"""A grain material of one's own, defined in a configuration file by its
formula and density."""
from __future__ import annotations

import tomllib

import pytest
import xraydb
from astropy.constants import N_A

from edgefit.config import build_model
from edgefit.errors import ConfigError

MODEL = """
absorbers = ["dust"]
emission = ["pl"]
[components.dust]
type = "dust_edge"
options = { material = "Mg1.8Fe0.2SiO4", density = 3.35, element = "Mg" }
[components.pl]
type = "photon_power_law"
"""


def test_material_from_formula_and_density():
    model, comps, _ = build_model(tomllib.loads(MODEL))
    mat = comps["dust"].material
    assert mat.formula == "Mg1.8Fe0.2SiO4" and mat.density == pytest.approx(3.35)
    assert mat.composition == pytest.approx({"Mg": 1.8, "Fe": 0.2, "Si": 1.0, "O": 4.0})
    # Mg atoms per cm^3 = rho N_A c_Mg / M with xraydb atomic masses (1e-4)
    mass = sum(c * xraydb.atomic_mass(el) for el, c in mat.composition.items())
    assert mat.atoms_per_cm3("Mg") == pytest.approx(3.35 * N_A.value * 1.8 / mass, rel=1e-4)
    assert comps["dust"].element == "Mg"


def test_material_formula_errors_name_the_key(tmp_path):
    bad = MODEL.replace("Mg1.8Fe0.2SiO4", "Mg1.8Xq0.2SiO4")
    with pytest.raises(ConfigError, match="dust"):
        build_model(tomllib.loads(bad), tmp_path / "c.toml")
    no_density = MODEL.replace(", density = 3.35", "")
    with pytest.raises(ConfigError, match="material"):
        build_model(tomllib.loads(no_density), tmp_path / "c.toml")
