"""The Python example in README.md runs as written (on the simulated demo
sightline, with a shorter chain) and recovers the simulated Si columns.

Reference: the invented truth of the simulated sightline
(edgefit.demo.TRUTH); tolerance 4 sigma of the 68 % profile-likelihood
interval (Delta C = 1 for one parameter, Wilks 1938, Ann. Math. Stat. 9,
60; normal tails; seeded simulation, so deterministic).
"""
import re
from pathlib import Path

import pytest

from edgefit.demo import TRUTH, write_sightline
from edgefit.errors import ShortChainWarning

README = Path(__file__).resolve().parents[1] / "README.md"


def _python_blocks():
    return re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), re.S)


def test_readme_python_example_runs(tmp_path, monkeypatch):
    code = _python_blocks()[0]   # the one-sightline example (batch: test_batch; tied edges: test_multi_edge)
    write_sightline(tmp_path / "examples" / "amber_loom")
    assert "nsteps=3000" in code
    code = code.replace("nsteps=3000", "nsteps=150").replace("progress=True", "progress=False")
    monkeypatch.chdir(tmp_path)
    namespace = {}
    with pytest.warns(ShortChainWarning):  # 150 steps is deliberately short here
        exec(compile(code, str(README), "exec"), namespace)  # our own README, not user input
    result = namespace["result"]
    assert (tmp_path / "my-results" / "fit.ecsv").is_file()
    for name in ("gas_si_col", "dust_col"):
        iv = result.intervals[name]
        level = min(iv, key=lambda lv: abs(lv - 0.6827))
        lo, hi = iv[level].lower, iv[level].upper
        best = result.params[name].value
        half = (hi - best) if TRUTH[name] > best else (best - lo)
        assert abs(best - TRUTH[name]) < 4.0 * half, (name, best, lo, hi)
