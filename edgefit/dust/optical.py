"""X-ray optical constants of grain materials.

The complex refractive index of a material at photon energy E is written
here as

.. math:: m = 1 - \\delta + i\\beta,
          \\qquad (\\delta, \\beta) = \\frac{r_e \\lambda^2}{2\\pi}
          \\sum_j n_j\\, (f_{1,j}, f_{2,j}),

with n_j the number density of atoms of kind j (cm^-3), r_e the classical
electron radius and f1, f2 the atomic scattering factors (f1 including Z)
from :mod:`edgefit.physics.atomic` (Henke, Gullikson & Davis 1993, ADNDT 54,
181, eqs. 1-3).  The sign convention ``+iβ`` (imaginary part positive for
absorption) is the one :func:`edgefit.dust.mie.mie_efficiencies` expects;
xraydb and Henke et al. write n = 1 − δ − iβ with the same δ and β.

Near-edge structure measured in the laboratory enters as a correction
(ΔF1, ΔF2) per formula unit, see :func:`nearedge_correction`: the measured
absorption is normalised to the atomic f2 far below and above the edge,
spliced onto it outside the measured range, and the matching change of f1
follows from the Kramers–Kronig relation (:mod:`edgefit.dust.kramers_kronig`).

Units: energy keV (or a spectral Quantity), density g cm^-3 (or a
Quantity), number densities cm^-3, μ cm^-1, thickness µm.
"""
from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
from numpy.typing import ArrayLike
from astropy import units as u

from .._units import HC_KEV_ANGSTROM, as_kev, to_value
from ..data.textcolumns import read_text_columns
from ..errors import InputFileError, PhysicsDataError
from ..physics import atomic
from .kramers_kronig import kk_delta_f1

__all__ = [
    "CLASSICAL_ELECTRON_RADIUS_CM", "parse_formula", "formula_mass", "number_densities",
    "as_density", "delta_beta", "refractive_index", "LabAbsorption", "read_lab_absorption",
    "NearEdgeCorrection", "nearedge_correction",
]

CLASSICAL_ELECTRON_RADIUS_CM = atomic.CLASSICAL_ELECTRON_RADIUS_CM

_TOKEN = re.compile(r"\s*(?:(?P<el>[A-Z][a-z]?)|(?P<num>\d+(?:\.\d*)?|\.\d+)|(?P<open>[(\[])"
                    r"|(?P<close>[)\]]))")


def parse_formula(formula: str) -> dict[str, float]:
    """Atoms per formula unit from a chemical formula.

    Accepts element symbols with optional decimal counts and nested
    parentheses or brackets with a multiplier, e.g. ``"MgFeSiO4"``,
    ``"Mg1.6Fe0.4SiO4"``, ``"(Mg0.5Fe0.5)SiO3"``, ``"Fe2(SiO4)"``.
    Spaces are ignored.  A tokenizer, not ``eval``.

    Returns
    -------
    dict
        Canonical symbol -> count (float), in order of first appearance.

    Raises
    ------
    PhysicsDataError
        Unknown element, unbalanced brackets, zero count or stray characters.
    """
    if not isinstance(formula, str) or not formula.strip():
        raise PhysicsDataError(f"chemical formula must be a non-empty string, not {formula!r}")
    text = formula.replace(" ", "")
    stack: list[dict[str, float]] = [{}]
    pos = 0
    last: dict[str, float] | str | None = None  # what a following number multiplies
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if not m or m.end() == pos:
            raise PhysicsDataError(f"formula {formula!r}: cannot read {text[pos:]!r}")
        pos = m.end()
        if m.group("el"):
            sym = atomic.element_symbol(m.group("el"))
            if m.group("el") != sym:
                raise PhysicsDataError(f"formula {formula!r}: unknown element {m.group('el')!r}")
            stack[-1][sym] = stack[-1].get(sym, 0.0) + 1.0
            last = sym
        elif m.group("num"):
            n = float(m.group("num"))
            if n <= 0:
                raise PhysicsDataError(f"formula {formula!r}: counts must be positive")
            if isinstance(last, str):
                stack[-1][last] += n - 1.0
            elif isinstance(last, dict):
                for k, v in last.items():
                    stack[-1][k] = stack[-1].get(k, 0.0) + v * (n - 1.0)
            else:
                raise PhysicsDataError(f"formula {formula!r}: a number must follow an "
                                       "element or a closing bracket")
            last = None
        elif m.group("open"):
            stack.append({})
            last = None
        else:
            if len(stack) == 1:
                raise PhysicsDataError(f"formula {formula!r}: unbalanced brackets")
            group = stack.pop()
            for k, v in group.items():
                stack[-1][k] = stack[-1].get(k, 0.0) + v
            last = group
    if len(stack) != 1 or not stack[0]:
        raise PhysicsDataError(f"formula {formula!r}: unbalanced brackets or no elements")
    return dict(stack[0])


