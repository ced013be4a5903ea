"""The sample table: one row per sightline of a batch.

:func:`sightline_row` turns one sightline's :class:`~edgefit.inference.FitResult`
into a JSON-ready record; :func:`sample_table` stacks records (in manifest
order) into an astropy Table with units; :func:`write_sample_table` writes
``sample.ecsv`` and ``sample.fits`` atomically.  The format is documented in
the README (section "The sample table") and summarised here:

* ``name``, ``status`` (``ok``, ``doubtful``, ``failed``), ``reason`` (one
  line; empty when ok);
* ``statistic`` (C or chi-square at the best fit), ``dof``, ``n_bins``,
  ``gof_p`` (goodness-of-fit p-value of the statistic), ``ppc_p``
  (posterior predictive p-value; NaN when not run), ``converged`` and
  ``flags`` (comma-separated convergence flags), ``prior_dominated``
  (comma-separated MCMC sampler coordinates whose posterior kept more than
  half its flat prior's variance, e.g. ``dust fraction``: the data did not
  constrain them; empty without MCMC);
* the hydrogen columns of the manifest (``nh_hi``, ``nh_hi_err``,
  ``nh_hi_upper``, the same for ``n_h2`` and ``nh_total``, in cm^-2) and
  ``nh_hi_2h2`` = N(HI) + 2 N(H2) with ``nh_hi_2h2_err`` (the two tracer
  errors in quadrature, 2 x for H2) and ``nh_hi_2h2_upper``;
* for every fitted (free) parameter, every derived quantity and every
  total element column ``total_<El>_cm2`` = N_gas + N_dust: three columns
  ``Q``, ``Q_lo``, ``Q_hi`` with the unit of Q -- the best-fit value and
  the central 68.27 % interval (:data:`edgefit.stats.ONE_SIGMA`).

``meta["interval_source"]`` says for every Q where its interval came
from: ``profile`` (profile likelihood, Delta stat = 1), ``posterior``
(MCMC quantiles), ``covariance`` (parameters: value -/+ covariance error;
derived quantities and totals: quantiles of draws from the covariance
Gaussian, which keep the correlations) or ``none``; a dict
{sightline: source} when the sightlines differ.  The FITS file repeats
these as COMMENT cards.

The total column ``total_<El>_cm2`` is the derived ``total_column_<El>``
(gas plus every dust component of the element, a grain population across
edges included, summed draw by draw).  Its interval is the posterior's when
MCMC ran; otherwise, when :func:`total_column_profiles` ran (``edgefit
batch`` runs it whenever a sightline's ``[errors] profile`` list is not
empty), the profile-likelihood interval of the total in the total/fraction
parametrisation (:func:`edgefit.inference.fit.reparametrise`), else the
covariance draws'.
"""
from __future__ import annotations

import math
import os
import tempfile
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Sequence

import numpy as np

from .._units import unit_or_none
from ..stats import ONE_SIGMA
from .manifest import HYDROGEN_KEYS

if TYPE_CHECKING:
    from astropy.table import Table

__all__ = ["sightline_row", "failed_row", "sample_table", "write_sample_table",
           "read_sample_table", "open_sample_table", "total_column_profiles", "STATUSES", "POOR_FIT_P",
           "TOTAL_PROFILES_KEY"]

#: Row statuses.
STATUSES = ("ok", "doubtful", "failed")
#: A goodness-of-fit p-value below this marks a fit doubtful (common practice).
POOR_FIT_P = 1e-3
_CM2 = "cm-2"
#: ``FitResult.meta`` key under which :func:`total_column_profiles` results
#: are kept for :func:`sightline_row`.
TOTAL_PROFILES_KEY = "total_profiles"
#: The column parameters' unit, 1e16 cm^-2, in cm^-2.
_COLUMN_UNIT_CM2 = 1e16


def _f(x):
    """float, with None and non-finite values as None (JSON null)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _is_one_sigma(level):
    return abs(float(level) - ONE_SIGMA) < 5e-4


def _parameter_interval(result, name):
    """(lo, hi, source) of a free parameter's 68.27 % interval."""
    for lev, iv in result.intervals.get(name, {}).items():
        if _is_one_sigma(lev) and iv.lower is not None and iv.upper is not None:
            return iv.lower, iv.upper, "profile"
    if result.mcmc is not None and name in result.mcmc.names:
        _, lo, hi = result.mcmc.quantiles(name, ONE_SIGMA)
        return lo, hi, "posterior"
    err = result.error(name)
    if err is not None and math.isfinite(err):
        v = float(result.params[name].value)
        return v - err, v + err, "covariance"
    return None, None, "none"


