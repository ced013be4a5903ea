"""Fit every sightline of a manifest, in parallel, resumably.

:func:`run_batch` runs :func:`edgefit.analysis.pipeline.run_sightline` for
each sightline of a :class:`~edgefit.analysis.manifest.Manifest` on a local
process pool (default) or on a dask.distributed cluster (``scheduler``).

Output folder layout::

    DIR/sample.ecsv, DIR/sample.fits     the sample table (sample_table.py)
    DIR/sightlines/<name>/               one folder per finished sightline:
        fit.ecsv fit.fits fit.json fit_parameters.ecsv fit_summary.txt
        posterior_samples.npz            when MCMC ran
        *.png                            figures, when drawn
        row.json                         its sample-table record + input hash

How it stays safe:

* Workers (local processes forked from a preloaded server, or dask
  workers) compute into a private temporary folder and send the files back;
  the main process writes them into ``DIR/.work/`` and renames the folder
  into ``DIR/sightlines/`` -- a sightline's folder appears whole or not at
  all.  The sample table is rewritten (temporary file, rename) after a
  finished sightline at most once every ``table_interval`` seconds (5 by
  default) or every 50 times the last rewrite's duration if that is longer
  (:data:`TABLE_WRITE_GAP_FACTOR`; rebuilding and writing both files costs
  the main process a few tenths of a second for tens of rows, CPU the
  workers share), and always at the end, on Ctrl-C/SIGTERM and when the run
  stops on an error.  Resuming never reads the table: it rests on the
  folders' ``row.json``, so a table a few seconds behind (a main process
  killed outright) loses nothing.
* ``row.json`` holds a SHA-256 of the sightline's inputs (merged manifest
  entry, run options, edgefit version and the bytes of every input file,
  see :meth:`SightlineEntry.input_hash`; the hydrogen columns are taken
  from the manifest whenever the table is written).  A rerun skips
  a sightline whose hash is unchanged and whose status is not ``failed``;
  changed and failed ones are fitted again.
* A failing sightline becomes a ``failed`` row with a one-line reason; the
  others go on.
* Ctrl-C (SIGINT) or SIGTERM stops the workers, throws away what was
  running (nothing of it reaches ``DIR/sightlines/``), rewrites the table
  of the finished ones and raises :class:`BatchInterrupted`, whose message
  says how many finished and how to resume.

dask is imported only when ``scheduler`` is given (optional extra
``edgefit[cluster]``); the workers need edgefit installed and the input
files at the same paths (a shared file system); results travel back to the
main process, which alone writes ``DIR``.
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import sys
import tempfile
import threading
import time
import uuid
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Sequence

from ..errors import ArgumentError, EdgefitError, MissingDependencyError
from .manifest import Manifest, load_manifest
from .sample_table import failed_row, sample_table, write_sample_table

if TYPE_CHECKING:
    from astropy.table import Table

__all__ = ["run_batch", "BatchInterrupted", "default_output", "fit_task", "ROW_FILE",
           "SIGHTLINES_DIR", "TABLE_INTERVAL", "TABLE_WRITE_GAP_FACTOR"]

#: The record of a finished sightline, inside its folder.
ROW_FILE = "row.json"
#: Sub-folder of the output holding one folder per sightline.
SIGHTLINES_DIR = "sightlines"
_WORK_DIR = ".work"
#: Default least time (s) between two rewrites of the sample table during a run.
TABLE_INTERVAL = 5.0
#: With a positive ``table_interval``, the least time between two rewrites
#: is also this many times the last rewrite's duration: rewriting a table of
#: many rows and columns (a few tenths of a second for tens of rows) then
#: takes at most ~2 % of the main process, CPU the workers would otherwise
#: share on a machine with as many workers as cores.
TABLE_WRITE_GAP_FACTOR = 50.0
#: ``row.json`` key of the CPU seconds the sightline's fit took (not a table
#: column): a later run that refits it starts the costliest sightlines first.
_COST_KEY = "fit_cpu_s"
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "NUMBA_NUM_THREADS")


class BatchInterrupted(EdgefitError):
    """A batch stopped by Ctrl-C or SIGTERM; finished sightlines are kept."""

    def __init__(self, finished, total, output, resume_hint, signum=signal.SIGINT):
        self.finished = finished
        self.total = total
        self.output = output
        self.signum = int(signum)
        super().__init__(f"interrupted: {finished} of {total} sightlines finished and kept "
                         f"in {output}; {resume_hint}")


class _Terminated(BaseException):
    """Raised in the main thread by the SIGTERM handler."""


def default_output(manifest_path):
    """``<manifest folder>/<manifest stem>_batch``."""
    p = Path(manifest_path)
    return p.parent / f"{p.stem}_batch"


def _one_line(exc):
    msg = str(exc).strip()
    if isinstance(exc, EdgefitError) and msg:
        return msg.splitlines()[0]
    return f"{type(exc).__name__}: {msg.splitlines()[0]}" if msg else type(exc).__name__


# ---------------------------------------------------------------------------
# in the worker
def _worker_init():
    """Workers leave Ctrl-C to the main process, which stops them."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def fit_task(task):
    """Fit one sightline (run in a worker process).

    ``task`` is a plain dict (see :func:`_task`); returns ``{"name",
    "folder", "row", "files"}`` where ``files`` maps relative paths to the
    bytes of every file the pipeline wrote.  Never raises for a problem of
    the sightline: that becomes a ``failed`` row."""
    from .config import config_from_dict
    from .pipeline import run_sightline
    from .sample_table import sightline_row

    cpu0 = time.process_time()
    tmp = Path(tempfile.mkdtemp(prefix="edgefit-sightline-"))
    seen = []
    try:
        try:
            cfg = config_from_dict(task["table"], task["manifest"], base=task["base"],
                                   key_prefix=f"sightline[{task['index']}].",
                                   name=task["name"], output=tmp)
            result = run_sightline(cfg, tmp, mcmc=task["mcmc"], plots=task["plots"],
                                   steps=task["steps"], quiet=True, command="batch",
                                   keep_samples=True, figures=task["figures"],
                                   checkpoints=False, total_profiles=True,
                                   warn=lambda m: seen.append(
                                       "warning: " + (str(m).splitlines() or [""])[0]))
            row = sightline_row(result, task["name"], seen)
        except Exception as exc:  # noqa: BLE001 -- one sightline's failure is its row
            row = failed_row(task["name"], _one_line(exc))
        files = {p.relative_to(tmp).as_posix(): p.read_bytes()
                 for p in sorted(tmp.rglob("*")) if p.is_file()}
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    row["input_hash"] = task["hash"]
    row[_COST_KEY] = round(time.process_time() - cpu0, 3)
    return {"name": task["name"], "folder": task["folder"], "row": row, "files": files,
            "worker": _worker_usage()}


