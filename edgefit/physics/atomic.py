"""Atomic X-ray data for H..Zn: scattering factors, photoabsorption, edges.

Data
----
* Anomalous scattering factors f1, f2 from the Chantler tables
  (C. T. Chantler 1995, J. Phys. Chem. Ref. Data 24, 71; 2000, JPCRD 29,
  597; NIST Standard Reference Database 66, 2005 release), as distributed
  in xraydb, stored in ``cross_sections/atomic/chantler_<Symbol>.txt``
  (every tabulated point between 0.05 and 15 keV; the source grid is
  logarithmic with 1 % steps and refined to 0.0004-0.02 % steps across
  each edge, so edges are resolved as in the source).
* Edge energies of neutral atoms from xraydb's edge table (Elam, Ravel &
  Sieber 2002, Radiat. Phys. Chem. 63, 121), ``cross_sections/atomic_edges.txt``.
* Standard atomic masses from xraydb, ``cross_sections/atomic_elements.txt``.

Regenerate all three with ``python cross_sections/make_atomic_tables.py``.

One source for gas and dust
---------------------------
The photoabsorption cross section per atom is derived from the **same**
Chantler f2 that the dust optical constants use,

.. math:: \\sigma_{abs}(E) = 2 r_e \\lambda f_2(E),

(e.g. Henke, Gullikson & Davis 1993, ADNDT 54, 181, eq. 3), so gas-phase
and dust-phase absorption of an element are computed from one atomic
tabulation and their ratio carries no table-to-table offset (tabulations
differ among themselves by about 5 %).  For Si at 1.9 keV this identity
reproduces Chantler's own tabulated photoelectric cross section to 1e-4.

Interpolation
-------------
f2 (and hence sigma) is interpolated linearly in log E - log f2; f1 (which
changes sign near edges) linearly in E.  Requests outside the tabulated
range raise :class:`~edgefit.errors.PhysicsDataError`.

Units: energy keV (or any spectral Quantity), f1 and f2 electrons/atom,
sigma cm^2 per atom, masses u (g/mol).
"""
from __future__ import annotations

import functools
import re

import numpy as np

from .._paths import data_file
from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import PhysicsDataError

__all__ = [
    "ELEMENTS", "CLASSICAL_ELECTRON_RADIUS_CM", "AVOGADRO",
    "element_symbol", "atomic_number", "atomic_mass", "edge_energy", "edge_position", "edges",
    "EDGE_OFFSET_KEV", "edge_bracket",
    "scattering_factors", "photoabsorption", "table", "energy_range",
]

#: Classical electron radius r_e in cm (CODATA 2018).
CLASSICAL_ELECTRON_RADIUS_CM = 2.8179403262e-13
#: Avogadro constant in mol^-1 (SI exact).
AVOGADRO = 6.02214076e23

#: Element symbols covered by the tables, index + 1 = Z.
ELEMENTS: tuple[str, ...] = (
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P",
    "S", "Cl", "Ar", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn",
)
_BY_LOWER = {s.lower(): s for s in ELEMENTS}


def element_symbol(element) -> str:
    """Canonical symbol (``"Si"``) from a symbol in any case or an atomic number."""
    if isinstance(element, (int, np.integer)) and not isinstance(element, bool):
        z = int(element)
        if 1 <= z <= len(ELEMENTS):
            return ELEMENTS[z - 1]
        raise PhysicsDataError(f"atomic number {z} outside the tabulated elements "
                               f"H..Zn (1..{len(ELEMENTS)})")
    if isinstance(element, str):
        key = element.strip().lower()
        if key in _BY_LOWER:
            return _BY_LOWER[key]
        raise PhysicsDataError(f"unknown or untabulated element {element!r}; edgefit "
                               f"has atomic data for {', '.join(ELEMENTS)}")
    raise PhysicsDataError(f"element must be a symbol or an atomic number, not {element!r}")


def atomic_number(element) -> int:
    """Atomic number Z of ``element`` (symbol or Z)."""
    return ELEMENTS.index(element_symbol(element)) + 1


@functools.lru_cache(maxsize=1)
def _masses() -> dict[str, float]:
    path = data_file("atomic_elements.txt")
    out = {}
    with open(path, encoding="ascii") as fh:
        for line in fh:
            if line.startswith("#") or not line.strip():
                continue
            _, sym, mass = line.split()
            out[sym] = float(mass)
    missing = set(ELEMENTS) - set(out)
    if missing:
        raise PhysicsDataError(f"{path}: no mass for {sorted(missing)}; regenerate it")
    return out


