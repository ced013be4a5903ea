"""Bin-averaged transmission of Voigt absorption lines: the algorithm.

The entry points are :func:`binned_line_transmission` (checks its lines,
any bins) and :func:`grid_transmission` (lines already checked, with a
:func:`line_grid` tuple cached per energy grid -- what
:class:`edgefit.models.absorption.IonLines` calls in a fit).  The line
physics (oscillator strengths, widths, cross sections) is in
:mod:`edgefit.physics.lines`; the method and its accuracy are described in
:func:`binned_line_transmission`.

A compiled loop (numba, loaded through :mod:`edgefit._jit`) and a
vectorised NumPy body implement the same algorithm and agree to rounding.
"""
from __future__ import annotations

import functools

import numpy as np
from scipy.special import voigt_profile

from .. import _jit
from ..errors import PhysicsDataError

__all__ = ["binned_line_transmission", "grid_transmission", "line_grid", "voigt_table",
           "voigt_fast", "numba_available"]

_SQRT2 = np.sqrt(2.0)


# ---------------------------------------------------------------------------
# Bin-averaged transmission of Voigt lines (fast path)
# ---------------------------------------------------------------------------
#
# The Voigt profile of unit area is V(x) = H(a, u) / (sigma sqrt(2 pi)) with
# u = x / (sigma sqrt 2), a = gamma / (sigma sqrt 2) and H(a, u) = Re w(u + i a),
# w the Faddeeva function.  Near the centre (u < _TAB_UMAX) H is read from a
# table of scipy.special.wofz built once per process, interpolated linearly in
# u and in a.  The interpolation error is bounded by h^2/8 |H_uu| + da^2/8 |H_aa|
# with |H_aa| = |H_uu| (H is harmonic); with h = da = 0.005 this is < 1.3e-5 of
# the peak everywhere and < 2e-4 of the local value out to u = 3.5, where a
# line with tau0 = 2e5 reaches tau = 1.  Further out the asymptotic expansion
# of w for large |z| is used (see binned_line_transmission).

_TAB_DU = 0.005            # table step in u
_TAB_DA = 0.005            # table step in a
_TAB_UMAX = 6.0            # table covers 0 <= u < _TAB_UMAX ...
_TAB_AMAX = 2.0            # ... and 0 <= a < _TAB_AMAX; larger a use scipy
_TAB_NU = int(round(_TAB_UMAX / _TAB_DU)) + 2
_TAB_NA = int(round(_TAB_AMAX / _TAB_DA)) + 2
#: smallest distance from a line centre, in sqrt(2) sigma, at which the
#: far-wing expansion is used (truncation error 945 (2u^2)^-5 < 3e-5 there).
_U_WING = 4.0
_SQRT2PI = np.sqrt(2.0 * np.pi)
#: Gauss-Legendre 2-point nodes on [0, 1] (equal weights 1/2).
_GL2 = np.array([0.5 - 0.5 / np.sqrt(3.0), 0.5 + 0.5 / np.sqrt(3.0)])
#: Sub-sampling steps: in the core the step is at most
#: _ALPHA (sigma / max(1, u_t) + gamma), u_t = sqrt(ln tau0) the half width
#: (in sqrt(2) sigma) where a saturated Doppler core reaches tau = 1; beyond
#: x_g = sqrt(2) sigma (u_t + 1.5) it may grow as _BETA (|x| - x_g).
_ALPHA = 0.5
_BETA = 0.25


@functools.lru_cache(maxsize=1)
def voigt_table():
    """Table of H(a, u) = Re w(u + i a) (scipy.special.wofz), flattened
    row-major with rows a = 0, 0.005, ... and columns u = 0, 0.005, ...
    (read-only; about 3.9 MB, built in ~0.1 s on first use)."""
    from scipy.special import wofz

    u = np.arange(_TAB_NU) * _TAB_DU
    a = np.arange(_TAB_NA) * _TAB_DA
    tab = np.ascontiguousarray(wofz(u[None, :] + 1j * a[:, None]).real).ravel()
    tab.setflags(write=False)
    return tab


