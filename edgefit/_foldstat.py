"""Folding and the Poisson deviance in one pass (layer 1, pure computation).

The hot loop of a fit computes, for each dataset, expected counts
mu = xnorm * (M @ flux) with M a CSR folding matrix, and then the
per-bin Poisson deviance of the observed counts n (Cash 1979, in the
deviance form of Kaastra 2017 eq. 4).  Done separately that is a sparse
product, a temporary mu, and half a dozen NumPy passes with their own
temporaries.  The kernels here walk the CSR rows once: each row's mu is
formed, checked (finite and >= 0), turned into its deviance term and
summed (:func:`fold_deviance`), or into its signed residual
(:func:`fold_residuals`), without an intermediate array.

The formulas are those of :func:`edgefit.stats._deviance_terms` and
:func:`edgefit.stats.deviance_residuals`, term by term (floor at
:data:`edgefit.stats.MODEL_FLOOR`, the log1p form, the direct formula where
that is not finite), so results agree with the NumPy path to rounding
(the sum is taken row by row rather than pairwise).  Each row's product is
accumulated in the same order as SciPy's CSR matrix-vector product.

numba compiles the kernels (through :mod:`edgefit._jit`) when it is
importable and ``EDGEFIT_NO_NUMBA`` is unset (:func:`numba_available`);
otherwise the same functions run as NumPy code (a SciPy product and the :mod:`edgefit.stats` functions).
"""
from __future__ import annotations

import math

import numpy as np

from . import _jit, stats

__all__ = ["numba_available", "Folding", "FoldingGroup", "fold", "fold_deviance",
           "fold_residuals"]

_FLOOR = stats.MODEL_FLOOR


def _fold_py(indptr, indices, data, flux, xn, out):
    """out[i] = xn * sum_j data[j] flux[indices[j]]."""
    for i in range(indptr.size - 1):
        s = 0.0
        for j in range(indptr[i], indptr[i + 1]):
            s += data[j] * flux[indices[j]]
        out[i] = xn * s


def _xlogy(x, y):
    if x == 0.0:
        return 0.0
    return x * math.log(y)


def _deviance_one(mu, n):
    m = mu if mu > _FLOOR else _FLOOR
    x = (n - m) / m
    d = 2.0 * m * ((1.0 + x) * math.log1p(x) - x) if x > -1.0 else math.nan
    if not (d - d == 0.0):      # not finite: the direct formula
        d = 2.0 * (m - n + _xlogy(n, n) - _xlogy(n, m))
    return d


def _deviance_sum(mu, counts):
    """(sum of deviance terms, ok); ok is False when an expected count is
    negative or not finite (or their sum overflows)."""
    total = 0.0
    musum = 0.0
    for i in range(mu.size):
        m = mu[i]
        if not m >= 0.0:
            return math.inf, False
        musum += m
        total += _deviance_one(m, counts[i])
    if not (musum - musum == 0.0):
        return math.inf, False
    return total, True


def _fold_deviance_py(indptr, indices, data, flux, xn, counts, scratch):
    """Fold into ``scratch`` (one row per group), then sum the deviance.
    (Two loops in one call: measured faster than a single loop that
    interleaves the row sums with the logarithms.)"""
    _fold_py(indptr, indices, data, flux, xn, scratch)
    return _deviance_sum(scratch, counts)


def _fold_residuals_py(indptr, indices, data, flux, xn, counts, out, start):
    """Signed deviance residuals into out[start:start + rows]; False when an
    expected count is negative or not finite."""
    n_rows = indptr.size - 1
    mu = out[start:start + n_rows]
    _fold_py(indptr, indices, data, flux, xn, mu)
    musum = 0.0
    for i in range(n_rows):
        m = mu[i]
        if not m >= 0.0:
            return False
        musum += m
        n = counts[i]
        d = _deviance_one(m, n)
        r = math.sqrt(d) if d > 0.0 else 0.0
        if n > m:
            mu[i] = r
        elif n < m:
            mu[i] = -r
        else:
            mu[i] = 0.0
    return musum - musum == 0.0


def _group_fold_py(indptr, indices, data, flux, bounds, xn, mu):
    """Rows bounds[k]..bounds[k+1] belong to dataset k, scaled by xn[k]."""
    for k in range(xn.size):
        x = xn[k]
        for i in range(bounds[k], bounds[k + 1]):
            s = 0.0
            for j in range(indptr[i], indptr[i + 1]):
                s += data[j] * flux[indices[j]]
            mu[i] = x * s


def _band_fold_py(indptr, start, data, flux, bounds, xn, mu):
    """:func:`_group_fold_py` for rows whose columns are one contiguous run
    starting at ``start[i]`` (a Gaussian or grating line-spread function
    gives such rows): each row is a dot product of two contiguous vectors,
    which the compiler vectorises (summation order not fixed, so results
    differ from the sequential sum by rounding only)."""
    for k in range(xn.size):
        x = xn[k]
        for i in range(bounds[k], bounds[k + 1]):
            j0 = indptr[i]
            n = indptr[i + 1] - j0
            d = data[j0:j0 + n]
            f = flux[start[i]:start[i] + n]
            s = 0.0
            for j in range(n):
                s += d[j] * f[j]
            mu[i] = x * s


