"""Multiplicative absorption components: smooth interstellar absorption,
gas-phase edges and ionised absorption lines.

All three return a transmission per bin of an :class:`EnergyGrid`, stay
finite at any optical depth (exp(-tau) underflows to 0, never NaN), and do
their grid-only work (interpolating cross sections, building line tables)
in :meth:`precompute`.

* :class:`SmoothISM` (registry ``"smooth_ism"``): exp(-N_H sigma_ISM(E)),
  sigma_ISM = sum_Z A_Z beta_Z sigma_Z(E) + H and He terms.
* :class:`GasEdge` (``"gas_edge"``): exp(-N_Z sigma_Z(E - shift)) for one
  element, with optional resonance lines below the edge.
* :class:`IonLines` (``"ion_lines"``): Voigt absorption lines of He-like and
  H-like ions, averaged over each bin.
"""
from __future__ import annotations

import math

import numpy as np

from .. import _jit
from .._units import HC_KEV_ANGSTROM, as_kev
from ..errors import ModelError
from ..physics import abundances as _ab
from ..physics import atomic, hydrogen, lines as _lines, voigt as _voigt
from .base import COLUMN_KEY, MULTIPLICATIVE, Component, EnergyGrid, Param

__all__ = ["SmoothISM", "GasEdge", "IonLines"]

_NH_UNIT = 1e22
_EDGE_COL_UNIT = 1e16
#: 2 r_e (hc in keV cm) x the column unit: sigma * 1e16 = this / E[keV] * f2
_SIGMA_CONST = 2.0 * atomic.CLASSICAL_ELECTRON_RADIUS_CM * HC_KEV_ANGSTROM * 1e-8 * _EDGE_COL_UNIT


def _energies(energy_kev):
    scalar = np.ndim(energy_kev) == 0
    e = np.atleast_1d(np.asarray(as_kev(energy_kev), dtype=float))
    return e, scalar


