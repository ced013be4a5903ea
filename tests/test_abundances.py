"""Abundance tables against the published values listed (with sources) in
/work/shared/REFERENCE-VALUES.md, and internal consistency of the file."""
import numpy as np
import pytest

from edgefit.errors import PhysicsDataError
from edgefit.physics import abundances as ab

# (table, element, 12 + log A) -- exact to the 0.005 dex rounding of the source
PUBLISHED = [
    # Wilms, Allen & McCray 2000, ApJ 542, 914, Table 2
    ("wilms00", "C", 8.38), ("wilms00", "O", 8.69), ("wilms00", "Mg", 7.40),
    ("wilms00", "Si", 7.27), ("wilms00", "Fe", 7.43),
    # Anders & Grevesse 1989, GCA 53, 197, photosphere
    ("angr89", "C", 8.56), ("angr89", "O", 8.93), ("angr89", "Mg", 7.58),
    ("angr89", "Si", 7.55), ("angr89", "Fe", 7.67),
    # Asplund et al. 2009, ARA&A 47, 481, Table 1
    ("asplund09", "C", 8.43), ("asplund09", "O", 8.69), ("asplund09", "Mg", 7.60),
    ("asplund09", "Si", 7.51), ("asplund09", "Fe", 7.50),
    # Lodders 2003, ApJ 591, 1220, Table 2
    ("lodders03", "C", 8.46), ("lodders03", "O", 8.76), ("lodders03", "Mg", 7.62),
    ("lodders03", "Si", 7.61), ("lodders03", "Fe", 7.54),
]


@pytest.mark.parametrize("table,el,loga", PUBLISHED)
def test_published_values(table, el, loga):
    assert 12 + np.log10(ab.abundance(el, table)) == pytest.approx(loga, abs=0.005)
    assert ab.status(el, table) == "published"


@pytest.mark.parametrize("el,beta", [("C", 0.5), ("O", 0.6), ("Mg", 0.2), ("Si", 0.1),
                                     ("Fe", 0.3)])
def test_wilms_gas_fractions(el, beta):
    # Wilms, Allen & McCray 2000, Table 2 gas-phase fractions
    assert ab.gas_fraction(el) == pytest.approx(beta, abs=1e-9)
    assert ab.status(el, "wilms00_gas") == "published"


def test_unlisted_element_fully_in_gas_and_h_is_one():
    assert ab.gas_fraction("Ne") == 1.0
    assert ab.gas_fraction("Zn") == 1.0  # not in the table -> all in gas
    for t in ab.abundance_tables():
        assert ab.abundance("H", t) == 1.0


def test_required_tables_and_elements_present():
    assert set(ab.abundance_tables()) >= {"angr89", "wilms00", "lodders03", "asplund09"}
    for t in ab.abundance_tables():
        tab = ab.abundances(t)
        for el in ("H", "He", "C", "N", "O", "Ne", "Mg", "Si", "S", "Fe"):
            assert el in tab
        # every value is either confirmed or marked from memory
        assert all(ab.status(el, t) in {"published", "definition", "from_memory"} for el in tab)


def test_he_and_metal_fractions_are_physical():
    # Common practice: He/H ~ 0.08-0.10 by number in every modern table; metals
    # decrease roughly from O to Zn.
    for t in ab.abundance_tables():
        assert 0.07 < ab.abundance("He", t) < 0.11
        assert ab.abundance("O", t) > ab.abundance("Si", t) > ab.abundance("Ni", t)


def test_unknown_table_and_element():
    with pytest.raises(PhysicsDataError, match="unknown abundance table"):
        ab.abundances("nosuch")
    with pytest.raises(PhysicsDataError, match="does not list"):
        ab.abundance("Sc", "wilms00")
    with pytest.raises(PhysicsDataError):
        ab.gas_fraction("Si", "angr89")


def test_mapping_is_read_only():
    tab = ab.abundances("wilms00")
    with pytest.raises(TypeError):
        tab["Si"] = 1.0
