"""A grid of design points: one or two swept design values, run in chunks, tabulated.

Shared by the parameter sweep (:mod:`freqpair.studies.sweep`) and the target solved over
a grid (:mod:`freqpair.studies.target_grid`): the grid indices, the design at one
index, the chunked run on an executor (:mod:`freqpair.studies.executors`) and the
table of rows with its CSV and JSON texts.

Two ways to the rows: :func:`run_grid` gathers every chunk's entries (the
result objects of small grids), :func:`iter_grid` hands them on in grid order
as chunks finish, holding only the few chunks the executor has in flight —
with :func:`csv_pieces` a grid of any size becomes CSV text piece by piece.
"""
from __future__ import annotations

import itertools
import json
import math
from typing import Callable, Iterable, Iterator

from freqpair.design.keys import replace_value
from freqpair.design.files import csv_text

__all__ = ["grid_indices", "grid_size", "grid_points", "design_at", "run_grid", "iter_grid",
           "grid_rows", "grid_row", "csv_pieces", "GridTable"]


def grid_indices(axes) -> list[tuple]:
    """Every index of the grid spanned by ``axes``, the last axis fastest."""
    return list(itertools.product(*(range(len(a.values)) for a in axes)))


def grid_size(axes) -> int:
    """Number of points of the grid spanned by ``axes``."""
    return math.prod(len(a.values) for a in axes)


def grid_points(axes, start: int, stop: int) -> list[tuple]:
    """The grid indices at positions ``start … stop−1`` of :func:`grid_indices`."""
    sizes = [len(a.values) for a in axes]
    out = []
    for flat in range(start, stop):
        idx = []
        for size in reversed(sizes):
            flat, i = divmod(flat, size)
            idx.append(i)
        out.append(tuple(reversed(idx)))
    return out


def design_at(design, axes, idx):
    """``design`` with each axis key set to its value at grid index ``idx`` (validated)."""
    for a, i in zip(axes, idx):
        design = replace_value(design, a.key, a.values[i])
    return design


def iter_grid(func: Callable, fixed_args: tuple, axes, chunk: int, executor=None,
              progress: Callable[[int], None] | None = None) -> Iterator:
    """The entries of :func:`run_grid`, one at a time in grid order, as chunks finish.

    The chunks' arguments are made as they are started and each chunk's entries
    are dropped once handed on, so memory holds only the chunks the executor
    has in flight (a few per worker), whatever the grid's size. An executor made
    here is closed when the iteration ends (or the iterator is closed).
    """
    from freqpair.studies.executors import chunk_ranges, get_executor, iter_chunks
    n = grid_size(axes)
    ex = get_executor(executor)
    try:
        ranges = chunk_ranges(n, ex.chunk_size(n, chunk))
        args = (tuple(fixed_args) + (grid_points(axes, a, b),) for a, b in ranges)
        for part in iter_chunks(ex, func, args, [b - a for a, b in ranges], progress):
            yield from part
    finally:
        if ex is not executor:
            ex.close()


def run_grid(func: Callable, fixed_args: tuple, axes, chunk: int, executor=None,
             progress: Callable[[int], None] | None = None) -> list:
    """Run ``func(*fixed_args, points)`` over chunks of the grid's indices.

    Parameters
    ----------
    func : callable
        A pure, module-level function (it may run on a cluster worker) returning
        a list with one entry per grid index it was given.
    fixed_args : tuple
        The arguments before the chunk's indices.
    axes : sequence of SweepAxis
    chunk : int
        Most grid points per chunk (the executor may choose fewer).
    executor : None, Executor, distributed.Client or str, optional
        Where the chunks run; an executor made here is closed here.
    progress : callable, optional
        Called with the number of grid points finished (after each chunk).

    Returns
    -------
    list
        The entries of every chunk, in grid order.
    """
    return list(iter_grid(func, fixed_args, axes, chunk, executor, progress))


def grid_rows(axes, columns, errors: dict) -> list[dict]:
    """One dict per grid point: the axis values, each column's value, the error.

    Parameters
    ----------
    axes : sequence of SweepAxis
    columns : sequence of (str, ndarray)
        Column name and its array of the grid's shape; NaN/inf become None.
    errors : dict of tuple → str
        Grid index → one-line error (the ``error`` entry; None elsewhere).
    """
    return [grid_row(axes, idx, [(name, arr[idx]) for name, arr in columns], errors.get(idx))
            for idx in grid_indices(axes)]


def grid_row(axes, idx: tuple, values, error: str | None) -> dict:
    """One row of :func:`grid_rows`: the axis values at ``idx``, each ``(name, value)``
    of ``values`` (None, NaN and ±inf become None), then ``error``."""
    row = {a.key: a.values[i] for a, i in zip(axes, idx)}
    for name, v in values:
        v = math.nan if v is None else float(v)
        row[name] = v if math.isfinite(v) else None
    row["error"] = error
    return row


def csv_pieces(header, rows: Iterable, batch: int = 512) -> Iterator[str]:
    """CSV text of ``rows`` (sequences of cells in ``header`` order) in pieces: the
    header line, then ``batch`` rows at a time. The pieces joined are exactly
    :func:`freqpair.design.files.csv_text` of the same rows."""
    header = list(header)
    yield csv_text(header, [])
    rows = iter(rows)
    while True:
        part = list(itertools.islice(rows, batch))
        if not part:
            return
        yield csv_text(header, part).split("\n", 1)[1]


class GridTable:
    """Mixin for grid results with ``axes``, ``to_rows()`` and ``to_json()``."""

    @property
    def shape(self) -> tuple:
        return tuple(len(a.values) for a in self.axes)

    def to_csv(self) -> str:
        """CSV text: a header, one line per grid point; empty cells where undefined."""
        rows = self.to_rows()
        cols = list(rows[0])
        return csv_text(cols, ([r[c] for c in cols] for r in rows))

    @staticmethod
    def csv_stream(rows: Iterable[dict]) -> Iterator[str]:
        """The text of :meth:`to_csv` in pieces, from rows as the streaming runs give
        them (:func:`freqpair.studies.sweep.iter_sweep_rows`, …)."""
        rows = iter(rows)
        first = next(rows)
        cols = list(first)
        return csv_pieces(cols, ([r[c] for c in cols] for r in itertools.chain([first], rows)))

    def to_json_text(self) -> str:
        return json.dumps(self.to_json(), allow_nan=False)

    def _axes_json(self) -> list:
        return [{"key": a.key, "values": list(a.values)} for a in self.axes]
