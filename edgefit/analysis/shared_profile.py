"""A parameter shared exactly by every sightline: the summed profile statistic.

Importance reweighting (:mod:`.population`) handles population
*distributions* broad enough for each sightline's posterior samples to
cover them.  A parameter that is *the same* for every sightline (one upper
grain size ``dust_amax`` for the whole sample, say) is a different
problem: the joint likelihood of the sample is the product of the
sightlines' likelihoods, each with its own nuisance parameters, so its
profile in the shared parameter a is the *sum* of the sightlines' own
profile statistics,

    S(a) = Σ_i C_i(a),   C_i(a) = min over sightline i's other parameters
                                  of its statistic with a held fixed.

This module evaluates C_i(a) on a grid of a: every (sightline, grid value)
pair is one task -- the sightline refitted with the package's global fit
(:func:`edgefit.inference.fit_sightline`, several starts) with a fixed,
then its columns profiled (:func:`edgefit.inference.profile_intervals`,
whose multi-chain scans refit when they meet a lower minimum, so C_i(a) is
the true minimum at each a).  The tasks run on the batch's process pool
(:func:`edgefit.analysis.batch._run_pool`), and each finished task is cached
as one JSON file, ``DIR/points/<sightline folder>/<parameter>=<value>.json``,
written atomically (temporary file, rename) and keyed by a hash of the
sightline's inputs (:meth:`SightlineEntry.input_hash` with the parameter,
value, columns and levels): a rerun fits only what is missing or changed.

From the grid:

* refinement (``refine`` rounds, default 2): the vertex of the parabola
  through the lowest point of S and its two neighbours (in ln a on a
  logarithmic grid), and the mid-points of grid steps across which ΔS
  crosses a threshold while changing by more than 2, are fitted too and
  join the grid (:func:`refinement_points`), so the best value and the
  interval ends rest on real evaluations where a coarse grid would
  interpolate across a steep rise;
* the best shared value: the lowest point of S;
* ΔS(a) = S(a) − min S and its intervals at 68.27 % and 95 %: the sets
  {a : ΔS(a) ≤ Δ} with Δ the χ² quantile of one degree of freedom
  (Wilks 1938, Ann. Math. Stat. 9, 60; ``scipy.stats.chi2.ppf``), found by
  linear interpolation of ΔS between grid points (in ln a on a logarithmic
  grid); a set may be a union of pieces, and a piece that reaches the end
  of the grid is a limit, flagged ``lower_at_bound``/``upper_at_bound``;
* each sightline's columns (by default every free ``*_col`` parameter):
  at the best shared value (its profile interval there, a fixed); *pooled*
  (profiled over a as well: min over grid points of that point's column
  profile plus the other sightlines' statistics there); and *single*, the
  same with this sightline alone (its own size free, over the grid's range
  of a), which is what one sightline can say by itself.  ``shrink`` is the
  pooled 68 % width (summed over the pieces) over the single one.  Pooling
  usually narrows a column's interval; it can widen it when the shared
  value sits where that sightline's column is less well determined than at
  its own best value.

The pooled and single column profiles are envelopes over the grid: each
grid point's column profile, plus the statistics, minimised over grid
points, with interpolated curves between neighbouring grid values (the
profile's shape shifted so that its minimum moves linearly, the statistic
interpolated linearly; :func:`envelope_profile`).  They are only as fine
as the grid: use enough grid points that neighbouring values of S differ
by well under 1 near the best value.

The figure is drawn by the caller's ``figures`` hook (the command passes
:func:`edgefit.plotting.shared_profile.save_shared_figure`).
"""
from __future__ import annotations

import json
import math
import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Sequence

import numpy as np
from numpy.typing import ArrayLike

from ..errors import ArgumentError
from ..stats import ONE_SIGMA

if TYPE_CHECKING:
    from astropy.table import Table

__all__ = ["shared_parameter_profile", "SharedProfileResult", "grid_point_task",
           "make_grid", "threshold_intervals", "refine_minimum", "refinement_points",
           "envelope_profile",
           "wilks_threshold", "POINTS_DIR", "LEVELS"]

#: Sub-folder of the output holding one cache file per sightline and grid value.
POINTS_DIR = "points"
#: Confidence levels of the reported intervals (68.27 % and 95 %).
LEVELS = (ONE_SIGMA, 0.95)
_FORMAT = 1


