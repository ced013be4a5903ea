"""Figures of a sample regression (matplotlib and corner imported inside
the functions)."""
from __future__ import annotations

import numpy as np

__all__ = ["plot_regression", "plot_regression_corner", "save_regression_figures"]


def _label(m):
    unit = m.unit.to_string("latex_inline") if m.unit.to_string() else ""
    return f"{m.name} [{unit}]" if unit else f"{m.name} (dimensionless)"


def plot_regression(result, path=None, ax=None):
    """Points with their asymmetric 68 % error bars, upper limits as
    arrows, the ODR line with its 68 % band (from the parameter covariance)
    and the Bayesian line (posterior median) with its 68 % band (16th-84th
    percentiles of the posterior lines).  Saves to ``path`` when given;
    returns the axes."""
    import matplotlib

    if ax is None:
        matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    x, y = result.x, result.y
    own = ax is None
    if own:
        fig, ax = plt.subplots(figsize=(6.4, 4.8))
    det = ~x.upper & ~y.upper
    xerr = np.vstack([np.nan_to_num(x.err_lo), np.nan_to_num(x.err_hi)])
    yerr = np.vstack([np.nan_to_num(y.err_lo), np.nan_to_num(y.err_hi)])
    ax.errorbar(x.value[det], y.value[det], xerr=xerr[:, det], yerr=yerr[:, det], fmt="o",
                ms=4, color="0.15", ecolor="0.5", elinewidth=0.8, capsize=0, zorder=3,
                label=f"detections ({int(det.sum())})")
    lim = ~det
    if lim.any():
        span_y = np.ptp(y.value) or 1.0
        span_x = np.ptp(x.value) or 1.0
        # arrows point down from y limits and left from x limits
        for xi, yi, xu, yu in zip(x.value[lim], y.value[lim], x.upper[lim], y.upper[lim]):
            dx = -0.06 * span_x if xu else 0.0
            dy = -0.08 * span_y if yu else 0.0
            ax.annotate("", xy=(xi + dx, yi + dy), xytext=(xi, yi),
                        arrowprops={"arrowstyle": "-|>", "color": "tab:purple", "lw": 1.0})
        xd = lim & ~x.upper
        if xd.any():
            ax.errorbar(x.value[xd], y.value[xd], xerr=xerr[:, xd], fmt="none",
                        ecolor="tab:purple", elinewidth=0.6, alpha=0.6)
        ax.plot(x.value[lim], y.value[lim], "_" if not x.upper[lim].any() else "s",
                color="tab:purple", ms=8, mew=1.5, ls="none",
                label=f"upper limits ({int(lim.sum())})", zorder=3)
    lo, hi = np.nanmin(x.value), np.nanmax(x.value)
    pad = 0.05 * (hi - lo or 1.0)
    grid = np.linspace(min(lo - pad, 0.0) if result.through_origin else lo - pad, hi + pad, 200)
    if result.odr is not None:
        o = result.odr
        line = o["intercept"] + o["slope"] * grid
        cov = np.asarray(o["covariance"])
        jac = np.vstack([np.ones_like(grid), grid])
        band = np.sqrt(np.einsum("in,ij,jn->n", jac, cov, jac))
        ax.plot(grid, line, color="tab:blue", lw=1.5,
                label=f"ODR: slope {o['slope']:.3g} ± {o['slope_err']:.2g}")
        ax.fill_between(grid, line - band, line + band, color="tab:blue", alpha=0.2, lw=0)
    b = result.bayes
    if b is not None:
        s = b["samples"]
        take = s[np.linspace(0, len(s) - 1, min(len(s), 2000)).astype(int)]
        lines = take[:, 0][:, None] + take[:, 1][:, None] * grid[None, :]
        p16, p50, p84 = np.percentile(lines, [15.865525393145708, 50, 84.13447460685429],
                                      axis=0)
        sl = b["slope"]
        ax.plot(grid, p50, color="tab:orange", lw=1.5, ls="--",
                label=f"Bayesian: slope {sl['median']:.3g} "
                      f"(+{sl['hi'] - sl['median']:.2g}/−{sl['median'] - sl['lo']:.2g}), "
                      f"scatter {b['scatter']['median']:.2g}")
        ax.fill_between(grid, p16, p84, color="tab:orange", alpha=0.25, lw=0)
    ax.set_xlabel(_label(x))
    ax.set_ylabel(_label(y))
    kc = result.kendall_censored
    ax.set_title(f"{y.name} against {x.name}: {result.n_points} points, "
                 f"Kendall τ = {kc['tau']:.2f} (p = {kc['p']:.2g})", fontsize=10)
    ax.legend(fontsize=8, loc="best")
    if own:
        fig.tight_layout()
        if path is not None:
            fig.savefig(path, dpi=120)
            plt.close(fig)
    return ax


def plot_regression_corner(result, path=None):
    """Corner plot of the Bayesian line's posterior (intercept, slope,
    intrinsic scatter; slope and scatter only through the origin)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import corner
    import matplotlib.pyplot as plt

    s = result.bayes["samples"]
    units = result.to_dict()["units"]

    def lab(name):
        return f"{name} [{units[name]}]" if units[name] else name

    labels = [lab("intercept"), lab("slope"), lab("scatter")]
    cols = [1, 2] if result.through_origin else [0, 1, 2]
    # axes over the central 99.5 % of each marginal: the scatter's long
    # tail otherwise squeezes every panel into a few bins (and leaves
    # too few points for the contours)
    fig = corner.corner(s[:, cols], labels=[labels[i] for i in cols], range=[0.995] * len(cols),
                        quantiles=[0.15865525393145708, 0.5, 0.8413447460685429],
                        show_titles=True, title_fmt=".3g", label_kwargs={"fontsize": 9},
                        title_kwargs={"fontsize": 8})
    if path is not None:
        fig.savefig(path, dpi=100)
        plt.close(fig)
    return fig


def save_regression_figures(result, folder):
    """``regression.png`` and ``regression_corner.png`` (when the Bayesian
    line was sampled) in ``folder``."""
    import os

    plot_regression(result, os.path.join(folder, "regression.png"))
    if result.bayes is not None:
        plot_regression_corner(result, os.path.join(folder, "regression_corner.png"))
