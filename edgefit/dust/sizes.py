"""Grain size distributions and their normalisation by an element's column.

Sizes are grain radii in micrometres (µm); a Quantity of length is
accepted wherever a size is given.  A distribution is a shape n(a) per µm
on a support [amin, amax]; it is used normalised to one grain,
p(a) = n(a) / ∫ n da.

Families (``FAMILIES``, by name):

``power_law`` n ∝ a^-q on [amin, amax] -- MRN (Mathis, Rumpl & Nordsieck
              1977, ApJ 217, 425: q = 3.5, 0.005-0.25 µm) is the default.
``single``    all grains of one radius.
``lognormal`` n ∝ a^-1 exp(−ln²(a/a0) / 2w²) on [amin, amax].
``cutoff``    n ∝ a^-q for a ≤ a_t and a^-q exp(−[(a − a_t)/a_c]³) above,
              on [amin, amax]: the large-size cut-off form of Weingartner &
              Draine 2001 (ApJ 548, 296, eq. 4-5) without their curvature
              factor F(a; β, a_t).
``table``     a user table of n(a), interpolated linearly in log n − log a.

Normalisation by the element locked in grains (column N_Z,dust of element
Z in dust, cm^-2): one grain of radius a holds
N_Z(a) = (4π/3) a³ ρ N_A c_Z / M atoms (c_Z atoms of Z per formula unit of
mass M g/mol, ρ g cm^-3), so the grain column is
N_grains = N_Z,dust / ⟨N_Z(a)⟩ and the dust mass column is
N_Z,dust M / (N_A c_Z), independent of the sizes.

Integration over sizes at fit time uses :class:`SizeGrid`: a table quantity
g(a) known at the grid's sizes is interpolated by a cubic spline in ln a of
g(a)/a^p and integrated against the distribution with Gauss–Legendre nodes
on every grid interval (cut at the support's ends), so the weighted sum is
a smooth function of the distribution's parameters (continuous
derivatives in amax, q, a single size ...), as a fit needs.
"""
from __future__ import annotations

import math
import os
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from astropy import units as u
from scipy.interpolate import CubicSpline

from .. import _jit
from .._units import to_value
from ..errors import PhysicsDataError
from ..params import Param

if TYPE_CHECKING:
    from .materials import Material

__all__ = ["SizeDistribution", "PowerLaw", "SingleSize", "LogNormal", "CutoffPowerLaw",
           "TabulatedSizes", "MRN", "FAMILIES", "register_family", "make_distribution",
           "SizeGrid",
           "as_um", "grain_column", "dust_mass_column", "mean_atoms_per_grain",
           "read_size_table"]


def as_um(value, name="size"):
    """Grain size in µm from a number (µm) or a length Quantity."""
    return to_value(value, u.um, name)


_GL_X, _GL_W = np.polynomial.legendre.leggauss(6)


#: Registered size-distribution families by name (filled as the classes
#: below, and any user subclass with a ``family``, are defined).
FAMILIES: dict[str, type["SizeDistribution"]] = {}


def register_family(cls):
    """Add a size-distribution class to :data:`FAMILIES` under its
    ``family`` name (done on class creation)."""
    old = FAMILIES.get(cls.family)
    if old is not None and old is not cls and (old.__module__, old.__qualname__) != (
            cls.__module__, cls.__qualname__):
        raise PhysicsDataError(f"size-distribution family {cls.family!r} is taken by "
                               f"{old.__module__}.{old.__qualname__}")
    FAMILIES[cls.family] = cls
    return cls