# ---------------------------------------------------------------------------
# pure arithmetic
def wilks_threshold(level: float, dof: int = 1) -> float:
    """ΔS at which a profile statistic leaves the ``level`` confidence set:
    the χ² quantile with ``dof`` degrees of freedom (Wilks 1938)."""
    from scipy import stats

    if not 0.0 < float(level) < 1.0:
        raise ArgumentError(f"confidence level must lie in (0, 1), got {level}")
    return float(stats.chi2.ppf(float(level), int(dof)))


def make_grid(lo: float, hi: float, n: int, log: bool = True) -> np.ndarray:
    """``n`` grid values from ``lo`` to ``hi``, evenly spaced in ln (``log``)
    or linearly; at least 3 values, ``lo < hi`` (and ``lo > 0`` on a log
    grid)."""
    lo, hi, n = float(lo), float(hi), int(n)
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise ArgumentError(f"grid: need finite LO < HI, got {lo:g}, {hi:g}")
    if n < 3:
        raise ArgumentError(f"grid: need at least 3 values, got {n}")
    if log:
        if lo <= 0:
            raise ArgumentError(f"grid: a logarithmic grid needs LO > 0, got {lo:g}")
        return np.exp(np.linspace(math.log(lo), math.log(hi), n))
    return np.linspace(lo, hi, n)


def _coord(x, log):
    x = np.asarray(x, float)
    return np.log(x) if log else x


def threshold_intervals(x: ArrayLike, delta: ArrayLike, threshold: float, *,
                        log: bool = False) -> dict[str, Any]:
    """The set {x : delta(x) ≤ threshold} from a curve sampled at sorted
    ``x`` (linear interpolation between samples, in ln x when ``log``).

    Returns ``{"pieces": [[lo, hi], ...], "lower": ..., "upper": ...,
    "lower_at_bound": bool, "upper_at_bound": bool}``: the pieces in order,
    the outermost ends, and whether the set reaches the first / last sample
    (then that end is where the curve stops, not a crossing).  NaN samples
    count as above the threshold.  No sample below: no pieces, ends None.
    """
    from ..inference.intervals import inside_runs

    xs = np.asarray(x, float)
    d = np.asarray(delta, float)
    if xs.shape != d.shape or xs.ndim != 1:
        raise ArgumentError("threshold_intervals: x and delta must be 1-d and of one length")
    u = _coord(xs, log)
    inside = np.isfinite(d) & (d <= threshold)
    pieces: list[list[float]] = []
    low_b = high_b = False
    n = xs.size

    def cross(a, b):
        # a inside, b outside (or NaN: the outside sample itself)
        if not np.isfinite(d[b]):
            return xs[b]
        t = (threshold - d[a]) / (d[b] - d[a])
        uu = u[a] + t * (u[b] - u[a])
        return float(np.exp(uu)) if log else float(uu)

    for i, j in inside_runs(inside):
        lo = float(xs[0]) if i == 0 else cross(i, i - 1)
        hi = float(xs[-1]) if j == n - 1 else cross(j, j + 1)
        low_b = low_b or i == 0
        high_b = high_b or j == n - 1
        pieces.append([lo, hi])
    return {"pieces": pieces, "lower": pieces[0][0] if pieces else None,
            "upper": pieces[-1][1] if pieces else None,
            "lower_at_bound": bool(low_b), "upper_at_bound": bool(high_b)}


def refine_minimum(x: ArrayLike, s: ArrayLike, *, log: bool = False) -> float | None:
    """The vertex of the parabola through the lowest sample of ``s`` and its
    two neighbours (in ln x when ``log``), kept between those neighbours;
    None when the lowest sample is at an end of the grid or the three
    points are not convex."""
    xs = np.asarray(x, float)
    ss = np.asarray(s, float)
    ok = np.isfinite(ss)
    if ok.sum() < 3:
        return None
    k = int(np.nanargmin(np.where(ok, ss, np.nan)))
    if k == 0 or k == xs.size - 1 or not (ok[k - 1] and ok[k + 1]):
        return None
    u = _coord(xs[k - 1:k + 2], log)
    y = ss[k - 1:k + 2]
    # divided differences: y = y0 + b (u - u0) + c (u - u0)(u - u1)
    b1 = (y[1] - y[0]) / (u[1] - u[0])
    b2 = (y[2] - y[1]) / (u[2] - u[1])
    c = (b2 - b1) / (u[2] - u[0])
    if not c > 0:
        return None
    v = 0.5 * (u[0] + u[1]) - b1 / (2.0 * c)
    v = min(max(v, u[0]), u[2])
    return float(np.exp(v)) if log else float(v)