def _composition(obj) -> dict[str, float]:
    """Atoms per formula unit from a formula string, a dict or a Material."""
    if isinstance(obj, str):
        return parse_formula(obj)
    comp = getattr(obj, "composition", obj)
    if not isinstance(comp, dict):
        raise PhysicsDataError(f"expected a formula, a composition dict or a Material, "
                               f"not {obj!r}")
    return comp


def formula_mass(composition: str | Mapping[str, float]) -> float:
    """Mass of one formula unit in u (g/mol); ``composition`` is a formula
    string or a dict symbol -> count."""
    comp = _composition(composition)
    return float(sum(atomic.atomic_mass(el) * n for el, n in comp.items()))


def as_density(density) -> float:
    """Mass density in g cm^-3 from a number (g cm^-3) or a Quantity."""
    rho = to_value(density, u.g / u.cm ** 3, "density")
    if (not isinstance(rho, (int, float, np.integer, np.floating))
            or not np.isfinite(rho) or rho <= 0):
        raise PhysicsDataError(f"density must be one positive number, not {density!r}")
    return float(rho)


def _formula_units_per_cm3(comp, density) -> float:
    """n_fu = ρ N_A / M, formula units per cm^3 (ρ in g cm^-3, M the formula
    mass in g/mol)."""
    return as_density(density) * atomic.AVOGADRO / formula_mass(comp)


def number_densities(composition: str | Mapping[str, float], density: Any) -> dict[str, float]:
    """Atoms per cm^3 of each element: n_j = ρ N_A c_j / M, with c_j atoms
    of j per formula unit and M the formula mass (g/mol)."""
    comp = _composition(composition)
    n_fu = _formula_units_per_cm3(comp, density)
    return {el: n_fu * c for el, c in comp.items()}


def _formula_f1f2(comp, energy):
    f1 = np.zeros_like(energy)
    f2 = np.zeros_like(energy)
    for el, c in comp.items():
        a, b = atomic.scattering_factors(el, energy)
        f1 = f1 + c * a
        f2 = f2 + c * b
    return f1, f2


def delta_beta(composition: str | Mapping[str, float], density: Any, energy_kev: ArrayLike,
               corrections: Sequence[NearEdgeCorrection] = ()) -> tuple[Any, Any]:
    """δ and β of a material (Henke, Gullikson & Davis 1993, eq. 2).

    .. math:: (\\delta, \\beta) = \\frac{r_e \\lambda^2}{2\\pi} n_{fu}
              \\left(\\sum_j c_j f_{1,j} + \\Delta F_1,\\;
                     \\sum_j c_j f_{2,j} + \\Delta F_2\\right)

    Parameters
    ----------
    composition : str or dict
        Chemical formula or symbol -> atoms per formula unit.
    density : float or Quantity
        Mass density, g cm^-3.
    energy_kev : float, array_like or Quantity
        Photon energy (keV).
    corrections : sequence of NearEdgeCorrection
        Laboratory near-edge corrections per formula unit (optional).

    Returns
    -------
    delta, beta : float or ndarray
        Dimensionless; the refractive index is 1 − δ + iβ.
    """
    comp = _composition(composition)
    scalar = np.ndim(energy_kev) == 0
    e = np.atleast_1d(np.asarray(as_kev(energy_kev), dtype=float))
    n_fu = _formula_units_per_cm3(comp, density)
    f1, f2 = _formula_f1f2(comp, e)
    for corr in corrections:
        d1, d2 = corr(e)
        f1, f2 = f1 + d1, f2 + d2
    lam_cm = HC_KEV_ANGSTROM / e * 1e-8
    pref = CLASSICAL_ELECTRON_RADIUS_CM * lam_cm ** 2 / (2 * np.pi) * n_fu
    delta, beta = pref * f1, pref * f2
    if scalar:
        return float(delta[0]), float(beta[0])
    return delta, beta


def refractive_index(composition: str | Mapping[str, float], density: Any, energy_kev: ArrayLike,
                     corrections: Sequence[NearEdgeCorrection] = ()) -> complex | np.ndarray:
    """Complex refractive index m = 1 − δ + iβ (imaginary part > 0 absorbs);
    see :func:`delta_beta`."""
    d, b = delta_beta(composition, density, energy_kev, corrections)
    return 1.0 - np.asarray(d) + 1j * np.asarray(b) if np.ndim(d) else complex(1 - d, b)