class SizeDistribution:
    """Base class: subclasses define ``family``, ``PARAMS`` and :meth:`shape`.

    ``PARAMS`` is a tuple of :class:`~edgefit.params.Param` declarations
    (name, default, bounds, unit, description, free by default), the same
    type components use: :class:`~edgefit.models.dust.DustEdge` makes them
    fit parameters.  A subclass with a ``family`` name registers itself in
    :data:`FAMILIES` when it is defined (``register = False`` opts out, as
    :class:`TabulatedSizes` does); defining a class of the same name and
    module again (a notebook cell run twice) replaces the old one, another
    class under a taken name is refused.
    """

    family: ClassVar[str] = ""
    PARAMS: ClassVar[tuple[Param, ...]] = ()
    register: ClassVar[bool] = True
    #: (code, parameter names) of this class's shape in the compiled size
    #: weights (:func:`_node_shape`), read from the class's own namespace
    #: only: a subclass (which may change the shape) declares its own or
    #: takes the general path.
    _KERNEL_SHAPE: ClassVar[tuple[int, tuple[str, ...]] | None] = None

    def __init_subclass__(cls, **kw):
        super().__init_subclass__(**kw)
        cls.PARAMS = tuple(p if isinstance(p, Param) else Param(*p) for p in cls.PARAMS)
        cls._DEFAULTS = {p.name: p.default for p in cls.PARAMS}
        if cls.family and cls.__dict__.get("register", True):
            register_family(cls)

    _DEFAULTS: ClassVar[dict[str, float]] = {}

    def __init__(self, **values):
        vals = dict(self._DEFAULTS)
        for k, v in values.items():
            if k not in vals:
                names = [p.name for p in self.PARAMS]
                raise PhysicsDataError(f"{self.family} size distribution has no parameter "
                                       f"{k!r}; it has {names}")
            if type(v) is float:        # a plain number is in µm already (fit-time path)
                vals[k] = v
            else:
                vals[k] = float(as_um(v, k)) if self._is_size(k) else float(v)
        self.values = vals
        self._check()

    def _is_size(self, name):
        return next(p for p in self.PARAMS if p.name == name).unit == "um"

    def _check(self):
        lo, hi = self.support()
        if not (0 < lo < hi and math.isfinite(hi)):
            raise PhysicsDataError(f"{self!r}: need 0 < amin < amax")

    def __getattr__(self, name):
        values = self.__dict__.get("values")
        if values is not None and name in values:
            return values[name]
        raise AttributeError(name)

    def support(self) -> tuple[float, float]:
        """(amin, amax) in µm."""
        return self.values["amin"], self.values["amax"]

    def shape(self, a_um):
        """Unnormalised n(a), per µm, on the support (vectorised)."""

    def _shape_nodes(self, a, ln_a):
        """:meth:`shape` at radii ``a`` whose logarithms ``ln_a`` are known
        (the integration nodes); a family may use them to save work."""
        return self.shape(a)
        raise NotImplementedError

    def pdf(self, a_um):
        """Normalised p(a) (per µm); zero outside the support."""
        a = np.asarray(as_um(a_um), dtype=float)
        lo, hi = self.support()
        inside = (a >= lo) & (a <= hi)
        out = np.where(inside, self.shape(np.clip(a, lo, hi)), 0.0) / self.moment(0, raw=True)
        return float(out) if out.ndim == 0 else out

    def _nodes(self, n_per_decade=40):
        """Gauss-Legendre nodes (a, weight for ∫ da) on the support."""
        lo, hi = self.support()
        nseg = max(4, int(math.ceil(n_per_decade * math.log10(hi / lo))))
        edges = np.linspace(math.log(lo), math.log(hi), nseg + 1)
        half = 0.5 * np.diff(edges)
        uu = (edges[:-1] + half)[:, None] + half[:, None] * _GL_X
        a = np.exp(uu).ravel()
        w = (half[:, None] * _GL_W).ravel() * a  # da = a du
        return a, w

    def moment(self, k: float, raw: bool = False) -> float:
        """⟨a^k⟩ (µm^k) over the normalised distribution; with ``raw`` the
        unnormalised ∫ a^k n(a) da.  Numerical (Gauss–Legendre in ln a,
        40 intervals per decade, 6 nodes each)."""
        a, w = self._nodes()
        val = float(np.sum(w * a ** k * self.shape(a)))
        if raw:
            return val
        return val / float(np.sum(w * self.shape(a)))

    def mean_volume(self) -> float:
        """Mean grain volume (4π/3)⟨a³⟩, µm³."""
        return 4.0 * math.pi / 3.0 * self.moment(3)

    def __repr__(self):
        vals = ", ".join(f"{k}={v:.4g}" for k, v in self.values.items())
        return f"{type(self).__name__}({vals})"


_AMIN = Param("amin", 0.005, 0.001, 1.0, "um", "smallest grain radius", False)
_AMAX = Param("amax", 0.25, 0.006, 5.0, "um", "largest grain radius", True)


