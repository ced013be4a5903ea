"""Dependencies run one way: each module imports only its own layer and
the layers below (DEVELOPERS.md, "Architecture").  The package is parsed
with Python's ``ast``; imports inside functions count too.  No physics
or statistics value is checked here."""
from __future__ import annotations

import ast
from pathlib import Path

import edgefit

ROOT = Path(edgefit.__file__).parent

#: top-level module or subpackage -> layer
LAYERS = {
    "_paths": 0, "_units": 0, "errors": 0, "grid": 0, "_jit": 0, "_threads": 0, "params": 0,
    "data": 1, "stats": 1, "_foldstat": 1,
    "physics": 2, "dust": 2,
    "models": 3,
    "inference": 4,
    "analysis": 5,
    "cli": 6, "plotting": 6, "demo": 6, "config": 6, "report": 6,
}

#: (importing file, imported module) pairs allowed to point upward, each a
#: lazy compatibility alias that runs only when the old name is used.
ALIASES = {
    ("data/__init__.py", "cli.inspect"),
    ("data/ogip/__init__.py", "cli.inspect"),
}


def _targets(node, package):
    if isinstance(node, ast.ImportFrom):
        if node.level:
            base = package[:len(package) - node.level + 1]
            mod = base + (node.module.split(".") if node.module else [])
            return [mod] if node.module else [mod + [a.name] for a in node.names]
        if node.module and node.module.split(".")[0] == "edgefit":
            return [node.module.split(".")[1:]]
    elif isinstance(node, ast.Import):
        return [a.name.split(".")[1:] for a in node.names if a.name.startswith("edgefit.")]
    return []


def upward_imports(root=ROOT):
    out = []
    for path in sorted(root.rglob("*.py")):
        rel = path.relative_to(root)
        head = rel.parts[0].removesuffix(".py")
        if head == "__init__":
            continue                      # the top-level package may import anything
        mine = LAYERS[head]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            for target in _targets(node, list(rel.parts[:-1])):
                if not target or target[0] not in LAYERS:
                    continue
                if LAYERS[target[0]] > mine and (rel.as_posix(), ".".join(target)) not in ALIASES:
                    out.append(f"{rel.as_posix()}:{node.lineno} (layer {mine}) imports "
                               f"{'.'.join(target)} (layer {LAYERS[target[0]]})")
    return out


def test_every_module_has_a_layer():
    heads = {p.relative_to(ROOT).parts[0].removesuffix(".py") for p in ROOT.rglob("*.py")}
    assert heads - {"__init__"} <= set(LAYERS), heads - set(LAYERS)


def test_imports_point_down(tmp_path):
    assert upward_imports() == []
    # the checker sees a violation (a physics module importing inference)
    (tmp_path / "physics").mkdir()
    (tmp_path / "physics" / "bad.py").write_text("def f():\n    from ..inference import fit\n")
    assert len(upward_imports(tmp_path)) == 1


def _numba_imports_outside_builders(root=ROOT):
    """numba imports anywhere but edgefit/_jit.py and the kernel builders
    (functions decorated with ``_jit.kernels``)."""
    out = []
    for path in sorted(root.rglob("*.py")):
        rel = path.relative_to(root).as_posix()
        if rel == "_jit.py":
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        allowed = set()
        for fn in ast.walk(tree):
            if isinstance(fn, ast.FunctionDef) and any(
                    ast.unparse(d) in ("_jit.kernels", "kernels") for d in fn.decorator_list):
                allowed.update(id(n) for n in ast.walk(fn))
        for node in ast.walk(tree):
            mods = ([a.name for a in node.names] if isinstance(node, ast.Import) else
                    [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            if any(m.split(".")[0] == "numba" for m in mods) and id(node) not in allowed:
                out.append(f"{rel}:{node.lineno}")
    return out


def test_numba_is_loaded_only_through_jit(tmp_path):
    """One numba loader (edgefit/_jit.py): other modules compile their
    kernels in a builder decorated with ``@_jit.kernels``."""
    assert _numba_imports_outside_builders() == []
    (tmp_path / "rogue.py").write_text("def f():\n    import numba\n    return numba\n")
    (tmp_path / "fine.py").write_text("@_jit.kernels\ndef k():\n"
                                      "    from numba.extending import register_jitable\n")
    assert _numba_imports_outside_builders(tmp_path) == ["rogue.py:2"]
