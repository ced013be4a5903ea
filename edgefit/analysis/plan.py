"""Planning an observation: how well would gas and dust be told apart?

Two answers for one simulation setup (:mod:`edgefit.analysis.simulate`:
a model whose parameter values are the assumed truth, responses, an
exposure and a background):

**Fisher forecast** (fast).  For Poisson counts with expectation
mu_k(theta) in channel k, the Fisher information is

    F_ij = sum_k (d mu_k / d theta_i) (d mu_k / d theta_j) / mu_k

(e.g. Cash 1979, ApJ 228, 939; any statistics text), evaluated at the
truth with central differences over every free parameter (and the free
cross-normalisations of the second and later spectra, as a fit has
them); the background is taken as known.  Its inverse is the smallest
covariance an unbiased estimate can have (Cramer-Rao), and it is what the
fit's covariance tends to when the counts are high and the likelihood
Gaussian.  Since every mu_k grows in proportion to the exposure t,
sigma(t) = sigma(t0) sqrt(t0 / t).  The total column of an element is
gas + dust; its variance adds the covariance twice.  "Size known" rows
condition on the size-distribution parameters (drop their rows and
columns of F before inverting).

**Simulations** (honest where Fisher is not).  With the grain size free
the likelihood of one edge is far from Gaussian (gas and dust trade
against the size); so ``plan`` also draws ``n_sims`` Poisson
realisations (seeded: realisation i uses child i of
``numpy.random.SeedSequence(seed)``, so results do not depend on the
number of worker processes), fits each, and reports the 68 % width of
the fitted values, (p84 - p16) / 2, of gas, dust and total.

**Verdict.** The setup *separates* gas from dust at significance z when
both columns are expected to differ from zero by z of their (simulated,
else Fisher) 68 % widths; the exposure that would do so follows from the
1/sqrt(t) scaling of the Fisher widths.  The text says which of a longer
exposure, a known size distribution, or more edges would help.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import ArgumentError, EdgefitError

__all__ = ["ColumnTargets", "column_targets", "Forecast", "fisher_forecast",
           "SimulatedWidths", "simulate_fits", "plan_observation", "PlanResult",
           "exposure_table", "verdict"]

_PCT = (15.865525393145708, 84.13447460685429)   # central 68.27 %


@dataclass
class ColumnTargets:
    """Full parameter names of the gas and dust column of the element
    whose edge is planned for, and the dust component's size parameters."""

    element: str
    gas: str
    dust: str
    size_params: list
    unit: str


def column_targets(model, element=None):
    """Find the gas-phase and dust column parameters (components declaring
    ``phase = "gas"``/``"dust"``, an ``element`` and a ``col`` parameter)."""
    found: dict[str, Any] = {}
    for comp in model.components():
        phase = getattr(comp, "phase", None)
        el = getattr(comp, "element", None)
        if phase in ("gas", "dust") and el and any(p.name == "col" for p in comp.params):
            if element is not None and el != element:
                continue
            found.setdefault(el, {}).setdefault(phase, comp)
    both = {el: d for el, d in found.items() if {"gas", "dust"} <= set(d)}
    if not both:
        raise EdgefitError("the model needs a gas-phase edge and a dust edge of one element "
                           "(e.g. gas_edge and dust_edge with element = \"Si\") to plan for")
    el = sorted(both)[0]
    gas, dust = both[el]["gas"], both[el]["dust"]
    size = [f"{dust.name}_{n}" for n in getattr(dust, "_dist_names", ())
            if n not in dust.fixed and any(p.name == n and p.vary for p in dust.params)]
    unit = next(p.unit for p in gas.params if p.name == "col")
    return ColumnTargets(el, f"{gas.name}_col", f"{dust.name}_col", size, unit)


def _settings_params(setup, n_data):
    """lmfit Parameters of the setup's model with its settings and one
    cross-normalisation per spectrum (the first fixed), at the truth."""
    from ..inference.likelihood import XNORM_PREFIX

    params = setup.model.make_params()
    for k, v in setup.truth.items():
        if k in params and not params[k].expr:
            params[k].value = v
    for i in range(n_data):
        params.add(f"{XNORM_PREFIX}{i + 1}", value=1.0, min=0.2, max=5.0, vary=i > 0)
    return params


def _apply_settings(setup, params):
    """Bounds, fixed flags and ties of the configuration; values at the truth."""
    from .config import apply_parameter_settings

    if setup.param_settings:
        params = apply_parameter_settings(params, setup.param_settings, setup.model, setup.path)
        for k, v in setup.truth.items():
            if k in params and not params[k].expr:
                params[k].value = v
    return params


