"""Figure of a population fit (matplotlib imported inside the function)."""
from __future__ import annotations

import numpy as np

__all__ = ["plot_population", "save_population_figure"]


def plot_population(result, path=None, covariate_label=None, unit=None):
    """Each sightline's single-fit 68 % interval (grey) and its interval under
    the population prior (blue) of the modelled quantity, against the
    covariate (or the sightline index), with the population mean and its
    intrinsic scatter (median hyper-parameters).  Saves to ``path`` when
    given; returns the figure."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    q = result.quantity
    ent = result.sightlines
    if result.covariate_ref is not None:
        x = np.array([e["covariate"] for e in ent])
        xlabel = covariate_label or "covariate"
    else:
        x = np.arange(len(ent), dtype=float)
        xlabel = "sightline"
    single = np.array([[e["columns"][q]["single"][k] for k in ("lo", "median", "hi")]
                       for e in ent])
    pop = np.array([[e["columns"][q]["population"][k] for k in ("lo", "median", "hi")]
                    for e in ent])
    if result.log:
        single, pop = np.log(single), np.log(pop)
    dx = 0.006 * (np.ptp(x) or 1.0)
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    ax.errorbar(x - dx, single[:, 1], yerr=[single[:, 1] - single[:, 0],
                                            single[:, 2] - single[:, 1]],
                fmt="o", ms=3, color="0.55", label="single fit (68 %)")
    ax.errorbar(x + dx, pop[:, 1], yerr=[pop[:, 1] - pop[:, 0], pop[:, 2] - pop[:, 1]],
                fmt="s", ms=3, color="tab:blue", label="under the population prior (68 %)")
    h = {k: v["median"] for k, v in result.hyper.items()}
    grid = np.linspace(x.min(), x.max(), 100)
    if result.covariate_ref is not None:
        mean = h["c0"] + h["c1"] * (grid - result.covariate_ref)
    else:
        mean = np.full_like(grid, h["c0"])
    ax.plot(grid, mean, color="tab:orange", label=f"population mean, scatter {h['s']:.3g}")
    ax.fill_between(grid, mean - h["s"], mean + h["s"], color="tab:orange", alpha=0.2, lw=0)
    ax.set_xlabel(xlabel)
    label = f"{q} [{unit}]" if unit else q
    ax.set_ylabel(f"ln ({label})" if result.log else label)
    if result.covariate_ref is None:
        ax.set_xticks(x)
        ax.set_xticklabels([e["name"] for e in ent], rotation=90, fontsize=6)
    ax.legend(fontsize=8)
    ax.set_title(f"population of {q}: {len(ent)} sightlines", fontsize=10)
    fig.tight_layout()
    if path is not None:
        fig.savefig(path, dpi=120)
        plt.close(fig)
    return fig


def save_population_figure(result, folder, covariate_label=None, unit=None):
    """``population.png`` in ``folder`` (:func:`plot_population`)."""
    import os

    plot_population(result, os.path.join(folder, "population.png"),
                    covariate_label=covariate_label, unit=unit)