def voigt_fast(x, sigma, gamma):
    """Unit-area Voigt profile by the method used in
    :func:`binned_line_transmission` (table of Re w inside 6 sqrt(2) sigma,
    far-wing expansion outside); same arguments as
    scipy.special.voigt_profile with scalar ``sigma`` (> 0) and ``gamma``.

    Accuracy against scipy.special.voigt_profile (tests/test_lines.py):
    relative error below 2e-4 within 5 sigma (1.5e-4 seen), and everywhere
    when gamma > 0; absolute error below 1e-5 of the peak everywhere."""
    x = np.abs(np.asarray(x, dtype=float))
    s, g = float(sigma), float(gamma)
    if not s > 0:
        raise PhysicsDataError("voigt_fast needs sigma > 0")
    a = g / (_SQRT2 * s)
    u = x / (_SQRT2 * s)
    out = np.empty_like(u)
    inner = u < _TAB_UMAX
    if a < _TAB_AMAX:
        out[inner] = _table_h(u[inner], np.full(int(inner.sum()), a)) / (s * _SQRT2PI)
    else:
        out[inner] = voigt_profile(x[inner], s, g)
    out[~inner] = _wing_point(x[~inner], s, g)
    return out


def _table_h(u, a):
    """Bilinear interpolation of H(a, u) in the table; u < _TAB_UMAX, a < _TAB_AMAX."""
    tab = voigt_table()
    kf = u * (1.0 / _TAB_DU)
    k = kf.astype(np.intp)
    t = kf - k
    af = a * (1.0 / _TAB_DA)
    j = af.astype(np.intp)
    ta = af - j
    flat = j * _TAB_NU + k
    h00 = tab[flat]
    h0 = h00 + t * (tab[flat + 1] - h00)
    flat += _TAB_NU
    h10 = tab[flat]
    h1 = h10 + t * (tab[flat + 1] - h10)
    return h0 + ta * (h1 - h0)


def _wing_point(d, s, g):
    """Far-wing expansion of the unit-area Voigt profile at distance d:
    (1/pi) Im[z^-1 (1 + s^2 z^-2 + 3 s^4 z^-4 + 15 s^6 z^-6 + 105 s^8 z^-8)],
    z = d - i gamma (Gaussian moments of the Lorentzian 1/(pi(z - y)))."""
    q = 1.0 / (d - 1j * g)
    r = (s * s) * (q * q)
    ser = 1.0 + r * (1.0 + r * (3.0 + r * (15.0 + 105.0 * r)))
    return (q * ser).imag * (1.0 / np.pi)


def _ranges(start, length):
    """Concatenated ``arange(start[i], start[i] + length[i])`` and, for each
    element, the index i of its range."""
    length = np.maximum(length, 0)
    owner = np.repeat(np.arange(length.size), length)
    offs = np.cumsum(length) - length
    idx = np.repeat(start - offs, length) + np.arange(owner.size)
    return idx, owner


def _check_lines(centre, area, sigma, gamma):
    centre = np.atleast_1d(np.asarray(centre, dtype=float))
    area = np.atleast_1d(np.asarray(area, dtype=float))
    sigma = np.atleast_1d(np.asarray(sigma, dtype=float))
    gamma = np.atleast_1d(np.asarray(gamma, dtype=float))
    if not (centre.shape == area.shape == sigma.shape == gamma.shape):
        raise PhysicsDataError("line centre, area, sigma and gamma need equal lengths")
    if np.any(sigma < 0) or np.any(gamma < 0) or np.any(sigma + gamma <= 0) \
            or np.any(area < 0) or not np.all(np.isfinite(
                np.concatenate([centre, area, sigma, gamma]))):
        raise PhysicsDataError("line widths must be positive and line strengths finite "
                               "and non-negative")
    keep = area > 0
    if not keep.all():
        centre, area, sigma, gamma = centre[keep], area[keep], sigma[keep], gamma[keep]
    return centre, area, sigma, gamma