class PowerLaw(SizeDistribution):
    """n(a) ∝ a^-q on [amin, amax] (Mathis, Rumpl & Nordsieck 1977)."""

    family = "power_law"
    PARAMS = (_AMIN, _AMAX,
              Param("index", 3.5, 1.0, 6.0, "", "power-law index q of n(a) ∝ a^-q", False))
    _KERNEL_SHAPE = (0, ("index",))

    def __init__(self, index=3.5, amin=0.005, amax=0.25):
        super().__init__(index=index, amin=amin, amax=amax)

    def shape(self, a_um):
        a = np.asarray(a_um, dtype=float)
        return a ** (-self.values["index"])

    def _shape_nodes(self, a, ln_a):
        # a^-q as exp(-q ln a): one exp instead of a pow (equal to rounding)
        out = ln_a * (-self.values["index"])
        return np.exp(out, out=out)


#: The default: MRN, q = 3.5 from 0.005 to 0.25 µm (Mathis, Rumpl & Nordsieck 1977).
MRN = PowerLaw(3.5, 0.005, 0.25)


class SingleSize(SizeDistribution):
    """All grains have radius ``size`` (µm)."""

    family = "single"
    PARAMS = (Param("size", 0.1, 0.001, 5.0, "um", "grain radius", True),)

    def __init__(self, size=0.1):
        super().__init__(size=size)

    def _check(self):
        if not self.values["size"] > 0:
            raise PhysicsDataError("single grain size must be positive")

    def support(self):
        s = self.values["size"]
        return s, s

    def shape(self, a_um):  # pragma: no cover - a delta function has no density
        raise PhysicsDataError("a single size has no density n(a)")

    def moment(self, k, raw=False):
        return self.values["size"] ** k


class LogNormal(SizeDistribution):
    """n(a) ∝ a^-1 exp(−ln²(a/a0) / (2 w²)) on [amin, amax]."""

    family = "lognormal"
    PARAMS = (Param("center", 0.1, 0.002, 3.0, "um", "median radius a0", True),
              Param("width", 0.4, 0.05, 2.0, "", "width w in ln a", False),
              Param("amin", 0.001, 0.001, 1.0, "um", "smallest grain radius", False),
              Param("amax", 5.0, 0.01, 5.0, "um", "largest grain radius", False))
    _KERNEL_SHAPE = (1, ("center", "width"))

    def __init__(self, center=0.1, width=0.4, amin=0.001, amax=5.0):
        super().__init__(center=center, width=width, amin=amin, amax=amax)

    def shape(self, a_um):
        a = np.asarray(a_um, dtype=float)
        z = np.log(a / self.values["center"]) / self.values["width"]
        return np.exp(-0.5 * z * z) / a


class CutoffPowerLaw(SizeDistribution):
    """n ∝ a^-q, times exp(−[(a − a_t)/a_c]³) above a_t (Weingartner &
    Draine 2001, ApJ 548, 296, eqs. 4-5, without the curvature factor)."""

    family = "cutoff"
    PARAMS = (_AMIN,
              Param("index", 3.5, 1.0, 6.0, "", "power-law index q", False),
              Param("atrans", 0.2, 0.005, 3.0, "um", "transition radius a_t", False),
              Param("acut", 0.1, 0.005, 3.0, "um", "cut-off scale a_c", True),
              Param("amax", 5.0, 0.01, 5.0, "um", "largest grain radius", False))
    _KERNEL_SHAPE = (2, ("index", "atrans", "acut"))

    def __init__(self, index=3.5, amin=0.005, atrans=0.2, acut=0.1, amax=5.0):
        super().__init__(index=index, amin=amin, atrans=atrans, acut=acut, amax=amax)

    def shape(self, a_um):
        a = np.asarray(a_um, dtype=float)
        v = self.values
        z = np.maximum(a - v["atrans"], 0.0) / v["acut"]
        return a ** (-v["index"]) * np.exp(-np.minimum(z ** 3, 700.0))


