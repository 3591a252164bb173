"""A grid of design points: one or two swept design values, run in chunks, tabulated.

Shared by the parameter sweep (:mod:`freqpair.studies.sweep`) and the target solved over
a grid (:mod:`freqpair.studies.target_grid`): the grid indices, the design at one
index, the chunked run on an executor (:mod:`freqpair.studies.executors`) and the
table of rows with its CSV and JSON texts.
"""
from __future__ import annotations

import itertools
import json
import math
from typing import Callable

from freqpair.design.keys import replace_value
from freqpair.design.files import csv_text

__all__ = ["grid_indices", "design_at", "run_grid", "grid_rows", "GridTable"]


def grid_indices(axes) -> list[tuple]:
    """Every index of the grid spanned by ``axes``, the last axis fastest."""
    return list(itertools.product(*(range(len(a.values)) for a in axes)))


def design_at(design, axes, idx):
    """``design`` with each axis key set to its value at grid index ``idx`` (validated)."""
    for a, i in zip(axes, idx):
        design = replace_value(design, a.key, a.values[i])
    return design


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
    from freqpair.studies.executors import chunk_ranges, get_executor, run_chunks
    points = grid_indices(axes)
    ex = get_executor(executor)
    try:
        ranges = chunk_ranges(len(points), ex.chunk_size(len(points), chunk))
        args = [tuple(fixed_args) + (points[a:b],) for a, b in ranges]
        parts = run_chunks(ex, func, args, [b - a for a, b in ranges], progress)
    finally:
        if ex is not executor:
            ex.close()
    return [entry for part in parts for entry in part]


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
    rows = []
    for idx in grid_indices(axes):
        row = {a.key: a.values[i] for a, i in zip(axes, idx)}
        for name, arr in columns:
            v = float(arr[idx])
            row[name] = v if math.isfinite(v) else None
        row["error"] = errors.get(idx)
        rows.append(row)
    return rows


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

    def to_json_text(self) -> str:
        return json.dumps(self.to_json(), allow_nan=False)

    def _axes_json(self) -> list:
        return [{"key": a.key, "values": list(a.values)} for a in self.axes]
