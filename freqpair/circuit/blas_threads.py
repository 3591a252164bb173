"""One BLAS thread while the core works on its small matrices.

The core's linear algebra is tiny (matrices of about ten unknowns, products
with a few thousand columns). On a machine whose cores are busy, OpenBLAS
worker threads that must be woken for such calls turn a 3 ms analysis into a
12 ms median with 40 ms spikes (measured, benchmarks/bench_core.py); one
thread is never slower at these sizes. :func:`single_blas_thread` limits BLAS
to one thread for the duration of a block and restores the previous setting
afterwards.

The BLAS thread count is process-wide (OpenBLAS keeps one pool), so the
limit is reference-counted over all threads under a lock: the first block to
open (in any thread) records the current counts and sets one thread; the last
to close restores what was recorded. Nested and concurrent blocks cost only a
counter. threadpoolctl lets one Python thread at a time change OpenBLAS (the
first to do so, while it lives); control is released before each change, so
the thread that opens or closes the outermost block can make it.
"""
from __future__ import annotations

import threading
from contextlib import ContextDecorator

__all__ = ["single_blas_thread"]

_lock = threading.Lock()
_state = {"controller": None, "limiter": None, "open": 0}


def _release_control():
    """Let this thread change OpenBLAS limits (threadpoolctl keeps the first
    thread that changed them in control while that thread lives)."""
    try:
        from threadpoolctl import OpenBLASController
    except ImportError:       # older threadpoolctl: no controlling thread
        return
    OpenBLASController.clear_controlling_thread(force=True)


class single_blas_thread(ContextDecorator):   # noqa: N801 (used like a function)
    """Context manager (or decorator): BLAS uses one thread inside the block.

    The counts in force before the first open block are restored when the last
    open block (in any thread) ends.
    """

    def __enter__(self):
        with _lock:
            if _state["open"] == 0:
                if _state["controller"] is None:    # found once (scanning costs ms)
                    from threadpoolctl import ThreadpoolController
                    _state["controller"] = ThreadpoolController()
                _release_control()
                _state["limiter"] = _state["controller"].limit(limits=1, user_api="blas")
            _state["open"] += 1
        return self

    def __exit__(self, *exc):
        with _lock:
            _state["open"] -= 1
            if _state["open"] == 0:
                limiter, _state["limiter"] = _state["limiter"], None
                _release_control()
                limiter.restore_original_limits()
                _release_control()
        return False
