#!/usr/bin/env python
"""Regenerate edgefit's atomic data tables from xraydb.

Writes, in the folder holding this script:

* ``atomic/chantler_<Symbol>.txt`` for H..Zn: photon energy (keV), f1
  (electrons/atom, *including* Z) and f2 (electrons/atom) from the
  Chantler tables (Chantler 1995, J. Phys. Chem. Ref. Data 24, 71;
  Chantler 2000, JPCRD 29, 597; NIST SRD 66, 2005 release) as shipped in
  the xraydb package.  Every tabulated point of the source between 0.05
  and 15 keV is kept, plus two points beyond each end.
* ``atomic_elements.txt``: atomic number, symbol and standard atomic mass
  (u) from xraydb.
* ``atomic_edges.txt``: absorption-edge energies (eV) from xraydb's edge
  table (Elam, Ravel & Sieber 2002, Radiat. Phys. Chem. 63, 121).

Usage::

    python cross_sections/make_atomic_tables.py

xraydb is needed only here (``pip install edgefit[data]``); edgefit reads
the text files at run time.
"""
from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path

import numpy as np

EMIN_KEV, EMAX_KEV = 0.05, 15.0
ZMAX = 30  # H..Zn
HERE = Path(__file__).resolve().parent
COMMAND = "python cross_sections/make_atomic_tables.py"


def _chantler_row(db, symbol):
    row = db.get_cache("Chantler", column="element", value=symbol)[0]
    energy_ev = np.array(json.loads(row.energy), dtype=float)
    f1 = np.array(json.loads(row.f1), dtype=float)  # stored as f1 - Z (= f')
    f2 = np.array(json.loads(row.f2), dtype=float)
    return energy_ev, f1, f2


def main():
    import xraydb

    db = xraydb.get_xraydb()
    version = xraydb.__version__
    today = _dt.date.today().isoformat()
    outdir = HERE / "atomic"
    outdir.mkdir(exist_ok=True)

    elem_lines = [
        "# edgefit: atomic numbers and standard atomic masses, H..Zn",
        f"# source: xraydb {version} (IUPAC standard atomic weights as tabulated there)",
        "# columns: Z [-]  symbol [-]  mass [u = g/mol]",
        f"# generated {today} by: {COMMAND}",
    ]
    edge_lines = [
        "# edgefit: absorption-edge energies of neutral atoms, H..Zn",
        f"# source: xraydb {version} edge table (Elam, Ravel & Sieber 2002,",
        "#   Radiat. Phys. Chem. 63, 121, which takes edge energies largely from",
        "#   Bearden & Burr 1967, Rev. Mod. Phys. 39, 125)",
        "# edges below 10 eV are placeholders in the source and are left out",
        "# columns: Z [-]  symbol [-]  edge [IUPAC shell name]  energy [eV]",
        f"# generated {today} by: {COMMAND}",
    ]
    for z in range(1, ZMAX + 1):
        sym = xraydb.atomic_symbol(z)
        elem_lines.append(f"{z:3d} {sym:2s} {xraydb.atomic_mass(sym):.6f}")
        edges = sorted(xraydb.xray_edges(sym).items(), key=lambda kv: -kv[1].energy)
        for name, edge in edges:
            if edge.energy >= 10.0:
                edge_lines.append(f"{z:3d} {sym:2s} {name:3s} {edge.energy:.2f}")

        e_ev, f1_minus_z, f2 = _chantler_row(db, sym)
        e_kev = e_ev / 1e3
        lo = max(0, np.searchsorted(e_kev, EMIN_KEV, side="right") - 2)
        hi = min(e_kev.size, np.searchsorted(e_kev, EMAX_KEV, side="left") + 1)
        sel = slice(lo, hi + 1)
        e_kev, f1, f2 = e_kev[sel], f1_minus_z[sel] + z, f2[sel]
        if np.any(np.diff(e_kev) <= 0):
            raise SystemExit(f"{sym}: source energies are not strictly increasing")
        if np.any(f2 <= 0):
            raise SystemExit(f"{sym}: non-positive f2 in the source; log interpolation impossible")
        header = "\n".join([
            f"edgefit atomic scattering factors for {sym} (Z = {z})",
            "source: Chantler tables (C. T. Chantler 1995, J. Phys. Chem. Ref. Data 24, 71;",
            "  2000, JPCRD 29, 597; NIST Standard Reference Database 66, 2005 release)",
            f"  as distributed in xraydb {version} (M. Newville et al.)",
            "grid: every tabulated point of the source from 0.05 to 15 keV plus two beyond",
            "  each end (logarithmic, 1 % steps, refined to 0.0004-0.02 % steps across edges)",
            "f1 includes Z: f1 = Z + f' (xraydb's f1_chantler returns f' = f1 - Z)",
            "photoabsorption cross section per atom: sigma = 2 r_e lambda f2",
            "columns: energy [keV]  f1 [electrons/atom]  f2 [electrons/atom]",
            f"generated {today} by: {COMMAND}",
        ])
        np.savetxt(outdir / f"chantler_{sym}.txt", np.column_stack([e_kev, f1, f2]),
                   fmt=["%.8e", "%.7e", "%.7e"], header=header)
    (HERE / "atomic_elements.txt").write_text("\n".join(elem_lines) + "\n")
    (HERE / "atomic_edges.txt").write_text("\n".join(edge_lines) + "\n")
    print(f"wrote {ZMAX} element tables, atomic_elements.txt and atomic_edges.txt in {HERE}")


if __name__ == "__main__":
    main()