def _worker_usage():
    """This process's id, peak resident memory (MB) and CPU seconds so far."""
    try:
        import resource
    except ImportError:   # not on every platform
        return {"pid": os.getpid()}
    r = resource.getrusage(resource.RUSAGE_SELF)
    peak_bytes = r.ru_maxrss * (1 if sys.platform == "darwin" else 1024)  # KiB on Linux
    return {"pid": os.getpid(), "peak_mb": peak_bytes / 2**20,
            "cpu_s": r.ru_utime + r.ru_stime}


# ---------------------------------------------------------------------------
# in the main process
def _task(manifest, entry, digest, mcmc, plots, steps, figures):
    return {"manifest": str(manifest.path), "base": str(entry.config.base),
            "index": entry.index, "name": entry.name, "folder": entry.folder,
            "table": entry.table, "hash": digest, "mcmc": mcmc, "plots": plots,
            "steps": steps, "figures": figures}


def _costliest_first(entries, cost):
    """``entries`` ordered by the CPU seconds of their last fit, longest
    first, so that the last sightline to finish is a short one rather than
    a long one running alone on an otherwise idle pool; a sightline never
    fitted counts as the median of the others, ties keep manifest order.
    The order of work only: results are kept by name and the table is in
    manifest order."""
    known = sorted(cost[e.name] for e in entries if e.name in cost)
    if not known:
        return list(entries)
    typical = known[len(known) // 2]
    return sorted(entries, key=lambda e: -cost.get(e.name, typical))


def _read_record(out, entry):
    p = out / SIGHTLINES_DIR / entry.folder / ROW_FILE
    try:
        rec = json.loads(p.read_text())
    except (OSError, ValueError):
        return None
    return rec if isinstance(rec, dict) and rec.get("name") == entry.name else None


def _commit(out, result):
    """Write one finished sightline's files atomically: a temporary folder
    in DIR/.work, renamed into DIR/sightlines/<folder>."""
    work = out / _WORK_DIR
    work.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f"{result['folder']}.", dir=work))
    for rel, data in result["files"].items():
        p = (tmp / rel).resolve()
        if tmp.resolve() not in p.parents:
            continue  # only files inside the folder
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data)
    (tmp / ROW_FILE).write_text(json.dumps(result["row"], indent=1) + "\n")
    dest = out / SIGHTLINES_DIR / result["folder"]
    dest.parent.mkdir(parents=True, exist_ok=True)
    old = None
    if dest.exists():
        old = work / f"{result['folder']}.old-{uuid.uuid4().hex[:8]}"
        os.rename(dest, old)
    os.rename(tmp, dest)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


