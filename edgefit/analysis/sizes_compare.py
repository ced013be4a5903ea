"""Which grain-size distribution do the data prefer?  Refit a batch under
several candidates and compare them.

Every sightline of a batch manifest is refitted once per candidate size
distribution with :func:`edgefit.analysis.batch.run_batch` (parallel,
resumable: one batch output folder per candidate, ``DIR/candidates/<label>``),
and the candidates are compared per sightline and summed over the sample.

Candidate syntax (``SPEC``, our own; no expression is evaluated)::

    FAMILY[:NAME=VALUE[,NAME=VALUE...]]

``FAMILY`` is a family of :data:`edgefit.dust.sizes.FAMILIES`
(``power_law``, ``single``, ``lognormal``, ``cutoff``) or ``mrn`` (the
power law with the Mathis, Rumpl & Nordsieck 1977 values, the registry's
defaults).  ``NAME`` is a parameter of that family (``power_law``: amin,
amax, index; ``single``: size; ``lognormal``: center, width, amin, amax;
``cutoff``: amin, index, atrans, acut, amax; radii in µm) and ``VALUE``
either a number (the parameter is held fixed there) or ``free`` (fitted,
starting from the family's default value within its bounds).  Parameters
not named are held fixed at the family's defaults, so ``mrn`` is MRN with
every size fixed and ``mrn:amax=free`` frees only the upper size.  The
candidate is applied to every ``dust_edge`` component of the manifest's
model (its ``sizes`` option and its size parameters are replaced; its
column, shift and f_in settings are kept).

Statistics (C = the fit statistic, −2 ln L up to a constant that is the
same for every candidate fitted to the same bins; k = free parameters,
n = bins):

* AIC = C + 2k (Akaike 1974, IEEE Trans. Autom. Control 19, 716);
* BIC = C + k ln n (Schwarz 1978, Ann. Stat. 6, 461);
* Akaike weights w_i = exp(−ΔAIC_i/2) / Σ_j exp(−ΔAIC_j/2) (Burnham &
  Anderson 2002, *Model Selection and Multimodel Inference*, 2nd ed.,
  sec. 2.9);
* likelihood-ratio test for nested candidates (same family; the smaller
  one's free parameters a subset of the larger one's; the parameters fixed
  in both at equal values): ΔC = C_small − C_large follows χ² with Δk
  degrees of freedom under the smaller model (Wilks 1938, Ann. Math. Stat.
  9, 60).  When a fixed value of the smaller model lies on a bound of the
  larger one's free parameter, Wilks' conditions fail (the null
  distribution is then a χ² mixture, Chernoff 1954); the comparison says
  so and its p-value is conservative.  Away from bounds the p-value is
  conservative too when the data barely constrain the freed size
  parameter: on 60 simulated sightlines where plain MRN was true, ΔC for
  freeing the upper size averaged 0.46 against 1 for χ²(1), and no p fell
  below 0.05 (``benchmarks/validate_lrt.py``).  A small p can be trusted;
  a large one is weak evidence for the simpler model.
* Non-nested candidates are compared by ΔAIC and ΔBIC, worded with the
  Burnham & Anderson (2002, sec. 2.6) scale: |ΔAIC| ≤ 2 the data do not
  distinguish them, 2-10 they favour one, > 10 they strongly prefer it.

Summed over the sample: C, k and n add over the sightlines fitted
successfully under every candidate (each sightline keeps its own size
parameters: the sum compares "every sightline has this distribution", not
one shared size -- that is ``edgefit population``'s job).

Outputs in ``DIR``: ``sizes.ecsv`` (one row per sightline and candidate,
and rows for the sample sum with sightline ``ALL``), ``sizes.json``
(candidates, per-sightline and summed statistics, the best-constrained
free size parameter with its 68.27 % interval, and one sentence per
comparison) and, through ``figures``, a figure of ΔC per sightline.
"""
from __future__ import annotations

import copy
import dataclasses
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ArgumentError

