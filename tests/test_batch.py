"""``edgefit batch`` and :func:`edgefit.analysis.run_batch` on SIMULATED
samples (tests/_batch_sim.py: invented sightlines drawn with edgefit's own
simulator).

What is checked against what:

* Resume: a real ``edgefit batch`` subprocess interrupted by SIGINT and
  rerun gives the same table as an uninterrupted run (every float to
  rel 1e-12, the same rows once each) -- the reference is the
  uninterrupted run itself.  That run (eight sightlines, three batches)
  is marked ``long``; the default suite keeps the SIGTERM stop (finished
  sightlines kept, the resume command printed) and the signal deferral
  during a table commit.
* Process pool against a dask.distributed LocalCluster with 2 worker
  processes: the same table (rel 1e-12).
* Failure isolation: a truncated PHA makes its row ``failed`` naming the
  file; the others are ``ok``.
* N_H from tracers: N(HI) + 2 N(H2) (molecules carry two atoms; e.g.
  Bohlin, Savage & Drake 1978, ApJ 224, 132), errors added in quadrature
  (independent tracers, common practice); the total element column's
  interval comes from the same joint draws as the two columns, so it is
  narrower than the sum of the two half-widths when they anticorrelate
  (checked: it is not the sum of errors).
* Every manifest error is one line naming the manifest and the key, exit 2.
"""
import json
import math
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from astropy.table import Table

from edgefit.analysis import load_manifest, read_sample_table, run_batch
from edgefit.cli import main
from edgefit.errors import ConfigError

sys.path.insert(0, os.path.dirname(__file__))
from _batch_sim import write_sample  # noqa: E402

FAST = dict(profile="[]", draws=200)


def _assert_same_table(a, b):
    assert list(a["name"]) == list(b["name"])
    assert len(set(a["name"])) == len(a)
    assert a.colnames == b.colnames
    for c in a.colnames:
        if a[c].dtype.kind == "f":
            np.testing.assert_allclose(np.asarray(a[c]), np.asarray(b[c]), rtol=1e-12,
                                       atol=0, equal_nan=True, err_msg=c)
        else:
            assert list(a[c]) == list(b[c]), c


# --- manifest errors ---------------------------------------------------------
@pytest.fixture(scope="module")
def small(tmp_path_factory):
    folder = tmp_path_factory.mktemp("small")
    return write_sample(folder, n=2, **FAST)


def _bad_manifest(small, tmp_path, old, new):
    text = small.read_text()
    assert old in text
    p = small.parent / f"bad_{tmp_path.name}.toml"
    p.write_text(text.replace(old, new, 1))
    return p