@contextmanager
def _single_threaded_workers(active):
    """Child processes inherit one-thread settings for BLAS/OpenMP/numba
    (several workers on few cores would otherwise oversubscribe them)."""
    saved = {k: os.environ.get(k) for k in _THREAD_VARS}
    if active:
        for k in _THREAD_VARS:
            os.environ.setdefault(k, "1")
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


@contextmanager
def _sigterm_raises():
    """SIGTERM raises _Terminated in the main thread while inside."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise _Terminated()

    old = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


#: Modules imported once in the fork server, so that workers start without
#: importing them again (spawn would pay that in every worker); the last
#: one imports the libraries a fit first reaches for.
_PRELOAD = ["edgefit.analysis.batch", "edgefit.analysis.pipeline", "edgefit.inference",
            "edgefit.models", "edgefit.data", "edgefit.analysis._pool_preload"]


def _pool_context():
    """A 'forkserver' context with edgefit preloaded where the platform has
    one (workers fork from a clean single-threaded server), else 'spawn'."""
    from multiprocessing import get_all_start_methods, get_context

    if "forkserver" in get_all_start_methods():
        ctx = get_context("forkserver")
        ctx.set_forkserver_preload(_PRELOAD)
        return ctx
    return get_context("spawn")


def _start_pool_server():
    """Start the fork server now, with the environment the workers get:
    it imports :data:`_PRELOAD` (several CPU-seconds) while the main process
    reads the manifest and hashes the inputs, instead of after.  Does
    nothing where workers are spawned, or when the server runs already."""
    ctx = _pool_context()
    if ctx.get_start_method() != "forkserver":
        return
    from multiprocessing import forkserver

    with _single_threaded_workers(True):
        forkserver.ensure_running()


@contextmanager
def _signals_deferred():
    """SIGINT/SIGTERM arriving inside are acted on when leaving.

    Python runs signal handlers in the main thread whichever thread the
    operating system delivered the signal to (the process pool has helper
    threads), so blocking the signal in this thread is not enough: inside,
    the handlers are replaced by one that only notes the signal, and on
    leaving the original handler of the first noted signal is called (or
    the signal sent again when its handler is the system default)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[int] = []

    def note(signum, frame):
        pending.append(signum)

    sigs = (signal.SIGINT, signal.SIGTERM)
    old = {s: signal.signal(s, note) for s in sigs}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if pending:
            handler = old[signal.Signals(pending[0])]
            if callable(handler):
                handler(pending[0], None)
            elif handler == signal.SIG_DFL:
                os.kill(os.getpid(), pending[0])


def _lost_sightline(task, reason):
    """The result of a fit task whose worker died: a ``failed`` row."""
    return {"name": task["name"], "folder": task["folder"], "files": {},
            "row": dict(failed_row(task["name"], reason), input_hash=task["hash"])}


def _run_pool(tasks, workers, on_result, func=None, lost=None):
    """Run ``func(task)`` for every task on the local process pool and hand
    each result to ``on_result`` in the main process as it arrives.

    ``func`` must be a module-level function (it is pickled by name);
    ``lost(task, reason)`` makes the result of a task whose worker died.
    Other analyses (e.g. :mod:`edgefit.analysis.shared_profile`) run their
    own task functions through this one pool.  The defaults (``fit_task``,
    a failed sightline row) are looked up when called, not when defined."""
    from concurrent.futures import ProcessPoolExecutor, as_completed

    func = fit_task if func is None else func
    lost = _lost_sightline if lost is None else lost

    with _single_threaded_workers(True):
        ex = ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context(),
                                 initializer=_worker_init)
        try:
            futures = {ex.submit(func, t): t for t in tasks}
            for fut in as_completed(futures):
                t = futures[fut]
                try:
                    res = fut.result()
                except Exception as exc:  # noqa: BLE001 -- e.g. a worker killed
                    res = lost(t, "worker lost: " + _one_line(exc))
                on_result(res)
        except BaseException:
            for p in list(getattr(ex, "_processes", {}).values()):
                p.terminate()
            ex.shutdown(wait=False, cancel_futures=True)
            raise
        ex.shutdown(wait=True)