__all__ = ["SizeSpec", "parse_spec", "information_criteria", "akaike_weights",
           "likelihood_ratio_test", "is_nested", "apply_spec", "compare_sizes",
           "SizesResult", "ALL", "CANDIDATES_DIR"]

#: Sightline name of the rows summed over the sample.
ALL = "ALL"
#: Sub-folder holding one batch output folder per candidate.
CANDIDATES_DIR = "candidates"
#: Family aliases accepted in a SPEC.
ALIASES = {"mrn": "power_law"}
#: Every size-distribution parameter name of any family (replaced by a SPEC).
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
_NAME = re.compile(r"^[a-z_][a-z0-9_]*$")


def _families():
    from ..dust.sizes import FAMILIES
    return FAMILIES


def _size_param_names():
    return {p.name for cls in _families().values() for p in cls.PARAMS}


@dataclass(frozen=True)
class SizeSpec:
    """A parsed candidate: ``family`` (registry name), ``values`` (every
    parameter of the family: its fixed value or starting value, in the
    parameter's unit), ``free`` (names fitted), ``text`` (as given)."""

    text: str
    family: str
    values: dict
    free: frozenset = field(default_factory=frozenset)
    given: frozenset = field(default_factory=frozenset)

    @property
    def label(self):
        """A folder-safe label, e.g. ``power_law_amax-free``."""
        parts = [self.family]
        defaults = {p.name: p.default for p in _families()[self.family].PARAMS}
        for name in sorted(self.values):
            if name in self.free:
                parts.append(f"{name}-free")
            elif self.values[name] != defaults[name] or name in self.given:
                parts.append(f"{name}-{self.values[name]:g}")
        return "_".join(parts).replace("+", "")

    @property
    def n_free(self):
        return len(self.free)

    def describe(self):
        """Canonical text, e.g. ``power_law:amax=free`` (defaults omitted)."""
        defaults = {p.name: p.default for p in _families()[self.family].PARAMS}
        items = [f"{n}=free" if n in self.free else f"{n}={self.values[n]:g}"
                 for n in sorted(self.values)
                 if n in self.free or n in self.given or self.values[n] != defaults[n]]
        return self.family + (":" + ",".join(items) if items else "")


def parse_spec(text, argument="--try"):
    """Parse one candidate ``FAMILY[:NAME=VALUE,...]`` (see the module
    docstring).  Any problem is an :class:`ArgumentError` whose one line
    names the argument and the text."""
    where = f"{argument} {text!r}"
    if not isinstance(text, str) or not text.strip():
        raise ArgumentError(f"{where}: empty size distribution (e.g. mrn, mrn:amax=free, "
                            "single:size=0.3)")
    head, sep, rest = text.strip().partition(":")
    fam = ALIASES.get(head.strip().lower(), head.strip().lower())
    families = _families()
    if fam not in families:
        raise ArgumentError(f"{where}: unknown family {head.strip()!r}; have "
                            f"{', '.join(sorted(set(families) | set(ALIASES)))}")
    params = {p.name: p for p in families[fam].PARAMS}
    values = {n: float(p.default) for n, p in params.items()}
    free = set()
    if sep and not rest.strip():
        raise ArgumentError(f"{where}: nothing after ':' (give NAME=VALUE pairs)")
    seen = set()
    for item in (rest.split(",") if rest.strip() else []):
        name, eq, val = item.partition("=")
        name, val = name.strip().lower(), val.strip().lower()
        if not eq or not name or not val:
            raise ArgumentError(f"{where}: {item.strip()!r} is not NAME=VALUE")
        if not _NAME.match(name) or name not in params:
            raise ArgumentError(f"{where}: {fam} has no parameter {name!r}; it has "
                                f"{', '.join(params)}")
        if name in seen:
            raise ArgumentError(f"{where}: {name} given twice")
        seen.add(name)
        lo, hi = float(params[name].min), float(params[name].max)
        if val == "free":
            free.add(name)
            continue
        if not _NUMBER.match(val):
            raise ArgumentError(f"{where}: {name}={val!r} must be a number or 'free'")
        x = float(val)
        if not (math.isfinite(x) and lo <= x <= hi):
            unit = " um" if params[name].unit == "um" else ""
            raise ArgumentError(f"{where}: {name}={x:g} lies outside [{lo:g}, {hi:g}]{unit}")
        values[name] = x
    if fam != "single":
        lo_v, hi_v = values.get("amin"), values.get("amax")
        if lo_v is not None and hi_v is not None and "amin" not in free \
                and "amax" not in free and not lo_v < hi_v:
            raise ArgumentError(f"{where}: amin={lo_v:g} must be below amax={hi_v:g}")
    return SizeSpec(text=text.strip(), family=fam, values=values, free=frozenset(free),
                    given=frozenset(seen))