def _draw_source(derived):
    return {"MCMC posterior": "posterior",
            "covariance Gaussian": "covariance"}.get(derived.source, "none")


def _totals(result):
    """{element: (best, samples, unit)} of N_gas + N_dust: the derived
    ``total_column_<El>`` of every element with gas and dust columns (every
    dust component of the element counts, a grain population across edges
    included), summed draw by draw."""
    der = result.derived
    if der is None:
        return {}
    prefix = "total_column_"
    return {q.name[len(prefix):]: (q.best, q.samples, q.unit) for q in der.quantities
            if q.name.startswith(prefix)}


def _column_pairs(model):
    """{element: (gas component, dust component)} for every element with
    exactly one gas-phase and one dust-phase component carrying its column
    (a grain population across edges carries its column element's)."""
    by_el: dict[str, dict[str, list]] = {}
    for comp in model.components():
        phase = getattr(comp, "phase", None)
        el = getattr(comp, "column_element", None) or getattr(comp, "element", None)
        if phase in ("gas", "dust") and el:
            by_el.setdefault(el, {}).setdefault(phase, []).append(comp)
    return {el: (d["gas"][0], d["dust"][0]) for el, d in by_el.items()
            if len(d.get("gas", [])) == 1 and len(d.get("dust", [])) == 1}


def total_column_profiles(result, level: float = ONE_SIGMA) -> dict[str, dict]:
    """Profile-likelihood intervals of each element's total column.

    For every element with one gas and one dust component whose columns
    are both free, the fit is re-expressed in total/fraction form
    (:func:`~edgefit.inference.fit.reparametrise`) and the total's profile
    interval at ``level`` is computed (:func:`~edgefit.inference.intervals.profile_intervals`:
    Delta stat = 1 at 68.27 %).  Returns {element: {"best", "lower",
    "upper" (cm^-2; None where not found), "lower_at_bound",
    "upper_at_bound", "level", "parameter"}}.  Elements with several
    components of a phase, a fixed column, or tied to a grain population
    through another element's column are left out (their totals keep the
    draws).  Pure computation, no I/O."""
    from ..inference.fit import reparametrise
    from ..inference.intervals import profile_intervals
    from ..models.columns import TotalAndFraction

    if isinstance(result.model, TotalAndFraction):
        return {}
    out: dict[str, dict] = {}
    for el, (gas, dust) in _column_pairs(result.model).items():
        names = [f"{c.name}_{c.params[0].name}" for c in (gas, dust)]
        if not all(n in result.free_names for n in names):
            continue
        tf = reparametrise(result, "total_fraction", gas=gas.name, dust=dust.name)
        tname = tf.model.total_param
        iv = profile_intervals(tf, [tname], [level], store=False)[tname][level]

        def cm2(x):
            return None if x is None else float(x) * _COLUMN_UNIT_CM2
        out[el] = {"best": cm2(tf.values[tname]), "lower": cm2(iv.lower),
                   "upper": cm2(iv.upper), "lower_at_bound": bool(iv.lower_at_bound),
                   "upper_at_bound": bool(iv.upper_at_bound), "level": float(level),
                   "parameter": tname}
    return out