# ---------------------------------------------------------------------------
# laboratory near-edge data
# ---------------------------------------------------------------------------
_KINDS = ("transmission", "mu", "beta")


@dataclass(frozen=True, eq=False)
class LabAbsorption:
    """Measured absorption of a material across an edge.

    Attributes
    ----------
    energy_kev : ndarray
        Increasing energies, keV.
    value : ndarray
        The measured quantity: transmission (0-1), absorption coefficient
        μ (cm^-1, or any scale) or β (dimensionless), per ``kind``.
    kind : str
        ``"transmission"``, ``"mu"`` or ``"beta"``.
    thickness_um : float or None
        Sample thickness for transmission data (µm); optional, since the
        normalisation to atomic f2 fixes the scale anyway.
    source : str
        File name or description, kept for provenance and the cache key.
    """

    energy_kev: np.ndarray
    value: np.ndarray
    kind: str = "mu"
    thickness_um: float | None = None
    source: str = "<memory>"

    def __post_init__(self):
        e = np.asarray(as_kev(self.energy_kev), dtype=float)
        v = np.asarray(self.value, dtype=float)
        where = self.source
        if self.kind not in _KINDS:
            raise InputFileError(where, f"kind must be one of {_KINDS}, not {self.kind!r}")
        if e.ndim != 1 or e.shape != v.shape or e.size < 8:
            raise InputFileError(where, "need at least 8 (energy, value) pairs")
        if not (np.all(np.isfinite(e)) and np.all(np.isfinite(v))) or np.any(e <= 0):
            raise InputFileError(where, "energies must be positive and values finite")
        order = np.argsort(e)
        e, v = e[order], v[order]
        if np.any(np.diff(e) <= 0):
            raise InputFileError(where, "repeated energies")
        if self.kind == "transmission" and (np.any(v <= 0) or np.any(v > 1.5)):
            raise InputFileError(where, "transmission must lie in (0, 1]")
        object.__setattr__(self, "energy_kev", e)
        object.__setattr__(self, "value", v)

    def raw_beta(self) -> np.ndarray:
        """β up to an unknown scale: β = μ λ / 4π, μ t = −ln T."""
        lam_cm = HC_KEV_ANGSTROM / self.energy_kev * 1e-8
        if self.kind == "beta":
            return self.value.copy()
        mu = self.value
        if self.kind == "transmission":
            t_cm = (self.thickness_um or 1e4) * 1e-4
            mu = -np.log(self.value) / t_cm
        return mu * lam_cm / (4 * np.pi)

    def digest(self) -> str:
        h = hashlib.blake2b(digest_size=12)
        for arr in (self.energy_kev, self.value):
            h.update(np.ascontiguousarray(arr).tobytes())
        h.update(f"{self.kind}|{self.thickness_um}".encode())
        return h.hexdigest()


def read_lab_absorption(path: str | os.PathLike, *, kind: str = "mu", energy_unit: str = "eV",
                        thickness_um: float | None = None,
                        columns: tuple[int, int] = (0, 1)) -> LabAbsorption:
    """Read measured near-edge absorption from a plain-text table.

    The file has whitespace- or comma-separated columns; lines starting with
    ``#`` are comments.  Column ``columns[0]`` is the photon energy in
    ``energy_unit`` (``"eV"`` or ``"keV"``), ``columns[1]`` the measured
    quantity of ``kind`` (see :class:`LabAbsorption`).

    Raises
    ------
    InputFileError
        Naming the file, for unreadable numbers, too few rows, a missing
        column or bad values.
    """
    path = os.fspath(path)
    if energy_unit not in ("eV", "keV"):
        raise InputFileError(path, f"energy_unit must be 'eV' or 'keV', not {energy_unit!r}")
    data = read_text_columns(path, columns, f"energy ({energy_unit}) and {kind}")
    energy = data[:, 0] / (1e3 if energy_unit == "eV" else 1.0)
    return LabAbsorption(energy, data[:, 1], kind=kind, thickness_um=thickness_um,
                         source=path)


@dataclass(frozen=True, eq=False)
class NearEdgeCorrection:
    """Change (ΔF1, ΔF2) of a formula unit's scattering factors (electrons)
    implied by laboratory near-edge data; zero outside ``energy_kev``.
    Call it with energies (keV) to get ``(dF1, dF2)``."""

    energy_kev: np.ndarray
    dF1: np.ndarray
    dF2: np.ndarray
    source: str = "<memory>"
    digest: str = ""

    def __call__(self, energy_kev):
        e = np.asarray(energy_kev, dtype=float)
        return (np.interp(e, self.energy_kev, self.dF1, left=0.0, right=0.0),
                np.interp(e, self.energy_kev, self.dF2, left=0.0, right=0.0))