class SmoothISM(Component):
    """Smooth photoabsorption by interstellar gas (and, optionally, the
    dust-borne metals in the thin-grain limit).

    .. math::

       T(E) = \\exp[-N_H \\sigma_{ISM}(E)],\\qquad
       \\sigma_{ISM} = (1 - f_{mol}) \\sigma_{HI} + \\frac{f_{mol}}{2} \\sigma_{H_2}
       + A_{He} \\sigma_{HeI} + \\sum_{Z \\ge 3} A_Z \\beta_Z \\sigma_Z

    with N_H = N(H I) + 2 N(H2) and f_mol = 2 N(H2)/N_H; sigma_HI,
    sigma_HeI from Verner et al. 1996, sigma_H2 = 2.85 sigma_HI (see
    :mod:`edgefit.physics.hydrogen`); sigma_Z = 2 r_e lambda f2 from the
    Chantler tables (:func:`edgefit.physics.atomic.photoabsorption`),
    evaluated at bin centres (the cross sections are smooth on grating-bin
    scales).  The sum is the Wilms, Allen & McCray 2000 (ApJ 542, 914)
    construction without their grain-shielding term.

    Parameters
    ----------
    name : str, optional
    abundances : str
        Abundance table name (:func:`edgefit.physics.abundances.abundance_tables`).
    depletion : str or None
        ``None``: every atom of each element absorbs with its atomic cross
        section (gas + dust, thin-grain limit).  A gas-fraction table name
        (e.g. ``"wilms00_gas"``): only the gas-phase fraction beta_Z is
        included; model the dust-borne part with dust components.
    exclude : tuple of str
        Elements left out entirely (e.g. ``("Si",)`` when the Si edge is
        modelled by separate gas and dust components).

    Fit parameters: ``nh`` [1e22 cm^-2] total hydrogen column N_H;
    ``mol_frac`` [-] molecular fraction 2N(H2)/N_H (fixed by default).
    """

    kind = MULTIPLICATIVE
    default_name = "ism"
    registry_name = "smooth_ism"
    params = (
        Param("nh", 0.5, 0.0, 100.0, "1e22 cm-2", "hydrogen column N_H = N(HI) + 2 N(H2)"),
        Param("mol_frac", 0.2, 0.0, 1.0, "", "molecular fraction 2 N(H2) / N_H", vary=False),
    )

    def __init__(self, name=None, *, abundances: str = _ab.DEFAULT_TABLE,
                 depletion: str | None = None, exclude=(), fixed=(), **values):
        super().__init__(name, fixed=fixed, **values)
        _ab.abundances(abundances)  # validate now
        if depletion is not None:
            _ab.gas_fractions(depletion)
        self.abundances = abundances
        self.depletion = depletion
        self.exclude = tuple(sorted({atomic.element_symbol(e) for e in exclude}))
        if "H" in self.exclude:
            raise ModelError("SmoothISM cannot exclude H: N_H is its parameter")

    # pure cross sections ------------------------------------------------
    def cross_sections(self, energy_kev):
        """Cross sections per H nucleus at ``energy_kev`` (cm^2): a tuple
        (metals + He, H I per H atom, H2 per H2 molecule)."""
        e = np.asarray(energy_kev, dtype=float)
        table = _ab.abundances(self.abundances)
        metals = np.zeros_like(e)
        for sym, a in table.items():
            if sym == "H" or sym in self.exclude:
                continue
            beta = 1.0 if self.depletion is None else _ab.gas_fraction(sym, self.depletion)
            if sym == "He":
                metals = metals + a * beta * hydrogen.sigma_hei(e)
            else:
                metals = metals + a * beta * atomic.photoabsorption(sym, e)
        return metals, hydrogen.sigma_hi(e), hydrogen.sigma_h2(e)

    def sigma_per_h(self, energy_kev, mol_frac=None):
        """Total cross section per H nucleus (cm^2) at ``energy_kev`` (keV)."""
        f = self.values["mol_frac"] if mol_frac is None else float(mol_frac)
        e, scalar = _energies(energy_kev)
        m, h1, h2 = self.cross_sections(e)
        out = m + (1.0 - f) * h1 + 0.5 * f * h2
        return float(out[0]) if scalar else out

    # component interface --------------------------------------------------
    def precompute(self, grid: EnergyGrid):
        m, h1, h2 = self.cross_sections(grid.mid)
        # the last combined cross section, keyed by mol_frac (usually fixed)
        return [m * _NH_UNIT, h1 * _NH_UNIT, 0.5 * h2 * _NH_UNIT, None, None]

    def has_log_transmission(self) -> bool:
        return True

    def _log_transmission(self, grid, pre, nh, mol_frac):
        if pre[3] != mol_frac:
            m, h1, h2half = pre[:3]
            pre[4] = -(m + (1.0 - mol_frac) * h1 + mol_frac * h2half)
            pre[3] = mol_frac
        return pre[4] * nh

    def _evaluate(self, grid, pre, nh, mol_frac):
        out = self._log_transmission(grid, pre, nh, mol_frac)
        return np.exp(out, out=out)

    def optical_depth(self, energy_kev, **values):
        v = self._merged(values)
        return v["nh"] * _NH_UNIT * self.sigma_per_h(energy_kev, v["mol_frac"])

    def derived(self, **values):
        v = self._merged(values)
        nh = v["nh"] * _NH_UNIT
        return {"nh_cm2": (nh, "cm-2"),
                "n_h2_cm2": (0.5 * v["mol_frac"] * nh, "cm-2"),
                "n_hi_cm2": ((1.0 - v["mol_frac"]) * nh, "cm-2")}


def _line_params(n_lines):
    out = []
    for i in range(1, n_lines + 1):
        out += [Param(f"line{i}_energy", 1.0, 0.05, 15.0, "keV",
                      f"centre of resonance line {i}"),
                Param(f"line{i}_strength", 1.0, 0.0, 1e6, "1e-18 cm2 eV",
                      f"integrated cross section of line {i} per atom (Mb eV)"),
                Param(f"line{i}_fwhm", 0.5, 1e-3, 100.0, "eV",
                      f"Lorentzian FWHM of line {i}")]
    return tuple(out)


