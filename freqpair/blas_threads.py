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
from contextlib import contextmanager

__all__ = ["single_blas_thread"]

_lock = threading.Lock()
_depth = 0
_limiter = None
_controller = None


def _blas_controller():
    """The process's threadpoolctl controller (found once; scanning costs ms)."""
    global _controller
    if _controller is None:
        from threadpoolctl import ThreadpoolController
        _controller = ThreadpoolController()
    return _controller


@contextmanager
def single_blas_thread():
    """Context manager: BLAS uses one thread inside the block.

    Nested or concurrent use is cheap (a counter under a lock); the original
    thread counts are restored when the outermost block ends.
    """
    global _depth, _limiter
    with _lock:
        if _depth == 0:
            _limiter = _blas_controller().limit(limits=1, user_api="blas")
        _depth += 1
    try:
        yield
    finally:
        with _lock:
            _depth -= 1
            if _depth == 0:
                limiter, _limiter = _limiter, None
                limiter.restore_original_limits()