def binned_line_transmission(lo, hi, centre, area, sigma, gamma, *, tau_floor=1e-5,
                             tol=1e-5, max_sub=4096, backend="auto"):
    """Transmission exp(-tau) averaged over energy bins for a set of Voigt lines.

    .. math:: T_k = \\frac{1}{E_{k+1} - E_k}\\int_{E_k}^{E_{k+1}}
              \\exp\\Big[-\\sum_l A_l V(E - c_l; \\sigma_l, \\gamma_l)\\Big] dE

    Parameters
    ----------
    lo, hi : ndarray
        Bin edges in keV (increasing, contiguous or not).
    centre, area, sigma, gamma : array_like
        Per line: centre (keV), energy-integrated optical depth
        ``A = N * pi r_e h c f`` (keV), Gaussian sigma (keV) and Lorentzian
        HWHM (keV); sigma, gamma >= 0 with ``sigma + gamma > 0``.
    tau_floor : float
        Optical depth below which line wings are neglected.  Each line
        reaches to max(sqrt(A gamma / (pi tau_floor)), 1000 gamma) from its
        centre, so at most (2/pi) gamma / reach < 0.07 % of a thin line's
        equivalent width is left out.
    tol : float
        Target error of each bin's transmission from the two approximations
        below (core boundary and exp of the mean optical depth).
    max_sub : int
        Largest number of sub-intervals per bin.
    backend : {"auto", "numba", "numpy"}
        "numba": the compiled loop kernel (:func:`numba_available`);
        "numpy": the vectorised NumPy body; "auto": numba when importable
        and ``EDGEFIT_NO_NUMBA`` is unset.  Same algorithm, results equal to
        rounding.  Lines with sigma = 0 or a >= 2 always use NumPy.

    Returns
    -------
    ndarray
        Transmission per bin, in [0, 1]; exactly 1 outside every line's reach.

    Notes
    -----
    Each line has a *core* of half width
    max(sqrt(2) sigma max(4, sqrt(ln(tau0/tol))), (2 A gamma w / (pi sqrt(24 tol)))^(1/3))
    (w the local bin width, tau0 the peak optical depth): beyond the first
    term the Doppler core adds less than ``tol`` to tau and the far-wing
    expansion is accurate; beyond the second, tau varies so little across a
    bin that <exp(-tau)> = exp(-<tau>) to ``tol`` (the difference is
    Var(tau)/2 <= (tau' w)^2 / 24).

    * Bins overlapping any core are split into K sub-intervals with two
      Gauss-Legendre points each; K is set by the finest step any line asks
      for there (see ``_ALPHA``, ``_BETA``).  At each point every line within
      reach adds A V, with V from a table of Re w(u + i a) (scipy.special.wofz)
      for u < 6 and from the far-wing expansion beyond; lines with a > 2 use
      scipy.special.voigt_profile directly.
    * Other bins within reach get exp(-<tau>), with the bin average of each
      line's far wing integrated in closed form:
      (1/w) int V dx = (1/(pi w)) [arctan(w gamma / (gamma^2 + d1 d2))
      + Im sum_{n=1..4} (2n-1)!! sigma^2n (z1^-2n - z2^-2n) / (2n)],
      z = d - i gamma, d1, d2 the bin edges relative to the centre.

    All lines are handled in one pass (vectorised NumPy, or one compiled
    loop with numba).  Against a direct evaluation (scipy.special.voigt_profile
    at >= 200 points per bin, step <= sigma/40) the transmission agrees to
    1e-4 per bin, and the absorbed fraction 1 - T to 0.1 % (+2e-5), for
    b = 10-1000 km/s, thin to saturated and damped columns (log N = 12-21
    for Si XIV), velocity shifts and bins of 0.1-5 eV (tests/test_lines.py;
    the largest difference seen there is 2.3e-5).

    Speed (benchmarks/bench_absorption.py, 6 lines on 8192 bins): about
    30 us per call with numba, about 180 us with NumPy alone.
    """
    centre, area, sigma, gamma = _check_lines(centre, area, sigma, gamma)
    grid = line_grid(lo, hi)
    if grid[0].size == 0 or centre.size == 0:
        return np.ones(grid[0].size)
    return grid_transmission(grid, centre, area, sigma, gamma, tau_floor, tol, max_sub,
                             backend)