# ---------------------------------------------------------------------------
# statistics (pure arithmetic)
def information_criteria(statistic, n_free, n_bins):
    """(AIC, BIC) of a fit statistic C = −2 ln L + const with ``n_free``
    parameters on ``n_bins`` bins: AIC = C + 2k (Akaike 1974), BIC = C +
    k ln n (Schwarz 1978).  Arrays broadcast."""
    c = np.asarray(statistic, float)
    k = np.asarray(n_free, float)
    n = np.asarray(n_bins, float)
    return c + 2.0 * k, c + k * np.log(n)


def akaike_weights(aic):
    """exp(−ΔAIC/2) normalised to sum 1 (Burnham & Anderson 2002, sec.
    2.9); NaN entries get weight NaN and are left out of the sum."""
    a = np.asarray(aic, float)
    ok = np.isfinite(a)
    w = np.full(a.shape, np.nan)
    if ok.any():
        d = a[ok] - a[ok].min()
        e = np.exp(-0.5 * d)
        w[ok] = e / e.sum()
    return w


def likelihood_ratio_test(stat_small, stat_large, k_small, k_large):
    """(ΔC, Δk, p) of the likelihood-ratio test of a smaller model nested in
    a larger one: ΔC = C_small − C_large, p = P(χ²_Δk ≥ ΔC) (Wilks 1938).
    A slightly negative ΔC (the larger fit stopped short of the smaller
    one's optimum) counts as 0 (p = 1)."""
    from scipy import stats

    dk = int(k_large) - int(k_small)
    if dk <= 0:
        raise ArgumentError(f"likelihood-ratio test needs more free parameters in the "
                            f"larger model (got {k_small} and {k_large})")
    dc = float(stat_small) - float(stat_large)
    return dc, dk, float(stats.chi2.sf(max(dc, 0.0), dk))


def is_nested(small, large):
    """True when candidate ``small`` is a special case of ``large``: the
    same family, ``small``'s free parameters a proper subset of
    ``large``'s, and every parameter fixed in both at the same value."""
    if small.family != large.family or not small.free < large.free:
        return False
    return all(small.values[n] == large.values[n] for n in small.values
               if n not in large.free)


def _on_bound(small, large):
    """Parameters fixed in ``small`` at a bound of ``large``'s free range."""
    params = {p.name: p for p in _families()[large.family].PARAMS}
    return [n for n in large.free - small.free
            if small.values[n] in (float(params[n].min), float(params[n].max))]


def _aic_words(d_aic):
    d = abs(d_aic)
    if d <= 2.0:
        return "the data do not distinguish them"
    if d <= 10.0:
        return "the data favour"
    return "the data strongly prefer"


