"""Figure of the shielded τ–N_H relation (matplotlib imported inside)."""
from __future__ import annotations

import numpy as np

__all__ = ["plot_shielded_relation", "save_grains_figure"]


def plot_shielded_relation(fit, nh, tau, path=None):
    """Left: τ against N_H (points with symmetrised errors, upper limits as
    arrows) with the best straight line, the best shielded relation and the
    thin-grain limit (no shielding, smallest radius of the scan).  Right:
    χ² of the shielded relation against grain radius with the 68 % level.
    ``nh``/``tau`` are :class:`~edgefit.analysis.regression.Measurements`."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    fig, (ax, ax2) = plt.subplots(1, 2, figsize=(10, 4.2))
    x = nh.value * nh.unit.to("cm-2")
    sx = nh.sigma * nh.unit.to("cm-2")
    y = tau.value * tau.unit.to("")
    sy = tau.sigma * tau.unit.to("")
    det = ~tau.upper & ~nh.upper
    ax.errorbar(x[det], y[det], xerr=np.nan_to_num(sx[det]), yerr=np.nan_to_num(sy[det]),
                fmt="o", ms=4, color="0.2", ecolor="0.55", label="sightlines")
    lim = tau.upper & ~nh.upper
    if lim.any():
        ax.errorbar(x[lim], y[lim], yerr=0.1 * np.nanmax(y), uplims=True, fmt="_",
                    color="tab:purple", label="upper limits")
    grid = np.linspace(0.0, np.nanmax(x) * 1.05, 100)
    ln = fit["line"]
    ax.plot(grid, ln["intercept"] + ln["slope_cm2"] * grid, color="tab:blue",
            label=f"straight line (χ² = {ln['chi2']:.1f})")
    sh = fit["shielded"]
    ax.plot(grid, sh["slope_cm2"] * grid, color="tab:orange",
            label=f"shielded, a = {sh['radius_um']:.3g} µm (χ² = {sh['chi2']:.1f})")
    ax.plot(grid, fit["thin_limit_slope_cm2"] * grid, color="tab:green", ls=":",
            label="thin-grain limit")
    ax.set_xlabel("N_H [cm$^{-2}$]")
    ax.set_ylabel(f"dust optical depth at {fit['energy_kev']:.4g} keV")
    ax.set_title(f"ΔAIC = {fit['delta_aic']:.1f}, ΔBIC = {fit['delta_bic']:.1f} "
                 "(shielded − line)", fontsize=10)
    ax.legend(fontsize=8)
    a = np.asarray(sh["profile_radius_um"])
    c = np.asarray(sh["profile_chi2"])
    ax2.semilogx(a, c - c.min(), color="tab:orange")
    ax2.axhline(1.0, color="0.5", ls="--", lw=0.8)
    ax2.set_ylim(0, min(50.0, float(np.max(c - c.min())) * 1.05 + 1))
    ax2.set_xlabel("grain radius [µm]")
    ax2.set_ylabel("Δχ² of the shielded relation")
    ax2.set_title(f"{fit['material']}, {fit['element']} ({fit['kind']})", fontsize=10)
    fig.tight_layout()
    if path is not None:
        fig.savefig(path, dpi=110)
        plt.close(fig)
    return fig


def save_grains_figure(fit, nh, tau, folder):
    """``grains.png`` in ``folder`` (:func:`plot_shielded_relation`)."""
    import os

    plot_shielded_relation(fit, nh, tau, os.path.join(folder, "grains.png"))
