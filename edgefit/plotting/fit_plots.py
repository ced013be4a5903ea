"""Figures of a sightline fit (matplotlib and corner imported inside).

* :func:`plot_spectra` -- each spectrum's data and best-fit model, counts
  s^-1 keV^-1 (or per Angstrom), with deviance residuals below, in energy
  or wavelength, optionally zoomed on a window around the edge; groups are
  merged for display to a minimum number of counts (display only, the fit
  is not affected).
* :func:`plot_transmission` -- transmission of each multiplicative
  component and of their product.
* :func:`plot_corner` -- corner plot of the MCMC posterior.
* :func:`plot_profiles` -- the profile-likelihood curves (Delta statistic
  against each profiled parameter) with the levels, the intervals (all
  pieces) and the parameter's value at the fit's other minima.

Sizes suit print: one-column figures 3.5 in wide or two-column 7 in, fonts
9--10 pt, labels with units.
"""
from __future__ import annotations

from typing import Any

import numpy as np

from .._units import HC_KEV_ANGSTROM
from ..stats import deviance_residuals, profiled_background_level
from ..errors import ArgumentError, MissingDependencyError

__all__ = ["plot_spectra", "plot_transmission", "plot_corner", "plot_profiles", "save_all",
           "save_configured"]

# keys typed loosely: matplotlib's stubs want literal rc names
_RC: dict[Any, Any] = {"font.size": 9, "axes.labelsize": 10, "legend.fontsize": 8,
                       "xtick.labelsize": 8, "ytick.labelsize": 8, "lines.linewidth": 1.0}


def _display_groups(counts, min_counts):
    """Indices where display bins start so that each holds >= min_counts."""
    starts = [0]
    acc = 0.0
    for i, c in enumerate(counts):
        if i and acc >= min_counts:  # channel 0 already starts the first bin
            starts.append(i)
            acc = 0.0
        acc += c
    return np.array(starts)


def _edge_markers(result):
    """(label, energy keV) of the edges the model's absorbers declare
    (``edge_kev`` attribute or ``edge_energy()`` method, with ``element``),
    one per element and energy."""
    out: dict[Any, Any] = {}
    for comp in result.model.components():
        e = getattr(comp, "edge_kev", None)
        if e is None and callable(getattr(comp, "edge_energy", None)):
            try:
                e = comp.edge_energy()
            except (TypeError, ValueError):
                e = None
        el = getattr(comp, "element", None)
        if e is not None and el:
            edge = getattr(comp, "edge", None)
            key = (el, round(float(e), 4))
            if key not in out or (edge and " " not in out[key][0].replace(" edge", "")):
                out[key] = (f"{el} {edge} edge" if edge else f"{el} edge", float(e))
    return sorted(out.values(), key=lambda kv: kv[1])


def _mark_edges(ax, edges, wave, label=True):
    for name, e in edges:
        x = HC_KEV_ANGSTROM / e if wave else e
        lo, hi = sorted(ax.get_xlim())
        if lo <= x <= hi:
            ax.axvline(x, color="C0", ls=":", lw=0.8, zorder=0)
            if label:
                ax.text(x, 0.04, f" {name}", transform=ax.get_xaxis_transform(), color="C0",
                        fontsize=7, ha="left", va="bottom")


