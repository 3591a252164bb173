"""One BLAS thread while the core works on its small matrices.

The core's linear algebra is tiny (matrices of about ten unknowns, products
with a few thousand columns). On a machine whose cores are busy, OpenBLAS
worker threads that must be woken for such calls turn a 3 ms analysis into a
12 ms median with 40 ms spikes (measured, benchmarks/bench_core.py); one
thread is never slower at these sizes. :func:`single_blas_thread` limits BLAS
to one thread for the duration of a block and restores the previous setting
afterwards.

The BLAS thread count is process-wide (OpenBLAS keeps one pool), so the limit
is reference-counted under a lock: nested and concurrent blocks in several
threads share one limit, set by the first to enter and restored by the last to
leave. While any block is open, other BLAS work in the process also runs on
one thread.
"""
from __future__ import annotations

import threading
from contextlib import ContextDecorator

__all__ = ["single_blas_thread"]

_lock = threading.Lock()
_state = {"depth": 0, "limiter": None, "controller": None}


def _blas_controller():
    """The process's threadpoolctl controller (found once; scanning costs ms)."""
    if _state["controller"] is None:
        from threadpoolctl import ThreadpoolController
        _state["controller"] = ThreadpoolController()
    return _state["controller"]


class single_blas_thread(ContextDecorator):   # noqa: N801 (used like a function)
    """Context manager (or decorator): BLAS uses one thread inside the block.

    Nested or concurrent use is cheap (a counter under a lock); the original
    thread counts are restored when the outermost block ends.
    """

    def __enter__(self):
        with _lock:
            if _state["depth"] == 0:
                _state["limiter"] = _blas_controller().limit(limits=1, user_api="blas")
            _state["depth"] += 1
        return self

    def __exit__(self, *exc):
        with _lock:
            _state["depth"] -= 1
            if _state["depth"] == 0:
                limiter, _state["limiter"] = _state["limiter"], None
                limiter.restore_original_limits()
        return False
