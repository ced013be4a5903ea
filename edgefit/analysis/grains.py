"""Grain columns from dust optical depths, through self-shielding.

A sightline's fitted dust optical depth at a reference energy E (by default
20 eV above the edge: the ``tau_above`` derived quantity of a dust edge,
sample-table column ``dust_tau_above`` for a component named ``dust``) is
τ = N_gr σ_gr(E), with N_gr the grain column (grains cm⁻²) and σ_gr the extinction cross section of one grain averaged over the size
distribution, from the package's own Mie / anomalous-diffraction per-size
tables (:func:`edgefit.dust.tables.grain_cross_sections`).  So

    N_gr = τ / σ_gr(E),      N_Z,dust = N_gr ⟨N_Z(a)⟩,

with ⟨N_Z(a)⟩ = (4π/3)⟨a³⟩ρ N_A c_Z / M the mean number of atoms of the
edge element per grain.  For a fixed material and size distribution both
maps are linear, so the quantiles of τ (a 68 % interval or posterior
samples) map to the same quantiles of N_gr and N_Z,dust exactly.

With ``count_once=True`` (the dust-edge component's default), σ_gr has the
grain's other atoms' unshielded absorption subtracted, as the component
does when a smooth interstellar absorber counts those atoms already
(:mod:`edgefit.models.dust`); use the same setting as the fits that made
the τ values.

Self-shielding enters through σ_gr: small grains absorb like their atoms
spread out as gas (σ_gr → ⟨N⟩ Σ_j c_j σ_j / c_Z; the "thin-grain limit",
τ ∝ N), large grains absorb less per atom.  :func:`shielding_factor` is the
ratio of a grain's absorption to that of its atoms unshielded; in the
geometric limit it tends to Wilms, Allen & McCray 2000 (ApJ 542, 914,
section 2.2) [1 − (2/τ_d²)(1 − (1 + τ_d) e^(−τ_d))] / (2τ_d/3), τ_d the
optical depth of the grain material along a diameter (the absorption
efficiency of anomalous diffraction, van de Hulst 1957).

:func:`fit_shielded_relation` fits τ against N_H with the shielded relation
τ = N_H A_Z f_dust σ_gr(E; a)/N_Z(a) (abundance A_Z per H, dust fraction
f_dust fixed, one grain radius a free, scanned on a grid so the answer does
not depend on a start) beside a straight line τ = α + β N_H, and reports
both χ², AIC, BIC and their differences.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
from astropy import units as u

from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import ArgumentError, InputFileError, PhysicsDataError
from .regression import SampleColumnError, read_quantity

if TYPE_CHECKING:
    from typing import TypeAlias

    from astropy.table import Table
    from numpy.typing import ArrayLike

    from ..dust.materials import Material
    from ..dust.sizes import SizeDistribution, SizeGrid

    #: A size distribution, a family name, (family name, parameters) or one
    #: radius (um or Quantity).
    SizesLike: TypeAlias = ("SizeDistribution | str | tuple[str, dict[str, Any]] | float "
                            "| u.Quantity")

__all__ = ["grain_cross_section", "shielding_factor", "geometric_shielding",
           "grain_columns", "fit_shielded_relation", "reference_energy", "grains_sample"]


def reference_energy(element) -> float:
    """Default reference energy (keV): just above the element's edge as
    placed by the atomic tables (:func:`edgefit.physics.atomic.edge_bracket`,
    the rule of the dust edge's ``tau_above``)."""
    from ..dust.tables import region_for
    from ..physics import atomic

    edge = region_for(element)[0]
    return atomic.edge_bracket(atomic.edge_position(element, edge))[1]


def _distribution(sizes):
    from ..dust.sizes import SingleSize, SizeDistribution, as_um, make_distribution

    if isinstance(sizes, SizeDistribution):
        return sizes
    if isinstance(sizes, str):
        return make_distribution(sizes)
    if isinstance(sizes, tuple) and len(sizes) == 2 and isinstance(sizes[0], str):
        return make_distribution(sizes[0], **sizes[1])
    return SingleSize(size=float(as_um(sizes)))


def _per_size(material, element, energy_kev, radii, count_once, kind="ext"):
    """(σ per grain -- extinction, or absorption for ``kind="abs"`` -- with the
    count-once subtraction, σ_abs per grain, atoms of the element per grain)
    on ``radii`` at one energy."""
    from ..dust.tables import grain_cross_sections
    from ..physics import atomic

    sig_abs, sig_sca, _ = grain_cross_sections(material, np.array([energy_kev]), radii)
    n_atoms = material.atoms_per_grain(element, radii)
    if kind not in ("ext", "abs"):
        raise ArgumentError(f"kind must be 'ext' or 'abs', not {kind!r}")
    ext = sig_abs[0] + sig_sca[0] if kind == "ext" else sig_abs[0].copy()
    if count_once:
        cz = material.count(element)
        other = sum(c / cz * float(atomic.photoabsorption(el, energy_kev))
                    for el, c in material.composition.items() if el != element)
        ext = ext - n_atoms * other
    return ext, sig_abs[0], n_atoms


def grain_cross_section(material: str | Material = "olivine", element: str = "Si",
                        sizes: SizesLike = 0.1, energy: float | u.Quantity | None = None, *,
                        count_once: bool = True, kind: str = "ext",
                        size_grid: SizeGrid | None = None) -> dict:
    """Optical depth per grain (cm²) at ``energy`` for one material and size
    distribution.

    Parameters
    ----------
    material : str or Material
    element : str
        The edge element whose dust column is wanted.
    sizes : SizeDistribution, family name, (family, {params}) or a radius
        A radius (µm or length Quantity) means a single size.
    energy : float or Quantity, optional
        Reference energy (default :func:`reference_energy`).
    count_once : bool
        Subtract the grain's other atoms' unshielded absorption (module
        docstring).
    kind : {"ext", "abs"}
        Extinction (all scattered light lost, ``fin = 0`` in the dust edge:
        narrow grating extractions) or absorption only (``fin = 1``).  Note
        that at X-ray energies even 5 nm grains are not Rayleigh scatterers
        (2πa/λ ≈ 47 at the Si K edge): their scattering adds about 5 % to
        the extinction there.
    size_grid : SizeGrid, optional
        Radii for averaging over a distribution (default 160 radii over
        0.001-5 µm).

    Returns
    -------
    dict
        ``sigma_grain`` (cm², extinction per grain as τ per grain column),
        ``atoms_per_grain`` (mean, of ``element``), ``sigma_per_atom``
        (cm² per dust atom of ``element``), ``energy_kev``, ``material``,
        ``element``, ``sizes`` (repr), ``count_once``.
    """
    from ..dust.materials import get_material
    from ..dust.sizes import SingleSize, SizeGrid
    from ..physics import atomic

    material = get_material(material)
    element = atomic.element_symbol(element)
    material.count(element)
    e = reference_energy(element) if energy is None else float(as_kev(energy))
    dist = _distribution(sizes)
    if isinstance(dist, SingleSize):
        a = np.array([dist.values["size"]])
        ext, _, n = _per_size(material, element, e, a, count_once, kind)
        sig, atoms = float(ext[0]), float(n[0])
    else:
        grid = size_grid if size_grid is not None else SizeGrid.log(0.001, 5.0, 160)
        ext, _, n = _per_size(material, element, e, grid.a, count_once, kind)
        w = grid.weights(dist)
        sig = float(ext @ w)
        atoms = float(4.0 * math.pi / 3.0 * dist.moment(3) * 1e-12
                      * material.atoms_per_cm3(element))
    return {"sigma_grain": sig, "atoms_per_grain": atoms, "sigma_per_atom": sig / atoms,
            "energy_kev": e, "material": material.name, "element": element,
            "sizes": repr(dist), "count_once": bool(count_once), "kind": kind}


def geometric_shielding(tau_diameter):
    """Wilms, Allen & McCray 2000 (ApJ 542, 914, section 2.2) geometric-limit
    shielding factor: the grain's absorption over that of its atoms
    unshielded, [1 − (2/τ²)(1 − (1+τ)e^(−τ))]/(2τ/3), τ the optical depth
    along a diameter.  → 1 for τ → 0, → 3/(2τ) for τ → ∞.  A series is used
    for τ < 1e-3, where the closed form loses digits."""
    t = np.asarray(tau_diameter, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        closed = (1.0 - 2.0 / t ** 2 * (1.0 - (1.0 + t) * np.exp(-t))) / (2.0 * t / 3.0)
    series = 1.0 - 3.0 * t / 8.0 + t ** 2 / 10.0   # expansion of the closed form
    out = np.where(t < 1e-3, series, closed)
    return float(out) if out.ndim == 0 else out


def shielding_factor(material="olivine", element="Si", radius=1.0, energy=None, *,
                     method="auto"):
    """Absorption of one grain of ``radius`` (µm) at ``energy`` over the
    absorption of its atoms unshielded, σ_abs(a) / (V 4πβ/λ), from the
    package's Mie/ADT efficiencies; also returns the diameter optical depth
    τ_d = 2a·4πβ/λ.  In the geometric limit (2πa/λ ≫ 1) this follows
    :func:`geometric_shielding`(τ_d) to the accuracy of anomalous
    diffraction against exact Mie theory, which the test suite finds within
    0.5 % for a ≥ 0.5 µm at the Si K edge (exact Mie and anomalous
    diffraction differ by 0.04 % there).  ``method`` is passed to
    :func:`edgefit.dust.efficiencies.efficiencies` ("auto", "mie", "adt")."""
    from ..dust.materials import get_material
    from ..dust.tables import grain_cross_sections

    material = get_material(material)
    e = reference_energy(element) if energy is None else float(as_kev(energy))
    a = np.atleast_1d(np.asarray(radius, float))
    sig_abs = grain_cross_sections(material, np.array([e]), a, method=method)[0][0]
    lam_cm = HC_KEV_ANGSTROM / e * 1e-8
    alpha = 4.0 * math.pi * float(material.delta_beta(e)[1]) / lam_cm   # cm^-1
    vol = 4.0 * math.pi / 3.0 * (a * 1e-4) ** 3
    factor = sig_abs / (vol * alpha)
    tau_d = 2.0 * a * 1e-4 * alpha
    if np.ndim(radius) == 0:
        return float(factor[0]), float(tau_d[0])
    return factor, tau_d


def grain_columns(table: Table, tau: str = "dust_tau_above", *,
                  material: str | Material = "olivine", element: str = "Si",
                  sizes: SizesLike = 0.1, energy: float | u.Quantity | None = None,
                  count_once: bool = True, kind: str = "ext", prefix: str = "",
                  source: str | None = None) -> Table:
    """Add grain and dust-element columns (with 68 % intervals) to a sample
    table, from its dust optical depth column ``tau`` (``tau``, ``tau_lo``,
    ``tau_hi`` or ``tau_err``; ``tau_upper`` rows give upper limits).

    New columns ``{prefix}grain_column``, ``{prefix}n_{element}_dust`` with
    ``_lo``, ``_hi`` (cm⁻²) and ``_upper`` flags; the table's meta
    ``grain_columns`` records material, sizes, energy and σ per grain.
    Returns a new table (the input is not modified).
    """
    source = source or table.meta.get("source", "<table>")
    q = read_quantity(table, tau, source)
    if not q.unit.is_equivalent(u.dimensionless_unscaled):
        raise SampleColumnError(source, f"column {tau!r} has unit {q.unit}; an optical depth "
                                        "is dimensionless")
    scale = q.unit.to(u.dimensionless_unscaled)
    try:
        xs = grain_cross_section(material, element, sizes, energy, count_once=count_once,
                                 kind=kind)
    except PhysicsDataError as exc:
        raise InputFileError(source, f"grain columns from {tau!r}: {exc}") from None
    if xs["sigma_grain"] <= 0:
        raise InputFileError(source, "the chosen grains have no positive optical depth at "
                                     f"{xs['energy_kev']:.4g} keV (count_once subtraction "
                                     "larger than the grain's extinction)")
    out = table.copy(copy_data=True)
    sym = xs["element"]
    value = q.value * scale
    lo, hi = value - q.err_lo * scale, value + q.err_hi * scale
    for name, per in ((f"{prefix}grain_column", 1.0 / xs["sigma_grain"]),
                      (f"{prefix}n_{sym}_dust", xs["atoms_per_grain"] / xs["sigma_grain"])):
        out[name] = value * per * u.cm ** -2
        out[f"{name}_lo"] = np.where(q.upper, np.nan, lo * per) * u.cm ** -2
        out[f"{name}_hi"] = np.where(q.upper, value, hi) * per * u.cm ** -2
        out[f"{name}_upper"] = q.upper.copy()
    meta = dict(xs)
    meta["from_column"] = tau
    out.meta.setdefault("grain_columns", {})[prefix or "default"] = meta
    return out


def _censored_chi2(model, y, sig, upper):
    """−2 ln L of Gaussian points (constant terms dropped) with upper limits as
    −2 ln Φ((U − model)/σ)."""
    from scipy.special import log_ndtr

    det = ~upper
    chi2 = float(np.sum(((y[det] - model[det]) / sig[det]) ** 2))
    if upper.any():
        chi2 += float(-2.0 * np.sum(log_ndtr((y[upper] - model[upper]) / sig[upper])))
    return chi2


def fit_shielded_relation(table: Table, tau: str = "dust_tau_above", nh: str = "nh_total", *,
                          material: str | Material = "olivine", element: str = "Si",
                          abundance: float | None = None, dust_fraction: float | None = None,
                          energy: float | u.Quantity | None = None, count_once: bool = True,
                          kind: str = "ext", radii: ArrayLike | None = None,
                          source: str | None = None) -> dict:
    """Fit τ against N_H with the self-shielded relation and a straight line.

    Shielded relation: τ_i = N_H,i A_Z f_dust s(a), s(a) = σ_gr(E; a)/N_Z(a)
    the optical depth per dust atom of a single grain radius a (free),
    A_Z the element's abundance per H (default: the package's default
    abundance table) and f_dust the fraction of it in grains (default:
    1 − the Wilms, Allen & McCray 2000 gas fraction), both fixed.  Straight
    line: τ = α + β N_H.  Both use one Gaussian per point with the
    effective variance σ_τ² + (dτ/dN_H)² σ_N² (symmetrised errors, as in
    :mod:`edgefit.analysis.regression`); upper limits in τ enter as
    censored points; rows with an upper limit in N_H are left out.  The
    radius is profiled on a grid (``radii``, default 200 radii over
    0.001-5 µm) and every local minimum refined, so a multi-modal s(a)
    (scattering raises the extinction of 0.1-1 µm grains, shielding lowers
    it for larger ones) is handled and the answer does not depend on a
    start; the 68 % set is where χ² is within 1 of its minimum (possibly
    several ranges, ends found by root finding; ``n_minima`` counts the
    local minima of the scan).

    Returns a dict with ``shielded`` (radius, its 68 % range(s), χ², k = 1,
    AIC, BIC, the χ² profile), ``line`` (α, β, χ², k = 2, AIC, BIC),
    ``delta_aic`` and ``delta_bic`` (shielded − line; negative favours the
    shielded relation), ``n_points``, and the fixed inputs.
    """
    from scipy.optimize import brentq, minimize, minimize_scalar

    from ..dust.materials import get_material
    from ..physics import abundances, atomic

    source = source or table.meta.get("source", "<table>")
    yq = read_quantity(table, tau, source)
    xq = read_quantity(table, nh, source)
    x = xq.value * xq.unit.to(u.cm ** -2)
    sx = xq.sigma * xq.unit.to(u.cm ** -2)
    y = yq.value * yq.unit.to(u.dimensionless_unscaled)
    sy = yq.sigma * yq.unit.to(u.dimensionless_unscaled)
    keep = np.isfinite(x) & np.isfinite(y) & ~xq.upper & np.isfinite(sy) & (sy > 0)
    keep &= ~np.isfinite(sx) | (sx >= 0)
    x, y, sy, upper = x[keep], y[keep], sy[keep], yq.upper[keep]
    sx = np.nan_to_num(sx[keep])
    if len(x) < 3:
        raise SampleColumnError(source, f"columns {tau!r} and {nh!r}: {len(x)} usable points, "
                                        "need at least 3")
    if upper.all():
        raise SampleColumnError(source, f"column {tau!r}: every point is an upper limit")
    material = get_material(material)
    element = atomic.element_symbol(element)
    e = reference_energy(element) if energy is None else float(as_kev(energy))
    if abundance is None:
        abundance = abundances.abundance(element)
    if dust_fraction is None:
        dust_fraction = 1.0 - abundances.gas_fraction(element)
    a = np.geomspace(0.001, 5.0, 200) if radii is None else np.asarray(radii, float)
    ext, _, n_atoms = _per_size(material, element, e, a, count_once, kind)
    per_atom = ext / n_atoms
    coef = abundance * dust_fraction * per_atom          # dτ/dN_H for each radius
    def chi2_of(c):
        return _censored_chi2(c * x, y, np.sqrt(sy ** 2 + (c * sx) ** 2), upper)

    def chi2_at(radius):
        e_r, _, n_r = _per_size(material, element, e, np.array([radius]), count_once, kind)
        return chi2_of(abundance * dust_fraction * float(e_r[0] / n_r[0]))

    chi2 = np.array([chi2_of(c) for c in coef])
    # refine every local minimum of the grid scan, then the chi^2 = min + 1 crossings
    minima = []
    for j in range(len(a)):
        left = chi2[j - 1] if j > 0 else np.inf
        right = chi2[j + 1] if j < len(a) - 1 else np.inf
        if chi2[j] <= left and chi2[j] <= right:
            lo_b, hi_b = math.log(a[max(j - 1, 0)]), math.log(a[min(j + 1, len(a) - 1)])
            r = minimize_scalar(lambda t: chi2_at(math.exp(t)), bounds=(lo_b, hi_b),
                                method="bounded", options={"xatol": 1e-6})
            minima.append((float(r.fun), float(math.exp(r.x)), j) if r.fun < chi2[j]
                          else (float(chi2[j]), float(a[j]), j))
    best_chi2, best_a, _ = min(minima)
    level = best_chi2 + 1.0
    ranges: list[list[float]] = []
    for c_min, a_min, j in sorted(minima, key=lambda m: m[1]):
        if c_min > level:
            continue
        ends = []
        for step in (-1, 1):
            k = j
            while 0 <= k + step < len(a) and chi2[k] <= level:
                k += step
            if chi2[k] <= level:      # the set reaches the end of the scanned radii
                ends.append(float(a[k]))
                continue
            ends.append(float(math.exp(brentq(lambda t: chi2_at(math.exp(t)) - level,
                                               *sorted((math.log(a_min), math.log(a[k])))))))
        rng_ = sorted(ends)
        if not ranges or rng_[0] > ranges[-1][1]:
            ranges.append(rng_)
        else:
            ranges[-1][1] = max(ranges[-1][1], rng_[1])
    i = int(np.argmin(chi2))
    n = len(x)

    def line_chi2(p):
        al, be = p
        return _censored_chi2(al + be * x, y, np.sqrt(sy ** 2 + (be * sx) ** 2), upper)

    # straight line from several starts (least squares, through-origin slope, flat)
    det = ~upper
    b1, b0 = np.polyfit(x[det], y[det], 1)
    scale = float(np.median(y[det]) / np.median(x[det]))
    best = None
    for p0 in ([b0, b1], [0.0, scale], [float(np.mean(y[det])), 0.0]):
        # slope in units of the median ratio so both parameters are of order one
        r = minimize(lambda q: line_chi2([q[0], q[1] * scale]),
                     np.array([p0[0], p0[1] / scale]), method="Nelder-Mead",
                     options={"xatol": 1e-10, "fatol": 1e-10, "maxiter": 20000})
        if best is None or r.fun < best.fun:
            best = r
    assert best is not None  # three starts were minimised
    alpha, beta = float(best.x[0]), float(best.x[1] * scale)
    e_b, _, n_b = _per_size(material, element, e, np.array([best_a]), count_once, kind)
    shielded = {"radius_um": best_a, "radius_68": ranges, "chi2": best_chi2,
                "k": 1, "aic": best_chi2 + 2, "bic": best_chi2 + math.log(n),
                "n_minima": len(minima),
                "slope_cm2": float(abundance * dust_fraction * e_b[0] / n_b[0]),
                "profile_radius_um": a.tolist(),
                "profile_chi2": chi2.tolist(),
                "at_grid_edge": bool(i in (0, len(a) - 1))}
    line = {"intercept": alpha, "slope_cm2": beta, "chi2": float(best.fun), "k": 2,
            "aic": float(best.fun + 4), "bic": float(best.fun + 2 * math.log(n))}
    return {"shielded": shielded, "line": line,
            "delta_aic": shielded["aic"] - line["aic"],
            "delta_bic": shielded["bic"] - line["bic"], "n_points": n,
            "n_limits": int(upper.sum()), "abundance": float(abundance),
            "dust_fraction": float(dust_fraction), "energy_kev": e,
            "material": material.name, "element": element, "count_once": bool(count_once),
            "kind": kind,
            "thin_limit_slope_cm2": float(abundance * dust_fraction * per_atom[0])}


def grains_sample(path, tau="dust_tau_above", *, material="olivine", element="Si",
                  sizes=0.1, nh=None, energy=None, count_once=True, kind="ext", output=None,
                  figures=None) -> dict:
    """``edgefit grains``: read a sample table, add grain and dust-element
    columns (:func:`grain_columns`), and, when ``nh`` names a hydrogen
    column, fit the shielded τ–N_H relation beside a straight line
    (:func:`fit_shielded_relation`).  Writes ``sample_grains.ecsv``,
    ``grains.json`` into ``output`` (default: the table's folder); with
    ``nh`` and ``figures`` given, calls ``figures(fit, nh, tau, output)``
    (``nh``/``tau`` as :class:`~edgefit.analysis.regression.Measurements`;
    the command passes :func:`edgefit.plotting.grains.save_grains_figure`).
    Returns the JSON content."""
    import os

    from .regression import read_sample, write_json

    table = read_sample(path)
    source = table.meta["source"]
    out_table = grain_columns(table, tau, material=material, element=element, sizes=sizes,
                              energy=energy, count_once=count_once, kind=kind, source=source)
    result = {"source": source, "grain_columns": out_table.meta["grain_columns"]}
    fit = None
    if nh is not None:
        fit = fit_shielded_relation(table, tau, nh, material=material, element=element,
                                    energy=energy, count_once=count_once, kind=kind,
                                    source=source)
        result["shielded_fit"] = fit
    out = output or os.path.dirname(os.path.abspath(source))
    os.makedirs(out, exist_ok=True)
    tmp = os.path.join(out, f".sample_grains.ecsv.tmp{os.getpid()}")
    out_table.write(tmp, format="ascii.ecsv", overwrite=True)
    os.replace(tmp, os.path.join(out, "sample_grains.ecsv"))
    write_json(result, os.path.join(out, "grains.json"))
    if fit is not None and figures is not None:
        figures(fit, read_quantity(table, nh, source), read_quantity(table, tau, source), out)
    result["output"] = out
    return result
