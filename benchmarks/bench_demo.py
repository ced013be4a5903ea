"""Wall and CPU time of ``edgefit demo --quick`` and ``edgefit demo``
(targets on a 2-core machine, first run with the dust tables built: quick
<= 60 s, full <= 180 s).  Prints the times and the ratio of each to its
target; no assertion.  The dust-table cache is the user's (build it first
with ``edgefit dust-tables build`` or a first demo run).

Run:  python benchmarks/bench_demo.py [--quick-only] [--workers N]
"""
import argparse
import resource
import subprocess
import sys
import tempfile
import time


def run(args):
    t0 = time.perf_counter()
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    code = "import sys; from edgefit.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.run([sys.executable, "-c", code, "demo", "-q", *args],
                          capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        print(proc.stderr)
        raise SystemExit(1)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return time.perf_counter() - t0, cpu


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick-only", action="store_true")
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args()
    cases = [("quick", ["--quick"], 60.0)] + ([] if a.quick_only else [("full", [], 180.0)])
    for label, extra, target in cases:
        with tempfile.TemporaryDirectory() as tmp:
            wall, cpu = run(["-o", tmp, "--workers", str(a.workers), *extra])
        print(f"demo {label:<6} wall {wall:7.1f} s  cpu {cpu:7.1f} s  "
              f"wall/target {wall / target:5.2f}  (target {target:.0f} s)")


if __name__ == "__main__":
    main()