def _residuals_py(mu, counts, bounds, out, starts):
    """Signed deviance residuals of the rows of dataset k (bounds[k] ..
    bounds[k+1] of ``mu``) into out[starts[k]:...]; False when an expected
    count is negative or not finite."""
    musum = 0.0
    for k in range(bounds.size - 1):
        o = starts[k] - bounds[k]
        for i in range(bounds[k], bounds[k + 1]):
            m = mu[i]
            if not m >= 0.0:
                return False
            musum += m
            n = counts[i]
            d = _deviance_one(m, n)
            r = math.sqrt(d) if d > 0.0 else 0.0
            if n > m:
                out[o + i] = r
            elif n < m:
                out[o + i] = -r
            else:
                out[o + i] = 0.0
    return musum - musum == 0.0


def _group_deviance_py(indptr, cols, data, flux, bounds, xn, mu, counts, band):
    """Fold the stacked rows into ``mu`` (:func:`_band_fold_py` when
    ``band``, ``cols`` holding each row's first column, else
    :func:`_group_fold_py`), then sum the deviance: one compiled call."""
    if band:
        _band_fold_py(indptr, cols, data, flux, bounds, xn, mu)
    else:
        _group_fold_py(indptr, cols, data, flux, bounds, xn, mu)
    return _deviance_sum(mu, counts)


def _group_residuals_py(indptr, cols, data, flux, bounds, xn, mu, counts, band, out, starts):
    """:func:`_group_deviance_py`'s folding, then the signed residuals
    (:func:`_residuals_py`)."""
    if band:
        _band_fold_py(indptr, cols, data, flux, bounds, xn, mu)
    else:
        _group_fold_py(indptr, cols, data, flux, bounds, xn, mu)
    return _residuals_py(mu, counts, bounds, out, starts)


@_jit.kernels
def _numba_kernels():
    """The compiled kernels by name (built once per process)."""
    xlogy = _jit.jit(_xlogy, nogil=True)
    one = _jit.jit(_deviance_one, nogil=True, globals={"_xlogy": xlogy})
    dsum = _jit.jit(_deviance_sum, nogil=True, globals={"_deviance_one": one})
    fold = _jit.jit(_fold_py, nogil=True)
    gfold = _jit.jit(_group_fold_py, nogil=True)
    # only the band products may be reassociated (no other fast-math
    # flag: NaN and inf must keep their meaning for the model checks)
    bfold = _jit.jit(_band_fold_py, nogil=True, fastmath={"reassoc"})
    gres = _jit.jit(_residuals_py, nogil=True, globals={"_deviance_one": one})
    helpers = {"_deviance_one": one, "_deviance_sum": dsum, "_fold_py": fold,
               "_band_fold_py": bfold, "_group_fold_py": gfold, "_residuals_py": gres}
    return {
        "fold": fold,
        "dev": _jit.jit(_fold_deviance_py, nogil=True, globals=helpers),
        "res": _jit.jit(_fold_residuals_py, nogil=True, globals=helpers),
        "gfold": gfold,
        "bfold": bfold,
        "devsum": dsum,
        "gres": gres,
        "gdev": _jit.jit(_group_deviance_py, nogil=True, globals=helpers),
        "gfres": _jit.jit(_group_residuals_py, nogil=True, globals=helpers),
    }


def numba_available() -> bool:
    """True when the compiled kernels are used."""
    return _numba_kernels() is not None


# -- public entry points (numba when available, else NumPy) -----------------
class Folding:
    """A CSR folding matrix prepared for the kernels: column indices as
    unsigned 32-bit integers (no negative-index handling in the inner
    loop; measured as fast as SciPy's own product), the flux read from a
    view starting at the dataset's offset in its model grid."""

    __slots__ = ("matrix", "indptr", "indices", "data", "n_rows", "n_cols")

    def __init__(self, matrix):
        self.matrix = matrix
        self.n_rows, self.n_cols = matrix.shape
        self.indptr = np.ascontiguousarray(matrix.indptr, dtype=np.int64)
        if self.n_cols >= 2 ** 32:  # pragma: no cover - beyond any response
            self.indices = np.ascontiguousarray(matrix.indices, dtype=np.int64)
        else:
            self.indices = np.ascontiguousarray(matrix.indices, dtype=np.uint32)
        self.data = np.ascontiguousarray(matrix.data, dtype=float)