def compare_pair(a, b, stats_a, stats_b, alpha=0.05, who=""):
    """One comparison of candidates ``a`` and ``b`` (SizeSpec) from their
    {statistic, n_free, n_bins, aic, bic}: a dict with the numbers and a
    plain ``sentence``."""
    who = f"{who}: " if who else ""
    out = {"a": a.describe(), "b": b.describe()}
    nested = None  # (smaller, larger, its stats, its stats) when one nests in the other
    if is_nested(a, b):
        nested = (a, b, stats_a, stats_b)
    elif is_nested(b, a):
        nested = (b, a, stats_b, stats_a)
    if nested is not None:
        small, large, s_s, s_l = nested
        dc, dk, p = likelihood_ratio_test(s_s["statistic"], s_l["statistic"],
                                          s_s["n_free"], s_l["n_free"])
        bound = _on_bound(small, large)
        out.update(test="likelihood ratio", nested=True, smaller=small.describe(),
                   larger=large.describe(), delta_stat=dc, delta_dof=dk, p_value=p,
                   boundary=bound)
        note = (f" ({', '.join(bound)} of the smaller model on a bound: Wilks' test does "
                "not strictly apply and p is conservative)") if bound else ""
        if p < alpha:
            verdict = f"the data prefer {large.describe()}"
        else:
            verdict = (f"no significant preference, so the simpler {small.describe()} is "
                       "enough")
        out["sentence"] = (f"{who}{small.describe()} is nested in {large.describe()}: "
                           f"dC = {dc:.2f} for {dk} more free parameter"
                           f"{'s' if dk > 1 else ''}, likelihood-ratio p = {p:.3g}{note}; "
                           f"{verdict} (at the {alpha:g} level).")
        out["preferred"] = large.describe() if p < alpha else small.describe()
        return out
    d_aic = stats_b["aic"] - stats_a["aic"]
    d_bic = stats_b["bic"] - stats_a["bic"]
    better = a if d_aic > 0 else b
    words = _aic_words(d_aic)
    bic_agrees = (d_bic > 0) == (d_aic > 0) or d_bic == 0
    out.update(test="information criteria", nested=False, delta_aic=d_aic, delta_bic=d_bic)
    if abs(d_aic) <= 2.0:
        verdict = words
        out["preferred"] = None
    else:
        verdict = f"{words} {better.describe()}"
        out["preferred"] = better.describe()
    out["sentence"] = (f"{who}{a.describe()} and {b.describe()} are not nested: "
                       f"AIC({b.describe()}) - AIC({a.describe()}) = {d_aic:.2f}, "
                       f"BIC difference {d_bic:.2f}; {verdict}"
                       f"{'' if bic_agrees or abs(d_aic) <= 2 else ' (BIC disagrees)'}.")
    return out


# ---------------------------------------------------------------------------
# applying a candidate to a manifest
def apply_spec(manifest, spec, profile_sizes=True):
    """A copy of ``manifest`` (a checked :class:`Manifest`) whose every
    ``dust_edge`` component uses the candidate ``spec``; every sightline's
    configuration is checked again.  ``profile_sizes``: the candidate's
    free size parameters get profile-likelihood intervals (else their
    covariance intervals stand).  No dust_edge component is an
    ArgumentError naming the manifest."""
    from .config import config_from_dict

    names = _size_param_names()
    entries = []
    for e in manifest:
        table = copy.deepcopy(e.table)
        comps = (table.get("model") or {}).get("components") or {}
        found = False
        for comp in comps.values():
            if not isinstance(comp, dict) or comp.get("type") != "dust_edge":
                continue
            found = True
            opts = dict(comp.get("options") or {})
            opts["sizes"] = spec.family
            comp["options"] = opts
            params = {k: v for k, v in (comp.get("params") or {}).items() if k not in names}
            for n, v in spec.values.items():
                params[n] = {"value": v, "fixed": n not in spec.free}
            comp["params"] = params
        if not found:
            raise ArgumentError(f"{manifest.path}: {e.key}: the model has no dust_edge "
                                "component whose sizes could be compared")
        _adapt_profile(table, comps, spec, names, profile_sizes)
        cfg = config_from_dict(table, manifest.path, base=e.config.base,
                               key_prefix=f"{e.key}.", name=e.name, output=e.config.base)
        entries.append(dataclasses.replace(e, table=table, config=cfg))
    return dataclasses.replace(manifest, sightlines=entries)