def sightline_row(result, name, warnings_seen=()):
    """The sample-table record of one finished sightline (JSON-ready dict).

    ``status`` is ``doubtful`` when a convergence flag was raised, the MCMC
    chain is shorter than its autocorrelation rule, the goodness-of-fit
    p-value is below :data:`POOR_FIT_P` or a convergence warning was
    seen; the ``reason`` says which.  Keys: name, status, reason,
    statistic, dof, n_bins, gof_p, ppc_p, converged, flags, quantities
    (ordered list of [name, best, lo, hi, unit, source])."""
    reasons = []
    if not result.converged:
        reasons.append("convergence flags: " + ", ".join(result.flags))
    if result.mcmc is not None and result.mcmc.short_chain:
        reasons.append("MCMC chain shorter than its autocorrelation rule")
    gof_p = (result.goodness or {}).get("p_value")
    if gof_p is not None and math.isfinite(gof_p) and gof_p < POOR_FIT_P:
        reasons.append(f"poor fit (goodness p = {gof_p:.2g})")
    for w in warnings_seen:
        if w not in reasons:
            reasons.append(w)
    quantities = []
    for n in result.free_names:
        lo, hi, src = _parameter_interval(result, n)
        quantities.append([n, _f(result.params[n].value), _f(lo), _f(hi), result.unit(n), src])
    if result.derived is not None:
        src = _draw_source(result.derived)
        for q in result.derived.quantities:
            lo, hi = q.interval(ONE_SIGMA)
            quantities.append([q.name, _f(q.best), _f(lo), _f(hi), q.unit, src])
        profiles = result.meta.get(TOTAL_PROFILES_KEY) or {}
        for el, (best, samples, unit) in _totals(result).items():
            prof = profiles.get(el) if result.mcmc is None else None
            if (prof and _is_one_sigma(prof["level"]) and prof["lower"] is not None
                    and prof["upper"] is not None):
                quantities.append([f"total_{el}_cm2", _f(best), _f(prof["lower"]),
                                   _f(prof["upper"]), unit, "profile"])
                continue
            s = samples[np.isfinite(samples)]
            lo, hi = ((np.quantile(s, [0.5 - ONE_SIGMA / 2, 0.5 + ONE_SIGMA / 2]))
                      if s.size else (None, None))
            quantities.append([f"total_{el}_cm2", _f(best), _f(lo), _f(hi), unit, src])
    return {"name": name, "status": "doubtful" if reasons else "ok",
            "reason": "; ".join(reasons), "statistic": _f(result.statistic),
            "dof": int(result.dof), "n_bins": int(result.n_bins), "gof_p": _f(gof_p),
            "ppc_p": _f((result.ppc or {}).get("p_value")), "converged": bool(result.converged),
            "flags": ",".join(result.flags),
            "prior_dominated": (",".join(result.mcmc.prior_dominated)
                                if result.mcmc is not None else ""),
            "quantities": quantities}


def failed_row(name, reason):
    """The record of a sightline that failed: ``reason`` is one line."""
    reason = (str(reason).strip().splitlines() or ["unknown error"])[0]
    return {"name": name, "status": "failed", "reason": reason, "statistic": None,
            "dof": None, "n_bins": None, "gof_p": None, "ppc_p": None, "converged": False,
            "flags": "", "prior_dominated": "", "quantities": []}


def _nan(x):
    return np.nan if x is None else float(x)


def _hydrogen_columns(h):
    """Values of the hydrogen columns (and N(HI) + 2 N(H2)) for one row."""
    out = {k: (bool(h.get(k, False)) if k.endswith("_upper") else _nan(h.get(k)))
           for k in HYDROGEN_KEYS}
    hi, h2 = h.get("nh_hi"), h.get("n_h2")
    if hi is not None and h2 is not None:
        out["nh_hi_2h2"] = hi + 2.0 * h2
        ehi, eh2 = h.get("nh_hi_err"), h.get("n_h2_err")
        out["nh_hi_2h2_err"] = (math.hypot(ehi, 2.0 * eh2)
                                if ehi is not None and eh2 is not None else np.nan)
        out["nh_hi_2h2_upper"] = bool(h.get("nh_hi_upper") or h.get("n_h2_upper"))
    else:
        out["nh_hi_2h2"] = np.nan
        out["nh_hi_2h2_err"] = np.nan
        out["nh_hi_2h2_upper"] = False
    return out