def _log_shifted(x, log_x, s):
    """ln(x - s) as ln x + ln(1 - s/x): the second term by its series to
    the 8th power where |s/x| < 0.01 (a shift of up to 20 eV above 2 keV;
    remainder below r^9/9 < 2e-19), by log1p elsewhere."""
    r = s / x
    if abs(r) < 0.01:
        return log_x - r * (1.0 + r * (0.5 + r * (1.0 / 3.0 + r * (0.25 + r * (
            0.2 + r * (1.0 / 6.0 + r * (1.0 / 7.0 + r * 0.125)))))))
    return log_x + math.log1p(-r)


def _gas_log_transmission_loop(x, log_x, s, log_e, log_f2, slope, const, col, out):
    """−N σ(E − s) at the bin centres ``x`` (logarithms ``log_x``):
    :meth:`GasEdge._sigma_shifted` (f2 interpolated linearly in log-log
    like ``np.interp``, with the table's interval slopes ``slope``
    computed once) and the product with the column, in one loop over the
    increasing ``x`` (compiled by numba); ln(x - s) by
    :func:`_log_shifted`.  The walk along the table starts at the first
    bin's interval, found by bisection."""
    last = log_e.size - 1
    j = 0
    if x.size:
        j = min(max(np.searchsorted(log_e, _log_shifted(x[0], log_x[0], s), side="right") - 1,
                    0), max(last - 1, 0))
    for i in range(x.size):
        e = x[i] - s
        le = _log_shifted(x[i], log_x[i], s)
        while j < last - 1 and log_e[j + 1] <= le:
            j += 1
        if le >= log_e[last]:
            f = log_f2[last]
        elif le <= log_e[0]:
            f = log_f2[0]
        else:
            f = slope[j] * (le - log_e[j]) + log_f2[j]
        sig = const / e
        sig *= math.exp(f)
        out[i] = sig * (-col)


@_jit.kernels
def _numba_kernels():
    """The compiled gas-edge kernel (None without numba)."""
    # divisions by the (positive) energies need no zero check
    return {"gas": _jit.jit(_gas_log_transmission_loop, error_model="numpy",
                            globals={"_log_shifted": _jit.jit(_log_shifted,
                                                              error_model="numpy")})}


