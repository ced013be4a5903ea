"""Folding speed: Response.fold against bare scipy.sparse products.

Builds four simulated grating-like responses of 8192 channels each (two
"arms" with different dispersion, orders -1 and +1 differing in their
invented effective-area curves), then times

* ``response.fold(flux, exposure)`` (edgefit), and
* ``matrix @ flux`` (the bare scipy.sparse CSR matrix-vector product of
  the same matrix),

interleaved in one run (alternating which goes first), and prints the
median time per call, their ratio (target <= 1.5) and how much memory
the sparse matrices take compared with dense ones.  No assertions: it
prints figures.  Run with ``python benchmarks/bench_fold.py``.
"""
from __future__ import annotations

import os
import statistics
import tempfile
import time
import tracemalloc

import numpy as np

from edgefit._units import HC_KEV_ANGSTROM
from edgefit.data import gaussian_response, read_response, write_response

N_CHAN = 8192
REPEATS = 41        # interleaved rounds
CALLS = 40          # calls per timed block


def _area(scale, tilt):
    def area(e_kev):
        return scale * (1.0 + tilt * np.log(e_kev)) * np.exp(-0.5 * ((e_kev - 1.5) / 1.2) ** 2)
    return area


def build_responses():
    """Four invented (simulated) arm/order responses."""
    specs = [  # (name, first wavelength A, channel width A, FWHM A, area scale, tilt)
        ("arm A order -1", 1.0, 0.0025, 0.012, 25.0, 0.10),
        ("arm A order +1", 1.0, 0.0025, 0.012, 27.0, -0.05),
        ("arm B order -1", 1.0, 0.0050, 0.023, 60.0, 0.08),
        ("arm B order +1", 1.0, 0.0050, 0.023, 65.0, -0.04),
    ]
    out = []
    for name, lam0, width, fwhm, scale, tilt in specs:
        lam_edges = lam0 + width * np.arange(N_CHAN + 1)
        # model grid: 2 energy bins per channel width in wavelength
        model_lam = np.linspace(lam_edges[0], lam_edges[-1], 2 * N_CHAN + 1)
        resp = gaussian_response(HC_KEV_ANGSTROM / model_lam, HC_KEV_ANGSTROM / lam_edges,
                                 fwhm, _area(scale, tilt), wavelength_order=True)
        out.append((name, resp))
    return out


def _block(func, *args):
    t0 = time.perf_counter()
    for _ in range(CALLS):
        func(*args)
    return (time.perf_counter() - t0) / CALLS


def main():
    t0 = time.perf_counter()
    responses = build_responses()
    build_s = time.perf_counter() - t0
    print(f"built 4 responses of {N_CHAN} channels in {build_s:.2f} s")
    print()
    print(f"{'response':<16} {'energies':>8} {'nnz':>9} {'sparse MB':>10} {'dense MB':>9} "
          f"{'fill':>7}")
    for name, r in responses:
        m = r.matrix()
        sparse_bytes = m.data.nbytes + m.indices.nbytes + m.indptr.nbytes
        rmf = r.rmf
        sparse_bytes_rmf = rmf.data.nbytes + rmf.indices.nbytes + rmf.indptr.nbytes
        dense_bytes = m.shape[0] * m.shape[1] * 8
        print(f"{name:<16} {r.n_energies:>8} {m.nnz:>9} "
              f"{(sparse_bytes + sparse_bytes_rmf) / 1e6:>10.2f} {dense_bytes / 1e6:>9.1f} "
              f"{m.nnz / (m.shape[0] * m.shape[1]):>7.2e}")
    print("(sparse MB counts both stored matrices: RMF and RMF x ARF)")
    print()

    rng = np.random.default_rng(20261201)
    fluxes = [rng.uniform(0.5, 1.5, r.n_energies) * 1e-4 for _, r in responses]
    exposure = 5.0e4
    fold_t = {name: [] for name, _ in responses}
    bare_t = {name: [] for name, _ in responses}
    for rep in range(REPEATS):
        for (name, r), f in zip(responses, fluxes):
            m = r.matrix()
            if rep % 2 == 0:
                fold_t[name].append(_block(r.fold, f, exposure))
                bare_t[name].append(_block(m.__matmul__, f))
            else:
                bare_t[name].append(_block(m.__matmul__, f))
                fold_t[name].append(_block(r.fold, f, exposure))
    print(f"{'response':<16} {'fold us':>9} {'bare us':>9} {'ratio':>6}")
    ratios = []
    for name, _ in responses:
        a, b = statistics.median(fold_t[name]), statistics.median(bare_t[name])
        ratios.append(a / b)
        print(f"{name:<16} {a * 1e6:>9.1f} {b * 1e6:>9.1f} {a / b:>6.3f}")
    total_fold = sum(statistics.median(v) for v in fold_t.values())
    total_bare = sum(statistics.median(v) for v in bare_t.values())
    print(f"{'all four':<16} {total_fold * 1e6:>9.1f} {total_bare * 1e6:>9.1f} "
          f"{total_fold / total_bare:>6.3f}   (target ratio <= 1.5)")
    print(f"10^5 folds of all four would take {total_fold * 1e5:.1f} s")
    print()
    name, r = responses[0]
    with tempfile.TemporaryDirectory() as tmp:
        rmf, arf = os.path.join(tmp, "b.rmf"), os.path.join(tmp, "b.arf")
        t0 = time.perf_counter()
        write_response(r, rmf, arf, simulated=True)
        t1 = time.perf_counter()
        back = read_response(rmf, arf)
        t2 = time.perf_counter()
        tracemalloc.start()       # a second, traced read for the memory peak
        read_response(rmf, arf)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        print(f"{name}: write RMF+ARF {t1 - t0:.2f} s, read {t2 - t1:.2f} s, "
              f"peak memory while reading "
              f"{peak / 1e6:.1f} MB vs {N_CHAN * r.n_energies * 8 / 1e6:.0f} MB for one dense "
              f"matrix; file {os.path.getsize(rmf) / 1e6:.1f} MB, nnz {back.matrix().nnz}")


if __name__ == "__main__":
    main()
