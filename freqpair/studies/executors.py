"""Where chunked work runs: in this process, or on a Dask cluster.

Sweeps, targets over grids and Monte Carlo split their work into chunks, each
a pure function call (e.g. :func:`freqpair.studies.montecarlo.run_chunk`). An
executor runs those calls and hands the results back **in chunk order**,
whatever order they finish in, so a run gives the same answer on any
executor. Two executors share one method, :meth:`map_chunks`:

- :class:`LocalExecutor` (the default): one chunk after another in this
  process, each a batched computation.
- :class:`DaskExecutor`: the chunks become tasks on a ``dask.distributed``
  cluster (a scheduler address such as ``"tcp://10.0.0.5:8786"`` or a
  ``Client`` made by the caller). The cluster's own scheduler places them,
  retries the tasks of a worker that dies, and returns the results; freqpair
  adds nothing of its own to that machinery. Tasks are submitted as earlier
  ones are handed back, a bounded window at a time, so the client holds only
  a few results whatever the number of chunks.

``dask[distributed]`` is an optional extra (``pip install "freqpair[cluster]"``)
and is imported only when a :class:`DaskExecutor` is made.
"""
from __future__ import annotations

import math
from typing import Any, Callable, Iterable, Iterator, Sequence

from freqpair.design.errors import FreqpairError

__all__ = ["Executor", "LocalExecutor", "DaskExecutor", "ClusterError", "get_executor",
           "INSTALL_HINT", "WORKER_ENV", "chunk_ranges", "iter_chunks", "run_chunks"]

INSTALL_HINT = 'dask[distributed] is not installed: pip install "freqpair[cluster]"'

#: Environment recommended for Dask workers running freqpair chunks. Dask's nanny
#: sets ``MALLOC_TRIM_THRESHOLD_``, which switches off glibc's adaptive mmap
#: threshold, so every large temporary array is a fresh mmap: measured 2–3× slower
#: Monte Carlo chunks. A fixed 32 MiB mmap threshold restores the speed.
WORKER_ENV = {"MALLOC_MMAP_THRESHOLD_": "33554432"}


class ClusterError(FreqpairError, RuntimeError):
    """The cluster cannot be used (not installed, unreachable, bad address)."""