def atomic_mass(element) -> float:
    """Standard atomic mass of ``element`` in u (= g/mol)."""
    return _masses()[element_symbol(element)]


@functools.lru_cache(maxsize=1)
def _edge_table() -> dict[str, dict[str, float]]:
    path = data_file("atomic_edges.txt")
    out: dict[str, dict[str, float]] = {s: {} for s in ELEMENTS}
    with open(path, encoding="ascii") as fh:
        for line in fh:
            if line.startswith("#") or not line.strip():
                continue
            _, sym, name, energy_ev = line.split()
            out[sym][name] = float(energy_ev) / 1e3
    return out


def edges(element) -> dict[str, float]:
    """All tabulated edges of ``element``: shell name -> energy in keV
    (Elam, Ravel & Sieber 2002 via xraydb; neutral atoms)."""
    return dict(_edge_table()[element_symbol(element)])


def edge_energy(element, edge: str = "K") -> float:
    """Energy (keV) of absorption ``edge`` (``"K"``, ``"L1"``, ``"L2"``,
    ``"L3"``, ``"M1"``...) of the neutral ``element``.

    Source: Elam, Ravel & Sieber 2002 (Radiat. Phys. Chem. 63, 121) via
    xraydb.  Note that the Chantler cross sections put their own edges a
    few eV from these energies (e.g. Si K: 1839.0 eV here, the Chantler f2
    rises between 1838.8 and 1846 eV).
    """
    sym = element_symbol(element)
    name = str(edge).strip().upper()
    table = _edge_table()[sym]
    if name not in table:
        raise PhysicsDataError(f"{sym} has no tabulated {edge!r} edge above 10 eV; "
                               f"it has {', '.join(table) or 'none'}")
    return table[name]


@functools.lru_cache(maxsize=None)
def edge_position(element, edge: str = "K") -> float:
    """Energy (keV) where the tabulated cross section of ``element`` rises
    across ``edge``: the steepest rise of ln sigma (sampled every
    ~0.005 %) within 3 % of :func:`edge_energy`, the window narrowed to
    half the distance to the element's neighbouring edges.

    Use this, not :func:`edge_energy`, to place "just below" and "just
    above" an edge in edgefit's own cross sections: the Chantler tables
    put some edges several eV from the Elam energies (O K: 532 against
    543.1 eV; Si K: 1838.8 against 1839.0 eV).
    """
    sym = element_symbol(element)
    e0 = edge_energy(sym, edge)
    half = 0.03 * e0
    for other in _edge_table()[sym].values():
        if other != e0:
            half = min(half, 0.5 * abs(other - e0))
    lo, hi = energy_range(sym)
    grid = np.linspace(max(e0 - half, lo), min(e0 + half, hi), 4001)
    logs = np.log(photoabsorption(sym, grid))
    i = int(np.argmax(np.diff(logs)))
    return float(0.5 * (grid[i] + grid[i + 1]))


#: The one rule for "just below" and "just above" an edge in edgefit: the
#: edge as placed by :func:`edge_position` minus / plus 20 eV.  A fixed
#: energy step (rather than a fraction of the edge energy) keeps the
#: near-edge structure of the solid, which spans a similar number of eV at
#: every edge, equally inside or outside the bracket; for Fe the bracket
#: around L3 (0.688-0.728 keV) spans L2 as well.  Every edge component's
#: ``tau_below`` / ``tau_above`` / ``tau_jump`` and the default reference
#: energy of derived optical depths use it.
EDGE_OFFSET_KEV = 0.020


def edge_bracket(edge_kev: float) -> tuple[float, float]:
    """(just below, just above) an edge at ``edge_kev``: ``edge_kev`` -/+
    :data:`EDGE_OFFSET_KEV`."""
    e = float(edge_kev)
    return e - EDGE_OFFSET_KEV, e + EDGE_OFFSET_KEV


class _Table:
    """Interpolation nodes of one element (read-only arrays)."""

    __slots__ = ("symbol", "z", "energy", "log_energy", "f1", "f2", "log_f2", "path")

    def __init__(self, symbol, z, energy, f1, f2, path):
        self.symbol, self.z, self.path = symbol, z, path
        self.energy, self.f1, self.f2 = energy, f1, f2
        self.log_energy = np.log(energy)
        self.log_f2 = np.log(f2)
        for arr in (self.energy, self.f1, self.f2, self.log_energy, self.log_f2):
            arr.setflags(write=False)


_NAME_RE = re.compile(r"^[A-Z][a-z]?$")