def line_grid(lo, hi):
    """Grid-only arrays used by the line code, worth caching per grid:
    ``(lo, hi, width, edges)`` with ``edges`` = lo followed by hi[-1] when
    the bins are contiguous (else None)."""
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    edges = None
    if lo.size and np.array_equal(lo[1:], hi[:-1]):
        edges = np.append(lo, hi[-1])
    return lo, hi, hi - lo, edges


def grid_transmission(grid, c, A, s, g, tau_floor=1e-5, tol=1e-5, max_sub=4096,
                      backend="auto"):
    """Core of :func:`binned_line_transmission` for validated lines with
    ``area > 0`` and a :func:`line_grid` tuple.  ``backend``: "numpy",
    "numba" or "auto" (numba when importable, see :func:`numba_available`);
    both run the same algorithm and agree to rounding."""
    lo, hi, width, edges = grid
    n = lo.size
    nl = c.size
    if backend != "numpy":
        kern = _numba_kernel(required=backend == "numba")
        if kern is not None:
            out = np.empty(n)
            if kern(lo, hi, width, edges is not None, c, A, s, g, tau_floor, tol, max_sub,
                    voigt_table(), out):
                return out
    sq2s = _SQRT2 * s
    # Voigt constants: u = |x| inv, a = gamma inv; V = H(a, u) norm / A
    pos_s = s > 0
    inv = np.divide(1.0, sq2s, out=np.zeros(nl), where=pos_s)
    a_l = g * inv
    slow = (a_l >= _TAB_AMAX) | ~pos_s
    any_slow = bool(slow.any())
    if any_slow:
        a_l[slow] = 0.0
    af = a_l * (1.0 / _TAB_DA)
    ja = af.astype(np.intp)
    ta = af - ja
    norm = np.divide(A, s * _SQRT2PI, out=np.zeros(nl), where=pos_s)
    inv_du = inv * (1.0 / _TAB_DU)
    tab = voigt_table()
    h00 = tab[ja * _TAB_NU]
    tau0 = (h00 + ta * (tab[(ja + 1) * _TAB_NU] - h00)) * norm
    if any_slow:
        tau0[slow] = A[slow] * voigt_profile(0.0, s[slow], g[slow])
    ag = A * g
    # core: Doppler part below tol and wing expansion valid beyond r_gauss;
    # exp(<tau>) valid beyond r_sat
    r_gauss = sq2s * np.sqrt(np.maximum(np.log(tau0 * (1.0 / tol)), _U_WING ** 2))
    wl = width[np.minimum(np.searchsorted(hi, c), n - 1)]
    r_core = np.maximum(r_gauss, np.cbrt(ag * wl * (2.0 / (np.pi * np.sqrt(24.0 * tol)))))
    r_reach = np.maximum(r_core, np.maximum(np.sqrt(ag * (1.0 / (np.pi * tau_floor))),
                                            1000.0 * g))
    r_in = np.minimum(_TAB_UMAX * sq2s, r_reach)
    ih = np.searchsorted(hi, np.concatenate([c - r_reach, c - r_core]), side="right")
    il = np.searchsorted(lo, np.concatenate([c + r_core, c + r_reach]), side="left")
    i0, j0 = ih[:nl], ih[nl:]
    j1, i1 = il[:nl], il[nl:]
    # bins needing sub-samples: union of the cores
    ivs: list[list[int]] = []
    for a_, b_ in sorted(zip(j0.tolist(), j1.tolist())):
        if b_ <= a_:
            continue
        if ivs and a_ <= ivs[-1][1]:
            if b_ > ivs[-1][1]:
                ivs[-1][1] = b_
        else:
            ivs.append([a_, b_])
    # per-line constants of the sub-sampling step
    u_t = np.sqrt(np.maximum(np.log(tau0), 1.0))
    h0 = _ALPHA * (s / u_t + g)
    x_g = sq2s * (u_t + 1.5)
    out = np.ones(n)
    # -- wing bins: closed-form bin average of the far wing -------------------
    span0, span1 = int(i0.min()), int(i1.max())
    if span1 > span0:
        first = np.concatenate([i0, j1])
        count = np.concatenate([j0 - i0, i1 - j1])
        line2 = np.concatenate([np.arange(nl), np.arange(nl)])
        if edges is not None:
            # antiderivative at the shared edges of each wing range; the
            # differences of consecutive edges are the bins, except where
            # one range ends and the next begins (weight set to 0 there)
            n_e = count + (count > 0)
            ep, eo = _ranges(first, n_e)
            lo_ = line2[eo]
            fe = _wing_antiderivative(edges[ep] - c[lo_], g[lo_], s[lo_])
            wb, wo = np.minimum(ep[:-1], n - 1), lo_[:-1]
            dF = np.diff(fe)
            dF[(np.cumsum(n_e)[n_e > 0] - 1)[:-1]] = 0.0
        else:
            wb, wo = _ranges(first, count)
            wo = line2[wo]
            cw = c[wo]
            dF = _wing_antiderivative(hi[wb] - cw, g[wo], s[wo]) \
                - _wing_antiderivative(lo[wb] - cw, g[wo], s[wo])
        if wb.size:
            tau_w = dF * (A * (1.0 / np.pi))[wo] / width[wb]
            tw = np.bincount(wb - span0, weights=tau_w, minlength=span1 - span0)
            out[span0:span1] = np.exp(-tw[:span1 - span0])   # (junction entries may add one)

    # -- core bins: sub-sampled --------------------------------------------------
    if not ivs:
        return out
    if len(ivs) == 1:
        cb = np.arange(ivs[0][0], ivs[0][1])
    else:
        iv = np.array(ivs)
        cb, _ = _ranges(iv[:, 0], iv[:, 1] - iv[:, 0])
    blo, bhi, bw = lo[cb], hi[cb], width[cb]
    cc = c[:, None]
    near = np.maximum(np.maximum(blo - cc, cc - bhi), 0.0)
    step = np.maximum(h0[:, None], _BETA * (near - x_g[:, None]))
    k = np.minimum(np.ceil((bw / step).max(axis=0)), max_sub).astype(np.intp)
    m = 2 * k
    starts = np.cumsum(m) - m
    own = np.repeat(np.arange(cb.size), m)
    pos = np.arange(own.size) - starts[own]
    x = blo[own] + (_GL2[pos & 1] + (pos >> 1)) * (bw / k)[own]
    ns = x.size
    q = np.searchsorted(x, np.concatenate([c - r_reach, c - r_in, c + r_in, c + r_reach]))
    s0, sa, sb, s1 = q[:nl], q[nl:2 * nl], q[2 * nl:3 * nl], q[3 * nl:]
    # inner points: table of H(a, u) (scipy for a >= _TAB_AMAX)
    pi_, po = _ranges(sa, sb - sa)
    if pi_.size:
        kf = np.abs(x[pi_] - c[po]) * inv_du[po]
        kk = kf.astype(np.intp)
        t = kf - kk
        flat = (ja * _TAB_NU)[po] + kk
        h00 = tab[flat]
        hv = h00 + t * (tab[flat + 1] - h00)
        flat += _TAB_NU
        h10 = tab[flat]
        hv += ta[po] * (h10 + t * (tab[flat + 1] - h10) - hv)
        hv *= norm[po]
        if any_slow:
            sel = slow[po]
            ps, ls = pi_[sel], po[sel]
            hv[sel] = A[ls] * voigt_profile(x[ps] - c[ls], s[ls], g[ls])
        tau = np.bincount(pi_, weights=hv, minlength=ns)
    else:
        tau = np.zeros(ns)
    # outer points: far-wing expansion
    pw, lw = _ranges(np.concatenate([s0, sb]), np.concatenate([sa - s0, s1 - sb]))
    if pw.size:
        lw = lw % nl
        tau += np.bincount(pw, weights=A[lw] * _wing_point(x[pw] - c[lw], s[lw], g[lw]),
                           minlength=ns)
    out[cb] = np.add.reduceat(np.exp(-tau), starts) / m
    return out


