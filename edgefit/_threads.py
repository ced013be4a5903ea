"""One BLAS thread for the fitters' small dense linear algebra.

The minimisers factorise Jacobians of a few thousand residuals by a few
parameters (an SVD per trust-region step).  A multi-threaded BLAS gains
nothing on matrices this thin, and on a busy machine its threads wait for
each other: an economy SVD of a 2,400 x 7 matrix was measured at ~20 ms
with two OpenBLAS threads on a loaded two-core machine against ~0.5-1 ms
with one.  :func:`single_blas_thread` limits the BLAS pools (through
threadpoolctl) for the duration of a minimisation; without threadpoolctl
it does nothing.  The controller is built once per process.
"""
from __future__ import annotations

import contextlib
import functools
from typing import Any, ContextManager

__all__ = ["single_blas_thread"]


@functools.lru_cache(maxsize=1)
def _controller() -> Any:
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # optional at run time: same numbers, maybe slower
        return None
    return ThreadpoolController()


def single_blas_thread() -> ContextManager[Any]:
    """Context manager: BLAS libraries limited to one thread inside."""
    c = _controller()
    if c is None:
        return contextlib.nullcontext()
    return c.limit(limits=1, user_api="blas")