def _run_inline(tasks, on_result, func=None):
    func = fit_task if func is None else func   # looked up now (tests replace fit_task)
    for t in tasks:
        on_result(func(t))


def _run_dask(tasks, scheduler, on_result):
    try:
        from dask.distributed import Client, as_completed
    except ImportError as exc:
        raise MissingDependencyError(
            "--scheduler needs dask.distributed: pip install 'edgefit[cluster]'") from exc
    own = not isinstance(scheduler, Client)
    try:
        client = Client(scheduler, timeout="30s") if own else scheduler
    except (OSError, TimeoutError, ValueError) as exc:
        raise ArgumentError(f"cannot reach the dask scheduler at {scheduler}: "
                            f"{_one_line(exc)}") from None
    futures = {}
    try:
        for t in tasks:
            fut = client.submit(fit_task, t, pure=False,
                                key=f"edgefit-{t['folder']}-{t['hash'][:12]}")
            futures[fut] = t
        for fut in as_completed(list(futures)):
            t = futures[fut]
            try:
                res = fut.result()
            except Exception as exc:  # noqa: BLE001 -- a lost worker
                res = {"name": t["name"], "folder": t["folder"], "files": {},
                       "row": dict(failed_row(t["name"], "worker lost: " + _one_line(exc)),
                                   input_hash=t["hash"])}
            on_result(res)
    except BaseException:
        client.cancel(list(futures))
        raise
    finally:
        if own:
            client.close()


