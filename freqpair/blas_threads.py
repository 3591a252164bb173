"""One BLAS thread while the core works on its small matrices.

The core's linear algebra is tiny (matrices of about ten unknowns, products
with a few thousand columns). On a machine whose cores are busy, OpenBLAS
worker threads that must be woken for such calls turn a 3 ms analysis into a
12 ms median with 40 ms spikes (measured, benchmarks/bench_core.py); one
thread is never slower at these sizes. :func:`single_blas_thread` limits BLAS
to one thread for the duration of a block and restores the previous setting
afterwards.

The BLAS thread count is process-wide (OpenBLAS keeps one pool), and
threadpoolctl lets one Python thread at a time control it: the first thread
to open a block sets the limit and restores it when its outermost block ends;
blocks opened meanwhile in other threads change nothing (they run with
whatever count is in force, so their results may differ from a one-thread run
in the last bits). Nested blocks in one thread cost only a counter.
"""
from __future__ import annotations

import threading
from contextlib import ContextDecorator

__all__ = ["single_blas_thread"]

_controller_lock = threading.Lock()
_controller = []          # the threadpoolctl controller, found once (scanning costs ms)
_local = threading.local()  # per thread: nesting depth and the open limiter


def _blas_controller():
    with _controller_lock:
        if not _controller:
            from threadpoolctl import ThreadpoolController
            _controller.append(ThreadpoolController())
        return _controller[0]


class single_blas_thread(ContextDecorator):   # noqa: N801 (used like a function)
    """Context manager (or decorator): BLAS uses one thread inside the block.

    The previous thread counts are restored when the outermost block of the
    controlling thread ends; nested blocks are cheap.
    """

    def __enter__(self):
        depth = getattr(_local, "depth", 0)
        if depth == 0:
            limiter = _blas_controller().limit(limits=1, user_api="blas")
            limiter.__enter__()
            _local.limiter = limiter
        _local.depth = depth + 1
        return self

    def __exit__(self, *exc):
        _local.depth -= 1
        if _local.depth == 0:
            limiter, _local.limiter = _local.limiter, None
            limiter.__exit__(None, None, None)
        return False