class TabulatedSizes(SizeDistribution):
    """A user table n(a): radii (µm) and n (any positive scale), linear
    interpolation in log n − log a; zero outside the table."""

    family = "table"
    PARAMS = ()
    register = False

    def __init__(self, a_um, n, source="<memory>"):
        a = np.asarray(as_um(a_um, "size"), dtype=float)
        n = np.asarray(n, dtype=float)
        if a.ndim != 1 or a.shape != n.shape or a.size < 2:
            raise PhysicsDataError(f"{source}: size table needs >= 2 (a, n) pairs")
        if not np.all(np.isfinite(a)):
            raise PhysicsDataError(f"{source}: sizes must be finite")
        order = np.argsort(a)
        a, n = a[order], n[order]
        if np.any(np.diff(a) <= 0) or np.any(a <= 0) or np.any(n <= 0) or \
                not np.all(np.isfinite(n)):
            raise PhysicsDataError(f"{source}: sizes must be positive and distinct, n "
                                   "positive and finite")
        self.values = {}
        self.a, self.n, self.source = a, n, source
        self._la, self._ln = np.log(a), np.log(n)

    def support(self):
        return float(self.a[0]), float(self.a[-1])

    def shape(self, a_um):
        return np.exp(np.interp(np.log(np.asarray(a_um, dtype=float)), self._la, self._ln))

    def __repr__(self):
        return f"TabulatedSizes({self.a.size} rows, {self.a[0]:.3g}-{self.a[-1]:.3g} um)"


def read_size_table(path: str | os.PathLike) -> TabulatedSizes:
    """Read a user size distribution: two whitespace/comma columns, radius
    (µm) and n(a) (any scale), ``#`` comments.  Errors name the file."""
    import os

    from ..data.textcolumns import read_text_columns
    from ..errors import InputFileError

    path = os.fspath(path)
    rows = read_text_columns(path, (0, 1), "radius (um) and n(a)")
    try:
        a, n = rows.T
        return TabulatedSizes(a, n, source=path)
    except (ValueError, PhysicsDataError) as exc:
        raise InputFileError(path, str(exc).replace(f"{path}: ", "")) from None




def make_distribution(family: str, **values: float) -> SizeDistribution:
    """A distribution of ``family`` (see ``FAMILIES``) with parameter values."""
    try:
        cls = FAMILIES[family]
    except KeyError:
        raise PhysicsDataError(f"unknown size distribution {family!r}; have "
                               f"{', '.join(FAMILIES)} (or pass a TabulatedSizes)") from None
    return cls(**values)


# ---------------------------------------------------------------------------
# normalisation by the element column
# ---------------------------------------------------------------------------
def mean_atoms_per_grain(dist: SizeDistribution, material: Material, element: str) -> float:
    """⟨N_Z(a)⟩ = (4π/3) ⟨a³⟩ ρ N_A c_Z / M (a in cm), atoms per grain."""
    return 4.0 * math.pi / 3.0 * dist.moment(3) * 1e-12 * material.atoms_per_cm3(element)


def grain_column(n_element_dust: Any, dist: SizeDistribution, material: Material,
                 element: str) -> float:
    """Grains per cm² holding a column ``n_element_dust`` (cm^-2) of
    ``element``: N_grains = N_Z,dust / ⟨N_Z(a)⟩."""
    n = to_value(n_element_dust, u.cm ** -2, "column")
    return n / mean_atoms_per_grain(dist, material, element)


def dust_mass_column(n_element_dust: Any, material: Material, element: str) -> float:
    """Dust mass per cm² (g cm^-2): N_Z,dust M / (N_A c_Z)."""
    n = to_value(n_element_dust, u.cm ** -2, "column")
    return n * material.mass_per_atom(element)


# ---------------------------------------------------------------------------
# integration over a size grid
# ---------------------------------------------------------------------------
def _moments_numpy(f, half, a, uu, u_left, power):
    """Per grid interval k, the moments Σ_q F_kq t_kq^(3-j) (j = 0..3) of
    the normalised integrand weights F = n(a) a^p (∫ da) / ∫ n da at the
    Gauss-Legendre nodes, t = ln a - u_k.  ``f`` (the shape n(a) at the
    nodes) is overwritten."""
    f *= half[:, None] * _GL_W * a                           # ∫ da = ∫ a du
    norm = float(np.sum(f))
    f *= a ** power if power != 3.0 else a * a * a
    f *= 1.0 / norm
    t = uu - u_left[:, None]
    mom = np.empty((f.shape[0], 4))
    mom[:, 3] = f.sum(axis=1)
    f *= t
    mom[:, 2] = f.sum(axis=1)
    f *= t
    mom[:, 1] = f.sum(axis=1)
    f *= t
    mom[:, 0] = f.sum(axis=1)
    return mom