def _kernel(lo, hi, width, contiguous, c, A, s, g, i0, j0, j1, i1, iv_lo, iv_hi,
            h0, x_g, r_reach, r_in, inv_du, ja, ta, norm, tab, nu, max_sub, beta, out):
    """Loop form of the NumPy body of :func:`_transmission` (compiled by
    numba): same wing bins, same sub-samples, same formulas."""
    n = lo.size
    nl = c.size
    tw = np.zeros(n)
    span0 = n
    span1 = 0
    for ll in range(nl):
        span0 = min(span0, i0[ll])
        span1 = max(span1, i1[ll])
        for side in range(2):
            a_ = i0[ll] if side == 0 else j1[ll]
            b_ = j0[ll] if side == 0 else i1[ll]
            if b_ <= a_:
                continue
            f_prev = _wing_antiderivative(lo[a_] - c[ll], g[ll], s[ll])
            for b in range(a_, b_):
                if b > a_ and not contiguous:
                    f_prev = _wing_antiderivative(lo[b] - c[ll], g[ll], s[ll])
                f_next = _wing_antiderivative(hi[b] - c[ll], g[ll], s[ll])
                tw[b] += (f_next - f_prev) * (A[ll] * (1.0 / np.pi)) / width[b]
                f_prev = f_next
    for b in range(n):
        out[b] = 1.0
    for b in range(span0, span1):
        if tw[b] != 0.0:        # exp(-0) = 1 exactly: skip the untouched bins
            out[b] = np.exp(-tw[b])
    gl0 = 0.5 - 0.5 / np.sqrt(3.0)
    gl1 = 0.5 + 0.5 / np.sqrt(3.0)
    for iv in range(iv_lo.size):
        for b in range(iv_lo[iv], iv_hi[iv]):
            blo = lo[b]
            bhi = hi[b]
            bw = width[b]
            kmax = 0.0
            for ll in range(nl):
                near = max(max(blo - c[ll], c[ll] - bhi), 0.0)
                step = max(h0[ll], beta * (near - x_g[ll]))
                kmax = max(kmax, bw / step)
            k = int(min(np.ceil(kmax), max_sub))
            hstep = bw / k
            acc = 0.0
            for j in range(2 * k):
                x = blo + ((gl1 if j & 1 else gl0) + (j >> 1)) * hstep
                tau = 0.0
                for ll in range(nl):
                    cl = c[ll]
                    if x >= cl - r_reach[ll] and x < cl + r_reach[ll]:
                        if x >= cl - r_in[ll] and x < cl + r_in[ll]:
                            kf = abs(x - cl) * inv_du[ll]
                            kk = int(kf)
                            t = kf - kk
                            flat = ja[ll] * nu + kk
                            h00 = tab[flat]
                            hv = h00 + t * (tab[flat + 1] - h00)
                            flat += nu
                            h10 = tab[flat]
                            hv += ta[ll] * (h10 + t * (tab[flat + 1] - h10) - hv)
                            tau += hv * norm[ll]
                        else:
                            tau += A[ll] * _wing_point(x - cl, s[ll], g[ll])
                acc += np.exp(-tau)
            out[b] = acc / (2 * k)