class _RootCurve:
    """A sampled profile y(x) as its minimum plus a square, y = y_min + r(x)²,
    with r = sign(x − x̂) √(y − y_min) interpolated linearly: exact for a
    parabola (the usual shape of a profile), and a profile scan samples
    few points between its level crossings.  Beyond the samples r is
    continued with its end slope when that points outward (flat otherwise),
    so a continuation never comes below the end values."""

    def __init__(self, x, y):
        x = np.asarray(x, float)
        y = np.asarray(y, float)
        good = np.isfinite(x) & np.isfinite(y)
        x, y = x[good], y[good]
        order = np.argsort(x, kind="stable")
        x, y = x[order], y[order]
        if x.size:
            x, first = np.unique(x, return_index=True)
            y = np.minimum.reduceat(y, first)
        self.size = x.size
        if not x.size:
            return
        i = int(np.argmin(y))
        self.xhat, self.ymin = float(x[i]), float(y[i])
        r = np.sqrt(np.maximum(y - self.ymin, 0.0))
        r[:i] *= -1.0
        self.x, self.r = x, r
        if x.size >= 2:
            self.right = max((r[-1] - r[-2]) / (x[-1] - x[-2]), 0.0)
            self.left = max((r[1] - r[0]) / (x[1] - x[0]), 0.0)
        else:
            self.right = self.left = 0.0

    def shape(self, xe):
        """r(x)², the curve above its minimum."""
        rr = np.interp(xe, self.x, self.r)
        rr = np.where(xe > self.x[-1], self.r[-1] + self.right * (xe - self.x[-1]), rr)
        rr = np.where(xe < self.x[0], self.r[0] - self.left * (self.x[0] - xe), rr)
        return rr * rr


def refinement_points(x: ArrayLike, s: ArrayLike, thresholds: Sequence[float], *,
                      log: bool = False, max_points: int = 4) -> list[float]:
    """Values worth fitting next on a grid ``x`` of a summed statistic
    ``s``: the parabola vertex of :func:`refine_minimum`, and the mid-points
    (in ln x when ``log``) of the grid steps across which ΔS = s − min s
    crosses one of the ``thresholds`` while changing by more than 2 (where
    linear interpolation of the crossing is poor); at most ``max_points``
    mid-points, those nearest the minimum first."""
    xs = np.asarray(x, float)
    d = np.asarray(s, float)
    d = d - np.nanmin(d)
    out = []
    v = refine_minimum(xs, s, log=log)
    if v is not None:
        out.append(v)
    u = _coord(xs, log)
    k0 = int(np.nanargmin(d))
    mids = []
    for k in range(xs.size - 1):
        lo, hi = sorted((d[k], d[k + 1]))
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi - lo <= 2.0:
            continue
        if any(lo < t < hi for t in thresholds):
            m = 0.5 * (u[k] + u[k + 1])
            mids.append((abs(k + 0.5 - k0), float(np.exp(m)) if log else float(m)))
    out.extend(m for _, m in sorted(mids)[:max_points])
    return out


def envelope_profile(offsets: ArrayLike, curves: Sequence[tuple[Any, Any]],
                     x: ArrayLike, substeps: int = 0) -> np.ndarray:
    """min over k of ``offsets[k] + curve_k(x)``: the profile of one
    quantity over a grid of another parameter, from the quantity's profile
    ``(x_k, y_k)`` at each grid value (interpolated as :class:`_RootCurve`
    does; a profile scan stops past its largest level, so the continuation
    beyond its samples only matters where the result is above every level).

    With ``substeps`` > 0 the grid is filled in between neighbours k, k+1
    at fractions t = j/(n+1), j = 1..n, n at least ``substeps`` and enough
    that the minimum moves by at most a tenth of the narrower curve's
    Δ = 1 half-width per step: there the curve is the two shapes (each
    above its minimum) shifted so that the minimum moves linearly from x̂_k
    to x̂_{k+1}, averaged with weights 1−t and t, plus the linear
    interpolation of ``offsets[k] + min y_k``.  This keeps the envelope
    continuous when the quantity's best value moves by more than its own
    interval from one grid value to the next."""
    xe = np.asarray(x, float)
    out = np.full(xe.shape, np.inf)
    cs = [_RootCurve(xk, yk) for xk, yk in curves]
    offs = np.asarray(offsets, float)
    for off, c in zip(offs, cs):
        if np.isfinite(off) and c.size:
            np.minimum(out, off + c.ymin + c.shape(xe), out=out)
    if substeps <= 0:
        return out
    for k in range(len(cs) - 1):
        ca, cb = cs[k], cs[k + 1]
        if not (ca.size and cb.size and np.isfinite(offs[k]) and np.isfinite(offs[k + 1])):
            continue
        dx = cb.xhat - ca.xhat
        base_a, base_b = offs[k] + ca.ymin, offs[k + 1] + cb.ymin
        slopes = [s for c in (ca, cb) for s in (c.left, c.right) if s > 0]
        width = 1.0 / max(slopes) if slopes else abs(dx)
        n = int(min(max(substeps, math.ceil(abs(dx) / (0.1 * width)) if width > 0 else 0),
                    400))
        for j in range(1, n + 1):
            t = j / (n + 1.0)
            val = ((1.0 - t) * ca.shape(xe - t * dx) + t * cb.shape(xe + (1.0 - t) * dx)
                   + (1.0 - t) * base_a + t * base_b)
            np.minimum(out, val, out=out)
    return out


