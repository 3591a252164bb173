"""A design target solved at every point of a grid of other design values.

E.g. the largest tail capacitance keeping the single-ended CMRR ≥ 80 dB at
100 kHz, for each of several tail currents and temperatures. Each grid point
is an independent :func:`freqpair.studies.targets.solve_target`; the points are
chunked and run on an executor (:mod:`freqpair.studies.executors`), locally or on a
Dask cluster, with identical results.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from freqpair.design.keys import get_value
from freqpair.studies.design_grid import GridTable, design_at, grid_row, grid_rows, \
    iter_grid, run_grid
from freqpair.design.errors import FreqpairError
from freqpair.studies.targets import TargetError, solve_target

__all__ = ["TargetGridResult", "solve_target_grid", "iter_target_rows", "target_points"]


@dataclass(frozen=True)
class TargetGridResult(GridTable):
    """Solved values over a grid.

    Attributes
    ----------
    axes : tuple of SweepAxis
        The grid (one or two axes).
    key, metric, kind : str
        The solved design key, the metric and "min" / "max".
    bound : float
        The bound [dB or Hz].
    at_hz : float or None
        Frequency [Hz] the metric is read at (None: DC / contract value).
    value : ndarray
        Solved value (SI) per grid point, NaN where unsolved (see ``errors``).
    metric_value : ndarray
        The metric re-analysed at the solved value, NaN where undefined.
    errors : dict of tuple → str
        Grid index → one-line reason ("cannot reach …", a bias error).
    """

    axes: tuple
    key: str
    metric: str
    bound: float
    kind: str
    at_hz: float | None
    value: np.ndarray
    metric_value: np.ndarray
    errors: dict

    def to_rows(self) -> list[dict]:
        """One dict per grid point: grid keys, solved value, metric value, error."""
        return grid_rows(self.axes, ((self.key, self.value), (self.metric, self.metric_value)),
                         self.errors)

    def to_json(self) -> dict:
        return {"axes": self._axes_json(),
                "key": self.key, "metric": self.metric, "bound": self.bound,
                "kind": self.kind, "at_hz": self.at_hz, "rows": self.to_rows()}


def target_points(design, axes, key, metric, bound, kind, bounds, at_hz, want, face,
                  points) -> list:
    """Solve the target at some grid points: a pure function (one chunk).

    Returns
    -------
    list of (idx, value, metric value, error)
        Value in SI, metric value in dB or Hz (None where undefined), error a
        one-line message or None.
    """
    out = []
    for idx in points:
        try:
            r = solve_target(design_at(design, axes, idx), key, metric, bound, kind, bounds,
                             at_hz, want, face=face)
            out.append((idx, r.value, r.metric_value, None))
        except FreqpairError as exc:
            out.append((idx, None, None, str(exc)))
    return out


def _checked(design, axes, key, metric, kind, bounds, want) -> tuple:
    """The axes as a tuple, after checking the request once (one error, not one per point)."""
    axes = tuple(axes)
    if not 1 <= len(axes) <= 2:
        raise TargetError(f"axes: {len(axes)} given; a grid has one or two")
    names = [a.key for a in axes]
    if len(set(names)) != len(names) or key in names:
        raise TargetError(f"axes: {', '.join(names)}: each grid key once, and not the "
                          f"solved key {key!r}")
    get_value(design, key)
    for a in axes:
        get_value(design, a.key)
    # check the request itself once, here, so a bad metric is one error, not one per point
    if kind not in ("min", "max") or want not in (None, "largest", "smallest"):
        raise TargetError(f"kind = {kind!r}, want = {want!r}: kind 'min'/'max', "
                          "want 'largest'/'smallest'")
    from freqpair.studies.targets import METRICS
    if metric not in METRICS:
        raise TargetError(f"metric = {metric!r}: unknown (choose from {', '.join(METRICS)})")
    a, b = bounds
    if a is None or b is None or not (math.isfinite(a) and math.isfinite(b) and b > a):
        raise TargetError(f"bounds = {bounds!r}: need a finite range [a, b] with b > a")
    return axes


def iter_target_rows(design, axes, key: str, metric: str, bound: float, kind: str = "min",
                     bounds=(None, None), at_hz: float | None = None,
                     want: str | None = None,
                     progress: Callable[[int], None] | None = None,
                     executor=None, chunk: int = 4, face: str = "library"):
    """The rows of :func:`solve_target_grid`'s table, in grid order, as chunks finish.

    Each row is the dict :meth:`TargetGridResult.to_rows` gives for that point,
    so :meth:`TargetGridResult.csv_stream` of them is byte for byte its
    :meth:`~TargetGridResult.to_csv`; only the chunks in flight are held. The
    request is checked before the first row.

    Returns
    -------
    iterator of dict
    """
    axes = _checked(design, axes, key, metric, kind, bounds, want)

    def rows():
        for idx, v, m, err in iter_grid(target_points, (design, axes, key, metric, bound, kind,
                                                        bounds, at_hz, want, face),
                                        axes, chunk, executor, progress):
            yield grid_row(axes, idx, ((key, v), (metric, m)), err)
    return rows()


def solve_target_grid(design, axes, key: str, metric: str, bound: float, kind: str = "min",
                      bounds=(None, None), at_hz: float | None = None,
                      want: str | None = None,
                      progress: Callable[[int], None] | None = None,
                      executor=None, chunk: int = 4, face: str = "library") -> TargetGridResult:
    """Solve ``key`` for ``metric`` vs ``bound`` at every point of a grid.

    Parameters
    ----------
    design : Design
    axes : list of SweepAxis
        One or two grid axes (design keys other than ``key``).
    key, metric, bound, kind, bounds, at_hz, want
        As in :func:`freqpair.studies.targets.solve_target` (bound in dB or Hz,
        ``at_hz`` in Hz).
    progress : callable, optional
        Called with the number of grid points finished (after each chunk).
    executor : None, Executor, distributed.Client or str, optional
        Where the points run (:mod:`freqpair.studies.executors`); default this process.
    chunk : int
        Most grid points per chunk.
    face : {"library", "cli"}
        How messages name options (see :func:`freqpair.studies.targets.solve_target`).

    Returns
    -------
    TargetGridResult
    """
    axes = _checked(design, axes, key, metric, kind, bounds, want)
    entries = run_grid(target_points, (design, axes, key, metric, bound, kind, bounds, at_hz,
                                       want, face), axes, chunk, executor, progress)
    shape = tuple(len(ax.values) for ax in axes)
    value = np.full(shape, np.nan)
    mval = np.full(shape, np.nan)
    errors = {}
    for idx, v, m, err in entries:
        if err is not None:
            errors[idx] = err
        else:
            value[idx] = v
            mval[idx] = np.nan if m is None else m
    return TargetGridResult(axes, key, metric, float(bound), kind, at_hz, value, mval, errors)
