"""Figure of a shared-parameter profile (matplotlib imported inside the function)."""
from __future__ import annotations

import numpy as np

__all__ = ["plot_shared_profile", "save_shared_figure"]


def plot_shared_profile(result, path=None, column=None):
    """Left: the summed ΔS of the shared parameter (thick) with each
    sightline's own ΔC (thin), the Wilks thresholds of the levels (dashed),
    the 68.27 % set shaded and the best value marked.  Right (when columns
    were profiled): each sightline's 68.27 % interval of ``column`` (default
    the first) alone with the shared parameter free (grey), pooled and
    profiled over it (blue) and at the best shared value (black).  Saves to
    ``path`` when given; returns the figure."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    summ = result.summary
    values = np.asarray(result.points["values"], float)
    stat = np.asarray(result.points["stat"], float)
    total = stat.sum(axis=0)
    cols = summ["columns"]
    column = column or (cols[0] if cols else None)
    ncol = 2 if column else 1
    fig, axes = plt.subplots(1, ncol, figsize=(5.6 * ncol, 4.4), squeeze=False)
    ax = axes[0, 0]
    for i, n in enumerate(result.names):
        ax.plot(values, stat[i] - stat[i].min(), "-", lw=0.8, color="0.6",
                label="each sightline alone" if i == 0 else None)
    ax.plot(values, total - total.min(), "o-", lw=2.0, ms=4, color="tab:blue",
            label=f"sum of {len(result.names)} sightlines")
    styles = ["--", ":", "-."]
    for j, (lv, thr) in enumerate(summ["thresholds"].items()):
        ax.axhline(thr, ls=styles[j % 3], color="k", lw=0.8,
                   label=f"{100 * float(lv):.4g} % (dS = {thr:.3g})")
    first = result.intervals[str(summ["levels"][0])]
    for lo, hi in first["pieces"]:
        ax.axvspan(lo, hi, color="tab:blue", alpha=0.12)
    ax.axvline(result.best, color="tab:blue", lw=0.8)
    if result.log:
        ax.set_xscale("log")
    top = max(3.0 * max(summ["thresholds"].values()), 1.0)
    ax.set_ylim(-0.05 * top, top)
    unit = f" [{result.unit}]" if result.unit else ""
    ax.set_xlabel(f"shared {result.parameter}{unit}")
    ax.set_ylabel("profile statistic dS (from its minimum)")
    ax.set_title(f"{result.parameter} = {result.best:.3g} (68 %: "
                 + ", ".join(f"{lo:.3g}-{hi:.3g}" for lo, hi in first["pieces"]) + ")",
                 fontsize=10)
    ax.legend(fontsize=7, loc="upper center")
    if column:
        bx = axes[0, 1]
        lv0 = str(summ["levels"][0])
        y = np.arange(len(result.names), dtype=float)
        for i, n in enumerate(result.names):
            c = summ["sightlines"][n]["columns"][column]
            for dy, kind, color, lab in ((-0.2, "single", "0.55", "alone, size free"),
                                         (0.0, "pooled", "tab:blue",
                                          f"pooled, profiled over {result.parameter}")):
                for lo, hi in c[kind][lv0]["pieces"]:
                    bx.plot([lo, hi], [y[i] + dy] * 2, "-", lw=3, color=color,
                            label=lab if i == 0 else None)
            at = c["at_best"]
            iv = at["intervals"].get(lv0, {})
            if iv.get("lower") is not None and iv.get("upper") is not None:
                bx.errorbar(at["value"], y[i] + 0.2,
                            xerr=[[at["value"] - iv["lower"]], [iv["upper"] - at["value"]]],
                            fmt="o", ms=3, color="k",
                            label=f"at {result.parameter} = {result.best:.3g}"
                            if i == 0 else None)
        bx.set_yticks(y)
        bx.set_yticklabels(result.names, fontsize=7)
        cu = summ["sightlines"][result.names[0]]["columns"][column]["unit"]
        bx.set_xlabel(f"{column}" + (f" [{cu}]" if cu else "") + " (68 %)")
        bx.legend(fontsize=7, loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=2,
                  frameon=False)
    fig.tight_layout()
    if path is not None:
        fig.savefig(path, dpi=120)
    return fig


def save_shared_figure(result, output):
    """``output/shared.png``; the figure is closed."""
    import matplotlib.pyplot as plt
    from pathlib import Path

    fig = plot_shared_profile(result, Path(output) / "shared.png")
    plt.close(fig)
