"""Self-check for speed work: the fit-time numbers must not move.

Evaluates the likelihood (vector path: statistic and residuals; values-dict
path: statistic), the model on its evaluation grids and the expected
counts at fixed parameter points on

* the sightline of ``bench_fit.py`` (four spectra, 3,600 channels; dust
  tables from the cache as the benchmark uses them), and
* small configurations with in-memory dust tables (every size family, a
  halo, f_in > 0, shifts, a gas edge with resonance lines, a dataset with a
  background, chi-square),

and compares every number with a reference file written by an earlier
version of the code (``--write``), element by element, reporting the
largest relative deviation.  The agreement target is 1e-10 relative
(a deviation of an element is measured against the largest magnitude of
its array, so that residuals near zero do not count as large relative
changes).  Data are invented, SIMULATED values.

    python benchmarks/check_fit_numbers.py --write benchmarks/results/fit_numbers.npz
    python benchmarks/check_fit_numbers.py            # compare with that file
"""
from __future__ import annotations

import argparse
import os
import sys
import warnings

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
DEFAULT_REF = os.path.join(HERE, "results", "fit_numbers.npz")
TOLERANCE = 1e-10


def _points(ev, n, seed, scale=0.02):
    rng = np.random.default_rng(seed)
    x0 = np.array([ev._base[i] for i in ev._free_idx])
    th = x0 + scale * np.abs(x0 + 0.1) * rng.standard_normal((n, len(x0)))
    return np.clip(th, ev.lower, ev.upper)


def _record(out, key, like, ev, thetas, arrays):
    """Statistics at every point; residuals, model values and expected
    counts (whole arrays) at the first ``arrays`` points (all points are
    evaluated in order, so the component caches see the same sequence)."""
    stat, vstat, res, flux, counts = [], [], [], [], []
    for k, t in enumerate(thetas):
        stat.append(ev.statistic(t))
        r = ev.residuals(t)
        vals = ev.values(t)
        vstat.append(like.statistic(vals))
        if k < arrays:
            res.append(r)
            flux += [like.model.evaluate(union, vals).copy() for union, _m in like._plan]
            counts += list(ev.source_counts(t))
    out[f"{key}/statistic"] = np.array(stat)
    out[f"{key}/dict_statistic"] = np.array(vstat)
    for name, arrs in (("residuals", res), ("model", flux), ("counts", counts)):
        for j, a in enumerate(arrs):
            out[f"{key}/{name}{j}"] = np.asarray(a, dtype=float)


def _bench_sightline(out):
    sys.path.insert(0, HERE)
    import bench_fit

    from edgefit.inference import JointLikelihood

    model = bench_fit.build_model()
    datasets = bench_fit.make_datasets(model)
    like = JointLikelihood(model, datasets)
    params = like.make_params()
    for name in ("gas_si_shift", "dust_index", "dust_shift"):
        params[name].vary = True
    for k, v in bench_fit.TRUTH.items():
        params[k].value = v
    ev = like.compile(params)
    _record(out, "bench_fit", like, ev, _points(ev, 12, 11), 4)
    # the same points in a different order and with single-parameter steps
    # (the component caches: only some values change between calls)
    th = _points(ev, 4, 12)
    steps = []
    for t in th:
        for j in range(len(t)):
            s = t.copy()
            s[j] = min(max(s[j] * (1 + 1e-4) + 1e-6, ev.lower[j]), ev.upper[j])
            steps += [t, s]
    _record(out, "bench_fit_steps", like, ev, np.array(steps), 0)


