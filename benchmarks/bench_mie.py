"""Speed of edgefit's Mie efficiencies, measured side by side in one run.

(a) exact Mie over 500 energies across the Si K edge (1.75-1.95 keV) x 20
    grain radii log-spaced 0.005-1 um for olivine (MgFeSiO4, 3.8 g/cm^3;
    delta, beta from xraydb when installed, else the constant 1.85 keV
    values delta = 2.125e-4, beta = 3.588e-5 of REFERENCE-VALUES.md),
    against miepython 3.x (numba JIT switched on via MIEPYTHON_USE_JIT=1,
    warmed up before timing) on the same points: time ratio, and the same
    on one thread by process CPU time (steady on a shared machine; both
    codes then run on one thread), target <= 0.5 (edgefit at least twice
    as fast); maximum relative disagreement (target <= 1e-6);
(b) the automatic ADT/Mie choice on the same grid against all-exact, with
    the default back end and with one thread (target >= 100x faster at
    rtol 1e-3, within its stated rtol).  Also printed: the share of all Mie
    orders (n_terms) at the points left to exact Mie; with the exact cost
    proportional to the orders, its inverse bounds the speed-up.

Run: python benchmarks/bench_mie.py
"""
import os
import time

os.environ.setdefault("MIEPYTHON_USE_JIT", "1")

import numpy as np  # noqa: E402

from edgefit._units import HC_KEV_ANGSTROM  # noqa: E402
from edgefit.dust.efficiencies import efficiencies  # noqa: E402
from edgefit.dust.mie import mie_efficiencies, n_terms, numba_available  # noqa: E402


def best_of(fn, repeat=3, clock=time.perf_counter):
    best = np.inf
    for _ in range(repeat):
        t0 = clock()
        out = fn()
        best = min(best, clock() - t0)
    return best, out


def main():
    energy = np.linspace(1.75, 1.95, 500)                 # keV
    radius = np.geomspace(0.005, 1.0, 20)                 # um
    lam_um = HC_KEV_ANGSTROM / energy * 1e-4
    x = 2 * np.pi * radius[None, :] / lam_um[:, None]
    try:
        import xraydb
        delta, beta, _ = xraydb.xray_delta_beta("MgFeSiO4", 3.8, energy * 1e3)
        source = "xraydb xray_delta_beta('MgFeSiO4', 3.8)"
    except ImportError:
        delta = np.full(energy.shape, 2.125e-4)
        beta = np.full(energy.shape, 3.588e-5)
        source = "constant 1.85 keV values (xraydb not installed)"
    # xraydb writes n = 1 - delta - i beta; edgefit uses m = 1 - delta + i beta
    m = np.broadcast_to((1 - delta + 1j * beta)[:, None], x.shape)
    print(f"grid: {energy.size} energies x {radius.size} radii = {x.size} points; "
          f"x = {x.min():.1f} .. {x.max():.1f}; index from {source}")
    print(f"numba back end available: {numba_available()}")

    # ---- (a) exact Mie vs miepython -------------------------------------
    mie_efficiencies(m[:2, :2], x[:2, :2])                 # compile / warm up
    t_ours, ours = best_of(lambda: mie_efficiencies(m, x))
    lines = [f"edgefit exact (default back end)     {t_ours:8.3f} s"]
    t_single = None
    if numba_available():
        import numba
        nthreads = numba.get_num_threads()
        numba.set_num_threads(1)
        t_single, _ = best_of(lambda: mie_efficiencies(m, x))
        t_single_cpu, _ = best_of(lambda: mie_efficiencies(m, x), clock=time.process_time)
        numba.set_num_threads(nthreads)
        lines[0] = f"edgefit exact (numba, {nthreads} threads)     {t_ours:8.3f} s"
        lines.append(f"edgefit exact (numba, 1 thread)       {t_single:8.3f} s")
    t_np, ours_np = best_of(lambda: mie_efficiencies(m, x, backend="numpy"), repeat=1)
    lines.append(f"edgefit exact (pure NumPy path)       {t_np:8.3f} s")
    try:
        import miepython
    except ImportError:
        miepython = None
        print("miepython not installed: comparison (a) skipped")
    if miepython is not None:
        mc = np.ascontiguousarray(np.conj(m).ravel())
        xr = np.ascontiguousarray(x.ravel())
        miepython.efficiencies_mx(mc[:4], xr[:4])          # JIT warm-up
        t_mp, ref = best_of(lambda: miepython.efficiencies_mx(mc, xr))
        t_mp_cpu, _ = best_of(lambda: miepython.efficiencies_mx(mc, xr), clock=time.process_time)
        lines.append(f"miepython {miepython.__version__} (JIT={miepython.USE_JIT})"
                     f"          {t_mp:8.3f} s")
        print("\n".join(lines))
        print(f"time ratio edgefit/miepython: default {t_ours / t_mp:.3f}"
              + (f", single thread {t_single / t_mp:.3f}" if t_single else "")
              + f", NumPy path {t_np / t_mp:.3f}")
        if t_single:
            print(f"one thread, process CPU time: edgefit {t_single_cpu:.3f} s, miepython "
                  f"{t_mp_cpu:.3f} s, ratio {t_single_cpu / t_mp_cpu:.3f} (target <= 0.5, "
                  f"i.e. edgefit >= 2x faster: {t_mp_cpu / t_single_cpu:.2f}x)")
        rel = {k: np.max(np.abs(getattr(ours, k).ravel() / r - 1))
               for k, r in (("qext", ref[0]), ("qsca", ref[1]), ("g", ref[3]))}
        print("max relative disagreement with miepython: "
              + ", ".join(f"{k} {v:.2e}" for k, v in rel.items()) + "   (target <= 1e-6)")
    else:
        print("\n".join(lines))
    d_np = max(np.max(np.abs(a / b - 1)) for a, b in zip(ours_np[:3], ours[:3]))
    print(f"NumPy path vs default back end: max relative difference {d_np:.1e}")

    # ---- (b) automatic ADT/Mie choice ------------------------------------
    orders = n_terms(x)
    for rtol in (1e-2, 1e-3):
        efficiencies(m[:2, :2], x[:2, :2], rtol=rtol)
        t_auto, auto = best_of(lambda: efficiencies(m, x, rtol=rtol), repeat=5)
        adt = np.isnan(auto.g)
        n_adt = int(adt.sum())
        e_ext = np.max(np.abs(auto.qext / ours.qext - 1))
        e_abs = np.max(np.abs(auto.qabs / ours.qabs - 1))
        single = f", one thread {t_single / t_auto:6.1f}x" if t_single else ""
        print(f"auto rtol={rtol:g}: {t_auto * 1e3:7.2f} ms, ADT at {n_adt}/{x.size} points "
              f"(the exact ones hold {orders[~adt].sum() / orders.sum():.2%} of all Mie orders); "
              f"speed-up over all-exact: default back end {t_ours / t_auto:6.1f}x{single} "
              f"(target >= 100x at 1e-3); "
              f"max rel error Q_ext {e_ext:.1e}, Q_abs {e_abs:.1e} (<= rtol)")


if __name__ == "__main__":
    main()
