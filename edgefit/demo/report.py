"""The demo's report page: the Brindle Cloud sample on one HTML page
(:class:`edgefit.report.html.Report`)."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..report.html import Report, format_interval, format_value
from .region import AMAX_FIT_UM, REGION, SIGHTLINES, si_abundance

__all__ = ["demo_report"]


def _cell(row, q, scale=1.0, digits=3):
    if q not in row.colnames:
        return "--"
    v = float(row[q]) * scale
    lo = float(row[f"{q}_lo"]) * scale if f"{q}_lo" in row.colnames else math.nan
    hi = float(row[f"{q}_hi"]) * scale if f"{q}_hi" in row.colnames else math.nan
    return format_interval(v, lo, hi, digits)


def _sightline_folder(batch, name):
    from ..analysis.manifest import folder_name

    folder = Path(batch) / "sightlines" / folder_name(name)
    return folder if folder.is_dir() else None


def _size_comparison(rep, res, output, quick):
    """The size-distribution comparison (edgefit.analysis.sizes_compare):
    one row per sightline and candidate plus the sample sums, the sample's
    verdicts in words and the Delta C figure."""
    from ..analysis.sizes_compare import ALL

    if res is None:
        rep.text("The size-distribution comparison did not run.", note=True)
        return
    tab = res.table
    size_col = next((c for c in tab.colnames if c.endswith("_amax")), None)
    rows, classes = [], []
    for r in tab:
        name = str(r["sightline"])
        size = "--"
        if size_col is not None and math.isfinite(float(r[size_col])):
            # quick: no profile of the size, and its covariance interval is
            # meaningless (it reaches negative radii): the best fit alone
            size = (format_value(r[size_col], 3) if quick else
                    format_interval(r[size_col], r[f"{size_col}_lo"], r[f"{size_col}_hi"]))
        rows.append([name if name != ALL else "sample sum", str(r["candidate"]),
                     format_value(r["statistic"], 6), str(int(r["n_free"])),
                     format_value(r["delta_aic"], 3), format_value(r["akaike_weight"], 2),
                     size])
        classes.append("" if name != ALL else "sum")
    which = ("every sightline" if len(res.sightlines) == len(SIGHTLINES) else
             f"{len(res.sightlines)} sightlines ({', '.join(res.sightlines)}; the quick run "
             "compares only these)")
    size_words = ("the fitted largest radius (best fit only: the quick run computes no "
                  "interval for it)" if quick else
                  "the fitted largest radius with its profile-likelihood 68 % interval")
    rep.table(["sightline", "size distribution", "C", "free parameters", "delta AIC",
               "Akaike weight", "largest grain radius" + ("" if quick else " [68 %]")], rows,
              units=["", "", "", "", "", "", "um"], text_columns=(0, 1, 6),
              row_class=classes, table_id="sizes-table",
              caption=f"Candidate grain-size distributions for {which}, each sightline "
                      "refitted under each: power_law:amax=free is MRN with the largest "
                      "radius fitted, power_law MRN fixed at 0.005-0.25 um (index 3.5, as "
                      "the batch assumes), single:size=0.1 grains of one radius 0.1 um.  C "
                      "is the fit statistic; AIC = C + 2k (Akaike 1974); Akaike weights as "
                      f"in Burnham & Anderson (2002); {size_words}.  Simulated truth: MRN "
                      "up to 0.25 um, Cinder Ford up to 1.5 um.")
    for c in res.summary["sample"]["comparisons"]:
        rep.text(c["sentence"])
    rep.text("Lowest AIC per sightline: " + "; ".join(
        f"{n}: {res.summary['sightlines'][n]['best_aic']}" for n in res.sightlines) + ".")
    png = Path(res.output) / "sizes.png"
    if png.is_file():
        rep.image(png.relative_to(output), caption="Delta C of each candidate per "
                  "sightline (against the best candidate of that sightline); dotted lines "
                  "at 1 and 4.", width=560)


def demo_report(output, products, quick=False):
    """Write ``output/report.html`` from the products of
    :func:`edgefit.demo.sample.run_sample_demo`; returns its path."""
    output = Path(output)
    table, truth = products["table"], products["truth"]
    batch, ana = products["batch"], products["analysis"]
    rep = Report(f"edgefit demo: the {REGION}",
                 subtitle="Everything on this page is SIMULATED: an invented region, eight "
                          "invented sightlines with made-up hydrogen columns, depletions and "
                          "grain sizes, observed with an invented two-arm grating-like "
                          "instrument.  No real source or observation is shown.")
    mode = ("quick run: best fits with profile-likelihood intervals, no MCMC" if quick
            else "full run: best fits, profile-likelihood intervals and MCMC posteriors")
    rep.text(f"{len(SIGHTLINES)} sightlines, each with a high- and a medium-resolution arm "
             f"around the Si K edge (1.84 keV), fitted jointly with a power law x smooth "
             f"interstellar absorption (Si left out; N_H free, starting at the tracer "
             f"value) x a gas-phase Si edge x an olivine dust edge (Mie theory, MRN-like "
             f"sizes up to {AMAX_FIT_UM} um assumed; for Cinder Ford the largest size is "
             f"fitted too, and its posterior, a long curved ridge along the gas-dust-size "
             f"degeneracy, is summarised by profile intervals instead of MCMC); {mode}.")

    # -- sample table ------------------------------------------------
    rep.heading("Sample table", "sample")
    cols = [("N_H (HI + 2 H2)", "nh_hi_2h2", 1e-22, "1e22 cm-2"),
            ("gas Si", "gas_si_col", 1.0, "1e16 cm-2"),
            ("dust Si", "dust_col", 1.0, "1e16 cm-2"),
            ("total Si", "total_Si_cm2", 1e-16, "1e16 cm-2"),
            ("depletion", "depletion_Si", 1.0, ""),
            ("dust tau above edge", "dust_tau_above", 1.0, ""),
            ("grain column", "grain_column", 1e-10, "1e10 cm-2")]
    grains = products.get("grains", table)
    rows, classes = [], []
    for r, g in zip(table, grains):
        cells = [str(r["name"]), str(r["status"])]
        for _, q, scale, _ in cols:
            if q == "nh_hi_2h2":
                v, e = float(r[q]) * scale, float(r[f"{q}_err"]) * scale
                cells.append(f"{format_value(v, 3)} +/- {format_value(e, 2)}")
            elif q == "grain_column":
                cells.append(_cell(g, q, scale))
            else:
                cells.append(_cell(r, q, scale))
        rows.append(cells)
        classes.append("" if str(r["status"]) == "ok" else "bad")
    rep.table(["sightline", "status"] + [c[0] for c in cols], rows,
              units=["", ""] + [c[3] for c in cols], text_columns=(0, 1), row_class=classes,
              caption="Value and central 68.27 % interval [lo, hi] per quantity "
                      "(profile likelihood for the fitted columns, "
                      + ("covariance draws" if quick else "MCMC posterior")
                      + " for derived ones); N_H from the invented 21-cm and H2 tracers.",
              table_id="sample-table")

    # -- edge fits ---------------------------------------------------
    rep.heading("Edge fits with residuals", "fits")
    corner = None
    for r in table:
        folder = _sightline_folder(batch, str(r["name"]))
        if folder is None:
            continue
        img = folder / "spectra.png"
        if img.is_file():
            rep.image(img.relative_to(output), caption=f"{r['name']} (simulated): data, "
                      "model and residuals of both arms", width=520)
        if corner is None and (folder / "corner.png").is_file():
            corner = (folder / "corner.png", str(r["name"]))

    # -- corner plot ---------------------------------------------------
    rep.heading("Posterior corner plot", "corner")
    if corner is not None:
        rep.image(corner[0].relative_to(output), caption=f"{corner[1]}: MCMC posterior of "
                  "the fitted parameters", width=640)
    elif (ana / "regression_total_corner.png").is_file():
        rep.text("The quick run samples no sightline posterior; shown instead is the "
                 "posterior of the straight line total Si against N_H.")
        rep.image((ana / "regression_total_corner.png").relative_to(output),
                  caption="Bayesian line (intercept, slope, intrinsic scatter)", width=480)

    # -- relations ---------------------------------------------------
    rep.heading("Optical depth and columns against N_H", "relations")
    regs = [("total Si column vs N_H", products["regression_total"], "regression_total.png"),
            ("dust optical depth vs N_H", products["regression_dust"], "regression_dust.png")]
    rrows = []
    for label, reg, png in regs:
        d = reg.to_dict()
        odr, bayes = d["odr"] or {}, d["bayes"] or {}
        bs = bayes.get("slope", {})
        rrows.append([label, str(d["n_points"]),
                      f"{format_value(odr.get('slope'))} +/- {format_value(odr.get('slope_err'), 2)}",
                      format_interval(bs.get("median"), bs.get("lo"), bs.get("hi")),
                      format_interval(*(bayes.get("scatter", {}).get(k) for k in
                                        ("median", "lo", "hi"))),
                      f"{format_value(d['spearman'].get('rho'), 3)} "
                      f"(p {format_value(d['spearman'].get('p'), 2)})",
                      d["units"]["slope"]])
        if (ana / png).is_file():
            rep.image((ana / png).relative_to(output), caption=f"{label}: points with 68 % "
                      "errors, ODR and Bayesian lines with 68 % bands", width=500)
    rep.table(["relation", "points", "ODR slope", "Bayesian slope [68 %]",
               "intrinsic scatter [68 %]", "Spearman rho", "slope unit"], rrows,
              text_columns=(0, 6), table_id="regressions",
              caption=f"The simulated truth of the total-Si slope is the Si abundance "
                      f"{si_abundance():.3g} per H atom.")
    sh = products.get("shielded")
    if sh:
        s = sh.get("shielded", {})
        rep.table(["model of tau(N_H)", "best single grain radius [um]", "68 % range(s)",
                   "chi2", "delta AIC (shielded - line)", "delta BIC"],
                  [["self-shielded relation (one radius)", format_value(s.get("radius_um"), 3),
                    "; ".join(f"{format_value(a, 3)}-{format_value(b, 3)}"
                              for a, b in s.get("radius_68", [])) or "--",
                    format_value(s.get("chi2")), format_value(sh.get("delta_aic")),
                    format_value(sh.get("delta_bic"))]],
                  text_columns=(0, 2), table_id="shielded",
                  caption="Dust optical depth against N_H with the self-shielded relation "
                          "(one grain radius for the sample, free; dust fraction fixed at "
                          f"{format_value(sh.get('dust_fraction'), 2)}) beside a straight "
                          "line; negative delta favours the shielded relation.")

    # -- grain columns ---------------------------------------------------
    rep.heading("Grain columns", "grains")
    if "grain_column" in grains.colnames:
        gm = grains.meta.get("grain_columns", {}).get("default", {})
        grows = [[str(g["name"]), _cell(g, "grain_column", 1e-10),
                  _cell(g, "n_Si_dust", 1e-16)] for g in grains]
        rep.table(["sightline", "grain column", "Si in grains"], grows,
                  units=["", "1e10 cm-2", "1e16 cm-2"], table_id="grain-table",
                  caption="From each sightline's dust optical depth through the package's "
                          f"Mie/ADT cross sections ({gm.get('material', 'olivine')}, "
                          "MRN-like sizes), with self-shielding; 68 % intervals.")

    # -- self-shielding ---------------------------------------------------
    rep.heading("Self-shielding", "shielding")
    if (ana / "shielding.png").is_file():
        rep.image((ana / "shielding.png").relative_to(output),
                  caption="Si K edge jump of olivine grains over the jump of their atoms "
                          "unshielded, against grain radius: large grains hide their "
                          "interiors.  The extinction curve (dashed) falls below zero for "
                          "micron-sized grains (see the table below).", width=460)

    # -- size distributions ---------------------------------------------------
    rep.heading("Size distributions", "sizes")
    _size_comparison(rep, products.get("sizes"), output, quick)
    shtab = products.get("shielding")
    if shtab is not None:
        radii = shtab["radius"].quantity.to_value("um")
        pick = [int(np.argmin(abs(radii - a))) for a in (0.01, 0.1, 0.25, 0.5, 1.0, 1.5, 3.0)]
        rep.table(["grain radius", "absorption jump ratio", "extinction jump ratio"],
                  [[format_value(radii[i], 3), format_value(shtab["ratio_abs"][i], 3),
                    format_value(shtab["ratio_ext"][i], 3)] for i in pick],
                  units=["um", "", ""], text_columns=(), table_id="size-table",
                  caption="How the edge jump depends on grain radius (olivine, Si K): "
                          "ratio to the jump of the same atoms unshielded.  The extinction "
                          "ratio is negative for radii of about 0.4-1.4 um: across the edge "
                          "the refractive part of the grains' extinction falls by more than "
                          "their absorption rises (anomalous dispersion; van de Hulst 1957 "
                          "anomalous diffraction), so such grains extinguish less just above "
                          "the edge than just below.  The absorption ratio counts the atoms "
                          "the edge sees.  The fits assume "
                          f"MRN sizes up to {AMAX_FIT_UM} um except for Cinder Ford, whose "
                          "grains reach 1.5 um in the simulation.")

    # -- population ---------------------------------------------------
    rep.heading("Population result", "population")
    pop = products.get("population")
    if pop is None:
        rep.text("The population fit reweights each sightline's posterior samples, which "
                 "only the full run (with MCMC) keeps; run `edgefit demo` without --quick "
                 "to see it here.", note=True)
    else:
        names = {"c0": "mean ln N_dust at the reference N_H", "c1": "slope d ln N_dust / "
                 "d log10 N_H", "s": "intrinsic scatter of ln N_dust"}
        hrows = [[names.get(k, k), format_interval(v.get("median"), v.get("lo"), v.get("hi"))]
                 for k, v in pop.hyper.items() if isinstance(v, dict)]
        rep.table(["hyper-parameter", "median [68 %]"], hrows, text_columns=(0,),
                  table_id="population-hyper",
                  caption="ln N_dust = c0 + c1 (log10 N_H - reference) with intrinsic "
                          "scatter s, from importance reweighting of each sightline's "
                          "posterior samples (Hogg, Myers & Bovy 2010).  Sightlines left "
                          "out: " + (", ".join(f"{n} ({why})" for n, why in pop.skipped)
                                     or "none") + ".")
        srows = []
        for e in pop.sightlines:
            cols = e["columns"]
            cells = [e["name"], format_value(e["n_eff"], 3)]
            for c in ("gas_si_col", "dust_col"):
                if c in cols:
                    one, popc = cols[c]["single"], cols[c]["population"]
                    cells += [format_interval(one["median"], one["lo"], one["hi"]),
                              format_interval(popc["median"], popc["lo"], popc["hi"]),
                              format_value(cols[c]["shrink"], 3)]
                else:
                    cells += ["--", "--", "--"]
            srows.append(cells)
        rep.table(["sightline", "effective samples", "gas Si alone", "gas Si, population",
                   "gas interval shrink", "dust Si alone", "dust Si, population",
                   "dust interval shrink"], srows,
                  units=["", "", "1e16 cm-2", "1e16 cm-2", "", "1e16 cm-2", "1e16 cm-2", ""],
                  text_columns=(0,), table_id="population-sightlines",
                  caption="Each sightline's columns alone and under the population prior "
                          "(median [68 %]); shrink = population width / single width.")
        for w in pop.warnings:
            rep.text(f"population: {w}", note=True)

    # -- truth ---------------------------------------------------
    rep.heading("Comparison with the simulated truth", "truth")
    trows, tcls = [], []
    for r in truth:
        trows.append([str(r["name"]), str(r["quantity"]), format_value(r["truth"], 4),
                      format_value(r["estimate"], 4),
                      format_interval(r["estimate"], r["lo68"], r["hi68"]),
                      f"[{format_value(r['lo95'], 3)}, {format_value(r['hi95'], 3)}]",
                      "yes" if r["covered95"] else "NO"])
        tcls.append("" if r["covered95"] else "bad")
    n_cov = int(np.sum(truth["covered95"]))
    rep.table(["sightline", "quantity", "truth", "estimate", "68 % interval",
               "95 % interval", "truth inside 95 %"], trows,
              units=["", "", "1e16 cm-2", "1e16 cm-2", "1e16 cm-2", "1e16 cm-2", ""],
              text_columns=(0, 1, 6), row_class=tcls, table_id="truth-table",
              caption=f"{n_cov} of {len(truth)} simulated columns lie inside their 95 % "
                      "profile-likelihood intervals (about 95 % are expected).  Cinder "
                      "Ford's grains (1.5 um in the simulation) are fitted with the "
                      "largest size free, which widens its gas-dust split.")
    return rep.write(output)