def plot_spectra(result, unit="keV", window=None, display_min_counts=20, figsize=None):
    """Data, model and residuals of every dataset (one column of panels).

    Parameters
    ----------
    unit : {"keV", "Angstrom"}
    window : (lo, hi), optional
        Range shown, in ``unit``.
    display_min_counts : float
        Adjacent fit groups are merged for display until each has this many
        counts.
    """
    import matplotlib.pyplot as plt

    like = result.likelihood
    mus = like.source_counts(result.values)
    n = len(like.datasets)
    with plt.rc_context(_RC):
        fig, axes = plt.subplots(2 * n, 1, figsize=figsize or (7.0, 2.6 * n + 0.6),
                                 sharex=True, squeeze=False,
                                 gridspec_kw={"height_ratios": [3, 1] * n, "hspace": 0.08})
        axes = axes[:, 0]
        wave = unit.lower().startswith("a")
        for k, (ds, mu) in enumerate(zip(like.datasets, mus)):
            ax, axr = axes[2 * k], axes[2 * k + 1]
            total = mu.copy()
            if ds.has_background:
                total = mu + ds.bkg_ratio * profiled_background_level(
                    mu, ds.counts, ds.bkg_counts, ds.bkg_ratio)
            st = _display_groups(ds.counts, display_min_counts)
            cnt = np.add.reduceat(ds.counts, st)
            mod = np.add.reduceat(total, st)
            emin = np.minimum.reduceat(ds.group_emin, st)
            emax = np.maximum.reduceat(ds.group_emax, st)
            if wave:
                xlo, xhi = HC_KEV_ANGSTROM / emax, HC_KEV_ANGSTROM / emin
            else:
                xlo, xhi = emin, emax
            width = xhi - xlo
            x = 0.5 * (xlo + xhi)
            norm = 1.0 / (ds.exposure * width)
            ax.errorbar(x, cnt * norm, yerr=np.sqrt(np.maximum(cnt, 1.0)) * norm,
                        xerr=0.5 * width, fmt="none", ecolor="0.35", elinewidth=0.6,
                        label="data (simulated)" if ds.spectrum.meta.get("simulated")
                        else "data")
            order = np.argsort(x)
            edges = np.r_[xlo[order], xhi[order][-1]]
            ax.stairs((mod * norm)[order], edges, color="C3", label="model")
            res = deviance_residuals(np.maximum(mod, 1e-300), cnt)
            axr.axhline(0.0, color="0.5", lw=0.6)
            axr.errorbar(x, res, yerr=1.0, xerr=0.5 * width, fmt="none", ecolor="0.35",
                         elinewidth=0.6)
            per = "\u00c5" if wave else "keV"
            ax.set_ylabel(f"counts s$^{{-1}}$ {per}$^{{-1}}$")
            axr.set_ylabel("residual\n(deviance)")
            ax.text(0.01, 0.96, ds.label, transform=ax.transAxes, va="top", ha="left",
                    fontsize=9)
            if k == 0:
                ax.legend(loc="upper right", frameon=False, ncols=2)
            if window is not None:
                ax.set_xlim(*window)
                vis = (x >= min(window)) & (x <= max(window))
                if vis.any():
                    yv = np.r_[(cnt * norm)[vis], (mod * norm)[vis]]
                    err = (np.sqrt(np.maximum(cnt, 1.0)) * norm)[vis]
                    lo_y = min(yv.min(), ((cnt * norm)[vis] - err).min())
                    hi_y = max(yv.max(), ((cnt * norm)[vis] + err).max())
                    pad = 0.08 * (hi_y - lo_y)
                    ax.set_ylim(lo_y - pad, hi_y + 2.5 * pad)
                    r_vis = res[vis]
                    r_max = max(3.0, float(np.abs(r_vis).max()) + 1.2)
                    axr.set_ylim(-r_max, r_max)
        edges = _edge_markers(result)
        for k in range(n):
            _mark_edges(axes[2 * k], edges, wave, label=True)
            _mark_edges(axes[2 * k + 1], edges, wave, label=False)
        axes[-1].set_xlabel("wavelength (\u00c5)" if wave else "energy (keV)")
        fig.align_ylabels(axes)
        fig.subplots_adjust(top=0.985, bottom=0.6 / fig.get_figheight(), left=0.11,
                            right=0.98)
    return fig


