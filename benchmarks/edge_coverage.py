"""Driver of ``validate_coverage.py --edges``: a seeded, resumable,
parallel run of :mod:`edgefit.inference._edge_coverage` (see that
script's docstring)."""
from __future__ import annotations

import json
import multiprocessing
import os
import time
from pathlib import Path

from edgefit.inference._edge_coverage import (EDGE_NH_RANGES, coverage_table, draw_tasks,
                                              run_one)


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
        unknown = wanted - set(EDGE_NH_RANGES)
        if unknown:
            raise SystemExit(f"--elements: unknown edge(s) {sorted(unknown)}; "
                             f"choose from {', '.join(EDGE_NH_RANGES)}")
        tasks = draw_tasks(args.n_si, "Si", args.seed, mcmc=args.mcmc,
                           mcmc_steps=args.mcmc_steps) if "Si" in wanted else []
        for el in EDGE_NH_RANGES:
            if el != "Si" and el in wanted:
                tasks += draw_tasks(args.n_other, el, args.seed, mcmc=args.mcmc,
                                    mcmc_steps=args.mcmc_steps)
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
