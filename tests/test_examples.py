"""Every script in examples/ runs with its reduced settings (--quick) and
prints what it promises; every command answers --help.

These are smoke tests of runnable documentation; the numbers the scripts
print are checked elsewhere (simulate/plan/demo tests).  One physics check
is made where the example makes a claim: compare_sizes must prefer the
family that contains the simulated truth (MRN with a free upper size) by
Delta AIC > 2 (Burnham & Anderson 2002, "substantial support" rule of
thumb: common practice).  The scripts that fit a batch or run simulated
fits for a plan (batch_regression, compare_sizes, plan_observation) take
a minute or more each, so they are marked ``long``; the single-sightline
and laboratory-material scripts stay in the default suite."""
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from edgefit.cli import COMMAND_MODULES, main

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"


def _run(script, tmp_path, *extra):
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, str(EXAMPLES / script), "--quick", "-o",
                           str(tmp_path / "out"), *extra], capture_output=True, text=True,
                          env=env, timeout=600, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stdout


@pytest.mark.slow
def test_one_sightline_example(tmp_path):
    out = _run("one_sightline.py", tmp_path)
    assert "gas_si_col" in out and (tmp_path / "out" / "fit.ecsv").is_file()


@pytest.mark.long
def test_batch_regression_example(tmp_path):
    out = _run("batch_regression.py", tmp_path, "--workers", "2")
    assert "total Si per H (ODR slope)" in out
    assert (tmp_path / "out" / "batch" / "sample.ecsv").is_file()


@pytest.mark.long
def test_compare_sizes_example_prefers_the_true_family(tmp_path):
    out = _run("compare_sizes.py", tmp_path)
    row = next(line for line in out.splitlines() if line.startswith("MRN, upper size free"))
    daic = float(row.split()[-4])
    assert daic == 0.0
    others = [float(line.split()[-4]) for line in out.splitlines()
              if re.match(r"(MRN up to|single size)", line)]
    assert len(others) == 3 and min(others) > 2.0


@pytest.mark.slow
def test_lab_material_example(tmp_path):
    out = _run("lab_material.py", tmp_path)
    assert "invented" in out and (tmp_path / "out" / "lab_material.png").stat().st_size > 5000


@pytest.mark.long
def test_plan_example(tmp_path):
    out = _run("plan_observation.py", tmp_path, "--workers", "1")
    assert out.count("planning the Si edge") == 2 and "cannot separate" in out


@pytest.mark.parametrize("command", [c.replace("_", "-") for c in COMMAND_MODULES])
def test_every_command_has_help(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    assert exc.value.code == 0
    assert "usage: edgefit" in capsys.readouterr().out