def sample_table(records: Sequence[dict], hydrogen: dict | None = None,
                 meta: dict | None = None) -> Table:
    """An astropy Table from sightline records (in the order given).

    ``hydrogen`` maps a sightline name to its manifest hydrogen columns.
    Quantities missing from a row (another model) are NaN."""
    from astropy import units as u
    from astropy.table import Column, Table

    hydrogen = hydrogen or {}
    order: list = []
    units: dict = {}
    sources: dict = {}
    for r in records:
        for qname, _b, _lo, _hi, unit, src in r["quantities"]:
            if qname not in units:
                order.append(qname)
                units[qname] = unit
            sources.setdefault(qname, {})[r["name"]] = src
    t = Table()
    n = len(records)
    t["name"] = Column([r["name"] for r in records], dtype=str)
    t["status"] = Column([r["status"] for r in records], dtype=str)
    t["reason"] = Column([r["reason"] for r in records], dtype=str)
    t["statistic"] = [_nan(r["statistic"]) for r in records]
    t["dof"] = np.array([-1 if r["dof"] is None else r["dof"] for r in records], dtype=int)
    t["n_bins"] = np.array([-1 if r["n_bins"] is None else r["n_bins"] for r in records],
                           dtype=int)
    t["gof_p"] = [_nan(r["gof_p"]) for r in records]
    t["ppc_p"] = [_nan(r["ppc_p"]) for r in records]
    t["converged"] = np.array([bool(r["converged"]) for r in records], dtype=bool)
    t["flags"] = Column([r["flags"] for r in records], dtype=str)
    t["prior_dominated"] = Column([r.get("prior_dominated", "") for r in records], dtype=str)
    hcols = [_hydrogen_columns(hydrogen.get(r["name"], {})) for r in records]
    for k in (hcols[0] if hcols else _hydrogen_columns({})):
        vals = [h[k] for h in hcols]
        if k.endswith("_upper"):
            t[k] = np.array(vals, dtype=bool)
        else:
            t[k] = np.array(vals, dtype=float) * u.Unit(_CM2)
    for qname in order:
        cols = np.full((n, 3), np.nan)
        for i, r in enumerate(records):
            for q in r["quantities"]:
                if q[0] == qname:
                    cols[i] = [_nan(q[1]), _nan(q[2]), _nan(q[3])]
        unit = unit_or_none(units[qname])
        for j, suffix in enumerate(("", "_lo", "_hi")):
            t[qname + suffix] = cols[:, j] if unit is None else cols[:, j] * unit
            if unit is None and units[qname]:
                t[qname + suffix].description = f"unit: {units[qname]}"
    interval_source = {}
    for qname in order:
        by_name = sources[qname]
        distinct = set(by_name.values())
        interval_source[qname] = distinct.pop() if len(distinct) == 1 else dict(by_name)
    t.meta["interval_level"] = ONE_SIGMA
    t.meta["interval_source"] = interval_source
    t.meta.update(meta or {})
    return t


def _atomic_write(path, writer):
    """Call ``writer(tmp_path)`` then rename the temporary file to ``path``."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    try:
        writer(tmp)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_sample_table(table, folder):
    """Write ``sample.ecsv`` and ``sample.fits`` into ``folder``, each
    atomically (temporary file, then rename); returns their paths."""
    from astropy import units as u

    from .._units import fits_ready_table

    folder = Path(folder)
    ecsv, fits = folder / "sample.ecsv", folder / "sample.fits"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", u.UnitsWarning)
        _atomic_write(ecsv, lambda p: table.write(p, format="ascii.ecsv", overwrite=True))
        ft = fits_ready_table(table)
        comments = [f"interval level {ONE_SIGMA}"]
        for q, src in table.meta.get("interval_source", {}).items():
            if isinstance(src, dict):
                src = "; ".join(f"{k}={v}" for k, v in src.items())
            comments.append(f"{q} interval: {src}")
        ft.meta = {k[:8].upper(): v for k, v in table.meta.items()
                   if isinstance(v, (int, float, str, bool)) and len(k) <= 8}
        ft.meta["comments"] = comments
        _atomic_write(fits, lambda p: ft.write(p, format="fits", overwrite=True))
    return ecsv, fits


def read_sample_table(folder_or_file: str | os.PathLike) -> Table:
    """Read ``sample.ecsv`` (a folder or the file itself) as an astropy
    Table; empty text cells (``reason`` of an ok row, ``flags``), which
    ECSV reads back as masked, become empty strings again."""
    from astropy.table import MaskedColumn, Table

    p = Path(folder_or_file)
    if p.is_dir():
        p = p / "sample.ecsv"
    t = Table.read(p, format="ascii.ecsv")
    for c in t.colnames:
        if isinstance(t[c], MaskedColumn) and t[c].dtype.kind in "US":
            t[c] = t[c].filled("")
    return t


def open_sample_table(folder_or_file: str | os.PathLike, *,
                      missing: str = "no sample table (run 'edgefit batch' first)"
                      ) -> tuple[Path, Table]:
    """``(path, table)``: the sample table of a batch output folder (its
    ``sample.ecsv``) or the file itself, read by :func:`read_sample_table`.
    A missing table (problem text ``missing``) or an unreadable one is an
    :class:`~edgefit.errors.InputFileError` naming the file."""
    from ..errors import InputFileError

    p = Path(folder_or_file)
    path = p / "sample.ecsv" if p.is_dir() else p
    if not path.exists():
        raise InputFileError(path, missing)
    try:
        return path, read_sample_table(path)
    except Exception as exc:  # astropy raises many kinds for unreadable tables
        raise InputFileError(path, f"cannot read the sample table ({exc})") from None