def _small_configs(out):
    from edgefit.dust import HaloGeometry, SizeGrid, TabulatedSizes, compute_table
    from edgefit.dust import edge_energy_grid
    from edgefit.inference import JointLikelihood
    from edgefit.inference._testing import three_arm_datasets
    from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw, SmoothISM

    energy = edge_energy_grid("olivine", 1.66, 2.14, rel_step=3e-3)
    table = compute_table("olivine", energy, SizeGrid.log(0.002, 3.0, 48), progress=False)
    truth = {"ism_nh": 1.5, "gas_si_col": 6.0, "gas_si_shift": 1.0, "dust_col": 25.0,
             "pl_index": 1.7, "pl_norm": 1.2}
    table_sizes = TabulatedSizes([0.005, 0.05, 0.2, 0.6], [3e3, 20.0, 0.5, 0.01])
    configs = {
        "power_law": (dict(), {"dust_amax": 0.3, "dust_index": 3.4, "dust_shift": 2.0},
                      ["gas_si_shift", "dust_index", "dust_shift"]),
        "power_law_fin": (dict(), {"dust_amax": 0.5, "dust_fin": 0.3},
                          ["dust_fin", "dust_amin"]),
        "lognormal": (dict(sizes="lognormal"), {"dust_center": 0.15, "dust_width": 0.5,
                                                "dust_amin": 0.003, "dust_amax": 2.0}, ["dust_width"]),
        "cutoff": (dict(sizes="cutoff"), {"dust_atrans": 0.15, "dust_acut": 0.2,
                                          "dust_amax": 2.0}, ["dust_atrans", "dust_index"]),
        "single": (dict(sizes="single"), {"dust_size": 0.2}, []),
        "table": (dict(sizes=table_sizes), {}, []),
        "halo": (dict(halo=HaloGeometry(2.0)), {"dust_amax": 0.4}, ["dust_shift"]),
        "lines": ("lines", {"dust_amax": 0.3}, ["gas_si_line1_energy", "gas_si_line1_fwhm"]),
    }
    for key, (opts, vals, extra_free) in configs.items():
        if opts == "lines":
            gas = GasEdge("gas_si", element="Si",
                          lines=[{"energy": 1.8650, "strength": 2.0, "fwhm": 0.4}])
            opts = {}
        else:
            gas = GasEdge("gas_si", element="Si")
        model = (SmoothISM("ism", exclude=("Si",)) * gas
                 * DustEdge("dust", table=table, **opts) * PhotonPowerLaw("pl"))
        values = dict(truth, **vals)
        ds = three_arm_datasets(model, values)
        for statistic in ("poisson", "chi2"):
            like = JointLikelihood(model, ds, statistic=statistic)
            params = like.make_params()
            for k, v in values.items():
                params[k].value = v
            for n in extra_free:
                params[n].vary = True
            ev = like.compile(params)
            _record(out, f"{key}_{statistic}", like, ev, _points(ev, 6, 21), 2)


def collect():
    out: dict = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _bench_sightline(out)
        _small_configs(out)
    return out


def compare(new, ref):
    """Largest deviation per configuration, each array's elements measured
    against the array's largest |value| (infinite values must match
    exactly); a missing or reshaped array counts as infinite."""
    report: dict = {}
    for name in ref.files:
        key = name.split("/")[0]
        b = ref[name]
        a = new.get(name)
        worst = report.get(key, 0.0)
        if a is None or a.shape != b.shape:
            report[key] = float("inf")
            continue
        fin = np.isfinite(b)
        if not np.array_equal(np.isfinite(a), fin) or not np.array_equal(a[~fin], b[~fin]):
            report[key] = float("inf")
            continue
        if fin.any():
            scale = np.max(np.abs(b[fin])) or 1.0
            worst = max(worst, float(np.max(np.abs(a[fin] - b[fin])) / scale))
        report[key] = worst
    return report


def self_check(ref=DEFAULT_REF):
    """(largest relative deviation from the reference file, within the
    tolerance?) for the current code."""
    with np.load(ref) as r:
        report = compare(collect(), r)
    worst = max(report.values())
    return worst, worst <= TOLERANCE


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--write", metavar="JSON", help="write the reference numbers here")
    ap.add_argument("--ref", default=DEFAULT_REF, help="reference file to compare with")
    args = ap.parse_args(argv)
    new = collect()
    if args.write:
        np.savez_compressed(args.write, **new)
        print(f"wrote {len(new)} arrays to {args.write}")
        return 0
    with np.load(args.ref) as ref:
        report = compare(new, ref)
    worst = max(report.values())
    for key, dev in report.items():
        print(f"   {key:<22} largest relative deviation {dev:.2e}")
    ok = worst <= TOLERANCE
    print(f"fit numbers against {os.path.basename(args.ref)}: largest relative deviation "
          f"{worst:.2e} ({'within' if ok else 'OUTSIDE'} {TOLERANCE:g})")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