@dataclass
class Forecast:
    """Fisher covariance of the free parameters at exposure ``exposure``."""

    names: list
    values: np.ndarray
    fisher: np.ndarray
    exposure: float
    targets: ColumnTargets

    def covariance(self, exposure=None, known=()):
        """Covariance at ``exposure`` (s); parameters in ``known`` are
        conditioned on (treated as known)."""
        keep = [i for i, n in enumerate(self.names) if n not in set(known)]
        f = self.fisher[np.ix_(keep, keep)]
        scale = 1.0 if exposure is None else float(exposure) / self.exposure
        try:
            cov = np.linalg.inv(f * scale)
        except np.linalg.LinAlgError:
            cov = np.linalg.pinv(f * scale)
        full = np.full((len(self.names),) * 2, np.nan)
        full[np.ix_(keep, keep)] = cov
        return full

    def columns(self, exposure=None, known=()):
        """(sigma_gas, sigma_dust, sigma_total, correlation gas-dust)."""
        cov = self.covariance(exposure, known)
        i, j = self.names.index(self.targets.gas), self.names.index(self.targets.dust)
        sg, sd = math.sqrt(max(cov[i, i], 0.0)), math.sqrt(max(cov[j, j], 0.0))
        st = math.sqrt(max(cov[i, i] + cov[j, j] + 2 * cov[i, j], 0.0))
        rho = cov[i, j] / (sg * sd) if sg > 0 and sd > 0 else math.nan
        return sg, sd, st, rho


def _expected_counts(setup, params, exposure, fit_lo, fit_hi):
    """Expected counts (source + background) per channel in the fit range
    of every response, concatenated."""
    vals = params.valuesdict()
    out = []
    for i, (_tag, _label, resp) in enumerate(setup.responses):
        model_vals = {k: v for k, v in vals.items() if not k.startswith("xnorm_")}
        flux = setup.model.evaluate(resp.grid, model_vals)
        mu = vals.get(f"xnorm_{i + 1}", 1.0) * resp.fold(flux, exposure)
        mid = resp.channel_mid
        sel = (mid >= fit_lo) & (mid <= fit_hi)
        mu = mu[sel] + setup.background_rate * exposure  # background in the source region
        out.append(mu)
    return np.concatenate(out)


def fisher_forecast(setup, exposure=None, rel_step=1e-3):
    """The Fisher matrix of ``setup`` (module docstring) at ``exposure``
    (default the setup's).  Returns a :class:`Forecast`."""
    t = float(setup.exposure if exposure is None else exposure)
    targets = column_targets(setup.model)
    params = _apply_settings(setup, _settings_params(setup, len(setup.responses)))
    free = [n for n, p in params.items() if p.vary and not p.expr]
    targets.size_params = [n for n in targets.size_params if n in free]
    for need in (targets.gas, targets.dust):
        if need not in free:
            raise EdgefitError(f"{need} is fixed; planning needs the gas and dust columns free")
    lo, hi = setup.fit_range
    mu0 = _expected_counts(setup, params, t, lo, hi)
    if np.any(mu0 <= 0):
        mu0 = np.maximum(mu0, 1e-12)
    derivs = []
    for n in free:
        p = params[n]
        x0 = p.value
        span = (p.max - p.min) if np.isfinite(p.max - p.min) else abs(x0) + 1.0
        h = rel_step * max(abs(x0), 1e-3 * span, 1e-6)
        up, down = min(x0 + h, p.max), max(x0 - h, p.min)
        p.value = up
        mu_up = _expected_counts(setup, params, t, lo, hi)
        p.value = down
        mu_dn = _expected_counts(setup, params, t, lo, hi)
        p.value = x0
        derivs.append((mu_up - mu_dn) / (up - down))
    d = np.array(derivs)
    fisher = (d / mu0) @ d.T
    return Forecast(free, np.array([params[n].value for n in free]), fisher, t, targets)