def _moments_loop(f, half, a, uu, u_left, glw, power, mom):
    """:func:`_moments_numpy` as one loop (compiled by numba); ``mom`` is
    filled in place."""
    nk, nq = f.shape
    norm = 0.0
    for k in range(nk):
        for q in range(nq):
            v = f[k, q] * (half[k] * glw[q] * a[k, q])
            f[k, q] = v
            norm += v
    inv = 1.0 / norm
    for k in range(nk):
        m0 = 0.0
        m1 = 0.0
        m2 = 0.0
        m3 = 0.0
        for q in range(nq):
            aq = a[k, q]
            v = f[k, q] * (aq * aq * aq if power == 3.0 else aq ** power) * inv
            t = uu[k, q] - u_left[k]
            m3 += v
            v *= t
            m2 += v
            v *= t
            m1 += v
            v *= t
            m0 += v
        mom[k, 0] = m0
        mom[k, 1] = m1
        mom[k, 2] = m2
        mom[k, 3] = m3


def _weights_loop(f, half, a, uu, k0, u, glw, power, mom, fac, inv_ap, w):
    """The moments (:func:`_moments_loop`) of the support's grid intervals
    k0, k0+1, ... and the weights W = (S^T mom) / a^p into ``w``, S the
    linear map from tabulated values to the not-a-knot spline's
    coefficients, applied transposed: the chain rule through the
    coefficients, the slopes and the spline's tridiagonal system (solved
    transposed with the factors of :meth:`SizeGrid._adjoint_factors`),
    O(grid size) instead of the product with the dense coefficients of
    :meth:`SizeGrid.weights`' NumPy path (equal to rounding).  Compiled by
    numba."""
    _moments_loop(f, half, a, uu, u[k0:k0 + mom.shape[0]], glw, power, mom)
    n = u.size
    dx = fac[0]
    upper = fac[1]
    mult = fac[2]
    piv = fac[3]
    d0 = u[2] - u[0]
    d1 = u[n - 1] - u[n - 3]
    gs = np.zeros(n)
    sl = np.zeros(n - 1)
    for m in range(n):
        w[m] = 0.0
    # value = sum_k m0 c0 + m1 c1 + m2 c2 + m3 c3 with, per interval k,
    # t = (s_k + s_k+1 - 2 slope_k) / h, c0 = t / h,
    # c1 = (slope_k - s_k) / h - t, c2 = s_k, c3 = y_k
    for i in range(mom.shape[0]):
        k = k0 + i
        h = dx[k]
        gt = mom[i, 0] / h - mom[i, 1]
        sl[k] += mom[i, 1] / h - 2.0 * gt / h
        gs[k] += mom[i, 2] - mom[i, 1] / h + gt / h
        gs[k + 1] += gt / h
        w[k] += mom[i, 3]
    # through the slopes' system A s = b: z = A^-T gs
    for k in range(1, n):
        gs[k] -= mult[k] * gs[k - 1]
    gs[n - 1] /= piv[n - 1]
    for k in range(n - 2, -1, -1):
        gs[k] = (gs[k] - upper[k] * gs[k + 1]) / piv[k]
    # b from the secant slopes (not-a-knot first and last rows)
    sl[0] += (dx[0] + 2.0 * d0) * dx[1] / d0 * gs[0]
    sl[1] += dx[0] * dx[0] / d0 * gs[0]
    for k in range(1, n - 1):
        sl[k - 1] += 3.0 * dx[k] * gs[k]
        sl[k] += 3.0 * dx[k - 1] * gs[k]
    sl[n - 3] += dx[n - 2] * dx[n - 2] / d1 * gs[n - 1]
    sl[n - 2] += (2.0 * d1 + dx[n - 2]) * dx[n - 3] / d1 * gs[n - 1]
    # secant slopes from the tabulated values
    for k in range(n - 1):
        g = sl[k] / dx[k]
        w[k + 1] += g
        w[k] -= g
    for m in range(n):
        w[m] *= inv_ap[m]


def _nodes_loop(u, ulo, uhi, glx, uu, half):
    """:meth:`SizeGrid._nodes_numpy` as one loop: fills uu[:nk], half[:nk]
    and returns (k0, nk)."""
    last = u.size - 2
    k0 = np.searchsorted(u, ulo, side="right") - 1
    k1 = np.searchsorted(u, uhi, side="left") - 1
    k0 = min(max(k0, 0), last)
    k1 = min(max(k1, 0), last)
    nk = 0
    first = -1
    for k in range(k0, k1 + 1):
        left = max(u[k], ulo)
        right = min(u[k + 1], uhi)
        if not right > left:
            if nk:
                break
            continue
        if first < 0:
            first = k
        h = 0.5 * (right - left)
        c = left + h
        half[nk] = h
        for q in range(glx.size):
            uu[nk, q] = c + h * glx[q]
        nk += 1
    return first, nk