# ---------------------------------------------------------------------------
# the task (in a worker)
def _value_label(value):
    return f"{float(value):.10g}"


def grid_point_task(task: dict) -> dict:
    """Fit one sightline with the shared parameter fixed at one value and
    profile its columns (run in a batch worker, or inline).

    ``task``: {"manifest", "base", "index", "name", "folder", "table",
    "parameter", "value", "columns", "levels", "hash"}.  Returns a
    JSON-ready record; a problem of the sightline becomes ``status =
    "failed"`` with a one-line ``reason`` (never raises for it)."""
    from ..inference import fit_sightline, profile_intervals
    from .batch import _one_line
    from .config import config_from_dict

    t0 = time.perf_counter()
    rec: dict[str, Any] = {k: task[k] for k in ("name", "folder", "parameter", "value",
                                                 "hash")}
    rec["format"] = _FORMAT
    name, value = task["parameter"], float(task["value"])
    seen: list[str] = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            cfg = config_from_dict(task["table"], task["manifest"], base=task["base"],
                                   key_prefix=f"sightline[{task['index']}].",
                                   name=task["name"], output=task["base"])
            datasets = cfg.load_datasets()
            fitc = cfg.fit
            _, params = cfg.likelihood(datasets)
            if name not in params:
                raise ArgumentError(f"the model has no parameter {name!r}")
            p = params[name]
            if not p.min <= value <= p.max:
                raise ArgumentError(f"{name} = {value:g} lies outside its bounds "
                                    f"[{p.min:g}, {p.max:g}]")
            p.set(value=value, vary=False, expr="")
            result = fit_sightline(cfg.model, datasets, params=params,
                                   statistic=fitc.statistic, method=fitc.method,
                                   chi2_variance=fitc.chi2_variance)
            cols = list(task["columns"]) if task["columns"] is not None else \
                [n for n in result.free_names if n.endswith("_col")]
            missing = [c for c in cols if c not in result.free_names]
            if missing:
                raise ArgumentError(f"column {missing[0]!r} is not a free parameter "
                                    f"(free: {', '.join(result.free_names)})")
            ivs = profile_intervals(result, cols, list(task["levels"])) if cols else {}
        seen = ["warning: " + (str(w.message).splitlines() or [""])[0] for w in caught
                if issubclass(w.category, Warning)]
        profiles = {}
        for c in cols:
            cur = result.profiles[c]
            profiles[c] = {"s0": float(cur.s0), "x": [float(v) for v in cur.x],
                           "delta": [float(v) for v in cur.delta]}
        rec.update(
            status="ok", reason="", statistic=float(result.statistic),
            n_bins=int(result.n_bins), dof=int(result.dof), flags=list(result.flags),
            values={n: float(result.params[n].value) for n in result.params},
            units={n: result.unit(n) for n in list(cols) + [name]},
            columns=cols, profiles=profiles,
            intervals={c: {str(lv): iv.as_dict() for lv, iv in by.items()}
                       for c, by in ivs.items()},
            warnings=seen)
    except Exception as exc:  # noqa: BLE001 -- one point's failure is its record
        rec.update(status="failed", reason=_one_line(exc), warnings=seen)
    rec["seconds"] = time.perf_counter() - t0
    return rec