def _bisect(arr, v, right):
    """np.searchsorted(arr, v, side="right" if right else "left") for one value."""
    lo_, hi_ = 0, arr.size
    while lo_ < hi_:
        mid = (lo_ + hi_) // 2
        if arr[mid] < v or (right and arr[mid] == v):
            lo_ = mid + 1
        else:
            hi_ = mid
    return lo_


def _kernel_all(lo, hi, width, contiguous, c, A, s, g, tau_floor, tol, max_sub, tab, out):
    """Set-up of :func:`_transmission` in loop form followed by
    :func:`_kernel`; returns False (doing nothing) when a line needs the
    scipy fallback (sigma = 0 or a >= 2), which only the NumPy path has."""
    n = lo.size
    nl = c.size
    i0 = np.empty(nl, np.intp)
    j0 = np.empty(nl, np.intp)
    j1 = np.empty(nl, np.intp)
    i1 = np.empty(nl, np.intp)
    ja = np.empty(nl, np.intp)
    ta = np.empty(nl)
    norm = np.empty(nl)
    inv_du = np.empty(nl)
    h0 = np.empty(nl)
    x_g = np.empty(nl)
    r_reach = np.empty(nl)
    r_in = np.empty(nl)
    k_sat = 2.0 / (np.pi * np.sqrt(24.0 * tol))
    k_floor = 1.0 / (np.pi * tau_floor)
    for ll in range(nl):
        if not s[ll] > 0:
            return False
        sq2s = _SQRT2 * s[ll]
        inv = 1.0 / sq2s
        a = g[ll] * inv
        if a >= _TAB_AMAX:
            return False
        af = a * (1.0 / _TAB_DA)
        ja[ll] = int(af)
        ta[ll] = af - ja[ll]
        norm[ll] = A[ll] / (s[ll] * _SQRT2PI)
        inv_du[ll] = inv * (1.0 / _TAB_DU)
        h00 = tab[ja[ll] * _TAB_NU]
        tau0 = (h00 + ta[ll] * (tab[(ja[ll] + 1) * _TAB_NU] - h00)) * norm[ll]
        ag = A[ll] * g[ll]
        r_gauss = sq2s * np.sqrt(max(np.log(tau0 * (1.0 / tol)), _U_WING ** 2))
        wl = width[min(_bisect(hi, c[ll], False), n - 1)]
        r_core = max(r_gauss, np.cbrt(ag * wl * k_sat))
        r_reach[ll] = max(r_core, max(np.sqrt(ag * k_floor), 1000.0 * g[ll]))
        r_in[ll] = min(_TAB_UMAX * sq2s, r_reach[ll])
        i0[ll] = _bisect(hi, c[ll] - r_reach[ll], True)
        j0[ll] = _bisect(hi, c[ll] - r_core, True)
        j1[ll] = _bisect(lo, c[ll] + r_core, False)
        i1[ll] = _bisect(lo, c[ll] + r_reach[ll], False)
        u_t = np.sqrt(max(np.log(tau0), 1.0))
        h0[ll] = _ALPHA * (s[ll] / u_t + g[ll])
        x_g[ll] = sq2s * (u_t + 1.5)
    # union of the cores, as sorted disjoint intervals
    order = np.argsort(j0)
    iv_lo = np.empty(nl, np.intp)
    iv_hi = np.empty(nl, np.intp)
    niv = 0
    for r in range(nl):
        a_ = j0[order[r]]
        b_ = j1[order[r]]
        if b_ <= a_:
            continue
        if niv > 0 and a_ <= iv_hi[niv - 1]:
            if b_ > iv_hi[niv - 1]:
                iv_hi[niv - 1] = b_
        else:
            iv_lo[niv] = a_
            iv_hi[niv] = b_
            niv += 1
    _kernel(lo, hi, width, contiguous, c, A, s, g, i0, j0, j1, i1, iv_lo[:niv],
            iv_hi[:niv], h0, x_g, r_reach, r_in, inv_du, ja, ta, norm, tab, _TAB_NU,
            max_sub, _BETA, out)
    return True