def _nodes_exp_loop(u, ulo, uhi, glx, uu, half, a_full, a):
    """:func:`_nodes_loop`, then a = exp(uu) into ``a``: copied from
    ``a_full`` (the nodes of whole grid intervals, computed once per grid
    with the same arithmetic) for the intervals the support does not cut,
    computed for the cut ones.  Returns (k0, nk)."""
    k0, nk = _nodes_loop(u, ulo, uhi, glx, uu, half)
    for i in range(nk):
        k = k0 + i
        whole = u[k] >= ulo and u[k + 1] <= uhi
        for q in range(glx.size):
            a[i, q] = a_full[k, q] if whole else math.exp(uu[i, q])
    return k0, nk


def _node_shape(code, a, ln_a, p0, p1, p2):
    """n(a) at one node of radius ``a`` (logarithm ``ln_a``) for a built-in
    family's ``_KERNEL_SHAPE`` code, with the arithmetic of its NumPy
    shape: 0 power law (p0 = q), 1 lognormal (p0 = a0, p1 = w), 2 cut-off
    power law (p0 = q, p1 = a_t, p2 = a_c)."""
    if code == 0:
        return math.exp(ln_a * (-p0))
    if code == 1:
        z = math.log(a / p0) / p1
        return math.exp(-0.5 * z * z) / a
    z = max(a - p1, 0.0) / p2
    return a ** (-p0) * math.exp(-min(z ** 3, 700.0))


def _family_weights_loop(code, p0, p1, p2, ulo, uhi, u, a_full, fac, inv_ap, power, w):
    """:meth:`SizeGrid.weights` of a built-in family in one compiled call:
    the support's nodes (:func:`_nodes_exp_loop`), the shape at the nodes
    (:func:`_node_shape`) and the moments and weights
    (:func:`_weights_loop`) into ``w``; work arrays are allocated here."""
    m = u.size - 1
    nq = _GL_X.size
    uu = np.empty((m, nq))
    half = np.empty(m)
    a = np.empty((m, nq))
    k0, nk = _nodes_exp_loop(u, ulo, uhi, _GL_X, uu, half, a_full, a)
    f = np.empty((nk, nq))
    for i in range(nk):
        for q in range(nq):
            f[i, q] = _node_shape(code, a[i, q], uu[i, q], p0, p1, p2)
    _weights_loop(f, half[:nk], a[:nk], uu[:nk], k0, u, _GL_W, power, np.empty((nk, 4)),
                  fac, inv_ap, w)


@_jit.kernels
def _numba_kernels():
    """The compiled :func:`_moments_loop` and :func:`_nodes_loop` (None when
    numba is missing or ``EDGEFIT_NO_NUMBA`` is set: the NumPy lines of
    :meth:`SizeGrid.weights` run instead)."""
    moments = _jit.jit(_moments_loop)
    nodes = _jit.jit(_nodes_loop)
    nodes_exp = _jit.jit(_nodes_exp_loop, globals={"_nodes_loop": nodes})
    weights = _jit.jit(_weights_loop, globals={"_moments_loop": moments})
    return {"moments": moments, "nodes": nodes, "nodes_exp": nodes_exp, "weights": weights,
            "family": _jit.jit(_family_weights_loop, globals={
                "_nodes_exp_loop": nodes_exp, "_weights_loop": weights,
                "_node_shape": _jit.jit(_node_shape)})}


