"""Driver of ``validate_coverage.py --edges``: a seeded, resumable,
parallel run of :mod:`edgefit.inference._edge_coverage` (see that
script's docstring)."""
from __future__ import annotations

import json
import multiprocessing
import os
import time
from pathlib import Path

from edgefit.inference._edge_coverage import coverage_table, draw_tasks, run_one


#: N_H ranges (1e22 cm^-2) of the other edges: below 1.3 keV the smooth
#: absorption of 5e22 cm^-2 leaves no counts (transmission < 1e-3 at Fe L
#: for N_H = 3e22), so Fe L and O K are drawn at 0.3-1 x 10^22 (the
#: N_H = 10^22 scenario of these edges) and Mg K at 0.5-3 x 10^22.
OTHER_NH = {"Mg": (0.5, 3.0), "Fe": (0.3, 1.0), "O": (0.3, 1.0)}


def _load(path):
    recs = []
    if path.exists():
        for line in path.read_text().splitlines():
            try:
                recs.append(json.loads(line))
            except json.JSONDecodeError:  # a line cut short by an interruption
                continue
    return recs


def run_edges(args):
    path = Path(args.out)
    done = _load(path)
    if not args.report:
        wanted = {e.strip() for e in args.elements.split(",") if e.strip()}
        unknown = wanted - {"Si", *OTHER_NH}
        if unknown:
            raise SystemExit(f"--elements: unknown edge(s) {sorted(unknown)}; "
                             "choose from Si, Mg, Fe, O")
        tasks = draw_tasks(args.n_si, "Si", args.seed, mcmc=args.mcmc) if "Si" in wanted else []
        for el in ("Mg", "Fe", "O"):
            if el in wanted:
                tasks += draw_tasks(args.n_other, el, args.seed, mcmc=args.mcmc,
                                    nh=OTHER_NH[el])
        seen = {(r["task"]["element"], r["task"]["index"]) for r in done}
        todo = [t for t in tasks if (t["element"], t["index"]) not in seen]
        # interleave the edges so that a partial run covers all of them
        todo.sort(key=lambda t: (t["index"], t["element"]))
        print(f"{len(done)} sightlines done, {len(todo)} to run on {args.workers} workers",
              flush=True)
        t0 = time.perf_counter()
        from tqdm import tqdm

        with multiprocessing.get_context("fork").Pool(args.workers) as pool, \
                open(path, "a") as fh:
            for k, rec in enumerate(tqdm(pool.imap_unordered(run_one, todo), total=len(todo),
                                         mininterval=30, disable=None)):
                fh.write(json.dumps(rec) + "\n")  # one line per sightline: resumable
                fh.flush()
                os.fsync(fh.fileno())
                done.append(rec)
                if (k + 1) % 20 == 0:
                    print(f"  {k + 1}/{len(todo)} in {time.perf_counter() - t0:.0f} s", flush=True)
    print(coverage_table(done))