class FoldingGroup:
    """The Poisson datasets (no background) whose model is evaluated on one
    grid, stacked into one CSR matrix (column indices shifted by each
    dataset's offset in the grid): folding all of them is one kernel call
    into a scratch row buffer, the deviance (or the residuals) a second
    pass over that buffer.  When every row's columns form one contiguous
    run, as for Gaussian or grating line-spread functions, the rows are
    folded as contiguous dot products (vectorised; same numbers to
    rounding), which beats a general CSR product."""

    __slots__ = ("parts", "indptr", "indices", "start", "data", "bounds", "counts",
                 "scratch", "n_cols", "band", "cols")

    def __init__(self, matrices, offsets, counts):
        self.parts = [(Folding(m), int(off)) for m, off in zip(matrices, offsets)]
        self.n_cols = max(int(off) + m.shape[1] for m, off in zip(matrices, offsets))
        rows = [m.shape[0] for m in matrices]
        self.bounds = np.concatenate([[0], np.cumsum(rows)]).astype(np.int64)
        nnz = np.concatenate([[0], np.cumsum([m.indptr[-1] for m in matrices])])
        self.indptr = np.concatenate([[0]] + [np.asarray(m.indptr[1:], dtype=np.int64) + nnz[k]
                                              for k, m in enumerate(matrices)]).astype(np.int64)
        cols = np.concatenate([np.asarray(m.indices, dtype=np.int64) + off
                               for m, off in zip(matrices, offsets)])
        itype = np.uint32 if self.n_cols < 2 ** 32 else np.int64
        self.indices = cols.astype(itype)
        self.data = np.concatenate([np.asarray(m.data, dtype=float) for m in matrices])
        self.counts = np.concatenate([np.asarray(c, dtype=float) for c in counts])
        self.scratch = np.empty(int(self.bounds[-1]))
        # band rows: within each row the columns step by one
        first = self.indptr[:-1]
        length = np.diff(self.indptr)
        start = np.where(length > 0, cols[np.minimum(first, max(cols.size - 1, 0))]
                         if cols.size else 0, 0)
        step_ok = np.ones(cols.size, dtype=bool)
        step_ok[1:] = np.diff(cols) == 1
        step_ok[first[length > 0]] = True
        self.start = start.astype(np.int64) if step_ok.all() else None
        # what the compiled group calls take: band rows' first columns, or
        # the CSR column indices
        self.band = self.start is not None
        self.cols = self.start if self.band else self.indices

    def deviance(self, flux, xn):
        """(summed C deviance, ok) for expected counts xn[k] * M_k @ flux."""
        kern = _numba_kernels()
        if kern is not None:
            return kern["gdev"](self.indptr, self.cols, self.data, flux[:self.n_cols],
                                self.bounds, xn, self.scratch, self.counts, self.band)
        total = 0.0
        b = self.bounds
        for k, (fm, off) in enumerate(self.parts):
            c, ok = fold_deviance(fm, flux, off, xn[k], self.counts[b[k]:b[k + 1]])
            if not ok:
                return math.inf, False
            total += c
        return total, True

    def residuals(self, flux, xn, out, starts):
        """Signed residuals of dataset k into out[starts[k]:...]; False when
        an expected count is negative or not finite."""
        kern = _numba_kernels()
        if kern is not None:
            return kern["gfres"](self.indptr, self.cols, self.data, flux[:self.n_cols],
                                 self.bounds, xn, self.scratch, self.counts, self.band, out,
                                 starts)
        b = self.bounds
        for k, (fm, off) in enumerate(self.parts):
            if not fold_residuals(fm, flux, off, xn[k], self.counts[b[k]:b[k + 1]], out,
                                  int(starts[k])):
                return False
        return True


def fold(fm, flux, off, xn):
    """xn * (matrix @ flux[off : off + n_cols]) for a :class:`Folding`."""
    f = flux[off:off + fm.n_cols]
    kern = _numba_kernels()
    if kern is None:
        return xn * (fm.matrix @ f)
    out = np.empty(fm.n_rows)
    kern["fold"](fm.indptr, fm.indices, fm.data, f, xn, out)
    return out


def fold_deviance(fm, flux, off, xn, counts, scratch=None):
    """(C deviance of ``counts`` given mu = xn * matrix @ flux[off:], ok);
    ok False (and C = inf) when mu is negative or not finite somewhere.
    ``scratch``: an array of one float per row to fold into (reused
    between calls; allocated when not given)."""
    f = flux[off:off + fm.n_cols]
    kern = _numba_kernels()
    if kern is not None:
        if scratch is None:
            scratch = np.empty(fm.n_rows)
        return kern["dev"](fm.indptr, fm.indices, fm.data, f, xn, counts, scratch)
    mu = xn * (fm.matrix @ f)
    if not _finite_non_negative(mu):
        return math.inf, False
    return stats.c_statistic(mu, counts), True


def fold_residuals(fm, flux, off, xn, counts, out, start):
    """Signed deviance residuals written to ``out[start:start + rows]``;
    returns False when mu is negative or not finite somewhere."""
    f = flux[off:off + fm.n_cols]
    kern = _numba_kernels()
    if kern is not None:
        return kern["res"](fm.indptr, fm.indices, fm.data, f, xn, counts, out, start)
    mu = xn * (fm.matrix @ f)
    if not _finite_non_negative(mu):
        return False
    out[start:start + mu.size] = stats.deviance_residuals(mu, counts)
    return True


def _finite_non_negative(m):
    return bool(m.min() >= 0.0 and np.isfinite(m.sum())) if m.size else True
