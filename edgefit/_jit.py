"""The one place edgefit loads numba.

numba is optional at run time: every compiled kernel has a NumPy path that
runs the same algorithm.  Modules with kernels declare a *builder* -- a
function that compiles their kernels with :func:`jit` and returns them --
and decorate it with :func:`kernels`; calling the decorated function gives
the compiled kernels (built once per process, numba's on-disk cache making
later processes quick), or None when numba is not importable or the
environment variable ``EDGEFIT_NO_NUMBA`` is set (checked on every call, so
a test or a user can switch numba off at any time).  Asking for numba
explicitly where it is missing is one error,
:class:`~edgefit.errors.MissingDependencyError`, everywhere.

No module-level mutable state: the import attempt and each builder's result
are cached by :func:`functools.lru_cache`.
"""
from __future__ import annotations

import functools
import os
import types
from typing import Any, Callable, TypeVar

from .errors import MissingDependencyError

__all__ = ["numba_module", "disabled", "jit", "kernels", "require", "fma"]

T = TypeVar("T")


_ENV_NAME = "EDGEFIT_NO_NUMBA"
# os.environ.get of a missing name raises and catches a KeyError inside
# (about 1 us, and the kernels are looked up several times per likelihood
# evaluation); CPython's os.environ keeps its encoded entries in a plain
# dict, updated by every assignment and deletion, which is read directly
# while os.environ is the object seen at import
_ENVIRON = os.environ
_ENV_DATA = getattr(os.environ, "_data", None)
try:
    _ENV_KEY: Any = os.environ.encodekey(_ENV_NAME)
except AttributeError:  # pragma: no cover - not CPython's os.environ
    _ENV_DATA = None


def disabled() -> bool:
    """True when ``EDGEFIT_NO_NUMBA`` is set to a non-empty value."""
    if _ENV_DATA is not None and os.environ is _ENVIRON:
        return bool(_ENV_DATA.get(_ENV_KEY))
    return bool(os.environ.get(_ENV_NAME))


@functools.lru_cache(maxsize=1)
def _import_numba():
    try:
        import numba
    except ImportError:
        return None
    return numba


def numba_module():
    """The numba module, or None when it cannot be imported or
    ``EDGEFIT_NO_NUMBA`` is set."""
    return None if disabled() else _import_numba()


def require(what: str):
    """The numba module, or MissingDependencyError saying that ``what``
    needs it."""
    nb = numba_module()
    if nb is None:
        raise MissingDependencyError(
            f"{what} needs numba, which is not available (pip install numba, or unset "
            "EDGEFIT_NO_NUMBA)")
    return nb


def jit(func: Callable, *, parallel: bool = False, globals: dict | None = None,
        **options) -> Any:
    """``numba.njit(func)`` with the on-disk cache where it can be written
    (compile-only otherwise).  ``globals`` gives names that ``func`` reads
    from its module a value for this compilation only (e.g. ``numba.prange``
    for a loop that is a plain ``range`` in Python, or the compiled version
    of a helper): ``func`` is rebuilt on a copy of its module's namespace,
    which is never modified.  Other ``options`` (e.g. ``nogil=True``) go to
    ``numba.njit``.

    numba's on-disk cache tells the compiled versions of one Python function
    apart by argument types and bytecode only -- not by ``parallel``,
    ``globals`` or other options -- so compile each function one way only:
    two builds of the same function load whichever was cached last."""
    nb = require(getattr(func, "__name__", "a compiled kernel"))
    if globals:
        func = types.FunctionType(func.__code__, {**func.__globals__, **globals},
                                  func.__name__, func.__defaults__, func.__closure__)
    try:
        return nb.njit(cache=True, parallel=parallel, **options)(func)
    except RuntimeError:      # no writable cache location: compile only
        return nb.njit(parallel=parallel, **options)(func)


def kernels(builder: Callable[[], T]) -> Callable[..., T | None]:
    """Decorator for a module's kernel builder.

    The decorated function, called as ``get()`` returns the builder's
    result (built once per process) or None when numba is unavailable;
    ``get(required=True)`` raises MissingDependencyError instead of
    returning None."""
    cached = functools.lru_cache(maxsize=1)(builder)

    @functools.wraps(builder)
    def get(required: bool = False):
        if numba_module() is None:
            if required:
                require("backend='numba'")
            return None
        return cached()

    get.cache_clear = cached.cache_clear  # type: ignore[attr-defined]
    return get


@functools.lru_cache(maxsize=1)
def _build_fma():
    nb = require("the fused multiply-add")
    from llvmlite import ir  # type: ignore[import-untyped]
    from numba.core import types as nbtypes
    from numba.extending import intrinsic

    @intrinsic
    def fma(typingctx, a, b, c):
        sig = nbtypes.float64(nbtypes.float64, nbtypes.float64, nbtypes.float64)

        def codegen(context, builder, signature, args):
            f64 = ir.DoubleType()
            fn = builder.module.declare_intrinsic(
                "llvm.fma", [f64], ir.FunctionType(f64, [f64, f64, f64]))
            return builder.call(fn, args)
        return sig, codegen

    del nb
    return fma


def fma() -> Any:
    """A numba intrinsic ``fma(a, b, c)`` = :math:`ab + c` with one rounding
    (LLVM's ``llvm.fma.f64``), for compiled kernels that must repeat, to
    the last bit, an array operation NumPy performs with fused
    multiply-adds (its complex products on x86-64 with FMA3).  Only
    usable inside compiled code; pass it to :func:`jit` in ``globals``."""
    return _build_fma()
