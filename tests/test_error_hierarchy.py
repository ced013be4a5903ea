"""Every error edgefit raises on purpose belongs to its own hierarchy.

The package's source is parsed (Python's ``ast``, so multi-line and
parenthesised raises are seen too) and every ``raise`` of a bare built-in
``ValueError`` / ``ImportError`` (or their file-related relatives) fails the
test: bad input and bad arguments raise an ``EdgefitError`` subclass
(``ArgumentError``, ``InputFileError`` ... which subclass ``ValueError``
where that reads naturally), and a missing optional package raises
``MissingDependencyError`` (an ``ImportError``) everywhere.

The rule is the project's own convention (DEVELOPERS.md); no physics or
statistics value is checked here.
"""
from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest

import edgefit
from edgefit import errors

PACKAGE = Path(edgefit.__file__).parent
BARE = {"ValueError", "ImportError", "ModuleNotFoundError", "FileNotFoundError", "TypeError"}


def _bare_raises(path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Raise) and node.exc is not None:
            exc = node.exc.func if isinstance(node.exc, ast.Call) else node.exc
            if isinstance(exc, ast.Name) and exc.id in BARE:
                yield f"{path}:{node.lineno}: raise {exc.id}"


def test_no_bare_builtin_raises_in_the_package():
    found = [hit for path in sorted(PACKAGE.rglob("*.py")) for hit in _bare_raises(path)]
    assert len(list(PACKAGE.rglob("*.py"))) > 30     # the scan sees the package
    assert not found, "raise an edgefit.errors class instead:\n" + "\n".join(found)


def test_the_scan_catches_a_bare_raise(tmp_path):
    # the checker itself: a file with both forms is reported twice
    bad = tmp_path / "probe.py"
    bad.write_text("def f(x):\n    if x:\n        raise ValueError(\n            'x')\n"
                   "    raise ImportError\n")
    assert len(list(_bare_raises(bad))) == 2


def test_hierarchy_shape():
    for name in errors.__all__:
        cls = getattr(errors, name)
        assert issubclass(cls, (errors.EdgefitError, errors.EdgefitWarning)), name
    assert issubclass(errors.ArgumentError, ValueError)
    assert issubclass(errors.MissingDependencyError, ImportError)
    assert issubclass(errors.MissingFileError, errors.InputFileError)


def test_missing_accelerator_is_one_error_type(monkeypatch):
    """Asking for the numba back end without numba raises the same
    MissingDependencyError from the Mie and the line kernels."""
    from edgefit import _jit
    from edgefit.dust import mie
    from edgefit.physics import voigt

    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert _jit.numba_module() is None and not mie.numba_available()
    with pytest.raises(errors.MissingDependencyError, match="numba"):
        mie.mie_efficiencies(1.5, 2.0, backend="numba")
    grid = voigt.line_grid(np.array([1.9]), np.array([2.1]))
    with pytest.raises(errors.MissingDependencyError, match="numba"):
        voigt.grid_transmission(grid, np.array([2.0]), np.array([1e-4]), np.array([3e-4]),
                                np.array([1e-5]), backend="numba")
    with pytest.raises(errors.MissingDependencyError, match="numba"):
        _jit.jit(lambda x: x)


def test_argument_errors_are_edgefit_errors():
    from edgefit import stats
    from edgefit.data import group_min_counts

    with pytest.raises(errors.ArgumentError):
        stats.chi_square(np.ones(3), np.ones(3), variance="nonsense")
    with pytest.raises(errors.EdgefitError):
        group_min_counts(np.ones(3), 0)