# ---------------------------------------------------------------------------
def _one_fit(args):
    """Simulate and fit one realisation (worker function; module level so
    process pools can pickle it)."""
    setup, seed_seq, exposure, names = args
    import warnings

    from ..analysis.simulate import simulate_spectra
    from ..inference import Dataset, fit_sightline

    rng = np.random.default_rng(seed_seq)
    spectra = simulate_spectra(setup, rng, exposure=exposure)
    data = [Dataset(s, ranges=setup.fit_range, grouping=setup.group_min_counts)
            for s in spectra]
    params = _apply_settings(setup, _settings_params(setup, len(data)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            res = fit_sightline(setup.model, data, params=params, warn=False, goodness=False)
        except EdgefitError:
            return None
    return [res.values[n] for n in names], list(res.flags)


@dataclass
class SimulatedWidths:
    """Fitted values of ``names`` over ``n`` simulated realisations."""

    names: list
    values: np.ndarray          # (n_ok, len(names))
    exposure: float
    seed: int
    n_failed: int = 0
    n_flagged: int = 0
    truth: dict = field(default_factory=dict)

    def width(self, name):
        """68 % width (p84 - p16) / 2 of the fitted values."""
        x = self.values[:, self.names.index(name)]
        lo, hi = np.percentile(x, _PCT)
        return 0.5 * (hi - lo)

    def std(self, name):
        return float(np.std(self.values[:, self.names.index(name)], ddof=1))

    def median(self, name):
        return float(np.median(self.values[:, self.names.index(name)]))


def simulate_fits(setup, n_sims=100, seed=1, exposure=None, workers=1, progress=False,
                  targets=None):
    """Simulate ``n_sims`` realisations and fit each (in ``workers``
    processes).  Returns :class:`SimulatedWidths` for the gas, dust and
    total (gas + dust) columns; fits that fail are counted, not kept."""
    if n_sims < 2:
        raise ArgumentError("n_sims: at least 2 simulations are needed for a width")
    t = float(setup.exposure if exposure is None else exposure)
    targets = targets or column_targets(setup.model)
    names = [targets.gas, targets.dust]
    children = np.random.SeedSequence(int(seed)).spawn(int(n_sims))
    jobs = [(setup, c, t, names) for c in children]
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(jobs), desc="simulated fits", unit="fit")
    results = []
    if workers and workers > 1:
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(max_workers=int(workers)) as pool:
            for r in pool.map(_one_fit, jobs, chunksize=max(1, len(jobs) // (4 * workers))):
                results.append(r)
                if bar is not None:
                    bar.update(1)
    else:
        for job in jobs:
            results.append(_one_fit(job))
            if bar is not None:
                bar.update(1)
    if bar is not None:
        bar.close()
    ok = [r for r in results if r is not None]
    if len(ok) < 2:
        raise EdgefitError("fewer than two simulated fits succeeded; check the setup")
    vals = np.array([v for v, _ in ok])
    vals = np.column_stack([vals, vals[:, 0] + vals[:, 1]])
    total = f"total_{targets.element}"
    truth = {targets.gas: setup.truth[targets.gas], targets.dust: setup.truth[targets.dust]}
    truth[total] = truth[targets.gas] + truth[targets.dust]
    return SimulatedWidths(names + [total], vals, t, int(seed),
                           n_failed=len(results) - len(ok),
                           n_flagged=sum(1 for _, f in ok if f), truth=truth)


# ---------------------------------------------------------------------------
def exposure_table(forecast, exposures):
    """Fisher 68 % uncertainties of gas, dust and total at each exposure
    (and with the size distribution known), as an astropy Table with units."""
    from astropy import units as u
    from astropy.table import Table

    unit = u.Unit(forecast.targets.unit) if forecast.targets.unit else u.dimensionless_unscaled
    rows: dict[str, list[float]] = {
        k: [] for k in ("sigma_gas", "sigma_dust", "sigma_total", "correlation",
                        "sigma_gas_size_known", "sigma_dust_size_known",
                        "sigma_total_size_known")}
    for t in exposures:
        sg, sd, st, rho = forecast.columns(t)
        rows["sigma_gas"].append(sg)
        rows["sigma_dust"].append(sd)
        rows["sigma_total"].append(st)
        rows["correlation"].append(rho)
        sgk, sdk, stk, _ = forecast.columns(t, known=forecast.targets.size_params)
        rows["sigma_gas_size_known"].append(sgk)
        rows["sigma_dust_size_known"].append(sdk)
        rows["sigma_total_size_known"].append(stk)
    tab = Table()
    tab["exposure"] = np.asarray(exposures, float) * u.s
    for k, v in rows.items():
        tab[k] = np.asarray(v) * (u.dimensionless_unscaled if k == "correlation" else unit)
    tab.meta["method"] = "Fisher matrix (Poisson), sigma scales as 1/sqrt(exposure)"
    return tab


def _exposure_for(sig_at_t0, value, t0, z):
    """Exposure at which value / sigma reaches z (sigma ~ 1/sqrt(t))."""
    if not (value > 0) or not (sig_at_t0 > 0) or not math.isfinite(sig_at_t0):
        return math.inf
    return t0 * (z * sig_at_t0 / value) ** 2


@dataclass
class PlanResult:
    """Everything ``edgefit plan`` reports."""

    forecast: Forecast
    table: object
    sims: SimulatedWidths | None
    significance: float
    needed_exposure: float
    needed_exposure_size_known: float
    separable: bool
    text: str

    def summary(self):
        t = self.forecast.targets
        sg, sd, st, rho = self.forecast.columns()
        lines = [f"planning the {t.element} edge: exposure {self.forecast.exposure:g} s",
                 f"Fisher 68 % uncertainties ({t.unit}): gas {sg:.3g}, dust {sd:.3g}, "
                 f"total {st:.3g}; correlation gas-dust {rho:.2f}"]
        if t.size_params:
            sgk, sdk, stk, rhok = self.forecast.columns(known=t.size_params)
            lines.append(f"  with the size distribution known: gas {sgk:.3g}, dust {sdk:.3g}, "
                         f"total {stk:.3g}; correlation {rhok:.2f}")
        if self.sims is not None:
            s = self.sims
            tot = s.names[2]
            lines.append(f"simulated 68 % widths over {len(s.values)} fits (seed {s.seed}"
                         f"{f', {s.n_failed} failed' if s.n_failed else ''}): gas "
                         f"{s.width(t.gas):.3g}, dust {s.width(t.dust):.3g}, total "
                         f"{s.width(tot):.3g}")
        lines.append("")
        lines.append(self.text)
        return "\n".join(lines)


def verdict(forecast, sims, significance=3.0):
    """(separable, exposure needed, exposure needed with sizes known, text)."""
    t = forecast.targets
    truth_g = float(forecast.values[forecast.names.index(t.gas)])
    truth_d = float(forecast.values[forecast.names.index(t.dust)])
    sg, sd, _, _ = forecast.columns()
    t0 = forecast.exposure
    fisher_need = max(_exposure_for(sg, truth_g, t0, significance),
                      _exposure_for(sd, truth_d, t0, significance))
    sgk, sdk, _, _ = forecast.columns(known=t.size_params)
    need_known = max(_exposure_for(sgk, truth_g, t0, significance),
                     _exposure_for(sdk, truth_d, t0, significance))
    if sims is not None:
        wg, wd = sims.width(t.gas), sims.width(t.dust)
        source = "simulated"
    else:
        wg, wd = sg, sd
        source = "Fisher"
    z_g = truth_g / wg if wg > 0 else math.inf
    z_d = truth_d / wd if wd > 0 else math.inf
    separable = bool(min(z_g, z_d) >= significance)
    # scale the needed exposure by how much wider the simulated widths are
    ratio = max(wg / sg if sg > 0 else 1.0, wd / sd if sd > 0 else 1.0, 1.0) \
        if sims is not None else 1.0
    need = t0 * max((significance / z_g) ** 2 if z_g > 0 else math.inf,
                    (significance / z_d) ** 2 if z_d > 0 else math.inf) \
        if sims is not None else fisher_need
    need = max(need, fisher_need)
    words = []
    if separable:
        words.append(f"This setup separates gas from dust: the {source} widths put the gas "
                     f"column {z_g:.1f} and the dust column {z_d:.1f} widths from zero "
                     f"(asked: {significance:g}).")
    else:
        words.append(f"This setup cannot separate gas from dust at {significance:g} sigma: "
                     f"the gas column lies {z_g:.1f} and the dust column {z_d:.1f} of their "
                     f"{source} 68 % widths from zero.")
        opts = []
        if math.isfinite(need):
            opts.append(f"a longer exposure, about {need:.3g} s ({need / t0:.3g} times this "
                        "one, from widths shrinking as 1/sqrt(exposure); check it with "
                        "--exposure)")
        if t.size_params:
            if math.isfinite(need_known) and need_known < need:
                opts.append(f"a fixed or separately known size distribution "
                            f"({', '.join(t.size_params)}), which brings the Fisher "
                            f"exposure to about {need_known:.3g} s")
            else:
                opts.append("a known size distribution helps little here")
        opts.append(f"more edges fitted together with one grain population (Mg K, Fe L, O K "
                    f"beside {t.element} K) constrain the grain size independently")
        words.append("What would: " + "; ".join(opts) + ".")
    if sims is not None and ratio > 1.5:
        words.append(f"The Fisher forecast is {ratio:.1f} times too optimistic here (the "
                     "likelihood is far from Gaussian, typically because the grain size is "
                     "free); trust the simulated widths.")
    return separable, need, need_known, " ".join(words)


def plan_observation(setup, *, exposures=None, n_sims=100, seed=1, workers=1,
                     significance=3.0, progress=False, flux=None, counts_per_channel=None):
    """Fisher forecast, exposure table, simulated widths (unless
    ``n_sims`` is 0) and verdict for ``setup``.  Returns :class:`PlanResult`.

    The source level is the setup's (its emission norms) unless ``flux``
    (unabsorbed photon flux density at the edge, a Quantity in
    ph cm-2 s-1 keV-1) or ``counts_per_channel`` (expected source counts
    per channel near the edge in the first response, a Quantity in count
    or count / chan) is given; not both
    (:func:`edgefit.analysis.simulate.set_source_level`)."""
    if not (significance > 0):
        raise ArgumentError("significance: must be positive")
    if flux is not None or counts_per_channel is not None:
        from .simulate import set_source_level

        setup = set_source_level(setup, flux=flux, counts_per_channel=counts_per_channel)
    fc = fisher_forecast(setup)
    t0 = fc.exposure
    if exposures is None:
        exposures = t0 * np.array([0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0])
    table = exposure_table(fc, exposures)
    sims = simulate_fits(setup, n_sims, seed, workers=workers, progress=progress,
                         targets=fc.targets) if n_sims else None
    separable, need, need_known, text = verdict(fc, sims, significance)
    table.meta["needed_exposure_s"] = need
    table.meta["significance"] = significance
    return PlanResult(fc, table, sims, significance, need, need_known, separable, text)


def write_plan(plan, folder):
    """Write ``plan.ecsv`` (Fisher uncertainties against exposure, with
    units), ``plan_sims.ecsv`` (the simulated fitted columns), ``plan.json``
    and ``plan.txt`` (the summary and verdict) into ``folder``; returns the
    folder."""
    import json
    from pathlib import Path

    from astropy import units as u
    from astropy.table import Table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    plan.table.write(folder / "plan.ecsv", overwrite=True)
    tg = plan.forecast.targets
    sg, sd, st, rho = plan.forecast.columns()
    info = {"note": "forecast for a SIMULATED setup", "element": tg.element,
            "unit": tg.unit, "exposure_s": plan.forecast.exposure,
            "fisher": {"sigma_gas": sg, "sigma_dust": sd, "sigma_total": st,
                       "correlation": rho, "free_parameters": plan.forecast.names},
            "significance": plan.significance, "separable": plan.separable,
            "needed_exposure_s": plan.needed_exposure,
            "needed_exposure_size_known_s": plan.needed_exposure_size_known,
            "verdict": plan.text}
    if tg.size_params:
        sgk, sdk, stk, rhok = plan.forecast.columns(known=tg.size_params)
        info["fisher_size_known"] = {"sigma_gas": sgk, "sigma_dust": sdk,
                                     "sigma_total": stk, "correlation": rhok}
    if plan.sims is not None:
        s = plan.sims
        unit = u.Unit(tg.unit) if tg.unit else u.dimensionless_unscaled
        sims = Table([s.values[:, i] * unit for i in range(len(s.names))], names=s.names)
        sims.meta.update({"seed": s.seed, "exposure_s": s.exposure, "n_failed": s.n_failed,
                          "truth": s.truth, "note": "fitted columns of simulated spectra"})
        sims.write(folder / "plan_sims.ecsv", overwrite=True)
        info["simulated"] = {"n_fits": int(len(s.values)), "n_failed": s.n_failed,
                             "n_flagged": s.n_flagged, "seed": s.seed,
                             "width68": {n: float(s.width(n)) for n in s.names},
                             "median": {n: s.median(n) for n in s.names},
                             "truth": s.truth}

    def clean(x):
        if isinstance(x, dict):
            return {k: clean(v) for k, v in x.items()}
        if isinstance(x, (list, tuple)):
            return [clean(v) for v in x]
        if isinstance(x, (float, np.floating)):
            return float(x) if math.isfinite(x) else None
        return x

    (folder / "plan.json").write_text(json.dumps(clean(info), indent=2) + "\n")
    (folder / "plan.txt").write_text(plan.summary() + "\n")
    return folder