def plot_transmission(result, energy_range=None, n=2000, unit="keV", figsize=(6.0, 2.8)):
    """Transmission of each multiplicative component (and their product) at
    the best fit, on a fine grid over ``energy_range`` (keV; default the
    span of the data)."""
    import matplotlib.pyplot as plt

    from ..models.base import ADDITIVE, EnergyGrid

    if energy_range is None:
        lo = min(ds.grid.lo[0] for ds in result.datasets)
        hi = max(ds.grid.hi[-1] for ds in result.datasets)
    else:
        lo, hi = energy_range
    grid = EnergyGrid.linear(lo, hi, n)
    values = result.values
    to_model = getattr(result.model, "model_values", None)
    if to_model is not None:  # total/fraction form: the components' own columns
        values = to_model(values)
    wave = unit.lower().startswith("a")
    x = HC_KEV_ANGSTROM / grid.mid if wave else grid.mid
    with plt.rc_context(_RC):
        fig, ax = plt.subplots(figsize=figsize, constrained_layout=True)
        prod = np.ones(len(grid))
        for comp in result.model.components():
            if comp.kind == ADDITIVE or getattr(comp, "parameter_holder", False):
                continue
            t = comp.evaluate(grid, values)
            prod = prod * t
            ax.plot(x, t, label=f"{comp.name} ({type(comp).__name__})")
        ax.plot(x, prod, color="k", lw=1.4, label="all absorbers")
        ax.set_xlabel("wavelength (\u00c5)" if wave else "energy (keV)")
        ax.set_ylabel("transmission")
        ax.set_xlim(x.min(), x.max())
        _mark_edges(ax, _edge_markers(result), wave)
        # outside the axes, so that no curve is hidden
        ax.legend(frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def plot_corner(result, names=None, **kwargs):
    """Corner plot of the MCMC posterior (needs ``result.mcmc``); labels
    carry each parameter's unit.  ``names`` default: the sampled
    parameters without the cross-normalisation constants."""
    try:
        import corner
    except ImportError as exc:  # pragma: no cover - corner is a dependency
        raise MissingDependencyError("plot_corner needs the 'corner' package: pip install corner") from exc
    if result.mcmc is None:
        raise ArgumentError("no MCMC samples: run edgefit.inference.run_mcmc first")
    names = names or [n for n in result.mcmc.names if not n.startswith("xnorm_")] \
        or result.mcmc.names
    samples = result.mcmc.flat_samples(names)
    labels = [f"{n}\n[{result.unit(n)}]" if result.unit(n) else n for n in names]
    kw = dict(labels=labels, quantiles=[0.1585, 0.5, 0.8415], show_titles=True,
              title_fmt=".3g", label_kwargs={"fontsize": 8}, title_kwargs={"fontsize": 8})
    kw.update(kwargs)
    return corner.corner(samples, **kw)


def plot_profiles(result, names=None, figsize=None):
    """Profile curves stored by
    :func:`~edgefit.inference.intervals.profile_intervals` (``result.profiles``):
    Delta statistic against the parameter, one panel per parameter, with a
    dashed line per confidence level, the interval pieces shaded at their
    level, the best fit, the parameter at the fit's other distinct minima
    (dotted) and any parameter bound the interval reaches."""
    import matplotlib.pyplot as plt

    from ..inference.result import level_label

    names = names or list(result.profiles)
    if not names:
        raise ArgumentError("no profile curves: run profile_intervals first")
    n = len(names)
    with plt.rc_context(_RC):
        fig, axes = plt.subplots(1, n, figsize=figsize or (3.4 * n, 2.8), squeeze=False,
                                 constrained_layout=True)
        for ax, name in zip(axes[0], names):
            c = result.profiles[name]
            top = max(c.thresholds.values()) * 1.6 if c.thresholds else 5.0
            ax.plot(c.x, c.delta, "o-", ms=2.5, color="k", lw=1.0, label="profile")
            colours = ["C0", "C1", "C2", "C3"]
            for k, (lev, thr) in enumerate(sorted(c.thresholds.items())):
                col = colours[k % len(colours)]
                ax.axhline(thr, ls="--", color=col, lw=0.8,
                           label=f"{level_label(lev)} % (Δ = {thr:.2f})")
                iv = result.intervals.get(name, {}).get(lev)
                if iv is not None:
                    for a, b in (iv.pieces or [(iv.lower, iv.upper)]):
                        if a is not None and b is not None:
                            ax.axvspan(a, b, ymax=(thr + 0.05 * top) / (1.05 * top), color=col,
                                       alpha=0.15, lw=0)
            ax.axvline(c.best, color="k", lw=0.6)
            for xm in c.minima_x:
                ax.axvline(xm, color="0.4", ls=":", lw=0.8)
            ax.set_ylim(-0.05 * top, top)
            inside = c.x[c.delta <= top]
            if inside.size:
                span = inside.max() - inside.min()
                pad = 0.08 * span if span > 0 else max(abs(c.best) * 0.1, 1e-3)
                ax.set_xlim(inside.min() - pad, inside.max() + pad)
            unit = result.unit(name)
            ax.set_xlabel(f"{name} [{unit}]" if unit else name)
            ax.set_ylabel("Δ statistic (profile)")
        axes[0][0].legend(frameon=False, fontsize=7, loc="upper center")
    return fig


def save_all(result, folder, unit="keV", window=None, display_min_counts=20, fmt="png"):
    """Write spectra, transmission and (with MCMC) corner figures; returns
    their paths."""
    from pathlib import Path

    import matplotlib.pyplot as plt

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    figs = [("spectra", plot_spectra(result, unit=unit, window=window,
                                     display_min_counts=display_min_counts)),
            ("transmission", plot_transmission(result, unit=unit))]
    if result.mcmc is not None:
        figs.append(("corner", plot_corner(result)))
    if getattr(result, "profiles", None):
        figs.append(("profiles", plot_profiles(result)))
    for name, fig in figs:
        p = folder / f"{name}.{fmt}"
        fig.savefig(p, dpi=150)
        plt.close(fig)
        paths.append(p)
    return paths


def save_configured(result, folder, settings):
    """:func:`save_all` with a configuration's ``[plots]`` settings
    (:class:`edgefit.analysis.config.PlotSettings`); the ``figures`` hook of
    :func:`edgefit.analysis.pipeline.run_sightline`."""
    return save_all(result, folder, unit=settings.unit,
                    window=tuple(settings.window) if settings.window else None,
                    display_min_counts=settings.display_min_counts, fmt=settings.format)
