"""Set-up shared by the benchmarks that run on tests/_batch_sim.py's
SIMULATED sample (invented sightlines: Si gas edge x olivine MRN dust edge
with one upper size, 0.25 um, for all x power law, two grating-like arms,
edgefit's own simulator): the command-line options of the sample and its
output folder, and the sample written there once (a rerun with the same
``--out`` reuses it and whatever results are cached beside it)."""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

#: The simulator's upper grain size in um (tests/_batch_sim.py build_model).
TRUE_AMAX = 0.25


def add_sample_options(ap, *, exposure, seed, workers=2):
    """``--exposure`` (s per spectrum), ``--workers``, ``--seed`` and
    ``--out`` with this benchmark's defaults."""
    ap.add_argument("--exposure", type=float, default=exposure)
    ap.add_argument("--workers", type=int, default=workers)
    ap.add_argument("--seed", type=int, default=seed)
    ap.add_argument("--out", type=Path)


def simulated_sample(args, n, prefix, **options):
    """``(out, manifest)``: the output folder (``args.out`` or a new
    temporary one named ``prefix...``) and ``out/sample/sample.toml``,
    written with ``n`` sightlines at ``args.seed`` and ``args.exposure``
    (further ``_batch_sim.write_sample`` options in ``options``) unless it
    is already there."""
    import _batch_sim

    out = args.out or Path(tempfile.mkdtemp(prefix=prefix))
    manifest = out / "sample" / "sample.toml"
    if not manifest.exists():
        _batch_sim.write_sample(out / "sample", n=n, seed=args.seed, exposure=args.exposure,
                                **options)
    return out, manifest