def _adapt_profile(table, comps, spec, names, profile_sizes=True):
    """``[errors] profile``: drop size parameters the candidate holds fixed,
    add the ones it frees (their intervals are the profile's) unless
    ``profile_sizes`` is False."""
    errors = table.setdefault("errors", {})
    prof = errors.get("profile")
    if isinstance(prof, str) and prof != "all":
        prof = [prof]
    if prof == "all":
        return
    dust = [n for n, c in comps.items() if isinstance(c, dict) and c.get("type") == "dust_edge"]
    size_full = {f"{d}_{n}" for d in dust for n in names}
    keep = [p for p in (prof or []) if p not in size_full]
    errors["profile"] = keep + ([f"{d}_{n}" for d in dust for n in sorted(spec.free)]
                                if profile_sizes else [])


# ---------------------------------------------------------------------------
@dataclass
class SizesResult:
    """Result of :func:`compare_sizes`: ``specs`` (SizeSpec, in order),
    ``table`` (astropy Table, also ``DIR/sizes.ecsv``), ``summary`` (the
    JSON-ready dict of ``DIR/sizes.json``), ``output`` (DIR), ``sightlines``
    (names compared), ``skipped`` ({name: reason})."""

    specs: list
    table: object
    summary: dict
    output: Path
    sightlines: list
    skipped: dict


def _size_columns(sample, spec):
    """Sample-table names of the candidate's free size parameters
    (``<component>_<param>``)."""
    out = []
    for c in sample.colnames:
        for n in sorted(spec.free):
            if c.endswith(f"_{n}") and f"{c}_lo" in sample.colnames:
                out.append(c)
    return out


def _row_stats(sample, name):
    i = list(sample["name"]).index(name) if name in list(sample["name"]) else None
    if i is None:
        return None, "not fitted"
    r = sample[i]
    if r["status"] == "failed":
        return None, f"failed: {r['reason']}"
    c = float(r["statistic"])
    if not math.isfinite(c):
        return None, "no statistic"
    n = int(r["n_bins"])
    k = n - int(r["dof"])
    return {"statistic": c, "n_free": k, "n_bins": n, "status": str(r["status"])}, None


def _interval(sample, name, col):
    i = list(sample["name"]).index(name)
    v, lo, hi = (float(np.asarray(sample[c][i])) for c in (col, f"{col}_lo", f"{col}_hi"))
    unit = sample[col].unit
    return {"name": col, "value": v, "lo": lo, "hi": hi,
            "unit": "" if unit is None else unit.to_string()}


def _fill_ic(entries):
    aic, bic = information_criteria([e["statistic"] for e in entries],
                                    [e["n_free"] for e in entries],
                                    [e["n_bins"] for e in entries])
    w = akaike_weights(aic)
    cmin = min(e["statistic"] for e in entries)
    for e, a, b, wi in zip(entries, aic, bic, w):
        e.update(aic=float(a), bic=float(b), akaike_weight=float(wi),
                 delta_stat=e["statistic"] - cmin)
    amin = min(e["aic"] for e in entries)
    bmin = min(e["bic"] for e in entries)
    for e in entries:
        e.update(delta_aic=e["aic"] - amin, delta_bic=e["bic"] - bmin)


def _comparisons(specs, entries, alpha, who):
    """Every nested pair (likelihood-ratio test) and every other candidate
    against the one of lowest AIC (information criteria)."""
    out = []
    best = int(np.argmin([e["aic"] for e in entries]))
    for i in range(len(specs)):
        for j in range(i + 1, len(specs)):
            nested = is_nested(specs[i], specs[j]) or is_nested(specs[j], specs[i])
            if nested or best in (i, j):
                a, b = (i, j) if (nested or i == best) else (j, i)
                out.append(compare_pair(specs[a], specs[b], entries[a], entries[b],
                                        alpha, who))
    return out


