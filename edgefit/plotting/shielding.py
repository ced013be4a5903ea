"""Figure of the self-shielding ratio against grain radius (matplotlib is
imported inside the function)."""
from __future__ import annotations

from ..errors import MissingDependencyError

__all__ = ["plot_shielding"]


def plot_shielding(table, ax=None, *, show_extinction=True):
    """Plot ``ratio_abs`` (and ``ratio_ext``) of a table from
    :func:`edgefit.dust.shielding.shielding_table` against radius (µm, log).

    Parameters
    ----------
    table : astropy.table.Table
    ax : matplotlib Axes, optional
        Draw here; a new 3.5 x 2.8 in figure otherwise.
    show_extinction : bool
        Also draw the extinction ratio.

    Returns
    -------
    matplotlib.figure.Figure
    """
    try:
        import matplotlib.pyplot as plt
    except ImportError as exc:  # pragma: no cover - matplotlib is a dependency
        raise MissingDependencyError("plotting needs matplotlib: "
                                     "pip install matplotlib") from exc
    if ax is None:
        fig, ax = plt.subplots(figsize=(3.5, 2.8), constrained_layout=True)
    else:
        fig = ax.figure
    a = table["radius"].quantity.to_value("um") if hasattr(table["radius"], "quantity") \
        else table["radius"]
    meta = table.meta
    ax.semilogx(a, table["ratio_abs"], color="C0", label="absorption")
    if show_extinction:
        ax.semilogx(a, table["ratio_ext"], color="C1", ls="--", label="extinction")
    ax.axhline(1.0, color="0.6", lw=0.6)
    if show_extinction:
        # the extinction ratio dips below zero for micron-sized grains (the
        # refractive part of the extinction falls across the edge; see
        # edgefit.dust.shielding): mark zero so the sign reads at a glance
        ax.axhline(0.0, color="0.6", lw=0.6, ls=":")
    ax.set_xlabel(r"grain radius $a$ [$\mu$m]")
    ax.set_ylabel("edge jump / unshielded jump")
    ax.set_title(f"{meta.get('material', '')} ({meta.get('formula', '')}), "
                 f"{meta.get('element', '')} {meta.get('edge', '')} edge", fontsize=9)
    ax.legend(frameon=False)
    return fig
