"""Figure of a grain-size-distribution comparison (matplotlib imported
inside the functions)."""
from __future__ import annotations

import numpy as np

__all__ = ["plot_sizes", "save_sizes_figure"]


def plot_sizes(result, path=None):
    """ΔC (statistic minus the lowest of the candidates) of every candidate
    for every sightline (one marker per candidate, sightlines along x), on
    a symmetric-log axis, with the ΔC = 1 and 4 lines for reference (1 and
    2 sigma for one parameter); the legend gives each candidate's sample
    sum of ΔC and its AIC wins.  Saves to ``path`` when given; returns the
    figure."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    specs = [s.describe() for s in result.specs]
    names = result.sightlines
    per = result.summary["sightlines"]
    tot = result.summary["sample"]["candidates"]
    dc = np.array([[per[n]["candidates"][s]["delta_stat"] for n in names] for s in specs])
    x = np.arange(len(names), dtype=float)
    fig, ax = plt.subplots(figsize=(max(7.5, 0.5 * len(names) + 2.0), 5.2))
    markers = "osD^v<>ph*"
    width = 0.6
    for j, s in enumerate(specs):
        off = (j - (len(specs) - 1) / 2) * width / max(len(specs), 1)
        ax.plot(x + off, dc[j], marker=markers[j % len(markers)], ls="none", ms=5,
                label=f"{s}  (sum dC {tot[s]['delta_stat']:.1f}, AIC wins "
                      f"{tot[s]['wins']}/{len(names)})")
    for level in (1.0, 4.0):
        ax.axhline(level, color="0.6", lw=0.8, ls=":")
    ax.set_yscale("symlog", linthresh=1.0)
    finite = dc[np.isfinite(dc)]
    top = float(finite.max()) if finite.size else 0.0
    # headroom above the largest dC (symlog: about a third of a decade)
    ax.set_ylim(bottom=-0.1, top=max(10.0, 2.0 * top))
    ax.set_xticks(x)
    tilt = len(names) > 4
    ax.set_xticklabels(names, rotation=30 if tilt else 0, ha="right" if tilt else "center",
                       fontsize=8)
    ax.set_xlabel("sightline")
    ax.set_ylabel("dC = C - C(best candidate)")
    ax.set_title("Grain-size distributions compared per sightline", fontsize=10)
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.22), ncol=2,
              frameon=False)
    fig.tight_layout()
    if path is not None:
        fig.savefig(path, dpi=120, bbox_inches="tight")
    return fig


def save_sizes_figure(result, output):
    """``DIR/sizes.png`` (the hook :func:`edgefit.analysis.sizes_compare.compare_sizes`
    calls as ``figures(result, output)``)."""
    import matplotlib.pyplot as plt
    from pathlib import Path

    fig = plot_sizes(result, Path(output) / "sizes.png")
    plt.close(fig)