@functools.lru_cache(maxsize=None)
def _load(symbol: str) -> _Table:
    assert _NAME_RE.match(symbol)  # internal: symbol comes from element_symbol
    path = data_file(f"atomic/chantler_{symbol}.txt")
    try:
        data = np.loadtxt(path, comments="#", dtype=float, ndmin=2)
    except ValueError as exc:
        raise PhysicsDataError(f"{path}: cannot read the table ({exc}); regenerate it "
                               "with python cross_sections/make_atomic_tables.py") from exc
    if data.shape[1] != 3 or data.shape[0] < 2:
        raise PhysicsDataError(f"{path}: expected 3 columns (energy, f1, f2) and at least "
                               "2 rows")
    energy, f1, f2 = (np.ascontiguousarray(c) for c in data.T)
    if np.any(np.diff(energy) <= 0) or np.any(f2 <= 0) or not np.all(np.isfinite(data)):
        raise PhysicsDataError(f"{path}: energies must increase strictly and f2 be "
                               "positive and finite")
    return _Table(symbol, atomic_number(symbol), energy, f1, f2, str(path))


def table(element):
    """The interpolation nodes of ``element``: ``(energy_kev, f1, f2)``, read-only
    arrays (f1 includes Z; electrons/atom)."""
    t = _load(element_symbol(element))
    return t.energy, t.f1, t.f2


def energy_range(element) -> tuple[float, float]:
    """Lowest and highest tabulated energy (keV) for ``element``."""
    t = _load(element_symbol(element))
    return float(t.energy[0]), float(t.energy[-1])


def _energies(t: _Table, energy_kev):
    e = np.asarray(as_kev(energy_kev), dtype=float)
    if e.size and (not np.all(np.isfinite(e)) or e.min() < t.energy[0]
                   or e.max() > t.energy[-1]):
        bad = e[~np.isfinite(e) | (e < t.energy[0]) | (e > t.energy[-1])]
        raise PhysicsDataError(
            f"{t.symbol}: energy {bad.flat[0]!r} keV outside the tabulated range "
            f"{t.energy[0]:.4g}-{t.energy[-1]:.4g} keV ({t.path})")
    return e


def _out(x, scalar):
    return float(x) if scalar else x


def scattering_factors(element, energy_kev):
    """Anomalous atomic scattering factors at ``energy_kev``.

    Parameters
    ----------
    element : str or int
        Symbol or atomic number, H..Zn.
    energy_kev : float, array_like or Quantity
        Photon energy in keV (or any spectral Quantity), within
        :func:`energy_range` (about 0.05-15 keV).

    Returns
    -------
    f1, f2 : float or ndarray
        Real and imaginary parts of the forward scattering factor in
        electrons/atom.  **f1 includes Z**, f1 = Z + f' (it tends to Z at
        high energy; xraydb's ``f1_chantler`` returns f' = f1 - Z).  The
        refractive index of a material with number densities n_j is
        n = 1 - delta - i beta with (delta, beta) = (r_e lambda^2 / 2 pi)
        sum_j n_j (f1_j, f2_j) (Henke, Gullikson & Davis 1993).

    Notes
    -----
    Chantler (2000, JPCRD 29, 597) tables; f2 interpolated linearly in
    log-log, f1 linearly in energy.
    """
    t = _load(element_symbol(element))
    scalar = np.ndim(energy_kev) == 0
    e = _energies(t, energy_kev)
    f1 = np.interp(e, t.energy, t.f1)
    f2 = np.exp(np.interp(np.log(e), t.log_energy, t.log_f2))
    return _out(f1, scalar), _out(f2, scalar)


def photoabsorption(element, energy_kev):
    """Photoabsorption cross section per atom, cm^2.

    .. math:: \\sigma(E) = 2 r_e \\lambda f_2(E), \\quad \\lambda = hc/E

    with f2 from the Chantler tables (see :func:`scattering_factors`);
    Henke, Gullikson & Davis 1993 (ADNDT 54, 181) eq. 3.  All shells of the
    element contribute.  Scattering (coherent and incoherent) is not
    included.

    Parameters
    ----------
    element : str or int
        Symbol or atomic number, H..Zn.
    energy_kev : float, array_like or Quantity
        Photon energy in keV, within :func:`energy_range`.

    Returns
    -------
    float or ndarray
        sigma in cm^2 per atom.
    """
    t = _load(element_symbol(element))
    scalar = np.ndim(energy_kev) == 0
    e = _energies(t, energy_kev)
    f2 = np.exp(np.interp(np.log(e), t.log_energy, t.log_f2))
    lam_cm = HC_KEV_ANGSTROM / e * 1e-8
    return _out(2.0 * CLASSICAL_ELECTRON_RADIUS_CM * lam_cm * f2, scalar)