class Executor:
    """Common shape of the executors (see the module docstring)."""

    #: number of chunks run at once (worker threads); 1 for the local executor
    slots: int = 1

    def chunk_size(self, n_items: int, preferred: int) -> int:
        """Items per chunk for ``n_items`` items, at most ``preferred`` (a memory bound)."""
        return max(1, int(preferred))

    def map_chunks(self, func: Callable, chunk_args: Iterable[tuple],
                   progress: Callable[[int], None] | None = None,
                   ordered: bool = True) -> Iterator[Any]:
        """Run ``func(*args)`` for every ``args`` in ``chunk_args``.

        Parameters
        ----------
        func : callable
            A pure, importable (module-level) function.
        chunk_args : iterable of tuple
            Positional arguments of each chunk; read lazily, as chunks are
            started, so a generator keeps a long run's arguments out of memory.
        progress : callable, optional
            Called with the chunk's position in ``chunk_args`` as each chunk
            finishes (completion order).
        ordered : bool
            Results in the order of ``chunk_args`` (default), or as they finish
            (for reductions whose merge does not depend on the order).

        Returns
        -------
        iterator
            The results. Only a bounded number of chunks is pending or held at
            any time (see :class:`DaskExecutor`).
        """
        raise NotImplementedError

    def close(self) -> None:
        """Release what this executor opened (nothing for the local one)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class LocalExecutor(Executor):
    """Run chunks one after another in this process (the default)."""

    def map_chunks(self, func, chunk_args, progress=None, ordered=True):
        for i, args in enumerate(chunk_args):
            out = func(*args)
            if progress is not None:
                progress(i)
            yield out

    def __repr__(self):
        return "LocalExecutor()"


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise ClusterError(INSTALL_HINT) from None
    return distributed


class DaskExecutor(Executor):
    """Run chunks as tasks on a ``dask.distributed`` cluster.

    Parameters
    ----------
    client_or_address : distributed.Client or str
        A connected client (left open by :meth:`close`), or a scheduler
        address such as ``"tcp://host:8786"`` (the client made for it is
        closed by :meth:`close`).
    chunks_per_slot : int
        Aim for at least this many chunks per worker thread, so a slow or
        lost worker delays only a small part of the run.
    min_chunk : int
        Smallest chunk (items) worth a task.
    timeout_s : float
        Connection timeout [s] when an address is given.

    Notes
    -----
    Workers must be able to import ``freqpair`` (the same version as the
    client): the tasks name its functions, they do not ship its code. At most
    :attr:`window` chunks are submitted and not yet handed back (an ordered
    run's results waiting for an earlier chunk count against it).
    """

    def __init__(self, client_or_address, chunks_per_slot: int = 4, min_chunk: int = 256,
                 timeout_s: float = 10.0):
        distributed = _import_distributed()
        if isinstance(client_or_address, str):
            address = client_or_address.strip()
            if "://" not in address or not address.split("://", 1)[1]:
                raise ClusterError(f"scheduler = {client_or_address!r}: expected an address "
                                   "like tcp://host:8786")
            try:
                self.client = distributed.Client(address, timeout=timeout_s,
                                                 set_as_default=False)
            except (OSError, TimeoutError, ValueError) as exc:
                msg = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
                raise ClusterError(f"scheduler = {address!r}: cannot connect ({msg})") from None
            self._owns = True
        elif isinstance(client_or_address, distributed.Client):
            self.client = client_or_address
            self._owns = False
        else:
            raise ClusterError(f"client_or_address = {client_or_address!r}: give a "
                               "distributed.Client or a scheduler address (tcp://host:port)")
        if not (isinstance(chunks_per_slot, int) and chunks_per_slot >= 1):
            raise ClusterError(f"chunks_per_slot = {chunks_per_slot!r}: must be a whole number ≥ 1")
        if not (isinstance(min_chunk, int) and min_chunk >= 1):
            raise ClusterError(f"min_chunk = {min_chunk!r}: must be a whole number ≥ 1")
        self.chunks_per_slot = chunks_per_slot
        self.min_chunk = min_chunk

    @property
    def slots(self) -> int:
        """Worker threads currently on the cluster (at least 1)."""
        info = self.client.scheduler_info()
        return max(1, sum(w.get("nthreads", 1) for w in info.get("workers", {}).values()))

    def chunk_size(self, n_items, preferred):
        """Enough chunks to keep every worker thread busy, none above ``preferred``."""
        want = math.ceil(n_items / (self.slots * self.chunks_per_slot))
        return max(1, min(int(preferred), max(self.min_chunk, want)))

    @property
    def window(self) -> int:
        """Most chunks submitted and not yet handed back (running, queued or, in an
        ordered run, waiting for an earlier chunk): two per wanted chunk per
        worker thread, so the workers stay busy while the client holds few results."""
        return max(4, 2 * self.slots * self.chunks_per_slot)

    def map_chunks(self, func, chunk_args, progress=None, ordered=True):
        distributed = _import_distributed()
        todo = enumerate(chunk_args)
        window = self.window
        live: dict[int, Any] = {}            # position → future, submitted and not yet read
        index: dict[str, int] = {}
        done: dict[int, Any] = {}            # finished, waiting for an earlier chunk (ordered)
        finished = distributed.as_completed([], loop=self.client.loop)
        nxt = 0

        def submit() -> bool:
            try:
                i, args = next(todo)
            except StopIteration:
                return False
            fut = self.client.submit(func, *args, pure=False)
            live[i] = fut
            index[fut.key] = i
            finished.add(fut)
            return True

        try:
            while len(live) < window and submit():
                pass
            for fut in finished:
                i = index.pop(fut.key)
                res = fut.result()               # re-raises a chunk's own error (one line)
                del live[i]                      # let the cluster free the result
                del fut
                if progress is not None:
                    progress(i)
                if ordered:
                    done[i] = res
                    while nxt in done:
                        yield done.pop(nxt)
                        nxt += 1
                else:
                    yield res
                del res
                while len(live) + len(done) < window and submit():
                    pass
        finally:
            if live:
                self.client.cancel(list(live.values()))

    def close(self):
        if self._owns:
            self.client.close()

    def __repr__(self):
        return f"DaskExecutor({self.client.scheduler.address!r})"


def get_executor(executor=None) -> Executor:
    """An executor from ``None`` (local), an :class:`Executor`, a ``Client`` or an address."""
    if executor is None:
        return LocalExecutor()
    if isinstance(executor, Executor):
        return executor
    return DaskExecutor(executor)


def chunk_ranges(n_items: int, size: int) -> list[tuple[int, int]]:
    """``[(start, stop), …]`` covering ``range(n_items)`` in pieces of ``size``."""
    return [(a, min(n_items, a + size)) for a in range(0, n_items, size)]


def iter_chunks(executor: Executor, func: Callable, chunk_args: Iterable[tuple],
                sizes: Sequence[int], progress: Callable[[int], None] | None = None,
                ordered: bool = True) -> Iterator[Any]:
    """:meth:`Executor.map_chunks` with progress counted in items (``sizes[i]`` per chunk)."""
    cb = None if progress is None else (lambda i: progress(sizes[i]))
    return executor.map_chunks(func, chunk_args, cb, ordered=ordered)


def run_chunks(executor: Executor, func: Callable, chunk_args: Iterable[tuple],
               sizes: Sequence[int], progress: Callable[[int], None] | None = None) -> list:
    """Every result of :func:`iter_chunks`, in chunk order, as a list."""
    return list(iter_chunks(executor, func, chunk_args, sizes, progress))