def compare_sizes(manifest, specs, output=None, *, workers=None, fresh=False, mcmc=False,
                  plots=False, steps=None, alpha=0.05, figures=None, progress=True,
                  batch_figures=None, profile_sizes=True):
    """Refit a batch manifest under each candidate size distribution and
    compare them (see the module docstring).

    Parameters
    ----------
    manifest : path or Manifest
    specs : list of str or SizeSpec
        At least two distinct candidates (SPEC strings are parsed by
        :func:`parse_spec`).
    output : path, optional
        Output folder (default ``<manifest stem>_sizes`` beside it); each
        candidate's batch goes to ``DIR/candidates/<label>`` and a rerun
        skips the sightlines already fitted under it.
    workers, fresh, mcmc, plots, steps
        Passed to :func:`~edgefit.analysis.batch.run_batch` (MCMC is off by
        default: the comparison needs the best fits and the profile or
        covariance intervals of the size parameters).
    alpha : float
        Level of the likelihood-ratio tests.
    figures : callable, optional
        ``figures(result, output)`` draws the ΔC figure (e.g.
        :func:`edgefit.plotting.sizes.save_sizes_figure`).
    batch_figures : callable, optional
        Per-sightline figure hook handed to ``run_batch``.
    profile_sizes : bool
        Profile-likelihood intervals for the free size parameters (the
        default; the most expensive part of a refit); False keeps their
        covariance intervals.

    Returns
    -------
    SizesResult
    """
    from astropy import units as u
    from astropy.table import Table

    from .batch import run_batch
    from .manifest import Manifest, load_manifest
    from .regression import write_json

    specs = [s if isinstance(s, SizeSpec) else parse_spec(s) for s in specs]
    if len(specs) < 2:
        raise ArgumentError("--try: give at least two size distributions to compare")
    labels = [s.label for s in specs]
    dup = sorted({x for x in labels if labels.count(x) > 1})
    if dup:
        raise ArgumentError(f"--try: the same size distribution is given twice ({dup[0]})")
    if not 0.0 < float(alpha) < 1.0:
        raise ArgumentError(f"alpha must lie in (0, 1), got {alpha}")
    if not isinstance(manifest, Manifest):
        manifest = load_manifest(manifest)
    out = (Path(output) if output is not None
           else manifest.path.parent / f"{manifest.path.stem}_sizes")
    applied = [apply_spec(manifest, s, profile_sizes) for s in specs]   # check all before fitting
    samples = []
    for s, m in zip(specs, applied):
        if progress:
            import sys
            print(f"candidate {s.describe()}", file=sys.stderr)
        samples.append(run_batch(m, out / CANDIDATES_DIR / s.label, workers=workers,
                                 fresh=fresh, mcmc=mcmc, plots=plots, steps=steps,
                                 figures=batch_figures, progress=progress))
    names, skipped, per = [], {}, {}
    for e in manifest:
        got, why = [], None
        for s, sample in zip(specs, samples):
            st, why = _row_stats(sample, e.name)
            if st is None:
                skipped[e.name] = f"{s.describe()}: {why}"
                break
            got.append(st)
        if len(got) == len(specs):
            names.append(e.name)
            per[e.name] = got
    if not names:
        first = next(iter(skipped.items()))
        raise ArgumentError(f"{manifest.path}: no sightline was fitted under every candidate "
                            f"(e.g. {first[0]}: {first[1]})")
    for name in names:
        _fill_ic(per[name])
        for s, sample, ent in zip(specs, samples, per[name]):
            ivs = [_interval(sample, name, c) for c in _size_columns(sample, s)]
            ent["size_parameters"] = ivs
            good = [iv for iv in ivs if all(math.isfinite(iv[k]) for k in ("value", "lo", "hi"))
                    and iv["value"] != 0]
            ent["best_constrained"] = (min(good, key=lambda iv: (iv["hi"] - iv["lo"])
                                           / abs(iv["value"]))["name"] if good else None)
    total = [{"statistic": sum(per[n][j]["statistic"] for n in names),
              "n_free": sum(per[n][j]["n_free"] for n in names),
              "n_bins": sum(per[n][j]["n_bins"] for n in names)} for j in range(len(specs))]
    _fill_ic(total)
    for j in range(len(specs)):
        total[j]["wins"] = sum(1 for n in names
                               if int(np.argmin([x["aic"] for x in per[n]])) == j)
    summary = {
        "manifest": str(manifest.path), "alpha": float(alpha),
        "candidates": [{"spec": s.text, "canonical": s.describe(), "family": s.family,
                        "values": s.values, "free": sorted(s.free),
                        "folder": f"{CANDIDATES_DIR}/{s.label}"} for s in specs],
        "sightlines": {n: {"candidates": {s.describe(): per[n][j] for j, s in enumerate(specs)},
                           "best_aic": specs[int(np.argmin([x["aic"] for x in per[n]]))]
                           .describe(),
                           "comparisons": _comparisons(specs, per[n], alpha, n)}
                       for n in names},
        "sample": {"n_sightlines": len(names),
                   "candidates": {s.describe(): total[j] for j, s in enumerate(specs)},
                   "best_aic": specs[int(np.argmin([x["aic"] for x in total]))].describe(),
                   "comparisons": _comparisons(specs, total, alpha, "sample")},
        "skipped": skipped,
        "notes": ["C is the fit statistic (-2 ln L up to a constant shared by candidates "
                  "fitted to the same bins); AIC = C + 2k, BIC = C + k ln n",
                  "sample sums treat every sightline's size parameters as its own"],
    }
    # the table
    size_cols: list[tuple[str, Any]] = []
    for s, sample in zip(specs, samples):
        for c in _size_columns(sample, s):
            if c not in [x[0] for x in size_cols]:
                size_cols.append((c, sample[c].unit))
    rows = []
    for n in names + [ALL]:
        ents = per[n] if n != ALL else total
        for s, ent in zip(specs, ents):
            row = {"sightline": n, "candidate": s.describe(), "family": s.family,
                   "status": ent.get("status", ""), "statistic": ent["statistic"],
                   "n_free": ent["n_free"], "n_bins": ent["n_bins"],
                   "delta_stat": ent["delta_stat"], "aic": ent["aic"],
                   "delta_aic": ent["delta_aic"], "bic": ent["bic"],
                   "delta_bic": ent["delta_bic"], "akaike_weight": ent["akaike_weight"]}
            by_name = {iv["name"]: iv for iv in ent.get("size_parameters", [])}
            for c, _ in size_cols:
                iv = by_name.get(c)
                for suf, key in (("", "value"), ("_lo", "lo"), ("_hi", "hi")):
                    row[c + suf] = iv[key] if iv else np.nan
            rows.append(row)
    table = Table(rows=rows, names=list(rows[0]))
    for c in ("statistic", "delta_stat", "aic", "delta_aic", "bic", "delta_bic",
              "akaike_weight"):
        table[c].unit = u.dimensionless_unscaled
    for c, unit in size_cols:
        for suf in ("", "_lo", "_hi"):
            table[c + suf].unit = unit
    table.meta.update({"manifest": manifest.path.name, "alpha": float(alpha),
                       "candidates": [s.describe() for s in specs],
                       "interval_level": 0.6827,
                       "comment": "rows with sightline ALL: sums over the sightlines "
                                  "fitted under every candidate"})
    out.mkdir(parents=True, exist_ok=True)
    tmp = out / ".sizes.ecsv.tmp"
    table.write(tmp, format="ascii.ecsv", overwrite=True)
    tmp.replace(out / "sizes.ecsv")
    write_json(summary, out / "sizes.json")
    result = SizesResult(specs=specs, table=table, summary=summary, output=out,
                         sightlines=names, skipped=skipped)
    if figures is not None:
        figures(result, out)
    return result
