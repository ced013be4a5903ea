"""``edgefit dust-tables``: build and list the cached dust cross-section
tables, and write the self-shielding table and plot.

* ``edgefit dust-tables build [--materials ...] [--elements ...] [--rebuild]``
  builds the default tables (MRN-ready per-size tables of olivine and the
  pyroxenes across the Si K, Mg K, Fe L and O K regions) into the cache
  folder (``EDGEFIT_CACHE_DIR`` or ``~/.cache/edgefit``).
* ``edgefit dust-tables list`` shows what the cache holds.
* ``edgefit dust-tables shielding --material olivine --element Si
  [--output shielding.ecsv] [--plot shielding.pdf]`` writes the
  self-shielding ratios against grain radius.
"""
from __future__ import annotations

import numpy as np


def add_parser(subparsers):
    p = subparsers.add_parser(
        "dust-tables", help="build/list dust cross-section tables; self-shielding report",
        description="Build the default per-size dust cross-section tables into the cache, "
                    "list the cache, or write the self-shielding table and plot.")
    sub = p.add_subparsers(dest="action", metavar="ACTION", required=True)
    b = sub.add_parser("build", help="build the default tables into the cache")
    b.add_argument("--materials", nargs="+", default=None,
                   help="material names (default: olivine pyroxene pyroxene_mgfe)")
    b.add_argument("--elements", nargs="+", default=None,
                   help="edge elements (default: Si Mg Fe O)")
    b.add_argument("--rebuild", action="store_true", help="recompute even if cached")
    b.add_argument("--method", choices=("auto", "mie", "adt"), default="auto",
                   help="efficiency method (default: automatic ADT/Mie choice)")
    b.add_argument("--workers", type=int, default=None,
                   help="processes per table (default 1; rarely worth more)")
    b.set_defaults(func=run_build)
    ls = sub.add_parser("list", help="list the cached tables")
    ls.set_defaults(func=run_list)
    s = sub.add_parser("shielding", help="self-shielding ratio against grain radius")
    s.add_argument("--material", default="olivine", help="material name (default olivine)")
    s.add_argument("--element", default="Si", help="edge element (default Si)")
    s.add_argument("--edge", default="K", help="edge name (default K)")
    s.add_argument("--amin", type=float, default=0.001, help="smallest radius, um")
    s.add_argument("--amax", type=float, default=5.0, help="largest radius, um")
    s.add_argument("--n", type=int, default=60, help="number of radii")
    s.add_argument("--output", default=None, help="write the table here (ECSV)")
    s.add_argument("--plot", default=None, help="write the figure here (pdf/png)")
    s.set_defaults(func=run_shielding)
    return p


def run_build(args) -> int:
    from ..dust.tables import DEFAULT_MATERIALS, EDGE_REGIONS, build_default_tables

    tables = build_default_tables(args.materials or DEFAULT_MATERIALS,
                                  args.elements or tuple(EDGE_REGIONS),
                                  rebuild=args.rebuild, method=args.method,
                                  workers=args.workers)
    for t in tables:
        print(f"{t.material.name:14s} {t.meta.get('element', ''):3s} "
              f"{t.energy_kev[0]:.3f}-{t.energy_kev[-1]:.3f} keV  {t.energy_kev.size:4d} E x "
              f"{len(t.sizes)} a  {t.meta.get('path', '(not cached)')}")
    return 0


def run_list(args) -> int:
    from .._paths import cache_dir
    from ..dust.tables import list_cached_tables

    rows = list_cached_tables()
    if not rows:
        print(f"no dust tables in {cache_dir()}")
        return 0
    for h in rows:
        lo, hi = h["energy_range"]
        print(f"{h.get('material_name', '?'):14s} {h.get('formula', ''):16s} "
              f"{h.get('density_g_cm3', float('nan')):5.2f} g/cm3  {lo:.3f}-{hi:.3f} keV  "
              f"{h['n_energy']:4d} E x {h['n_size']} a  {h.get('method', '')}  "
              f"{h['bytes'] / 1e6:.1f} MB  {h['path']}")
    return 0


def run_shielding(args) -> int:
    from ..dust.shielding import shielding_table

    table = shielding_table(args.material, args.element,
                            np.geomspace(args.amin, args.amax, args.n), edge=args.edge)
    if args.output:
        table.write(args.output, format="ascii.ecsv", overwrite=True)
    else:
        for col in ("ratio_abs", "ratio_ext", "x_edge", "tau_grain"):
            table[col].info.format = ".4g"
        table["atoms_per_grain"].info.format = ".3e"
        table["radius"].info.format = ".4g"
        table.pprint(max_lines=-1, max_width=-1)
    if args.plot:
        from ..plotting.shielding import plot_shielding

        fig = plot_shielding(table)
        fig.savefig(args.plot)
    return 0