def _lost_point(task, reason):
    return {k: task[k] for k in ("name", "folder", "parameter", "value", "hash")} | {
        "status": "failed", "reason": reason, "format": _FORMAT}


# ---------------------------------------------------------------------------
# the cache (main process only)
def _point_path(out, folder, parameter, value):
    return out / POINTS_DIR / folder / f"{parameter}={_value_label(value)}.json"


def _write_point(out, rec):
    path = _point_path(out, rec["folder"], rec["parameter"], rec["value"])
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp{os.getpid()}")
    tmp.write_text(json.dumps(rec, indent=1, default=_json_default) + "\n")
    os.replace(tmp, path)


def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    return str(o)


def _read_point(path, digest):
    try:
        rec = json.loads(Path(path).read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(rec, dict) or rec.get("hash") != digest or rec.get("format") != _FORMAT:
        return None
    return rec


# ---------------------------------------------------------------------------
@dataclass
class SharedProfileResult:
    """Result of :func:`shared_parameter_profile`.

    ``curve``: one row per grid value (``value`` with the parameter's unit,
    ``statistic`` S, ``delta_stat`` ΔS, ``C_<sightline>`` each sightline's
    statistic); ``sightlines``: one row per sightline with, per column X,
    ``X`` / ``X_lo`` / ``X_hi`` at the best shared value, ``X_pooled_lo`` /
    ``X_pooled_hi`` and ``X_single_lo`` / ``X_single_hi`` (68.27 %, outermost
    ends of the sets) and ``X_shrink``; ``summary``: the JSON-ready dict of
    ``shared.json``; ``skipped``: {sightline: reason}."""

    parameter: str
    unit: str
    log: bool
    best: float
    intervals: dict
    curve: Any
    sightlines: Any
    summary: dict
    output: Path
    names: list
    skipped: dict = field(default_factory=dict)
    points: dict = field(default_factory=dict)


def _tasks_for(manifest, entries, parameter, values, columns, levels):
    out = []
    for e in entries:
        for v in values:
            cols = None if columns is None else list(columns)
            extra = {"shared_parameter": parameter, "value": _value_label(v),
                     "columns": cols, "levels": [float(x) for x in levels]}
            out.append({"manifest": str(manifest.path), "base": str(e.config.base),
                        "index": e.index, "name": e.name, "folder": e.folder,
                        "table": e.table, "parameter": parameter, "value": float(v),
                        "columns": cols, "levels": [float(x) for x in levels],
                        "hash": e.input_hash(extra)})
    return out


def _run_points(out, tasks, fresh, workers, progress, label):
    """Run the tasks whose cache files are missing, stale or failed; return
    {(name, value label): record} for every task."""
    import signal
    import sys
    from tqdm.auto import tqdm

    from .batch import (BatchInterrupted, _run_inline, _run_pool, _signals_deferred,
                        _sigterm_raises, _Terminated)

    records = {}
    todo = []
    for t in tasks:
        key = (t["name"], _value_label(t["value"]))
        rec = None if fresh else _read_point(
            _point_path(out, t["folder"], t["parameter"], t["value"]), t["hash"])
        if rec is not None and rec.get("status") == "ok":
            records[key] = rec
        else:
            todo.append(t)
    bar = tqdm(total=len(todo), desc=label, unit="fit", file=sys.stderr,
               disable=not progress or not todo, dynamic_ncols=True)

    def on_result(rec):
        with _signals_deferred():
            _write_point(out, rec)
        records[(rec["name"], _value_label(rec["value"]))] = rec
        bar.update(1)

    try:
        with _sigterm_raises():
            if not todo:
                pass
            elif workers == 0:
                _run_inline(todo, on_result, func=grid_point_task)
            else:
                _run_pool(todo, min(workers, len(todo)), on_result, func=grid_point_task,
                          lost=_lost_point)
    except (KeyboardInterrupt, _Terminated) as exc:
        bar.close()
        signum = signal.SIGTERM if isinstance(exc, _Terminated) else signal.SIGINT
        raise BatchInterrupted(len(records), len(tasks), out,
                               "run the same command again to resume (finished grid "
                               "points are kept)", signum) from None
    bar.close()
    return records


def _as_interval(d):
    return {"pieces": d["pieces"], "lower": d["lower"], "upper": d["upper"],
            "lower_at_bound": d["lower_at_bound"], "upper_at_bound": d["upper_at_bound"]}


def _column_profiles(names, values, stat, recs, col, levels, substeps):
    """Pooled and single profiles of ``col`` for every sightline: dicts of
    intervals per level (and the evaluation x and curves for plotting)."""
    out = {}
    total = np.sum(stat, axis=0)
    for i, n in enumerate(names):
        curves = []
        for k, v in enumerate(values):
            pr = recs[(n, _value_label(v))]["profiles"][col]
            curves.append((np.asarray(pr["x"], float),
                           pr["s0"] + np.asarray(pr["delta"], float)))
        xs = np.unique(np.concatenate([c[0] for c in curves]))
        xs = xs[np.isfinite(xs)]
        xe = np.unique(np.concatenate([xs, np.linspace(xs.min(), xs.max(), 600)]))
        others = total - stat[i]
        pooled = envelope_profile(others, curves, xe, substeps)
        single = envelope_profile(np.zeros(len(values)), curves, xe, substeps)
        entry: dict[str, Any] = {}
        for kind, prof in (("pooled", pooled), ("single", single)):
            d = prof - np.min(prof)
            entry[kind] = {str(lv): _as_interval(threshold_intervals(
                xe, d, wilks_threshold(lv))) for lv in levels}
            entry[kind]["best"] = float(xe[int(np.argmin(prof))])
        entry["_curves"] = {"x": xe, "pooled": pooled - pooled.min(),
                            "single": single - single.min()}
        out[n] = entry
    return out


def _width(iv):
    if iv["lower"] is None or iv["upper"] is None:
        return float("nan")
    return float(sum(hi - lo for lo, hi in iv["pieces"]))


def shared_parameter_profile(manifest: Any, parameter: str, grid: ArrayLike, *,
                             output: str | os.PathLike | None = None,
                             columns: Sequence[str] | None = None, log: bool | None = None,
                             levels: Sequence[float] = LEVELS, workers: int | None = None,
                             fresh: bool = False, refine: int = 2, substeps: int = 8,
                             figures: Callable[..., Any] | None = None,
                             progress: bool = True) -> SharedProfileResult:
    """The summed profile statistic of a parameter shared by every sightline
    of a batch manifest (see the module docstring).

    Parameters
    ----------
    manifest : path or Manifest
        The batch manifest whose sightlines share ``parameter``.
    parameter : str
        Full parameter name, e.g. ``"dust_amax"``; every sightline's model
        must have it.  Its value in the manifest is ignored (fixed at each
        grid value in turn).
    grid : sequence of float or Quantity
        At least 3 distinct values (sorted here), in the parameter's unit
        (a Quantity is converted to it).  :func:`make_grid` makes one.
    output : path, optional
        Output folder (default ``<manifest stem>_shared_<parameter>``
        beside the manifest): ``shared.json``, ``shared_curve.ecsv``,
        ``shared_sightlines.ecsv``, ``points/`` (the cache) and the figure.
    columns : list of str, optional
        Parameters reported per sightline (default: every free ``*_col``).
    log : bool, optional
        Interpolate in ln(value) (default: when every grid value is > 0 and
        the grid spans more than a factor 3).
    levels : sequence of float
        Confidence levels (default 68.27 % and 95 %); the first is the one
        in the tables.
    workers : int, optional
        Local worker processes (default: the number of CPUs; 0 runs the
        fits in this process).
    fresh : bool
        Refit every point even when cached.
    refine : int
        Rounds of refinement (default 2; 0 for the grid alone): each adds
        the values of :func:`refinement_points` and fits every sightline
        there.
    substeps : int
        Interpolated steps between grid values for the pooled and single
        column profiles (:func:`envelope_profile`); 0 uses the grid only.
    figures : callable, optional
        ``figures(result, output)`` draws the figure.
    progress : bool
        A progress bar on stderr.

    Returns
    -------
    SharedProfileResult
    """
    from astropy import units as u
    from astropy.table import Table

    from .manifest import Manifest, load_manifest
    from .regression import write_json

    if not isinstance(manifest, Manifest):
        manifest = load_manifest(manifest)
    if not isinstance(parameter, str) or not parameter:
        raise ArgumentError("shared parameter: give a full parameter name, e.g. dust_amax")
    declared = {}
    for e in manifest:
        decl = e.config.model.parameters()
        if parameter not in decl:
            raise ArgumentError(f"{manifest.path}: {e.key}: the model has no parameter "
                                f"{parameter!r} (have {', '.join(sorted(decl))})")
        declared[e.name] = decl[parameter][1].unit or ""
    unit0 = next(iter(declared.values())) or ""
    if hasattr(grid, "unit"):
        grid = u.Quantity(grid).to_value(u.Unit(unit0) if unit0 else u.dimensionless_unscaled)
    values = np.unique(np.asarray(grid, float))
    if values.size < 3 or not np.all(np.isfinite(values)):
        raise ArgumentError(f"grid of {parameter}: need at least 3 distinct finite values")
    if log is None:
        log = bool(values[0] > 0 and values[-1] / values[0] > 3.0)
    if log and values[0] <= 0:
        raise ArgumentError(f"grid of {parameter}: a logarithmic grid needs values > 0")
    levels = [float(lv) for lv in levels]
    thresholds = {str(lv): wilks_threshold(lv) for lv in levels}
    if columns is not None:
        columns = list(columns)
    if workers is None:
        workers = os.cpu_count() or 1
    if workers < 0:
        raise ArgumentError(f"workers must be >= 0, got {workers}")
    out = (Path(output) if output is not None
           else manifest.path.parent / f"{manifest.path.stem}_shared_{parameter}")
    out.mkdir(parents=True, exist_ok=True)
    entries = list(manifest)
    tasks = _tasks_for(manifest, entries, parameter, values, columns, levels)
    recs = _run_points(out, tasks, fresh, workers, progress, f"{parameter} grid")

    def usable(vals):
        names, skipped = [], {}
        for e in entries:
            bad = [recs.get((e.name, _value_label(v))) for v in vals]
            why = next((f"{parameter}={_value_label(v)}: "
                        f"{(r or {}).get('reason', 'not fitted')}"
                        for v, r in zip(vals, bad) if r is None or r["status"] != "ok"), None)
            if why is None:
                names.append(e.name)
            else:
                skipped[e.name] = why
        return names, skipped

    names, skipped = usable(values)
    if not names:
        first = next(iter(skipped.items()))
        raise ArgumentError(f"{manifest.path}: no sightline was fitted at every grid value "
                            f"of {parameter} (e.g. {first[0]}: {first[1]})")
    stat = np.array([[recs[(n, _value_label(v))]["statistic"] for v in values]
                     for n in names])
    notes: list[str] = []
    added: list[float] = []
    for _ in range(int(refine)):
        extra = refinement_points(values, stat.sum(axis=0), list(thresholds.values()),
                                  log=log)
        extra = [v for v in extra if not np.any(np.isclose(values, v, rtol=1e-9, atol=0))]
        if not extra:
            break
        more = _tasks_for(manifest, [e for e in entries if e.name in names], parameter,
                          extra, columns, levels)
        recs.update(_run_points(out, more, fresh, workers, progress,
                                f"{parameter} refinement"))
        for v in extra:
            ok_names, _ = usable([v])
            if set(names) <= set(ok_names):
                values = np.sort(np.append(values, v))
                added.append(float(v))
            else:
                notes.append(f"the fits at {parameter} = {v:.6g} failed for "
                             f"{', '.join(sorted(set(names) - set(ok_names)))}; left out")
        stat = np.array([[recs[(n, _value_label(v))]["statistic"] for v in values]
                         for n in names])
    total = stat.sum(axis=0)
    kbest = int(np.argmin(total))
    best = float(values[kbest])
    delta = total - total[kbest]
    intervals = {str(lv): threshold_intervals(values, delta, thresholds[str(lv)], log=log)
                 for lv in levels}
    if kbest in (0, values.size - 1):
        notes.append(f"the lowest summed statistic is at the end of the grid ({best:.6g}); "
                     "extend the grid")
    rec0 = recs[(names[0], _value_label(best))]
    cols = list(rec0["columns"])
    units = dict(rec0["units"])
    unit_p = units.get(parameter, unit0) or ""
    col_prof = {c: _column_profiles(names, values, stat, recs, c, levels, substeps)
                for c in cols}
    lv0 = str(levels[0])
    # per-sightline summary
    per: dict[str, Any] = {}
    for i, n in enumerate(names):
        rb = recs[(n, _value_label(best))]
        ent: dict[str, Any] = {"statistic": {_value_label(v): float(stat[i, k])
                                             for k, v in enumerate(values)},
                               "best_own": float(values[int(np.argmin(stat[i]))]),
                               "flags_at_best": rb["flags"],
                               "warnings_at_best": rb.get("warnings", []), "columns": {}}
        for c in cols:
            cp = col_prof[c][n]
            w_single = _width(cp["single"][lv0])
            w_pooled = _width(cp["pooled"][lv0])
            ent["columns"][c] = {
                "unit": units.get(c, ""),
                "at_best": {"value": float(rb["values"][c]),
                            "intervals": rb["intervals"][c]},
                "pooled": {k: v for k, v in cp["pooled"].items()},
                "single": {k: v for k, v in cp["single"].items()},
                "shrink": (w_pooled / w_single if w_single > 0 else float("nan")),
                "width_pooled": w_pooled, "width_single": w_single}
        per[n] = ent
    summary = {
        "manifest": str(manifest.path), "parameter": parameter, "unit": unit_p,
        "grid": [float(v) for v in values], "log_grid": bool(log),
        "refinement_values": added, "best": best, "statistic_at_best": float(total[kbest]),
        "levels": levels, "thresholds": thresholds, "intervals": intervals,
        "n_sightlines": len(names), "sightlines": per, "skipped": skipped,
        "columns": cols, "notes": notes,
        "method": ("sum over sightlines of each one's profile statistic with the shared "
                   "parameter fixed on a grid (global fit and multi-chain column profiles "
                   "per point); thresholds: chi-square quantiles of 1 dof (Wilks 1938)"),
    }
    # tables
    curve = Table()
    curve["value"] = values * (u.Unit(unit_p) if unit_p else u.dimensionless_unscaled)
    curve["statistic"] = total * u.dimensionless_unscaled
    curve["delta_stat"] = delta * u.dimensionless_unscaled
    curve["n_sightlines"] = np.full(values.size, len(names))
    for i, n in enumerate(names):
        curve[f"C_{n}"] = stat[i] * u.dimensionless_unscaled
    curve.meta.update({"parameter": parameter, "best": best, "log_grid": bool(log),
                       "thresholds": thresholds,
                       "comment": "statistic: sum over sightlines of each one's statistic "
                                  f"minimised with {parameter} fixed at value"})
    rows = Table()
    rows["name"] = names
    rows["best_own"] = [per[n]["best_own"] for n in names]
    if unit_p:
        rows["best_own"].unit = u.Unit(unit_p)
    for c in cols:
        unit = u.Unit(units[c]) if units.get(c) else u.dimensionless_unscaled
        at = [per[n]["columns"][c]["at_best"] for n in names]
        rows[c] = [a["value"] for a in at] * unit
        lo = [a["intervals"].get(lv0, {}).get("lower") for a in at]
        hi = [a["intervals"].get(lv0, {}).get("upper") for a in at]
        rows[f"{c}_lo"] = np.array([np.nan if v is None else v for v in lo]) * unit
        rows[f"{c}_hi"] = np.array([np.nan if v is None else v for v in hi]) * unit
        for kind in ("pooled", "single"):
            ivs = [per[n]["columns"][c][kind][lv0] for n in names]
            rows[f"{c}_{kind}_lo"] = np.array([np.nan if v["lower"] is None else v["lower"]
                                               for v in ivs]) * unit
            rows[f"{c}_{kind}_hi"] = np.array([np.nan if v["upper"] is None else v["upper"]
                                               for v in ivs]) * unit
        rows[f"{c}_shrink"] = [per[n]["columns"][c]["shrink"] for n in names] \
            * u.dimensionless_unscaled
    rows.meta.update({"parameter": parameter, "best": best, "interval_level": levels[0],
                      "comment": f"X, X_lo, X_hi: at {parameter} = best; X_pooled_*: "
                                 f"profiled over the shared {parameter}; X_single_*: this "
                                 f"sightline alone with {parameter} free over the grid; "
                                 "shrink = pooled / single 68 % width"})
    for t, fname in ((curve, "shared_curve.ecsv"), (rows, "shared_sightlines.ecsv")):
        tmp = out / f".{fname}.tmp{os.getpid()}"
        t.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, out / fname)
    write_json(summary, out / "shared.json")
    result = SharedProfileResult(parameter=parameter, unit=unit_p, log=bool(log), best=best,
                                 intervals=intervals, curve=curve, sightlines=rows,
                                 summary=summary, output=out, names=names, skipped=skipped,
                                 points={"values": values, "stat": stat,
                                         "columns": {c: {n: col_prof[c][n]["_curves"]
                                                         for n in names} for c in cols}})
    if figures is not None:
        figures(result, out)
    return result