class SizeGrid:
    """Increasing grain radii (µm) on which cross sections are tabulated,
    with the machinery to integrate tabulated quantities over a
    distribution.

    A quantity g_i = g(a_i) is represented by the not-a-knot cubic spline
    in u = ln a of s(u) = g / a^p (p = 3 by default: cross sections of
    small grains scale as a³, so s is nearly flat there), and

    .. math:: \\langle g \\rangle = \\int p(a)\\, a^p\\, s(\\ln a)\\, da
              = \\sum_i W_i\\, g_i ,

    with p(a) the normalised distribution, integrated by 6-point
    Gauss–Legendre on every grid interval inside the support.
    """

    def __init__(self, sizes_um, power: float = 3.0):
        a = np.asarray(as_um(sizes_um, "size"), dtype=float)
        if a.ndim != 1 or a.size < 4 or np.any(np.diff(a) <= 0) or a[0] <= 0:
            raise PhysicsDataError("size grid: need >= 4 positive, increasing radii")
        self.a = a
        self.u = np.log(a)
        self.power = float(power)
        self._coef = CubicSpline(self.u, np.eye(a.size), axis=0).c  # (4, M-1, M)

    @classmethod
    def log(cls, amin=0.001, amax=5.0, n=160):
        """``n`` radii spaced evenly in ln a from ``amin`` to ``amax`` (µm)."""
        return cls(np.geomspace(as_um(amin), as_um(amax), int(n)))

    def __len__(self):
        return self.a.size

    def _check_range(self, lo, hi):
        limits = self.__dict__.get("_limits")
        if limits is None:
            tol = 1e-9
            limits = self._limits = (float(self.a[0] * (1 - tol)), float(self.a[-1] * (1 + tol)))
        if lo < limits[0] or hi > limits[1]:
            raise PhysicsDataError(
                f"size distribution spans {lo:.4g}-{hi:.4g} um but the cross-section "
                f"table covers {self.a[0]:.4g}-{self.a[-1]:.4g} um; build a table with a "
                "wider size grid or narrow the distribution")

    def basis(self, a_um):
        """Spline basis rows B (n × M) so that s(a) = B @ s_i."""
        uu = np.log(np.atleast_1d(np.asarray(a_um, dtype=float)))
        k = np.clip(np.searchsorted(self.u, uu, side="right") - 1, 0, self.a.size - 2)
        t = (uu - self.u[k])[:, None]
        c = self._coef
        return ((c[0, k] * t + c[1, k]) * t + c[2, k]) * t + c[3, k]

    def weights(self, dist: SizeDistribution) -> np.ndarray:
        """W (length M) with ⟨g⟩ = Σ W_i g_i over the normalised ``dist``."""
        spec = type(dist).__dict__.get("_KERNEL_SHAPE")
        if spec is not None:
            kern = _numba_kernels()
            if kern is not None:
                # a built-in family: nodes, shape, moments and weights in one call
                lo, hi = dist.support()
                self._check_range(lo, hi)
                code, names = spec
                p = list(map(dist.values.__getitem__, names)) + [0.0, 0.0]
                arrays = self.__dict__.get("_family_arrays")
                if arrays is None:
                    arrays = self._family_arrays = (self._nodes_full(kern),
                                                    self._adjoint_factors(), self._inv_a_power())
                w = np.empty(self.a.size)
                kern["family"](code, p[0], p[1], p[2], math.log(lo), math.log(hi), self.u,
                               arrays[0], arrays[1], arrays[2], self.power, w)
                return w
        if isinstance(dist, SingleSize):
            s = dist.values["size"]
            self._check_range(s, s)
            return self.basis(s)[0] * s ** self.power / self._a_power()
        lo, hi = dist.support()
        self._check_range(lo, hi)
        ulo, uhi = math.log(lo), math.log(hi)
        kern = _numba_kernels()
        if kern is not None:
            # the support's grid intervals and their Gauss-Legendre nodes in
            # one compiled call (same arithmetic as the NumPy lines below)
            work = self.__dict__.get("_nodes_work")
            if work is None:
                # work arrays, and the exp of every whole interval's nodes
                work = self._nodes_work = (np.empty((self.a.size - 1, _GL_X.size)),
                                           np.empty(self.a.size - 1), self._nodes_full(kern))
            a = np.empty((self.a.size - 1, _GL_X.size))
            k0, nk = kern["nodes_exp"](self.u, ulo, uhi, _GL_X, work[0], work[1], work[2], a)
            k1 = k0 + nk - 1
            uu, half, a = work[0][:nk], work[1][:nk], a[:nk]
        else:
            k0, k1, uu, half, a = self._nodes_numpy(ulo, uhi)
        f = dist._shape_nodes(a, uu)
        if not (isinstance(f, np.ndarray) and f.dtype == float and f.flags.owndata
                and f.flags.writeable and f.shape == a.shape):
            f = np.array(np.broadcast_to(f, a.shape), dtype=float)   # overwritten below
        if kern is not None:
            # moments and the weights in one compiled call (the spline map
            # applied transposed, not as a dense product)
            w = np.empty(self.a.size)
            kern["weights"](f, half, a, uu, k0, self.u, _GL_W, self.power,
                            np.empty((k1 - k0 + 1, 4)), self._adjoint_factors(),
                            self._inv_a_power(), w)
            return w
        mom = _moments_numpy(f, half, a, uu, self.u[k0:k1 + 1], self.power)
        w = mom.ravel() @ self._coef_by_interval()[k0:k1 + 1].reshape(-1, self.a.size)
        w /= self._a_power()
        return w

    def _nodes_numpy(self, ulo, uhi):
        """(k0, k1, ln a, half-widths, a) of the Gauss-Legendre nodes on the
        grid intervals k0..k1 cut at the support [ulo, uhi] (in ln a)."""
        last = self.a.size - 2
        k0 = min(max(int(np.searchsorted(self.u, ulo, side="right")) - 1, 0), last)
        k1 = min(max(int(np.searchsorted(self.u, uhi, side="left")) - 1, 0), last)
        # grid intervals k0..k1 cut at the support; only the end ones can be empty
        uk = self.u[k0:k1 + 2]
        left = np.maximum(uk[:-1], ulo)
        right = np.minimum(uk[1:], uhi)
        keep = right > left
        if not keep.all():
            idx = np.flatnonzero(keep)
            k0, k1 = k0 + int(idx[0]), k0 + int(idx[-1])
            left, right = left[idx[0]:idx[-1] + 1], right[idx[0]:idx[-1] + 1]
        half = 0.5 * (right - left)
        uu = (left + half)[:, None] + half[:, None] * _GL_X      # (nk, 6)
        return k0, k1, uu, half, np.exp(uu)

    def _nodes_full(self, kern):
        """exp of the Gauss-Legendre nodes of every whole grid interval
        (computed once per grid by the compiled node loop)."""
        full = self.__dict__.get("_a_full")
        if full is None:
            full = np.empty((self.a.size - 1, _GL_X.size))
            kern["nodes"](self.u, self.u[0], self.u[-1], _GL_X, full, np.empty(self.a.size - 1))
            full = self._a_full = np.exp(full)
        return full

    def _a_power(self):
        cached = self.__dict__.get("_a_p")
        if cached is None or cached[0] != self.power:
            cached = (self.power, self.a ** self.power)
            self._a_p = cached
        return cached[1]

    def _inv_a_power(self):
        cached = self.__dict__.get("_inv_a_p")
        if cached is None or cached[0] != self.power:
            cached = (self.power, 1.0 / self._a_power())
            self._inv_a_p = cached
        return cached[1]

    def _adjoint_factors(self):
        """(4, M) array: interval widths in ln a, and the upper diagonal,
        elimination multipliers and pivots of the transposed tridiagonal
        system of the not-a-knot spline's slopes (the system scipy's
        CubicSpline solves), for :func:`_weights_loop`."""
        fac = self.__dict__.get("_adj")
        if fac is None:
            x = self.u
            n = x.size
            dx = np.diff(x)
            diag = np.empty(n)
            diag[0], diag[-1] = dx[1], dx[-2]
            diag[1:-1] = 2.0 * (dx[:-1] + dx[1:])
            lower = np.zeros(n)           # of A^T: A[k-1, k]
            lower[1] = x[2] - x[0]
            lower[2:] = dx[:-1]
            upper = np.zeros(n)           # of A^T: A[k+1, k]
            upper[:n - 2] = dx[1:]
            upper[n - 2] = x[-1] - x[-3]
            mult = np.zeros(n)
            piv = np.empty(n)
            piv[0] = diag[0]
            for k in range(1, n):
                mult[k] = lower[k] / piv[k - 1]
                piv[k] = diag[k] - mult[k] * upper[k - 1]
            fac = self._adj = np.ascontiguousarray(
                np.stack([np.append(dx, 0.0), upper, mult, piv]))
        return fac

    def _coef_by_interval(self):
        """Spline coefficients as (interval, power, radius), contiguous."""
        c = self.__dict__.get("_coef_k")
        if c is None:
            c = self._coef_k = np.ascontiguousarray(self._coef.transpose(1, 0, 2))
        return c

    def average(self, values, dist: SizeDistribution):
        """⟨g⟩ over ``dist`` for tabulated ``values`` (..., M) (last axis = size)."""
        return np.asarray(values) @ self.weights(dist)
