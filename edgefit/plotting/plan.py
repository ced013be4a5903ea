"""Figure of ``edgefit plan``: 68 % uncertainty of the gas, dust and total
columns against exposure (matplotlib imported inside the function)."""
from __future__ import annotations

from ..errors import MissingDependencyError

__all__ = ["plot_plan"]


def plot_plan(plan, ax=None):
    """Fisher 68 % uncertainties against exposure (lines; dotted: size
    distribution known) and the simulated widths (points) of a
    :class:`~edgefit.analysis.plan.PlanResult`; the column values are drawn
    as horizontal lines divided by the significance asked for, so an
    uncertainty below its line means a detection at that significance.

    Returns the matplotlib Figure.
    """
    try:
        import matplotlib
        if matplotlib.get_backend().lower() not in ("agg", "pdf", "svg", "ps"):
            matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError as exc:  # pragma: no cover - matplotlib is a dependency
        raise MissingDependencyError("plotting needs matplotlib: pip install matplotlib") \
            from exc
    tab, fc = plan.table, plan.forecast
    tg = fc.targets
    if ax is None:
        fig, ax = plt.subplots(figsize=(5.6, 4.0), constrained_layout=True)
    else:
        fig = ax.figure
    t = tab["exposure"].quantity.to_value("ks")
    unit = tab["sigma_gas"].unit
    style = {"gas": ("C0", "sigma_gas", tg.gas), "dust": ("C3", "sigma_dust", tg.dust),
             "total": ("k", "sigma_total", None)}
    for label, (colour, col, name) in style.items():
        ax.loglog(t, tab[col], color=colour, label=f"{label} (Fisher)")
        if tg.size_params and f"{col}_size_known" in tab.colnames:
            ax.loglog(t, tab[f"{col}_size_known"], color=colour, ls=":",
                      label=f"{label}, size known")
        if name is not None:
            value = float(fc.values[fc.names.index(name)])
            if value > 0:
                ax.axhline(value / plan.significance, color=colour, lw=0.6, ls="--")
    if plan.sims is not None:
        s = plan.sims
        for label, name, colour in (("gas", tg.gas, "C0"), ("dust", tg.dust, "C3"),
                                    ("total", s.names[2], "k")):
            ax.plot([s.exposure / 1e3], [s.width(name)], "o", color=colour, ms=7, mfc="none",
                    label=f"{label} (simulated, {len(s.values)} fits)")
    ax.axvline(fc.exposure / 1e3, color="0.6", lw=0.6)
    ax.set_xlabel("exposure [ks]")
    ax.set_ylabel(f"68 % uncertainty of the {tg.element} column [{unit}]")
    ax.set_title(f"{tg.element} K: gas vs dust (dashed: column / {plan.significance:g}); "
                 "simulated setup", fontsize=9)
    ax.legend(fontsize=7, ncol=2)
    return fig
