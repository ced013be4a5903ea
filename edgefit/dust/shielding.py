"""Self-shielding of an edge by grains, as a function of grain size.

Atoms deep inside a large grain see a beam already attenuated by the atoms
in front of them, so the grain's absorption edge is shallower than that of
the same atoms spread out as gas (e.g. Wilms, Allen & McCray 2000, ApJ 542,
914, section 2.2; Draine 2003, ApJ 598, 1026).  For a grain of radius a
holding N_Z(a) atoms of the edge element Z, the self-shielding ratio is

.. math::

    R_{abs}(a) = \\frac{\\sigma_{abs}(E_+, a) - \\sigma_{abs}(E_-, a)}
                       {\\sum_j N_j(a)\\,[\\sigma_j(E_+) - \\sigma_j(E_-)]},

with E± = E_edge ± ΔE just outside the edge, N_j(a) the atoms of element j
in the grain and σ_j the unshielded atomic cross sections from the same f2
(:func:`edgefit.physics.atomic.photoabsorption`).  The denominator is the
jump of the same atoms spread out as gas: N_Z Δσ_Z, plus the small
decline of the other atoms' absorption over 2ΔE (without it R would not
tend to 1 for small grains).  R_ext uses the extinction cross section
instead.  R → 1 for small grains
(no shielding) and falls as the grain becomes optically thick at the edge.

R_abs stays positive at every size; R_ext does not.  Extinction also
carries the refractive part of the grain's interaction (the phase shift
ρ = 2x(n − 1), n = 1 − δ), and δ falls across the edge (anomalous
dispersion: for olivine at Si K from 2.22e-4 to 2.12e-4 between E− and
E+).  In anomalous diffraction (van de Hulst 1957, §11.22) Q_ext rises
with |ρ| up to its maximum near |ρ| ≈ 4.1; for olivine at Si K, radii of
about 0.4-1.4 µm have 2 ≲ |ρ| ≲ 5.5, where the fall of the refractive
extinction across the edge outweighs the rise of the absorption: the
grains' extinction is *lower* just above the edge than just below, and
R_ext is negative (down to about −0.6 near 0.8 µm), then oscillates about
zero for larger grains.  This is physics, not a sign error
(tests/test_dust_tables.py checks it against van de Hulst's formula with
xraydb's optical constants and against exact Mie).  Only R_abs measures
how many atoms the edge sees; how much of the extinction a spectrum loses
depends on the scattered light kept in the extraction region
(:func:`edgefit.dust.halo.fraction_in_region`).
"""
from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from astropy import units as u
from astropy.table import Table

from .._units import HC_KEV_ANGSTROM
from ..physics import atomic
from .materials import get_material
from .sizes import SizeGrid
from .cross_sections import grain_cross_sections

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

    from .materials import Material

__all__ = ["shielding_table"]


def shielding_table(material: str | Material = "olivine", element: str = "Si",
                    sizes: SizeGrid | ArrayLike | None = None, *, edge: str = "K",
                    offset_kev: float = 0.02, method: str = "auto",
                    rtol: float | None = None) -> Table:
    """Self-shielding ratios of one material's edge against grain radius.

    Parameters
    ----------
    material : str or Material
    element : str
        Edge element (must be in the material).
    sizes : array_like or SizeGrid, optional
        Radii in µm (default 60 radii from 0.001 to 5 µm).
    edge : str
        Edge name (``"K"``, ``"L3"``...), energy from
        :func:`edgefit.physics.atomic.edge_position` (the edge as placed by the
        atomic tables the optical constants come from).
    offset_kev : float
        ΔE: the ratios compare E_edge ± ΔE (keV).
    method, rtol :
        Passed to :func:`edgefit.dust.efficiencies.efficiencies`.

    Returns
    -------
    astropy.table.Table
        Columns ``radius`` (µm), ``atoms_per_grain``, ``x_edge`` (size
        parameter 2πa/λ at E+), ``tau_grain`` (4πβa/λ·2, optical depth of a
        grain diameter at E+), ``ratio_abs`` and ``ratio_ext``
        (dimensionless); meta holds material, element, edge energies.
    """
    material = get_material(material)
    if sizes is None:
        a = np.geomspace(0.001, 5.0, 60)
    else:
        a = sizes.a if isinstance(sizes, SizeGrid) else np.atleast_1d(np.asarray(sizes, float))
    e0 = atomic.edge_position(element, edge)  # where the tabulated f2 jumps
    energies = np.array([e0 - offset_kev, e0 + offset_kev])
    sig_abs, sig_sca, _ = grain_cross_sections(material, energies, a, method, rtol)
    sig_ext = sig_abs + sig_sca
    n_atoms = material.atoms_per_grain(element, a)
    atom_jump = sum(c / material.count(element) * np.diff(atomic.photoabsorption(el, energies))[0]
                    for el, c in material.composition.items())
    ratio_abs = (sig_abs[1] - sig_abs[0]) / (n_atoms * atom_jump)
    ratio_ext = (sig_ext[1] - sig_ext[0]) / (n_atoms * atom_jump)
    lam_um = HC_KEV_ANGSTROM / energies[1] * 1e-4
    table = Table()
    table["radius"] = a * u.um
    table["atoms_per_grain"] = n_atoms
    table["x_edge"] = 2 * np.pi * a / lam_um
    table["tau_grain"] = 8 * np.pi * material.delta_beta(energies[1])[1] * a / lam_um
    table["ratio_abs"] = ratio_abs
    table["ratio_ext"] = ratio_ext
    table.meta.update({"material": material.name, "formula": material.formula,
                       "density_g_cm3": material.density, "element": element, "edge": edge,
                       "edge_kev": e0, "e_minus_kev": float(energies[0]),
                       "e_plus_kev": float(energies[1])})
    return table