class GasEdge(Component):
    """Photoabsorption edge of one element in the gas phase.

    .. math:: T(E) = \\exp[-N_Z \\sigma_Z(E - \\Delta E)] \\prod_i T_i(E)

    sigma_Z = 2 r_e lambda f2 (Chantler tables) of the named element **with
    all its shells** (in a band around one edge the other shells add a
    smooth, slowly varying part); the shift Delta E moves the whole cross
    section of that element (use it for the few-eV offset of the edge;
    across a band of tens of eV this is the same as shifting only the
    edge).  Optional resonance lines below the edge, each a Lorentzian with
    its own energy, integrated cross section S_i (per atom, so its optical
    depth scales with N_Z) and FWHM, averaged over bins:
    tau_i(E) = N_Z S_i L(E - E_i; FWHM_i) (lines are not shifted by Delta E;
    their energies are parameters of their own).

    Parameters
    ----------
    element : str or int
        Element symbol or Z (H..Zn).
    edge : str
        Edge name for derived quantities and the default band ("K", "L3"...).
    lines : sequence of dict, optional
        Initial values for resonance lines, each with keys ``energy`` (keV),
        ``strength`` (1e-18 cm^2 eV) and ``fwhm`` (eV); creates parameters
        ``line<i>_energy``, ``line<i>_strength``, ``line<i>_fwhm``.

    Fit parameters: ``col`` [1e16 cm^-2] gas column of the element;
    ``shift`` [eV] edge-energy shift.
    """

    kind = MULTIPLICATIVE
    default_name = "gas"
    registry_name = "gas_edge"
    #: the phase of the element this component counts (used for depletion)
    phase = "gas"
    params = (
        Param("col", 10.0, 0.0, 1e7, "1e16 cm-2", "gas-phase column of the element"),
        Param("shift", 0.0, -20.0, 20.0, "eV", "shift of the element's cross section",
              vary=False),
    )

    def __init__(self, name=None, *, element="Si", edge="K", lines=(), fixed=(), **values):
        self.element = atomic.element_symbol(element)
        self.edge = str(edge).upper()
        # the edge where edgefit's own cross section jumps (the Chantler
        # tables put some edges several eV from the Elam table energies)
        self.edge_kev = atomic.edge_position(self.element, self.edge)
        lines = tuple(dict(ln) for ln in lines)
        self.n_lines = len(lines)
        self.params = type(self).params + _line_params(self.n_lines)
        init = {}
        for i, ln in enumerate(lines, 1):
            extra = set(ln) - {"energy", "strength", "fwhm"}
            if extra or "energy" not in ln:
                raise ModelError(f"resonance line {i}: give 'energy' (keV) and optionally "
                                 f"'strength', 'fwhm'; unknown keys {sorted(extra)}")
            for key, val in ln.items():
                init[f"line{i}_{key}"] = val
        init.update(values)
        super().__init__(name or f"gas_{self.element.lower()}", fixed=fixed, **init)

    def reference_energy(self) -> float:
        """Just above the edge: its position plus 20 eV (keV)."""
        return atomic.edge_bracket(self.edge_kev)[1]

    def sigma(self, energy_kev, shift_ev=0.0):
        """sigma_Z(E - shift) in cm^2 per atom (continuum only)."""
        e, scalar = _energies(energy_kev)
        out = atomic.photoabsorption(self.element, e - shift_ev * 1e-3)
        return float(out[0]) if scalar else out

    def precompute(self, grid: EnergyGrid):
        t = atomic._load(self.element)
        return {"sigma0": self.sigma(grid.mid) * _EDGE_COL_UNIT, "x": grid.mid,
                "log_x": np.log(grid.mid), "ends": (float(grid.mid[0]), float(grid.mid[-1])),
                "table": (t.energy[0], t.energy[-1], t.log_energy, t.log_f2),
                # slopes of log f2 in log E per table interval (np.interp's)
                "slope": np.diff(t.log_f2) / np.diff(t.log_energy)}

    def _sigma_shifted(self, pre, shift):
        """sigma_Z(E - shift) * 1e16 at the bin centres: the formula of
        :func:`edgefit.physics.atomic.photoabsorption` (2 r_e hc/E f2, f2
        interpolated in log-log) with its constants folded into one factor
        (equal to rounding) and its input checks done once on the sorted
        grid."""
        e = pre["x"] - shift * 1e-3
        emin, emax, log_e, log_f2 = pre["table"]
        if not (e[0] >= emin and e[-1] <= emax):
            return self.sigma(e) * _EDGE_COL_UNIT      # raises the range error
        f2 = np.log(e)
        f2 = np.exp(np.interp(f2, log_e, log_f2))
        sig = np.divide(_SIGMA_CONST, e, out=e)
        sig *= f2
        return sig

    def _line_arrays(self, v, n_z):
        c = np.array([v[f"line{i}_energy"] for i in range(1, self.n_lines + 1)])
        s = np.array([v[f"line{i}_strength"] for i in range(1, self.n_lines + 1)])
        w = np.array([v[f"line{i}_fwhm"] for i in range(1, self.n_lines + 1)])
        area = n_z * s * 1e-18 * 1e-3          # cm^-2 * cm^2 keV -> keV
        return c, area, np.zeros_like(c), 0.5 * w * 1e-3

    def has_log_transmission(self) -> bool:
        return not self.n_lines       # the lines' transmission is bin-averaged

    def _log_transmission(self, grid, pre, col, shift):
        if shift == 0.0:
            return pre["sigma0"] * (-col)
        kern = _numba_kernels()
        if kern is not None:
            x = pre["x"]
            emin, emax, log_e, log_f2 = pre["table"]
            s = shift * 1e-3
            x0, x1 = pre["ends"]
            if x0 - s >= emin and x1 - s <= emax:
                out = np.empty(x.size)
                kern["gas"](x, pre["log_x"], s, log_e, log_f2, pre["slope"], _SIGMA_CONST, col,
                            out)
                return out
        return self._sigma_shifted(pre, shift) * (-col)

    def _evaluate(self, grid, pre, **v):
        col = v["col"]
        trans = self._log_transmission(grid, pre, col, v["shift"])
        np.exp(trans, out=trans)
        if self.n_lines and col > 0:
            c, area, s, g = self._line_arrays(v, col * _EDGE_COL_UNIT)
            trans *= _voigt.binned_line_transmission(grid.lo, grid.hi, c, area, s, g)
        return trans

    def optical_depth(self, energy_kev, **values):
        """Optical depth at ``energy_kev`` (continuum plus the lines'
        Lorentzian profiles, not bin-averaged)."""
        v = self._merged(values)
        e, scalar = _energies(energy_kev)
        n_z = v["col"] * _EDGE_COL_UNIT
        tau = n_z * self.sigma(e, v["shift"])
        if self.n_lines:
            c, area, _, g = self._line_arrays(v, n_z)
            for ci, ai, gi in zip(c, area, g):
                tau = tau + ai * gi / np.pi / ((e - ci) ** 2 + gi * gi)
        return float(tau[0]) if scalar else tau

    def derived(self, **values):
        """Gas column ``col_cm2`` (cm^-2); the optical depth just below and
        just above the edge (edge position plus shift, -/+ 20 eV:
        :func:`edgefit.physics.atomic.edge_bracket`) and their difference,
        the edge jump; the shifted edge energy."""
        v = self._merged(values)
        n_z = v["col"] * _EDGE_COL_UNIT
        e_edge = self.edge_kev + v["shift"] * 1e-3
        e_lo, e_hi = atomic.edge_bracket(e_edge)
        above = n_z * self.sigma(e_hi, v["shift"])
        below = n_z * self.sigma(e_lo, v["shift"])
        return {COLUMN_KEY: (n_z, "cm-2"),
                "tau_below": (float(below), ""),
                "tau_above": (float(above), ""),
                "tau_jump": (float(above - below), ""),
                "edge_energy": (e_edge, "keV")}


