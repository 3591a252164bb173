"""Parameter sweeps: one or two design values over a range → a table of metrics.

Each point is the design with the swept values replaced
(:func:`freqpair.design.keys.replace_value`, fully validated) and analysed with
:func:`freqpair.analysis.result.analyze`. A point that cannot be analysed (e.g. the
bias saturates) keeps its one-line error in the table instead of stopping the
sweep. The engine is a pure function returning a frozen :class:`SweepResult`;
progress is reported through an optional callback (the command line draws a
bar with it). For grids too large to hold, :func:`iter_sweep_rows` hands the
table's rows on in grid order as chunks finish (the command line writes its
CSV that way).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from freqpair.analysis.result import analyze
from freqpair.design.keys import get_value
from freqpair.studies.design_grid import GridTable, design_at, grid_row, grid_rows, \
    iter_grid, run_grid
from freqpair.design.errors import FreqpairError
from freqpair.analysis.crossings import db
from freqpair.studies.targets import (
    AT_FREQUENCY,
    LOOP_METRICS,
    METRICS,
    TargetResult,
    metric_value,
    solve_target,
)

__all__ = ["SweepAxis", "SweepResult", "SweepError", "sweep", "iter_sweep_rows", "solve_target",
           "TargetResult", "METRICS", "DEFAULT_METRICS"]

DEFAULT_METRICS = ("adm_db", "f3db_hz", "ugf_hz", "cmrr_se_db", "cmrr_db", "cmrr_corner_hz")


class SweepError(FreqpairError, ValueError):
    """A sweep request that cannot run (names the field and the value)."""


@dataclass(frozen=True)
class SweepAxis:
    """One swept design value.

    Parameters
    ----------
    key : str
        Dotted design key, e.g. ``"tail.capacitance"``.
    values : tuple of float
        The values in SI units, in sweep order.
    """

    key: str
    values: tuple

    def __post_init__(self):
        vals = tuple(float(v) for v in self.values)
        if not vals or not all(math.isfinite(v) for v in vals):
            raise SweepError(f"{self.key}: need one or more finite values")
        object.__setattr__(self, "values", vals)

    @classmethod
    def linear(cls, key: str, start: float, stop: float, n: int) -> "SweepAxis":
        """``n`` evenly spaced values from ``start`` to ``stop`` inclusive."""
        if not (isinstance(n, int) and n >= 1):
            raise SweepError(f"{key}: points = {n!r}: must be a whole number ≥ 1")
        return cls(key, tuple(np.linspace(start, stop, n)))

    @classmethod
    def log(cls, key: str, start: float, stop: float, n: int) -> "SweepAxis":
        """``n`` log-spaced values from ``start`` to ``stop`` (both > 0)."""
        if not (start > 0 and stop > 0):
            raise SweepError(f"{key}: log spacing needs start and stop > 0 "
                             f"(got {start:g}, {stop:g})")
        if not (isinstance(n, int) and n >= 1):
            raise SweepError(f"{key}: points = {n!r}: must be a whole number ≥ 1")
        return cls(key, tuple(np.logspace(math.log10(start), math.log10(stop), n)))


@dataclass(frozen=True)
class SweepResult(GridTable):
    """Metrics over a sweep grid.

    Attributes
    ----------
    axes : tuple of SweepAxis
    metrics : tuple of str
    table : dict of str → ndarray
        Each metric as a float array of shape ``(len(axis0)[, len(axis1)])``;
        NaN where the metric is undefined/infinite or the point failed (see
        ``errors``).
    errors : dict of tuple → str
        Grid index → one-line error for points that could not be analysed.
    f_hz : ndarray or None
        Frequencies [Hz] of the curves (with ``curves=True``).
    curves : dict of str → ndarray or None
        ``adm_db``, ``cmrr_se_db`` (and ``cmrr_db`` if balanced) of shape
        ``grid shape + (n_f,)``.
    """

    axes: tuple
    metrics: tuple
    table: dict
    errors: dict
    at_hz: float | None = None
    f_hz: np.ndarray | None = field(default=None, repr=False)
    curves: dict | None = field(default=None, repr=False)

    def to_rows(self) -> list[dict]:
        """One dict per grid point: swept keys, metrics (None if undefined), error."""
        return grid_rows(self.axes, [(m, self.table[m]) for m in self.metrics], self.errors)

    def to_json(self) -> dict:
        """JSON-ready object: axes, metrics, rows (and curves when computed)."""
        out = {"axes": self._axes_json(),
               "metrics": list(self.metrics), "at_hz": self.at_hz, "rows": self.to_rows()}
        if self.curves is not None:
            out["f_hz"] = [float(f) for f in self.f_hz]
            out["curves"] = {
                name: np.where(np.isfinite(arr), arr, np.nan).reshape(-1, arr.shape[-1])
                .tolist() for name, arr in self.curves.items()}
            for name, arr in out["curves"].items():
                out["curves"][name] = [[v if math.isfinite(v) else None for v in row]
                                       for row in arr]
        return out


def sweep(design, axes, metrics=DEFAULT_METRICS, curves: bool = False, f_hz=None,
          at_hz: float | None = None,
          progress: Callable[[int], None] | None = None,
          executor=None, chunk: int = 16) -> SweepResult:
    """Analyse ``design`` at every point of a 1-D or 2-D grid of design values.

    Parameters
    ----------
    design : Design
    axes : list of SweepAxis
        One or two axes (the grid is their outer product).
    metrics : sequence of str
        Names from :data:`freqpair.studies.targets.METRICS`.
    curves : bool
        Also keep A_dm and CMRR curves on ``f_hz`` (default: the design's sweep).
    f_hz : array_like, optional
        Frequencies [Hz] for the curves.
    at_hz : float, optional
        Evaluate the frequency-dependent metrics (``cmrr_se_db`` …) at this
        frequency [Hz] instead of DC.
    progress : callable, optional
        Called with the number of points finished (after each chunk).
    executor : None, Executor, distributed.Client or str, optional
        Where the points run (:mod:`freqpair.studies.executors`): None for this
        process (default), a client or a scheduler address for a Dask cluster.
    chunk : int
        Most grid points per chunk (task); on a cluster fewer, so that every
        worker gets several chunks.

    Returns
    -------
    SweepResult
    """
    axes = _checked(design, axes, metrics)
    shape = tuple(len(a.values) for a in axes)
    table = {m: np.full(shape, np.nan) for m in metrics}
    errors: dict = {}
    from freqpair.circuit.frequency import FrequencyGrid
    grid = None
    store = None
    if curves:
        grid = FrequencyGrid.from_design(design).f_hz if f_hz is None else \
            FrequencyGrid(np.asarray(f_hz, dtype=float)).f_hz
        store = {"adm_db": np.full(shape + (grid.size,), np.nan),
                 "cmrr_se_db": np.full(shape + (grid.size,), np.nan),
                 "cmrr_db": np.full(shape + (grid.size,), np.nan)}
    entries = run_grid(sweep_points, (design, axes, tuple(metrics), at_hz, grid), axes, chunk,
                       executor, progress)
    for idx, vals, crv, err in entries:
        if err is not None:
            errors[idx] = err
            continue
        for m, v in zip(metrics, vals):
            table[m][idx] = np.nan if v is None else v
        if crv is not None:
            for name, arr in zip(("adm_db", "cmrr_se_db", "cmrr_db"), crv):
                if arr is not None:
                    store[name][idx] = arr
    table = {m: np.where(np.isfinite(v), v, np.nan) for m, v in table.items()}
    if store is not None and np.all(np.isnan(store["cmrr_db"])):
        del store["cmrr_db"]
    return SweepResult(axes, tuple(metrics), table, errors, at_hz, grid, store)


def _checked(design, axes, metrics) -> tuple:
    """The axes as a tuple, after checking the request (one-line errors, before any work)."""
    axes = tuple(axes)
    if not 1 <= len(axes) <= 2:
        raise SweepError(f"axes: {len(axes)} given; a sweep has one or two")
    if len({a.key for a in axes}) != len(axes):
        raise SweepError(f"axes: {axes[0].key} is swept twice")
    for m in metrics:
        if m not in METRICS:
            raise SweepError(f"metric = {m!r}: unknown (choose from {', '.join(METRICS)})")
        if m in LOOP_METRICS and design.feedback is None:
            raise SweepError(f"metric = {m!r}: needs a [feedback] table in the design")
    for a in axes:
        get_value(design, a.key)            # names a missing key before any work
    return axes


def iter_sweep_rows(design, axes, metrics=DEFAULT_METRICS, at_hz: float | None = None,
                    progress: Callable[[int], None] | None = None, executor=None,
                    chunk: int = 16):
    """The rows of :func:`sweep`'s table, in grid order, as the chunks finish.

    Each row is the dict :meth:`SweepResult.to_rows` gives for that point (swept
    keys, metrics, error), so :meth:`SweepResult.csv_stream` of these rows is
    byte for byte :meth:`SweepResult.to_csv`. Only the chunks in flight are
    held (a few per worker): a grid of any size streams in bounded memory. The
    request is checked here, before the first row (same errors as :func:`sweep`).

    Returns
    -------
    iterator of dict
    """
    axes = _checked(design, axes, metrics)
    metrics = tuple(metrics)

    def rows():
        for idx, vals, _, err in iter_grid(sweep_points, (design, axes, metrics, at_hz, None),
                                           axes, chunk, executor, progress):
            yield grid_row(axes, idx, zip(metrics, vals if err is None else
                                          (None,) * len(metrics)), err)
    return rows()


def sweep_points(design, axes, metrics, at_hz, grid, points) -> list:
    """Analyse some grid points of a sweep: a pure function (one chunk of :func:`sweep`).

    Returns
    -------
    list of (idx, metric values, curves, error)
        Per point: the grid index; the metric values (None where undefined);
        ``(adm_db, cmrr_se_db, cmrr_db)`` arrays over ``grid`` [dB] (``cmrr_db``
        None without a balanced output), or None when ``grid`` is None; the
        one-line error, or None.
    """
    out = []
    for idx in points:
        try:
            res = analyze(design_at(design, axes, idx))
            vals = tuple(metric_value(res, m, at_hz if m in AT_FREQUENCY else None)
                         for m in metrics)
            crv = None
            if grid is not None:
                r = res.responses.at(grid)
                crv = (db(r.get(res.primary)), db(r.adm_se) - db(r.acm_se),
                       None if r.adm is None else db(r.adm) - db(r.acm_dm))
            out.append((idx, vals, crv, None))
        except FreqpairError as exc:
            out.append((idx, None, None, str(exc)))
    return out