def nearedge_correction(composition: str | Mapping[str, float], density: Any, lab: LabAbsorption,
                        edge_kev: float, *, below: tuple[float, float] = (0.01, 0.05),
                        above: tuple[float, float] = (0.03, 0.08),
                        taper: float = 0.1) -> NearEdgeCorrection:
    """Normalise laboratory absorption to atomic f2 and derive ΔF1 by
    Kramers–Kronig.

    Steps:

    1. β_lab(E) from the data (:meth:`LabAbsorption.raw_beta`), known up to
       a scale and an offset;
    2. scale s and offset c fitted by least squares so that s β_lab + c
       matches the atomic β of the material in two windows, from
       ``below[1]`` to ``below[0]`` (fractions of E_edge) below the edge and
       from ``above[0]`` to ``above[1]`` above it (where fine structure has
       died out, common practice);
    3. Δβ = s β_lab + c − β_atomic, tapered smoothly (cosine) to zero over
       the outer ``taper`` fraction of the measured range at each end so the
       splice onto atomic f2 outside the data is continuous;
    4. ΔF2 = Δβ · 2π / (r_e λ² n_fu) per formula unit, and
       ΔF1 = −(2/π) PV ∫ ε ΔF2(ε) / (ε² − E²) dε (Henke, Gullikson & Davis
       1993), tabulated on the data energies and on a logarithmic extension
       to a factor 3 beyond them.

    Parameters
    ----------
    composition : str or dict
        Formula of the material the data were measured on.
    density : float or Quantity
        Its mass density (g cm^-3).
    lab : LabAbsorption
        The data; must extend at least into both windows.
    edge_kev : float or Quantity
        Edge energy, keV.

    Returns
    -------
    NearEdgeCorrection
    """
    comp = _composition(composition)
    e0 = float(as_kev(edge_kev))
    e = lab.energy_kev
    beta_raw = lab.raw_beta()
    _, beta_at = delta_beta(comp, density, e)
    win = ((e >= e0 * (1 - below[1])) & (e <= e0 * (1 - below[0]))) | \
          ((e >= e0 * (1 + above[0])) & (e <= e0 * (1 + above[1])))
    n_lo = np.count_nonzero(win & (e < e0))
    n_hi = np.count_nonzero(win & (e > e0))
    if n_lo < 2 or n_hi < 2:
        raise InputFileError(lab.source, (
            f"near-edge data must cover the normalisation windows "
            f"{e0 * (1 - below[1]):.4f}-{e0 * (1 - below[0]):.4f} keV and "
            f"{e0 * (1 + above[0]):.4f}-{e0 * (1 + above[1]):.4f} keV with >= 2 points "
            f"each (have {n_lo} and {n_hi}); they cover {e[0]:.4f}-{e[-1]:.4f} keV"))
    design = np.c_[beta_raw[win], np.ones(np.count_nonzero(win))]
    (scale, offset), *_ = np.linalg.lstsq(design, beta_at[win], rcond=None)
    if not scale > 0:
        raise InputFileError(lab.source, "the measured absorption does not rise across "
                             "the edge as the atomic data do; check the columns/kind")
    dbeta = scale * beta_raw + offset - beta_at
    # cosine taper to zero at both ends
    span = np.log(e[-1] / e[0])
    t = np.log(e / e[0]) / span
    w = np.ones_like(t)
    lo, hi = t < taper, t > 1 - taper
    w[lo] = 0.5 - 0.5 * np.cos(np.pi * t[lo] / taper)
    w[hi] = 0.5 - 0.5 * np.cos(np.pi * (1 - t[hi]) / taper)
    dbeta = dbeta * w
    n_fu = _formula_units_per_cm3(comp, density)
    lam_cm = HC_KEV_ANGSTROM / e * 1e-8
    dF2 = dbeta * 2 * np.pi / (CLASSICAL_ELECTRON_RADIUS_CM * lam_cm ** 2 * n_fu)
    ext_lo = np.geomspace(e[0] / 3, e[0], 60, endpoint=False)
    ext_hi = np.geomspace(e[-1], e[-1] * 3, 61)[1:]
    e_out = np.concatenate([ext_lo, e, ext_hi])
    dF1 = np.asarray(kk_delta_f1(e, dF2, e_out))  # e_out is an array, so is dF1
    dF2_out = np.concatenate([np.zeros(ext_lo.size), dF2, np.zeros(ext_hi.size)])
    return NearEdgeCorrection(e_out, dF1, dF2_out, source=lab.source,
                              digest=f"{lab.digest()}-{e0:.6f}-{below}-{above}-{taper}")