class IonLines(Component):
    """Absorption lines of ionised gas (He-like and H-like ions).

    .. math::

       \\tau(E) = \\sum_{ions} N_{ion} \\sum_{lines} \\pi r_e h c f\\,
       V(E - E_0/(1 + v/c);\\ \\sigma_G = E_0 b/(c\\sqrt 2),\\ \\gamma = \\hbar\\Gamma/2)

    (Voigt profile V of unit area; lambda_obs = lambda_0 (1 + v/c)), with
    the transmission exp(-tau) averaged over each bin
    (:func:`edgefit.physics.voigt.binned_line_transmission`) so equivalent
    widths are conserved.  Line data: ``cross_sections/ion_lines.txt``
    (Si XIII, Si XIV, Mg XI, Mg XII, Ne IX, Ne X, O VII, O VIII; Ly-alpha
    doublets as two lines).

    Parameters
    ----------
    ions : sequence of str
        Ion keys or names (``"si14"`` or ``"Si XIV"``); default all tabulated.
    backend : {"auto", "numba", "numpy"}
        How the bin-averaged transmission is computed: the compiled kernel
        (numba, used by "auto" when importable) or the vectorised NumPy body;
        both run the same algorithm and agree to rounding
        (:func:`edgefit.physics.voigt.binned_line_transmission`).

    Fit parameters: ``logn_<ion>`` [log10 cm^-2] ion column (one per ion);
    ``b`` [km/s] Doppler parameter shared by all lines; ``v`` [km/s]
    line-of-sight velocity shared by all lines (positive = redshift).
    """

    kind = MULTIPLICATIVE
    default_name = "ions"
    registry_name = "ion_lines"
    #: log10 column below which an ion is treated as absent (tau < 1e-8).
    LOGN_OFF = 5.0

    def __init__(self, name=None, *, ions=None, backend="auto", fixed=(), **values):
        if backend not in ("auto", "numba", "numpy"):
            raise ModelError(f"IonLines backend must be 'auto', 'numba' or 'numpy', "
                             f"not {backend!r}")
        self.backend = backend
        keys = _lines.ion_keys() if ions is None else \
            tuple(dict.fromkeys(_lines.ion_lines(i)[0].key for i in ions))
        if not keys:
            raise ModelError("IonLines needs at least one ion")
        self.ions = keys
        self.params = tuple(
            Param(f"logn_{k}", 16.0, 0.0, 21.0, "dex(cm-2)",
                  f"log10 column density of {_lines.ion_lines(k)[0].ion}") for k in keys) + (
            Param("b", 100.0, 1.0, 3000.0, "km / s", "Doppler parameter"),
            Param("v", 0.0, -5000.0, 5000.0, "km / s", "line-of-sight velocity (+ = redshift)"),
        )
        super().__init__(name, fixed=fixed, **values)

    def _table(self):
        rows = [(i, ln) for i, k in enumerate(self.ions) for ln in _lines.ion_lines(k)]
        owner = np.array([i for i, _ in rows], dtype=np.int64)
        e0 = np.array([ln.energy for _, ln in rows])
        area1 = _lines.integrated_cross_section([ln.f for _, ln in rows])
        gam = _lines.lorentz_hwhm([ln.gamma for _, ln in rows])
        return owner, e0, area1, gam

    def precompute(self, grid: EnergyGrid):
        """Line table and the grid arrays of :func:`edgefit.physics.voigt.line_grid`."""
        return self._table() + (_voigt.line_grid(grid.lo, grid.hi),)

    def _columns(self, v):
        """Ion columns (cm^-2) as a list; 0 for ions at or below LOGN_OFF."""
        off = self.LOGN_OFF
        return [10.0 ** min(x, 30.0) if x > off else 0.0
                for x in [v["logn_" + k] for k in self.ions]]

    def _line_arrays(self, pre, v, cols=None):
        owner, e0, area1, gam = pre[:4]
        if cols is None:
            cols = self._columns(v)
        centre = e0 * (1.0 / (1.0 + v["v"] / _lines.SPEED_OF_LIGHT_KMS))
        return centre, np.array(cols)[owner] * area1, _lines.doppler_sigma(centre, v["b"]), gam

    def _evaluate(self, grid, pre, **v):
        cols = self._columns(v)
        c, a, s, g = self._line_arrays(pre, v, cols)
        if not v["b"] > 0:       # b <= 0 from an unbounded caller: checked path
            return _voigt.binned_line_transmission(grid.lo, grid.hi, c, a, s, g,
                                                   backend=self.backend)
        # parameter bounds keep b > 0 and gamma > 0, so only absent ions
        # need removing before the (unchecked) core routine
        if not all(cols):
            keep = a > 0
            if not keep.any():
                return np.ones(len(grid))
            c, a, s, g = c[keep], a[keep], s[keep], g[keep]
        return _voigt.grid_transmission(pre[4], c, a, s, g, backend=self.backend)

    def optical_depth(self, energy_kev, **values):
        """Optical depth at ``energy_kev`` (unbinned Voigt profiles)."""
        from scipy.special import voigt_profile

        v = self._merged(values)
        e, scalar = _energies(energy_kev)
        c, a, s, g = self._line_arrays(self._table(), v)
        tau = np.zeros_like(e)
        for ci, ai, si, gi in zip(c, a, s, g):
            if ai > 0:
                tau += ai * voigt_profile(e - ci, si, gi)
        return float(tau[0]) if scalar else tau

    def derived(self, **values):
        """Column density (cm^-2) of each ion and the optically thin
        equivalent width (Angstrom) of its strongest line."""
        v = self._merged(values)
        out = {}
        for k in self.ions:
            logn = v[f"logn_{k}"]
            n = 10.0 ** logn if logn > self.LOGN_OFF else 0.0
            out[f"n_{k}_cm2"] = (n, "cm-2")
            best = max(_lines.ion_lines(k), key=lambda ln: ln.f)
            out[f"ew_thin_{k}"] = (float(_lines.thin_equivalent_width(n, best.f, best.wavelength)),
                                   "Angstrom")
        return out