def _cli_error(capsys, manifest):
    rc = main(["batch", str(manifest), "-o", str(manifest.parent / "never"), "-q"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1, err
    assert str(manifest) in err[0]
    assert not (manifest.parent / "never").exists()   # nothing ran
    return err[0]


def test_manifest_unknown_key(small, tmp_path, capsys):
    m = _bad_manifest(small, tmp_path, 'name = "SIM-B02"', 'name = "SIM-B02"\nexposure = 3')
    assert "sightline[1].exposure: unknown key" in _cli_error(capsys, m)
    m = _bad_manifest(small, tmp_path, "[defaults.derived]", "[defaults.fitting]\n"
                      "x = 1\n[defaults.derived]")
    assert "defaults.fitting: unknown key" in _cli_error(capsys, m)


def test_manifest_missing_file(small, tmp_path, capsys):
    m = _bad_manifest(small, tmp_path, '"sim-b02_p1.pha"', '"sim-b02_p9.pha"')
    line = _cli_error(capsys, m)
    assert "sightline[1].pha[1]: file not found" in line and "sim-b02_p9.pha" in line


def test_manifest_duplicate_name(small, tmp_path, capsys):
    m = _bad_manifest(small, tmp_path, 'name = "SIM-B02"', 'name = "SIM-B01"')
    line = _cli_error(capsys, m)
    assert "sightline[1].name: duplicate name 'SIM-B01'" in line


def test_manifest_sightline_without_spectra(small, tmp_path, capsys):
    m = _bad_manifest(small, tmp_path, 'pha = ["sim-b02_m1.pha", "sim-b02_p1.pha"]', "")
    line = _cli_error(capsys, m)
    assert "sightline[1].pha: sightline 'SIM-B02' has no spectra" in line
    m = _bad_manifest(small, tmp_path, 'pha = ["sim-b02_m1.pha", "sim-b02_p1.pha"]',
                      "pha = []")
    assert "has no spectra" in _cli_error(capsys, m)


def test_manifest_merges_defaults_and_overrides(small, tmp_path):
    # tables appended at the end belong to the last sightline, SIM-B02
    m = tmp_path / "override.toml"
    m.write_text(small.read_text() + '\n[sightline.errors]\nprofile = "all"\n'
                 '[sightline.model.components.pl]\nparams.index = { value = 2.5, '
                 'min = 0.5, max = 4.0 }\n')
    # relative file names are relative to the manifest: keep it beside the data
    m = small.parent / f"override_{tmp_path.name}.toml"
    m.write_text((tmp_path / "override.toml").read_text())
    man = load_manifest(m)
    a, b = man.sightlines
    assert a.config.errors.profile == () and b.config.errors.profile == "all"
    assert a.config.components["pl"].values["index"] == 2.0
    assert b.config.components["pl"].values["index"] == 2.5
    assert [s.range for s in b.config.spectra] == [[1.70, 2.10]] * 2   # defaults.spectrum
    m.write_text(small.read_text() + "\n[sightline.model.components.pl]\nparams.slope = 1\n")
    with pytest.raises(ConfigError, match=r"sightline\[1\]\.model\.components\.pl\.params"):
        load_manifest(m)


def test_only_unknown_name_is_one_line(small, capsys):
    rc = main(["batch", str(small), "--only", "SIM-NOPE", "-q", "-o",
               str(small.parent / "never")])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "SIM-NOPE" in err[0]


# --- running -----------------------------------------------------------------
def test_truncated_pha_fails_only_its_row(tmp_path):
    m = write_sample(tmp_path, n=3, **FAST)
    bad = tmp_path / "sim-b02_p1.pha"
    data = bad.read_bytes()
    bad.write_bytes(data[: len(data) // 2])
    t = run_batch(m, tmp_path / "out", workers=0, progress=False)
    assert list(t["name"]) == ["SIM-B01", "SIM-B02", "SIM-B03"]
    assert list(t["status"]) == ["ok", "failed", "ok"]
    assert "sim-b02_p1.pha" in t["reason"][1] and "\n" not in t["reason"][1]
    assert math.isnan(t["gas_si_col"][1]) and np.isfinite(t["gas_si_col"][0])
    # the other rows carry values with units and their interval sources
    assert t["gas_si_col_cm2"].unit == "cm-2" and t["nh_hi"].unit == "cm-2"
    assert t.meta["interval_source"]["gas_si_col"] == "covariance"
    on_disk = read_sample_table(tmp_path / "out")
    _assert_same_table(t, on_disk)
    fits = Table.read(tmp_path / "out" / "sample.fits")
    assert list(fits["status"]) == ["ok", "failed", "ok"]
    # a repaired file is picked up by the rerun (its hash changed); the
    # finished rows are not refitted
    row1 = tmp_path / "out" / "sightlines" / "SIM-B01" / "row.json"
    before = row1.stat().st_mtime_ns
    bad.write_bytes(data)
    t2 = run_batch(m, tmp_path / "out", workers=0, progress=False)
    assert list(t2["status"]) == ["ok", "ok", "ok"]
    assert row1.stat().st_mtime_ns == before
    # a new tracer value only rewrites the table; a changed fit setting of
    # one sightline refits that one alone
    row3 = tmp_path / "out" / "sightlines" / "SIM-B03" / "row.json"
    before3 = row3.stat().st_mtime_ns
    text = m.read_text()
    m.write_text(text.replace("nh_hi = 2.000000e+21", "nh_hi = 2.050000e+21")
                 + '\n[sightline.fit]\nmethod = "least_squares"\nxnorm_free = false\n')
    t3 = run_batch(m, tmp_path / "out", workers=0, progress=False)
    assert t3["nh_hi"][0] == 2.05e21
    assert row1.stat().st_mtime_ns == before and row3.stat().st_mtime_ns != before3
    assert math.isnan(t3["xnorm_2"][2]) and np.isfinite(t3["xnorm_2"][0])


def _batch_command(manifest, out, *extra):
    """``edgefit batch`` as a real subprocess command line."""
    return [sys.executable, "-c", "import sys; from edgefit.cli import main; "
            "sys.exit(main(sys.argv[1:]))", "batch", str(manifest), "-o", str(out),
            *extra]


def test_failed_sightline_sets_exit_status_1(tmp_path):
    from edgefit.cli.batch import EXIT_FAILED

    m = write_sample(tmp_path, n=2, **FAST)
    bad = tmp_path / "sim-b02_p1.pha"
    data = bad.read_bytes()
    bad.write_bytes(data[: len(data) // 2])
    out = tmp_path / "out"
    run = subprocess.run(_batch_command(m, out, "--workers", "0", "--no-plots", "-q"),
                         capture_output=True, text=True, timeout=600)
    assert EXIT_FAILED == 1 and run.returncode == EXIT_FAILED, run.stderr
    err = run.stderr.strip().splitlines()
    assert len(err) == 1, err                     # one line, even with -q
    assert "1 of 2 sightlines failed (SIM-B02)" in err[0]
    assert f"'reason' column of {out}/sample.ecsv" in err[0]
    # the table and both folders are written all the same
    t = read_sample_table(out)
    assert list(t["status"]) == ["ok", "failed"] and "sim-b02_p1.pha" in t["reason"][1]
    for folder in ("SIM-B01", "SIM-B02"):
        row = json.loads((out / "sightlines" / folder / "row.json").read_text())
        assert row["name"] == folder
    assert "sim-b02_p1.pha" in row["reason"]
    # repaired: the rerun retries it and ends with status 0
    bad.write_bytes(data)
    rerun = subprocess.run(_batch_command(m, out, "--workers", "0", "--no-plots"),
                           capture_output=True, text=True, timeout=600)
    assert rerun.returncode == 0, rerun.stderr
    assert "2 ok, 0 doubtful, 0 failed" in rerun.stdout


def test_changed_dust_table_refits_unchanged_skips(tmp_path, monkeypatch):
    """The input hash holds the identity of the dust cross-section tables
    the model uses: the same table rebuilt with other numbers under the
    same cache key (as another build of the code or other optical
    constants would give) makes the rerun refit; an unchanged one is
    skipped."""
    import shutil

    from edgefit.dust import cache

    m = write_sample(tmp_path, n=1, **FAST)
    # the model's table (olivine across the Si region, default sizes), in a
    # cache of this test's own so the session's copy stays untouched
    src = cache.default_table("olivine", "Si").meta["path"]
    own = tmp_path / "cache"
    own.mkdir()
    shutil.copy(src, own)
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(own))
    table = cache.default_table("olivine", "Si")
    path = table.meta["path"]
    assert os.path.dirname(path) == str(own)
    identity = cache.table_identity(table)
    dust = load_manifest(m).sightlines[0].dust_tables()
    assert dust == [["dust", [identity]]]

    out = tmp_path / "out"
    t1 = run_batch(m, out, workers=0, progress=False)
    row = out / "sightlines" / "SIM-B01" / "row.json"
    first = (row.stat().st_mtime_ns, json.loads(row.read_text())["input_hash"])
    run_batch(m, out, workers=0, progress=False)
    assert (row.stat().st_mtime_ns, json.loads(row.read_text())["input_hash"]) == first

    # same key, same header, 2 % more absorption per grain
    with np.load(path) as f:
        arrays = {k: f[k] for k in f.files}
    arrays["sigma_abs"] = arrays["sigma_abs"] * 1.02
    np.savez_compressed(path, **arrays)
    changed = cache.table_identity(cache.default_table("olivine", "Si"))
    assert changed["content"] != identity["content"]
    assert {k: v for k, v in changed.items() if k != "content"} == \
        {k: v for k, v in identity.items() if k != "content"}
    t2 = run_batch(m, out, workers=0, progress=False)
    second = (row.stat().st_mtime_ns, json.loads(row.read_text())["input_hash"])
    assert second[0] != first[0] and second[1] != first[1]
    # refitted with the new numbers: the dust column moved
    assert t2["dust_col"][0] != pytest.approx(t1["dust_col"][0], rel=1e-6, abs=0)
    run_batch(m, out, workers=0, progress=False)
    assert (row.stat().st_mtime_ns, json.loads(row.read_text())["input_hash"]) == second


def test_readme_batch_example_runs(tmp_path, monkeypatch):
    import re
    from pathlib import Path

    readme = Path(__file__).resolve().parents[1] / "README.md"
    blocks = re.findall(r"```python\n(.*?)```", readme.read_text(encoding="utf-8"), re.S)
    (code,) = [b for b in blocks if "run_batch" in b]
    assert "workers=2" in code
    code = code.replace("workers=2", "workers=0")   # in this process: quicker here
    write_sample(tmp_path, n=1, **FAST)       # writes sample.toml
    monkeypatch.chdir(tmp_path)
    namespace = {}
    exec(compile(code, str(readme), "exec"), namespace)  # our own README, not user input
    table = namespace["table"]
    assert list(table["status"]) == ["ok"]
    assert (tmp_path / "sample_batch" / "sample.ecsv").is_file()


def test_mcmc_samples_kept_and_posterior_intervals(tmp_path):
    from edgefit.analysis.pipeline import read_samples

    m = write_sample(tmp_path, n=1, **FAST)
    m.write_text(m.read_text().replace("[defaults.plots]", "[defaults.mcmc]\nenabled = true\n"
                                       "walkers = 12\nsteps = 60\nseed = 3\n"
                                       "[defaults.goodness]\nppc_draws = 10\n"
                                       "[defaults.plots]"))
    t = run_batch(m, tmp_path / "out", workers=0, progress=False)
    folder = tmp_path / "out" / "sightlines" / "SIM-B01"
    names, samples = read_samples(folder)
    assert names == ["gas_si_col", "dust_col", "pl_index", "pl_norm", "xnorm_2"]
    assert samples.shape[1] == 5 and samples.shape[0] > 0
    # the table's intervals are these samples' central 68.27 % quantiles
    lo, hi = np.quantile(samples[:, 0], [0.5 - 0.6827 / 2, 0.5 + 0.6827 / 2])
    assert t["gas_si_col_lo"][0] == pytest.approx(lo, rel=1e-12)
    assert t["gas_si_col_hi"][0] == pytest.approx(hi, rel=1e-12)
    assert t.meta["interval_source"]["gas_si_col"] == "posterior"
    assert t.meta["interval_source"]["total_Si_cm2"] == "posterior"
    # 60 steps is far below the autocorrelation rule: doubtful, and says why
    assert t["status"][0] == "doubtful" and "MCMC chain" in t["reason"][0]


def test_hydrogen_and_total_columns(tmp_path):
    m = write_sample(tmp_path, n=1, **FAST)
    t = run_batch(m, tmp_path / "out", workers=0, progress=False)
    e = load_manifest(m).sightlines[0].hydrogen
    assert t["nh_hi_2h2"][0] == pytest.approx(e["nh_hi"] + 2 * e["n_h2"], rel=1e-15)
    assert t["nh_hi_2h2_err"][0] == pytest.approx(math.hypot(e["nh_hi_err"],
                                                             2 * e["n_h2_err"]), rel=1e-15)
    assert math.isnan(t["nh_total"][0]) and not t["nh_total_upper"][0]
    # total column = gas + dust at the best fit; its interval is not the
    # sum of the two errors (joint draws: gas and dust anticorrelate)
    tot = t["total_Si_cm2"][0]
    assert tot == pytest.approx(t["gas_si_col_cm2"][0] + t["dust_col_cm2"][0], rel=1e-12)
    w_tot = t["total_Si_cm2_hi"][0] - t["total_Si_cm2_lo"][0]
    w_sum = sum(t[f"{q}_hi"][0] - t[f"{q}_lo"][0] for q in ("gas_si_col_cm2", "dust_col_cm2"))
    assert 0 < w_tot < 0.9 * w_sum


def test_local_cluster_equals_process_pool(tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    m = write_sample(tmp_path, n=3, **FAST)
    pool = run_batch(m, tmp_path / "pool", workers=2, progress=False)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        dask_t = run_batch(m, tmp_path / "dask", scheduler=cluster.scheduler_address,
                           progress=False)
    _assert_same_table(pool, dask_t)
    assert list(pool["status"]) == ["ok"] * 3


@pytest.mark.parametrize("no_numba", ["", "1"])
def test_fork_server_preload_imports_cleanly_and_respects_no_numba(no_numba):
    """Every module the pool's fork server preloads imports in a fresh
    interpreter (the server would silently skip one that does not, and the
    workers would pay for it), the first compiled call included; with
    EDGEFIT_NO_NUMBA set, numba is not even imported."""
    from edgefit.analysis import batch

    code = ("import importlib, sys\n"
            f"for m in {batch._PRELOAD!r}:\n"
            "    importlib.import_module(m)\n"
            "print('numba' in sys.modules, 'lmfit' in sys.modules)")
    env = dict(os.environ, EDGEFIT_NO_NUMBA=no_numba)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                         text=True, check=True).stdout.split()
    assert out == [str(not no_numba), "True"]


def test_pool_server_starts_before_the_manifest_is_read(tmp_path, monkeypatch):
    """run_batch starts the local pool's fork server first, so that its
    imports overlap the reading of the manifest; not for an in-process
    run (workers=0)."""
    from edgefit.analysis import batch

    calls = []
    monkeypatch.setattr(batch, "_start_pool_server", lambda: calls.append("server"))
    real = batch.load_manifest
    monkeypatch.setattr(batch, "load_manifest",
                        lambda p: calls.append("manifest") or real(p))
    m = write_sample(tmp_path, n=1, **FAST)
    run_batch(m, tmp_path / "inline", workers=0, progress=False)
    assert calls == ["manifest"]
    calls.clear()
    with pytest.raises(ConfigError):
        run_batch(tmp_path / "missing.toml", tmp_path / "pool", workers=2, progress=False)
    assert calls == ["server", "manifest"]


def test_refit_starts_the_costliest_sightlines_and_keeps_manifest_order(tmp_path, monkeypatch):
    """Each row.json records the CPU seconds of its fit; a run that refits
    starts with the sightlines whose last fit took longest (a new one
    counts as the median), while the table stays in manifest order and
    holds the same numbers as before."""
    from edgefit.analysis import batch

    m = write_sample(tmp_path, n=4, **FAST)
    out = tmp_path / "out"
    first = run_batch(m, out, workers=0, progress=False)
    rows = {n: out / "sightlines" / n / "row.json" for n in first["name"]}
    for n, p in rows.items():
        assert json.loads(p.read_text())["fit_cpu_s"] > 0, n
    assert "fit_cpu_s" not in first.colnames
    # pretend costs: B03 longest, then B01, B04; B02 never fitted
    for n, c in {"SIM-B01": 7.0, "SIM-B03": 9.0, "SIM-B04": 1.0}.items():
        rec = json.loads(rows[n].read_text())
        rows[n].write_text(json.dumps(dict(rec, fit_cpu_s=c)))
    rows["SIM-B02"].unlink()
    started = []
    real = batch.fit_task
    monkeypatch.setattr(batch, "fit_task", lambda t: started.append(t["name"]) or real(t))
    again = run_batch(m, out, workers=0, progress=False, fresh=True)
    assert started == ["SIM-B03", "SIM-B01", "SIM-B02", "SIM-B04"]
    _assert_same_table(first, again)
    assert list(again["name"]) == ["SIM-B01", "SIM-B02", "SIM-B03", "SIM-B04"]


def test_table_rewrites_are_throttled_but_never_lost(tmp_path, monkeypatch):
    from edgefit.analysis import batch

    m = write_sample(tmp_path, n=3, **FAST)
    writes = []
    real_write = batch.write_sample_table
    monkeypatch.setattr(batch, "write_sample_table",
                        lambda table, folder: writes.append(len(table))
                        or real_write(table, folder))
    real_task = batch.fit_task

    def third_breaks(task):
        if task["name"] == "SIM-B03":
            raise RuntimeError("simulated crash of the run")
        return real_task(task)

    # the run stops on an error after two sightlines: with an interval no
    # run reaches, the table is still written with both before the error
    # propagates
    monkeypatch.setattr(batch, "fit_task", third_breaks)
    with pytest.raises(RuntimeError, match="simulated crash"):
        run_batch(m, tmp_path / "out", workers=0, progress=False, table_interval=1e9)
    assert writes == [2]                          # not before a fit ends; on the error
    assert list(read_sample_table(tmp_path / "out")["name"]) == ["SIM-B01", "SIM-B02"]
    # resumed: one sightline left; written once, at the end
    monkeypatch.setattr(batch, "fit_task", real_task)
    writes.clear()
    resumed = run_batch(m, tmp_path / "out", workers=0, progress=False, table_interval=1e9)
    assert writes == [3]
    # interval 0 writes after every sightline; the final tables agree
    writes.clear()
    every = run_batch(m, tmp_path / "every", workers=0, progress=False, table_interval=0)
    assert writes == [1, 2, 3]
    _assert_same_table(resumed, every)
    _assert_same_table(read_sample_table(tmp_path / "out"), every)


def test_a_slow_table_write_widens_the_gap_to_the_next(tmp_path, monkeypatch):
    """With a positive interval the next rewrite waits for
    TABLE_WRITE_GAP_FACTOR times the last one's duration: a table write
    made to take 0.2 s with a factor of 1e4 leaves the first write (after
    the first sightline, the 1e-6 s interval having passed) and the final
    one; factor 0 falls back to the interval (after every sightline)."""
    import time

    from edgefit.analysis import batch

    m = write_sample(tmp_path, n=3, **FAST)
    writes = []
    real_write = batch.write_sample_table

    def slow_write(table, folder):
        writes.append(len(table))
        time.sleep(0.2)
        return real_write(table, folder)

    monkeypatch.setattr(batch, "write_sample_table", slow_write)
    monkeypatch.setattr(batch, "TABLE_WRITE_GAP_FACTOR", 1e4)
    slow = run_batch(m, tmp_path / "slow", workers=0, progress=False, table_interval=1e-6)
    assert writes == [1, 3]
    writes.clear()
    monkeypatch.setattr(batch, "TABLE_WRITE_GAP_FACTOR", 0.0)
    every = run_batch(m, tmp_path / "every", workers=0, progress=False, table_interval=1e-6)
    assert writes == [1, 2, 3]
    _assert_same_table(slow, every)


def test_signals_deferred_until_the_commit_ends():
    """A SIGINT inside the deferred block (a commit) is acted on when it
    ends, not in the middle -- also when a helper thread, not the main
    one, is the thread the operating system hands the signal to."""
    import threading

    from edgefit.analysis.batch import _signals_deferred

    steps = []
    go = threading.Event()

    def helper():   # started before the block, like the process pool's threads
        go.wait()
        os.kill(os.getpid(), signal.SIGINT)

    # Python's own SIGINT handler, whatever the test run inherited (a shell
    # starts background jobs with SIGINT ignored, and an ignored signal is
    # rightly left ignored by the deferred block)
    inherited = signal.signal(signal.SIGINT, signal.default_int_handler)
    t = threading.Thread(target=helper)
    t.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            with _signals_deferred():
                go.set()
                t.join()
                for _ in range(1000):   # give the interpreter many chances to run handlers
                    steps.append(1)
                steps.append("end of the commit")
        assert steps[-1] == "end of the commit" and len(steps) == 1001
        assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    finally:
        signal.signal(signal.SIGINT, inherited)



def test_signals_deferred_leaves_an_ignored_signal_ignored():
    """A run started with SIGINT ignored (``nohup``, a background job of a
    shell) is not interrupted by one arriving during a commit, and the
    ignore disposition is restored afterwards."""
    from edgefit.analysis.batch import _signals_deferred

    inherited = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        with _signals_deferred():
            os.kill(os.getpid(), signal.SIGINT)   # noted, not acted on yet
            done = True
        assert done and signal.getsignal(signal.SIGINT) == signal.SIG_IGN
    finally:
        signal.signal(signal.SIGINT, inherited)

def _count_finished(out):
    d = out / "sightlines"
    return sum(1 for p in d.glob("*/row.json")) if d.is_dir() else 0


def _wait_for_finished(proc, out, n, what):
    """Poll until ``n`` sightline folders exist in ``out`` while the batch
    subprocess runs (no fixed sleeps: a loaded machine only makes it
    slower).  Fails clearly when the batch ends first or after 30 minutes
    (a hang, not slowness)."""
    deadline = time.monotonic() + 1800
    while _count_finished(out) < n:
        if proc.poll() is not None:
            pytest.fail(f"the batch ended (status {proc.returncode}) before it could be "
                        f"{what}: {proc.stderr.read() if proc.stderr else ''}")
        if time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"no {n} finished sightlines after 30 minutes")
        time.sleep(0.02)



def _sigint_default():
    """In a child before it runs: SIGINT back to the system default."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)

@pytest.mark.long
def test_sigint_then_resume_equals_uninterrupted_run(tmp_path):
    m = write_sample(tmp_path, n=8, **FAST)
    out = tmp_path / "interrupted"
    cmd = [sys.executable, "-c", "import sys; from edgefit.cli import main; "
           "sys.exit(main(sys.argv[1:]))", "batch", str(m), "-o", str(out), "--workers", "2",
           "--no-plots", "-q"]
    # the child starts as from a terminal, with SIGINT at the system default
    # (a test run started as a background job would pass on SIGINT ignored)
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=_sigint_default)
    _wait_for_finished(proc, out, 2, "interrupted")
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=1800)
    assert proc.returncode == 130, err
    msg = err.strip().splitlines()[-1]
    done = _count_finished(out)
    assert 2 <= done < 8
    assert f"interrupted: {done} of 8 sightlines finished" in msg and "to resume" in msg
    assert not (out / ".work").exists()          # nothing half-written left
    part = read_sample_table(out)
    assert len(part) == done and list(part["status"]) == ["ok"] * done
    # resume with the same command
    cmd_rerun = cmd[:-1] + ["-q"]
    rerun = subprocess.run(cmd_rerun, capture_output=True, text=True, timeout=1800)
    assert rerun.returncode == 0, rerun.stderr
    resumed = read_sample_table(out)
    full = run_batch(m, tmp_path / "uninterrupted", workers=2, progress=False)
    _assert_same_table(resumed, full)
    assert list(resumed["name"]) == [f"SIM-B{i:02d}" for i in range(1, 9)]
    rows = [json.loads(p.read_text()) for p in sorted((out / "sightlines").glob("*/row.json"))]
    assert len(rows) == 8 and len({r["name"] for r in rows}) == 8


def test_sigterm_keeps_finished_and_says_how_to_resume(tmp_path):
    m = write_sample(tmp_path, n=6, **FAST)
    out = tmp_path / "out"
    cmd = [sys.executable, "-c", "import sys; from edgefit.cli import main; "
           "sys.exit(main(sys.argv[1:]))", "batch", str(m), "-o", str(out), "--workers", "0",
           "--no-plots", "-q"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    _wait_for_finished(proc, out, 1, "stopped")
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=1800)
    assert proc.returncode == 128 + signal.SIGTERM, err
    done = _count_finished(out)
    msg = err.strip().splitlines()[-1]
    assert f"interrupted: {done} of 6 sightlines finished" in msg
    assert f"edgefit batch {m} -o {out}" in msg and "--no-plots" in msg
    assert not (out / ".work").exists() and len(read_sample_table(out)) == done