@_jit.kernels
def _numba_kernel():
    """The compiled :func:`_kernel_all` (built once per process, cached on
    disk by numba; None without numba, see :mod:`edgefit._jit`)."""
    from numba.extending import register_jitable

    for fn in (_wing_antiderivative, _wing_point, _bisect, _kernel):
        register_jitable(fn)
    return _jit.jit(_kernel_all)


def numba_available():
    """True if the compiled line kernel can be used."""
    return _numba_kernel() is not None


def _wing_antiderivative(d, g, s):
    """pi times the antiderivative of the far-wing expansion of the Voigt
    profile, in real arithmetic:
    arctan(d/gamma) + Im sum_{n=1..4} -(2n-1)!! s^2n z^-2n / (2n), z = d - i gamma
    (gamma > 0)."""
    d2 = d * d
    g2 = g * g
    p = 1.0 / (d2 + g2)
    sp = (s * s) * (p * p)
    pr = sp * (d2 - g2)            # s^2 z^-2 = pr + i pi
    pim = sp * (2.0 * d * g)
    qr = 2.5 + 13.125 * pr
    qi = 13.125 * pim
    qr, qi = 0.75 + pr * qr - pim * qi, pr * qi + pim * qr
    qr, qi = 0.5 + pr * qr - pim * qi, pr * qi + pim * qr
    return np.arctan(d / g) - (pr * qi + pim * qr)