def run_batch(manifest: str | os.PathLike | Manifest, output: str | os.PathLike | None = None,
              *, workers: int | None = None, scheduler: Any = None, fresh: bool = False,
              only: Sequence[str] | None = None, mcmc: bool = True, plots: bool = True,
              steps: int | None = None, figures: Callable[..., Any] | None = None,
              progress: bool = True, resume_hint: str | None = None,
              usage: dict | None = None, table_interval: float = TABLE_INTERVAL) -> Table:
    """Fit the sightlines of a manifest and return the sample table.

    Parameters
    ----------
    manifest : path or Manifest
        The batch manifest (:func:`~edgefit.analysis.manifest.load_manifest`
        checks it whole before anything runs).
    output : path, optional
        Output folder (default ``<manifest stem>_batch`` beside it).
    workers : int, optional
        Local worker processes (default: the number of CPUs); 0 runs the
        sightlines one after another in this process.
    scheduler : str or dask.distributed.Client, optional
        Run on this dask.distributed cluster instead of the local pool.
    fresh : bool
        Refit every selected sightline even when its inputs are unchanged.
    only : list of str, optional
        Fit only these sightlines (the table still lists every finished one).
    mcmc, plots, steps
        As for :func:`~edgefit.analysis.pipeline.run_sightline`.
    figures : callable, optional
        Figure hook handed to ``run_sightline`` (must be picklable, e.g.
        :func:`edgefit.plotting.fit_plots.save_configured`); none by default.
    progress : bool
        A tqdm bar (on stderr) counting sightlines done and failed.
    usage : dict, optional
        Filled with ``{worker pid: {"peak_mb": ..., "cpu_s": ...}}`` (peak
        resident memory and CPU seconds of each worker process, as last
        reported) -- for benchmarks.
    table_interval : float
        Least time (seconds) between two rewrites of the sample table while
        sightlines finish (0: after every one); when positive, the gap is
        also at least :data:`TABLE_WRITE_GAP_FACTOR` times the last
        rewrite's duration.  The table is always
        written at the end, on an interruption and when the run stops on
        an error; each sightline's folder is written the moment it
        finishes regardless.

    Returns
    -------
    astropy.table.Table
        The sample table (also written to ``DIR/sample.ecsv`` and
        ``DIR/sample.fits``): every sightline of the manifest whose results
        are up to date, in manifest order.

    Raises
    ------
    BatchInterrupted
        On Ctrl-C / SIGTERM, after the finished sightlines are safe.
    """
    if workers is None:
        workers = os.cpu_count() or 1
    if workers < 0:
        raise ArgumentError(f"workers must be >= 0, got {workers}")
    if workers > 0 and scheduler is None:
        _start_pool_server()   # its imports overlap the reading and hashing below
    if not isinstance(manifest, Manifest):
        manifest = load_manifest(manifest)
    out = Path(output) if output is not None else default_output(manifest.path)
    selected = manifest.select(only)
    (out / SIGHTLINES_DIR).mkdir(parents=True, exist_ok=True)
    shutil.rmtree(out / _WORK_DIR, ignore_errors=True)  # leftovers of a killed run
    # "totals" names how the table's total columns are bounded without
    # MCMC (sample_table.total_column_profiles), so rows made otherwise refit
    options = {"mcmc": bool(mcmc), "plots": bool(plots), "steps": steps,
               "totals": "profile"}
    digests = {e.name: e.input_hash(options) for e in manifest}
    records = {}
    cost = {}    # CPU seconds of each sightline's last fit, whatever its inputs were
    for e in manifest:
        rec = _read_record(out, e)
        if rec is not None and isinstance(rec.get(_COST_KEY), (int, float)):
            cost[e.name] = float(rec[_COST_KEY])
        if rec is not None and rec.get("input_hash") == digests[e.name]:
            records[e.name] = rec
    todo = _costliest_first([e for e in selected if fresh or e.name not in records
                             or records[e.name]["status"] == "failed"], cost)
    for e in todo:
        records.pop(e.name, None)
    hydrogen = {e.name: e.hydrogen for e in manifest}
    meta = {"manifest": manifest.path.name, "n_sightlines": len(manifest)}

    def write_table():
        rows = [records[e.name] for e in manifest if e.name in records]
        table = sample_table(rows, hydrogen, meta)
        write_sample_table(table, out)
        return table

    tasks = [_task(manifest, e, digests[e.name], bool(mcmc), bool(plots), steps, figures)
             for e in todo]
    # with fits queued the table is first written when the first one ends
    # (the one before would be rewritten at once; it costs the main process
    # a table write while the workers start); with nothing to fit, now
    table = None if tasks else write_table()
    from tqdm.auto import tqdm

    bar = tqdm(total=len(tasks), desc="sightlines", unit="sightline", file=sys.stderr,
               disable=not progress, dynamic_ncols=True)
    counts = {"done": 0, "failed": 0}
    written = {"at": time.monotonic(), "stale": table is None, "gap": table_interval}

    def refresh_table(force):
        """Rewrite the table if it lags behind the records and ``force``
        or the gap (``table_interval``, or more after a slow write) passed
        since the last write."""
        nonlocal table
        if written["stale"] and (force or time.monotonic() - written["at"] >= written["gap"]):
            t0 = time.monotonic()
            table = write_table()
            now = time.monotonic()
            gap = (max(table_interval, TABLE_WRITE_GAP_FACTOR * (now - t0))
                   if table_interval > 0 else 0.0)
            written.update(at=now, stale=False, gap=gap)

    def on_result(res):
        with _signals_deferred():   # a folder and the table are written whole
            _commit(out, res)
            records[res["name"]] = res["row"]
            written["stale"] = True
            refresh_table(force=False)
        counts["failed" if res["row"]["status"] == "failed" else "done"] += 1
        if usage is not None and res.get("worker"):
            w = dict(res["worker"])
            usage[w.pop("pid")] = w
        bar.set_postfix(counts, refresh=False)
        bar.update(1)

    try:
        with _sigterm_raises():
            if not tasks:
                pass
            elif scheduler is not None:
                _run_dask(tasks, scheduler, on_result)
            elif workers == 0:
                _run_inline(tasks, on_result)
            else:
                _run_pool(tasks, min(workers, len(tasks)), on_result)
    except (KeyboardInterrupt, _Terminated) as exc:
        signum = signal.SIGTERM if isinstance(exc, _Terminated) else signal.SIGINT
        bar.close()
        shutil.rmtree(out / _WORK_DIR, ignore_errors=True)
        with _signals_deferred():
            write_table()
        finished = sum(1 for e in manifest if e.name in records)
        hint = resume_hint or ("call run_batch again with the same manifest and output "
                               "to resume (finished sightlines are skipped)")
        raise BatchInterrupted(finished, len(manifest), out, hint, signum) from None
    except BaseException:
        bar.close()
        with _signals_deferred():
            refresh_table(force=True)   # the finished sightlines are in the table
        raise
    bar.close()
    with _signals_deferred():
        refresh_table(force=True)
    shutil.rmtree(out / _WORK_DIR, ignore_errors=True)
    return table
