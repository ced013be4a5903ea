"""Every function a subpackage exports (its ``__all__``) carries type hints
on all its parameters and its return value (PEP 484, 2014), so that
``mypy edgefit`` (run by CI) checks callers of the public API too.  Classes
are checked by mypy itself; this test guards the functions, whose missing
hints mypy would silently accept."""
from __future__ import annotations

import importlib
import inspect

import pytest

SUBPACKAGES = ["edgefit", "edgefit.data", "edgefit.physics", "edgefit.dust", "edgefit.models",
               "edgefit.inference", "edgefit.analysis", "edgefit.plotting", "edgefit.cli",
               "edgefit.demo", "edgefit.report"]


@pytest.mark.parametrize("package", SUBPACKAGES)
def test_exported_functions_are_fully_annotated(package):
    module = importlib.import_module(package)
    exported = [getattr(module, name) for name in getattr(module, "__all__", [])]
    functions = [f for f in exported if inspect.isfunction(f)]
    missing = []
    for f in functions:
        sig = inspect.signature(f)
        bare = [p for p, v in sig.parameters.items()
                if v.annotation is inspect.Parameter.empty and p not in ("self", "cls")]
        if bare or sig.return_annotation is inspect.Signature.empty:
            missing.append(f"{f.__module__}.{f.__qualname__} ({', '.join(bare) or 'return'})")
    assert not missing, "exported functions without full type hints: " + "; ".join(missing)


def test_the_check_sees_the_main_entry_points():
    # the test above must not pass vacuously: the fit and batch entry points are among them
    names = {f.__name__ for p in SUBPACKAGES for f in
             (getattr(importlib.import_module(p), n) for n in
              getattr(importlib.import_module(p), "__all__", []))
             if inspect.isfunction(f)}
    assert {"fit_sightline", "run_batch", "read_pha", "regress"} <= names
