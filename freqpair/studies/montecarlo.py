"""Monte Carlo mismatch: CMRR(f) and PSRR(f) percentile bands, DC CMRR, PSRR and corner
spreads, yield.

A :class:`MonteCarloSpec` gives a spread per design key; :func:`run_montecarlo`
draws ``n`` sampled designs and evaluates them all in batches
(:class:`~freqpair.studies.batch.BatchEvaluator`), chunk by chunk.

Spreads (``width`` is a fraction in both cases):

- ``mismatch.load``, ``mismatch.gm`` are relative differences already; a
  sample is ``δ = δ_nominal + width·z``.
- sizes (``tail.resistance``, ``tail.capacitance``, ``load.capacitance``)
  spread relative to their nominal value: ``x = x_nominal·(1 + width·z)``.

``z`` is standard normal (``"normal"``, width = σ) or uniform on [−1, 1)
(``"uniform"``, width = half-width). Offsets (V_BE / V_th) are not offered: in
the small-signal model an offset only shifts the bias point, i.e. one side's
g_m, which ``mismatch.gm`` already covers; values that move the bias (tail
current, load resistance, device sizes) would need a fresh operating point per
sample and are not batched.

Streaming reductions: a chunk does not hand back its samples' curves but
mergeable summaries (:class:`MonteCarloSummary`): per-frequency histograms of
each banded curve on bins of 1/256 dB, histograms of the DC CMRRs (same bins;
the DC PSRRs too when a PSRR curve is banded) and of log10 of the corner
frequency (bins of 2^-17 decade), and integer counts for the requested yields
(:class:`~freqpair.studies.histogram.BinnedCounts`).
Merging adds integers, so the answer does not depend on the order chunks
finish in, on the chunk size or on the executor. The client's memory follows
the spread of the values, not the number of samples. Every sample can still
be kept (``keep_samples=True``) at 8 bytes per sample and frequency per curve.

Reproducibility: the random numbers of sample ``i`` for key ``k`` come from a
stream keyed by ``(seed, crc32(k), i // BLOCK)``, so results depend only on the
seed and the sample index, never on the chunking or on which other keys vary.
A chunk ``(design, spec, start, stop, seed, f_hz)`` is a pure function
(:func:`run_chunk` for the samples, :func:`reduce_chunk` for their summary) —
chunks may run anywhere.
"""
from __future__ import annotations

import math
import threading
import zlib
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.special import ndtri

from freqpair.studies.batch import BALANCED_CURVES, BATCH_KEYS, CURVES, PSRR_CURVES, \
    BatchEvaluator, single_threaded_blas
from freqpair.studies.histogram import DB_BIN, DECADE_BIN, BinnedCounts
from freqpair.design.keys import get_value, replace_value
from freqpair.design.errors import FreqpairError
from freqpair.design.quantities import parse_si
from freqpair.circuit.frequency import s_of_hz
from freqpair.analysis.crossings import DB_3, search_grid
from freqpair.analysis.responses import ZERO_GAIN_RATIO

__all__ = ["Spread", "MonteCarloSpec", "MonteCarloChunk", "MonteCarloSummary",
           "MonteCarloResult", "run_chunk", "reduce_chunk", "run_montecarlo", "sample_values",
           "sampled_design", "default_grid", "parse_spread", "BLOCK", "MonteCarloError",
           "TASK_CHUNKS", "CURVES", "BALANCED_CURVES", "PSRR_CURVES"]

#: Samples per random-number block (fixed: part of the reproducibility contract).
BLOCK = 1024
_RELATIVE_KEYS = ("mismatch.load", "mismatch.gm")
#: Corner refinement: each lattice level splits an interval into this many parts …
LATTICE = 16
#: … and levels are added until the lattice step is at most this [decades]. The
#: last level's four points around the crossing give the corner by inverse cubic
#: interpolation: measured within 2e-11 decades of a secant iteration on direct
#: solves (the CMRR itself carries ~1e-11 dB of rounding).
LATTICE_STEP = 5e-4
#: Lattice plans kept per engine (each ≈ 20 kB; a wide spread needs a few hundred).
LATTICE_CACHE = 2048
#: On a cluster a task runs up to this many chunks of ``chunk`` samples one after
#: another and returns one summary (fewer, larger results to send back).
TASK_CHUNKS = 16


class MonteCarloError(FreqpairError, ValueError):
    """A Monte Carlo request that cannot run (names the key and value)."""


@dataclass(frozen=True)
class Spread:
    """Distribution of one design value.

    Parameters
    ----------
    kind : {"normal", "uniform"}
    width : float
        σ (normal) or half-width (uniform), as a fraction (0.01 = 1 %).
    """

    kind: str
    width: float

    def __post_init__(self):
        if self.kind not in ("normal", "uniform"):
            raise MonteCarloError(f"spread kind = {self.kind!r}: must be 'normal' or 'uniform'")
        if not (isinstance(self.width, (int, float, np.floating, np.integer))
                and math.isfinite(self.width) and self.width >= 0):
            raise MonteCarloError(f"spread width = {self.width!r}: must be a finite value ≥ 0")

    def unit_draws(self, u: np.ndarray) -> np.ndarray:
        """Map uniforms u ∈ (0, 1) to z (standard normal or uniform on [−1, 1))."""
        return ndtri(u) if self.kind == "normal" else 2.0 * u - 1.0


def parse_spread(text: str, field: str = "spread") -> Spread:
    """``"normal:SIGMA"`` or ``"uniform:HALFWIDTH"`` → :class:`Spread`.

    The width is a fraction (``"0.01"``), a percentage (``"1%"``) or an SI value
    (``"10m"``). Errors are one line starting with ``field`` (the command line
    passes its option, e.g. ``"--spread mismatch.load"``).
    """
    expected = "normal:SIGMA or uniform:HALFWIDTH (e.g. normal:1%)"
    if not isinstance(text, str) or ":" not in text:
        raise MonteCarloError(f"{field} = {text!r}: expected {expected}")
    kind, width = (part.strip() for part in text.split(":", 1))
    if kind not in ("normal", "uniform"):
        raise MonteCarloError(f"{field} = {text!r}: kind {kind!r} is not 'normal' or "
                              "'uniform'")
    try:
        value = parse_si(width[:-1].strip(), field=f"{field} width") / 100.0 \
            if width.endswith("%") else parse_si(width, field=f"{field} width")
    except ValueError as exc:                  # parse_si's one line names the field
        raise MonteCarloError(str(exc)) from None
    if not (math.isfinite(value) and value >= 0):
        raise MonteCarloError(f"{field} = {text!r}: the width must be a finite value ≥ 0")
    return Spread(kind, value)


@dataclass(frozen=True)
class MonteCarloSpec:
    """Spreads per design key, e.g. ``{"mismatch.load": Spread("normal", 0.01)}``."""

    spreads: tuple[tuple[str, Spread], ...]

    def __post_init__(self):
        keys = [k for k, _ in self.spreads]
        if not keys:
            raise MonteCarloError("Monte Carlo: give at least one spread")
        for key in keys:
            if key not in BATCH_KEYS:
                raise MonteCarloError(f"{key}: cannot be spread (supported: "
                                      f"{', '.join(BATCH_KEYS)})")
        if len(set(keys)) != len(keys):
            raise MonteCarloError(f"{keys}: a key is given twice")
        object.__setattr__(self, "spreads", tuple(sorted(self.spreads)))

    @classmethod
    def from_dict(cls, spreads: dict) -> "MonteCarloSpec":
        """From ``{key: Spread}``, ``{key: (kind, width)}`` or ``{key: "normal:1%"}``
        (the command line's syntax, :func:`parse_spread`)."""
        items = []
        for key, val in spreads.items():
            if isinstance(val, Spread):
                items.append((key, val))
            elif isinstance(val, str):
                items.append((key, parse_spread(val, field=key)))
            else:
                try:
                    kind, width = val
                except (TypeError, ValueError):
                    raise MonteCarloError(f"{key} = {val!r}: give a Spread, (kind, width) or "
                                          "'normal:SIGMA' / 'uniform:HALFWIDTH'") from None
                items.append((key, Spread(kind, width)))
        return cls(tuple(items))

    @property
    def keys(self) -> tuple[str, ...]:
        return tuple(k for k, _ in self.spreads)


def _uniforms(seed: int, key: str, start: int, stop: int) -> np.ndarray:
    """Per-sample uniforms in (0, 1) for samples [start, stop), chunking-independent."""
    out = np.empty(stop - start)
    tag = zlib.crc32(key.encode("utf-8"))
    b0, b1 = start // BLOCK, (stop - 1) // BLOCK
    for b in range(b0, b1 + 1):
        ss = np.random.SeedSequence(entropy=int(seed), spawn_key=(tag, b))
        u = np.random.Generator(np.random.PCG64(ss)).random(BLOCK) + 2.0 ** -54
        lo, hi = max(start, b * BLOCK), min(stop, (b + 1) * BLOCK)
        out[lo - start:hi - start] = u[lo - b * BLOCK:hi - b * BLOCK]
    return out


def sample_values(design, spec: MonteCarloSpec, start: int, stop: int,
                  seed: int) -> dict[str, np.ndarray]:
    """Sampled design values (SI units) of samples ``start … stop−1``.

    Raises
    ------
    MonteCarloError
        If a sample leaves the valid range (a mismatch outside (−1, 1), a
        negative size): the spread is too wide.
    """
    values = {}
    for key, spread in spec.spreads:
        nominal = float(get_value(design, key))
        z = spread.unit_draws(_uniforms(seed, key, start, stop))
        if key in _RELATIVE_KEYS:
            x = nominal + spread.width * z
            bad = np.nonzero(~(np.abs(x) < 1.0))[0]
        else:
            x = nominal * (1.0 + spread.width * z)
            bad = np.nonzero(~(x > 0) if key == "tail.resistance" else ~(x >= 0))[0]
        if bad.size:
            i = int(bad[0])
            raise MonteCarloError(f"{key}: sample {start + i} = {x[i]:.4g} is out of range "
                                  f"({spread.kind} width {spread.width:g} is too wide)")
        values[key] = x
    return values


def sampled_design(design, spec: MonteCarloSpec, index: int, seed: int):
    """The design of sample ``index`` (for checks against single analyses)."""
    vals = sample_values(design, spec, index, index + 1, seed)
    for key, x in vals.items():
        design = replace_value(design, key, float(x[0]))
    return design


def default_grid(design, points: int = 200) -> np.ndarray:
    """``points`` log-spaced frequencies [Hz] over the design's sweep range."""
    return np.logspace(math.log10(design.sweep.start), math.log10(design.sweep.stop), points)


@dataclass(frozen=True)
class MonteCarloChunk:
    """Per-sample results of samples ``start … stop−1`` (arrays over samples first).

    DC gains are complex; CMRR values in dB with +inf where infinite (a common-
    mode gain zero to rounding); ``corner_hz`` +inf where the CMRR never falls
    3 dB (or is infinite). ``curves`` maps curve names (:data:`CURVES`) to
    ``(n, n_f)`` arrays [dB]; ``cmrr_db_f`` is None without a balanced output.
    ``psrr_pos_dc_db``, ``psrr_neg_dc_db`` (+inf where the rail's gain is zero to
    rounding) only when that PSRR curve was computed.
    """

    start: int
    stop: int
    values: dict
    dc_adm: np.ndarray | None
    dc_adm_se: np.ndarray
    dc_acm_se: np.ndarray
    dc_acm_dm: np.ndarray | None
    cmrr_se_dc_db: np.ndarray
    cmrr_dc_db: np.ndarray | None
    curves: dict
    corner_hz: np.ndarray
    psrr_pos_dc_db: np.ndarray | None = None
    psrr_neg_dc_db: np.ndarray | None = None

    @property
    def cmrr_se_db_f(self) -> np.ndarray:
        return self.curves["cmrr_se_db"]

    @property
    def cmrr_db_f(self) -> np.ndarray | None:
        return self.curves.get("cmrr_db")


def _ratio_db(num, den, ref):
    """20·log10|num/den|, +inf where |den| ≤ 1e-12·ref (zero to rounding)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = 20.0 * (np.log10(np.abs(num)) - np.log10(np.abs(den)))
    return np.where(np.abs(den) <= ZERO_GAIN_RATIO * ref, np.inf, out)


def _first_fall(above: np.ndarray) -> np.ndarray:
    """Per row, the index j of the first step from above the level (j) to at or below
    it (j + 1); −1 where there is none."""
    if above.shape[1] < 2:
        return np.full(above.shape[0], -1)
    cross = above[:, :-1] & ~above[:, 1:]
    j = np.argmax(cross, axis=1)
    return np.where(cross[np.arange(len(j)), j], j, -1)


class _Engine:
    """Evaluator plus the grids and lattice plans used to find corners."""

    def __init__(self, design, spec, f_hz):
        self.ev = BatchEvaluator(design, spec.keys)
        self.f_hz = np.asarray(f_hz, dtype=float)
        poles = self.ev.solver.poles()
        sg = search_grid(poles, design.sweep.start, design.sweep.stop, points_per_decade=20)
        low, high = sg[sg < self.f_hz[0]], sg[sg > self.f_hz[-1]]
        # bracketing grids: the run's grid, then below and above it (nominal search range)
        self.grids = (self.f_hz, np.concatenate([low, self.f_hz[:1]]),
                      np.concatenate([self.f_hz[-1:], high]))
        self.log_grids = tuple(np.log10(g) for g in self.grids)
        self._lattice: OrderedDict = OrderedDict()
        self._lock = threading.Lock()          # tasks on a multi-threaded worker share it

    def corners(self, curve, level, dG, dC, ref):
        """Lowest f [Hz] where CMRR_se = level, per sample.

        Each sample's crossing is bracketed on the run's grid (or the nominal
        search range beyond it: the first step from above the level to at or
        below it), then narrowed on lattices (:meth:`_refine`).
        """
        n = level.size
        out = np.full(n, np.inf)
        live = np.isfinite(level)
        gid = np.full(n, -1)
        j = np.full(n, -1)
        above = curve > level[:, None]             # booleans only: no n × n_f float copy
        below = live & ~above[:, 0]
        jj = _first_fall(above)
        has = live & ~below & (jj >= 0)
        gid[has], j[has] = 0, jj[has]
        for g, mask in ((1, below), (2, live & ~below & ~has)):
            sel = np.nonzero(mask)[0]
            grid = self.grids[g]
            if sel.size == 0 or grid.size < 2:
                continue
            cse = self.ev.db_on_grid(s_of_hz(grid), dG[sel], dC[sel], ref[sel])["cmrr_se_db"]
            if g == 1:                                 # treat the lowest point as DC-like
                cse[:, 0] = np.maximum(cse[:, 0], np.nextafter(level[sel], np.inf))
            je = _first_fall(cse > level[sel][:, None])
            ok = je >= 0
            gid[sel[ok]], j[sel[ok]] = g, je[ok]
        todo = np.nonzero(gid >= 0)[0]
        if todo.size:
            out[todo] = 10.0 ** self._refine(gid[todo], j[todo], level[todo], dG[todo],
                                             dC[todo], ref[todo])
        return out

    def _plans(self, codes, a, b) -> list:
        """Lattice plans of the intervals [a_k, b_k] (log10 f) named by ``codes``: the
        points a + (b − a)·m/LATTICE, m = −1 … LATTICE + 1, as ``(x, plan)`` pairs.
        Plans not yet cached are built together; least recently used ones go."""
        out: list = [None] * len(codes)
        with self._lock:
            for k, c in enumerate(codes):
                hit = self._lattice.get(int(c))
                if hit is not None:
                    self._lattice.move_to_end(int(c))
                    out[k] = hit
        missing = [k for k, hit in enumerate(out) if hit is None]
        if missing:
            steps = np.arange(-1, LATTICE + 2) / LATTICE
            x = np.array([a[k] + (b[k] - a[k]) * steps for k in missing])
            plans = self.ev.lattice_plans(s_of_hz(10.0 ** x))
            with self._lock:
                for k, xk, plan in zip(missing, x, plans):
                    out[k] = (xk, plan)
                    self._lattice[int(codes[k])] = out[k]
                while len(self._lattice) > LATTICE_CACHE:
                    self._lattice.popitem(last=False)
        return out

    def _refine(self, gid, j, level, dG, dC, ref):
        """log10 of the corner of samples bracketed in [x_j, x_j+1] of grid ``gid``.

        Level by level, the bracket is split into LATTICE parts and the first
        part where the CMRR falls to the level is kept; the lattice points are a
        function of the bracket alone (so of the grid, never of the chunk), and
        every sample of a chunk with the same bracket is evaluated with one
        plan by the closed-form expansion (fixed-shape products: the same bits
        in any chunk). After the last level (step ≤ :data:`LATTICE_STEP`) the
        corner is the inverse cubic interpolant of the four lattice points
        around the crossing (quadratic or linear where the cubic's points are
        not monotonic).
        """
        n = gid.size
        a = np.empty(n)
        b = np.empty(n)
        for g in range(3):
            m = gid == g
            a[m], b[m] = self.log_grids[g][j[m]], self.log_grids[g][j[m] + 1]
        levels = np.maximum(1, np.ceil(np.log((b - a) / LATTICE_STEP) / np.log(LATTICE)))
        levels = levels.astype(int)
        code = gid.astype(np.int64) * (1 << 24) + j
        xs4 = np.full((n, 4), np.nan)
        ds4 = np.full((n, 4), np.nan)
        live = np.arange(n)
        depth = 0
        threshold = 10.0 ** (level / 10.0)          # the level as a power ratio
        with single_threaded_blas():
            mono = self.ev.monomials_of(dG, dC)
            while live.size:
                depth += 1
                codes, group = np.unique(code[live], return_inverse=True)
                first = np.zeros(codes.size, dtype=int)
                first[group[::-1]] = live[::-1]                  # a sample of each bracket
                lattice = self._plans(codes, a[first], b[first])
                x = np.array([xp for xp, _ in lattice])[group]   # (n_live, LATTICE + 3)
                ratio = self.ev.lattice_cmrr_se(mono[live], [p for _, p in lattice], group)
                above = ratio[:, 1:LATTICE + 2] > threshold[live][:, None]   # m = 0 … LATTICE
                above[:, 0] = True                               # the bracket: above …
                above[:, -1] = False                             # … then at or below
                m = _first_fall(above)
                rows = np.arange(live.size)
                a[live], b[live] = x[rows, m + 1], x[rows, m + 2]
                code[live] = code[live] * LATTICE + m
                last = levels[live] == depth
                if last.any():
                    cols = m[last][:, None] + np.arange(4)       # points m−1 … m+2
                    fin = live[last]
                    xs4[fin] = np.take_along_axis(x[last], cols, axis=1)
                    with np.errstate(divide="ignore", invalid="ignore"):
                        ds4[fin] = 10.0 * np.log10(np.take_along_axis(ratio[last], cols, axis=1)) \
                            - level[fin][:, None]
                live = live[~last]
        hit = ds4[:, 2] == 0                                     # the level, exactly
        est = _inverse_interpolation(xs4, ds4, a, b, ((1, 2), (0, 1, 2), (1, 2, 3), (0, 1, 2, 3)))
        result = np.where(hit, b, est)
        # no usable interpolant (a bracket start that was only treated as above it)
        result = np.where(np.isfinite(result), result, np.where(ds4[:, 1] <= 0, a, 0.5 * (a + b)))
        return result


_ENGINES: OrderedDict = OrderedDict()
_ENGINES_LOCK = threading.Lock()


def _engine_for(design, spec, f_hz) -> _Engine:
    """The engine of a design, spec and grid, kept for the next chunk of the same run
    (a cluster worker runs many tasks of one run: one QZ and one set of lattice plans
    per worker process, not per task). The cache changes no result."""
    key = (design, spec.keys, np.asarray(f_hz, dtype=float).tobytes())
    with _ENGINES_LOCK:
        eng = _ENGINES.get(key)
        if eng is not None:
            _ENGINES.move_to_end(key)
            return eng
    eng = _Engine(design, spec, f_hz)
    with _ENGINES_LOCK:
        _ENGINES[key] = eng
        while len(_ENGINES) > 2:
            _ENGINES.popitem(last=False)
    return eng


def _inverse_interpolation(xs, ds, lo, hi, subsets):
    """x at d = 0 by Lagrange interpolation of x(d) through columns of ``(ds, xs)``.

    ``subsets`` are tuples of columns, in increasing order of preference; a
    subset counts for a row when its points are finite with d strictly
    decreasing along it and the estimate lies strictly inside (lo, hi).
    Returns NaN where no subset counts.
    """
    x = np.full(lo.size, np.nan)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for cols in subsets:
            X, D = xs[:, cols], ds[:, cols]
            ok = np.all(np.isfinite(X) & np.isfinite(D), axis=1) & \
                np.all(np.diff(D, axis=1) < 0, axis=1)
            est = np.zeros(lo.size)
            for i in range(len(cols)):
                w = np.ones(lo.size)
                for k in range(len(cols)):
                    if k != i:
                        w = w * (0.0 - D[:, k]) / (D[:, i] - D[:, k])
                est = est + w * X[:, i]
            x = np.where(ok & np.isfinite(est) & (est > lo) & (est < hi), est, x)
    return x


def run_chunk(design, spec: MonteCarloSpec, start: int, stop: int, seed: int,
              f_hz=None, engine: _Engine | None = None, curves=None) -> MonteCarloChunk:
    """Evaluate samples ``start … stop−1``: a pure function of its arguments.

    Parameters
    ----------
    design : Design
        The nominal design.
    spec : MonteCarloSpec
    start, stop : int
        Sample index range.
    seed : int
    f_hz : array_like, optional
        Frequencies [Hz] of the curves (default :func:`default_grid`).
    engine : optional
        A prepared engine for this design, spec and grid (shared by the chunks
        of one local run).
    curves : sequence of str, optional
        Curve names (:data:`CURVES`); default the CMRRs (single-ended, and
        balanced where the stage has a balanced output). The single-ended CMRR
        is always computed (it gives the corner).

    Returns
    -------
    MonteCarloChunk
    """
    f_hz = default_grid(design) if f_hz is None else np.asarray(f_hz, dtype=float)
    eng = engine or _engine_for(design, spec, f_hz)
    ev = eng.ev
    bal = ev.balanced
    names = ("cmrr_se_db", "cmrr_db") if curves is None and bal else tuple(curves or ())
    names = ("cmrr_se_db",) + tuple(c for c in names if c != "cmrr_se_db")
    values = sample_values(design, spec, start, stop, seed)
    dG, dC = ev.deltas(values)
    dc = ev.dc(dG)
    ref = np.abs(dc.adm) if bal else np.abs(dc.adm_se)
    if not np.all(np.isfinite(dc.adm_se)) or not np.all(np.isfinite(dc.acm_se)):
        bad = int(np.nonzero(~np.isfinite(dc.adm_se) | ~np.isfinite(dc.acm_se))[0][0])
        raise MonteCarloError(f"sample {start + bad}: the sampled network is singular")
    cmrr_se_dc = _ratio_db(dc.adm_se, dc.acm_se, ref)
    cmrr_dc = _ratio_db(dc.adm, dc.acm_dm, ref) if bal else None
    # PSRR± (DESIGN.md §7f): A_se = A_dm,se or A_total; a rail gain below 1e-12·|A_se(0)|
    # is zero to rounding (the PSRR +inf), at DC and on the grid alike
    ref_se = np.abs(dc.a_se)
    psrr_dc = {name: _ratio_db(dc.a_se, rail, ref_se) if name in names else None
               for name, rail in zip(PSRR_CURVES, (dc.a_vpos, dc.a_vneg))}
    refs = {None: ref, **{name: ref_se for name in PSRR_CURVES}}
    # curves: blocks of a fixed number of samples inside (memory bounded by the block)
    out = ev.db_on_grid(s_of_hz(f_hz), dG, dC, refs, names)
    for arr in out.values():
        if np.isnan(arr).any():
            raise MonteCarloError("a sampled network is singular at some frequency")
    corner = eng.corners(out["cmrr_se_db"], cmrr_se_dc - DB_3, dG, dC, ref)
    return MonteCarloChunk(start, stop, values, dc.adm, dc.adm_se, dc.acm_se, dc.acm_dm,
                           cmrr_se_dc, cmrr_dc, out, corner, psrr_dc["psrr_pos_db"],
                           psrr_dc["psrr_neg_db"])


# ---------------------------------------------------------------- reductions

def _position(f_hz: np.ndarray, at_hz: float, what: str) -> tuple[int, float]:
    """``(j, t)``: ``at_hz`` lies a fraction t of the way from f_j to f_j+1 in log f
    (t = 0 on a grid point, within 1e-9 relative)."""
    at = float(at_hz)
    hit = np.nonzero(np.isclose(f_hz, at, rtol=1e-9, atol=0))[0]
    if hit.size:
        return int(hit[0]), 0.0
    if not (f_hz[0] < at < f_hz[-1]):
        raise MonteCarloError(f"{what} = {at:g} Hz: outside the Monte Carlo grid "
                              f"({f_hz[0]:g} … {f_hz[-1]:g} Hz)")
    x = np.log10(f_hz)
    j = int(np.searchsorted(x, math.log10(at)) - 1)
    return j, float((math.log10(at) - x[j]) / (x[j + 1] - x[j]))


def _interpolate(curve: np.ndarray, j: int, t: float) -> np.ndarray:
    """Each row of ``curve`` at position (j, t): linear in log f between columns j, j+1
    (an infinite value at either column with a weight gives an infinite result)."""
    if t == 0.0:
        return curve[:, j]
    with np.errstate(invalid="ignore"):
        return (1.0 - t) * curve[:, j] + t * curve[:, j + 1]


#: yield outputs → the curve they read: single-ended or balanced CMRR, PSRR+ or PSRR−
_OUTPUTS = {"se": "cmrr_se_db", "balanced": "cmrr_db", "psrr_pos": "psrr_pos_db",
            "psrr_neg": "psrr_neg_db"}
#: banded PSRR curve → its DC statistic (counted when the curve is banded)
_PSRR_DC = {"psrr_pos_db": "psrr_pos_dc_db", "psrr_neg_db": "psrr_neg_dc_db"}


@dataclass(frozen=True)
class _Request:
    """What a chunk reduces its samples to (see :class:`MonteCarloSummary`)."""

    curves: tuple                     # banded curve names
    yields: tuple                     # ((spec_db, at_hz, output), …)
    positions: tuple                  # ((j, t), …) of each yield's frequency
    keep_samples: bool
    chunk: int                        # samples evaluated at once inside a task

    @property
    def computed(self) -> tuple:
        """Curves every chunk evaluates: the banded ones and those the yields read."""
        names = list(self.curves)
        for _, _, output in self.yields:
            if _OUTPUTS[output] not in names:
                names.append(_OUTPUTS[output])
        return tuple(names)


@dataclass
class MonteCarloSummary:
    """Mergeable reductions of some samples of a run.

    Attributes
    ----------
    n : int
        Samples summarised.
    curves : dict of str → BinnedCounts
        Per banded curve, one histogram per frequency (bins of 1/256 dB).
    dc : dict of str → BinnedCounts
        ``cmrr_se_dc_db`` (and ``cmrr_dc_db`` with a balanced output;
        ``psrr_pos_dc_db``, ``psrr_neg_dc_db`` when that PSRR curve is banded), one row.
    corner : BinnedCounts
        log10 of the single-ended CMRR corner [Hz] (bins of 2^-17 decade; +inf
        where the CMRR never falls 3 dB).
    yield_counts : ndarray of int64
        Samples meeting each requested yield spec.
    samples : list of MonteCarloChunk
        The samples themselves, only with ``keep_samples``.
    """

    n: int
    curves: dict
    dc: dict
    corner: BinnedCounts
    yield_counts: np.ndarray
    samples: list = field(default_factory=list)

    @classmethod
    def of_chunk(cls, ch: MonteCarloChunk, request: _Request) -> "MonteCarloSummary":
        curves = {name: BinnedCounts.of(ch.curves[name], DB_BIN) for name in request.curves}
        dc = {"cmrr_se_dc_db": BinnedCounts.of(ch.cmrr_se_dc_db, DB_BIN)}
        if ch.cmrr_dc_db is not None:
            dc["cmrr_dc_db"] = BinnedCounts.of(ch.cmrr_dc_db, DB_BIN)
        for curve, name in _PSRR_DC.items():
            if curve in request.curves:
                dc[name] = BinnedCounts.of(getattr(ch, name), DB_BIN)
        corner = BinnedCounts.of(np.log10(ch.corner_hz), DECADE_BIN)
        counts = np.array([np.count_nonzero(_interpolate(ch.curves[_OUTPUTS[out]], j, t) >= spec)
                           for (spec, _, out), (j, t) in zip(request.yields, request.positions)],
                          dtype=np.int64)
        return cls(ch.stop - ch.start, curves, dc, corner, counts,
                   [ch] if request.keep_samples else [])

    def merge(self, other: "MonteCarloSummary") -> "MonteCarloSummary":
        """Add ``other`` to this summary (in place): exact, in any order."""
        self.n += other.n
        for name, h in other.curves.items():
            self.curves[name].merge(h)
        for name, h in other.dc.items():
            self.dc[name].merge(h)
        self.corner.merge(other.corner)
        self.yield_counts += other.yield_counts
        self.samples.extend(other.samples)
        return self

    @classmethod
    def empty(cls, request: _Request, n_f: int, balanced: bool) -> "MonteCarloSummary":
        dc = {"cmrr_se_dc_db": BinnedCounts(DB_BIN, 1)}
        if balanced:
            dc["cmrr_dc_db"] = BinnedCounts(DB_BIN, 1)
        for curve, name in _PSRR_DC.items():
            if curve in request.curves:
                dc[name] = BinnedCounts(DB_BIN, 1)
        return cls(0, {name: BinnedCounts(DB_BIN, n_f) for name in request.curves}, dc,
                   BinnedCounts(DECADE_BIN, 1), np.zeros(len(request.yields), dtype=np.int64))

    @property
    def nbytes(self) -> int:
        """Bytes of the histograms (kept samples not counted)."""
        return sum(h.nbytes for h in (*self.curves.values(), *self.dc.values(), self.corner))


def reduce_chunk(design, spec: MonteCarloSpec, start: int, stop: int, seed: int, f_hz,
                 request: _Request, engine: _Engine | None = None) -> MonteCarloSummary:
    """The summary of samples ``start … stop−1``: a pure function of its arguments.

    The samples are evaluated ``request.chunk`` at a time (:func:`run_chunk`), so
    memory stays bounded by that, however long the range.
    """
    f_hz = np.asarray(f_hz, dtype=float)
    eng = engine or _engine_for(design, spec, f_hz)
    total = None
    for a in range(start, stop, request.chunk):
        ch = run_chunk(design, spec, a, min(stop, a + request.chunk), seed, f_hz, eng,
                       curves=request.computed)
        part = MonteCarloSummary.of_chunk(ch, request)
        del ch
        total = part if total is None else total.merge(part)
    return total


def _fin(v):
    v = float(v)
    return v if math.isfinite(v) else None


_SAMPLE_FIELDS = ("cmrr_se_dc_db", "cmrr_dc_db", "corner_hz", "dc_adm", "dc_acm_dm",
                  "psrr_pos_dc_db", "psrr_neg_dc_db")


@dataclass(frozen=True)
class MonteCarloResult:
    """Statistics of a Monte Carlo run (and its samples, when kept).

    Percentiles (bands, DC CMRR and PSRR, corner) follow numpy's default definition —
    linear interpolation between the order statistics at rank (n − 1)·q/100 —
    with the order statistics read from the run's histograms: within 1/256 dB
    (0.0039 dB) of the exact ones for values in dB, within 1.8e-5 relative for
    the corner frequency.

    Attributes
    ----------
    f_hz : ndarray (n_f,)
        Frequencies [Hz] of the curves and bands.
    percentiles : tuple of float
        The band percentiles, e.g. (5, 50, 95).
    bands : dict of str → ndarray (n_p, n_f)
        Each banded curve [dB] at each percentile and frequency (+inf = infinite).
    band_cmrr_se_db, band_cmrr_db : ndarray (n_p, n_f)
        The CMRR bands (``band_cmrr_db`` None without a balanced output).
    band_psrr_pos_db, band_psrr_neg_db : ndarray (n_p, n_f) or None
        The PSRR bands, when banded (``curves=("psrr_neg_db", …)``).
    summary : MonteCarloSummary
        The merged histograms and yield counts (any other percentile can be
        read from them: :meth:`percentile`, :meth:`band_percentile`).
    yields : tuple of (spec_db, at_hz, output, fraction)
        The yields requested from :func:`run_montecarlo`.
    cmrr_se_dc_db, cmrr_dc_db, corner_hz, cmrr_se_db_f, cmrr_db_f, values, curves, ...
        Per-sample arrays, only with ``keep_samples=True`` (else None);
        ``psrr_pos_dc_db``, ``psrr_neg_dc_db`` where that PSRR was computed.
    """

    n: int
    seed: int
    spec: MonteCarloSpec
    f_hz: np.ndarray
    percentiles: tuple
    bands: dict = field(repr=False)
    summary: MonteCarloSummary = field(repr=False)
    yields: tuple = ()
    values: dict | None = field(default=None, repr=False)
    curves: dict | None = field(default=None, repr=False)
    cmrr_se_dc_db: np.ndarray | None = field(default=None, repr=False)
    cmrr_dc_db: np.ndarray | None = field(default=None, repr=False)
    corner_hz: np.ndarray | None = field(default=None, repr=False)
    dc_adm: np.ndarray | None = field(default=None, repr=False)
    dc_acm_dm: np.ndarray | None = field(default=None, repr=False)
    psrr_pos_dc_db: np.ndarray | None = field(default=None, repr=False)
    psrr_neg_dc_db: np.ndarray | None = field(default=None, repr=False)

    # ------------------------------------------------------------ bands
    @property
    def band_cmrr_se_db(self) -> np.ndarray:
        return self.bands["cmrr_se_db"]

    @property
    def band_cmrr_db(self) -> np.ndarray | None:
        return self.bands.get("cmrr_db")

    @property
    def band_psrr_pos_db(self) -> np.ndarray | None:
        return self.bands.get("psrr_pos_db")

    @property
    def band_psrr_neg_db(self) -> np.ndarray | None:
        return self.bands.get("psrr_neg_db")

    @property
    def cmrr_se_db_f(self) -> np.ndarray | None:
        """Per-sample single-ended CMRR curves (``keep_samples=True`` only)."""
        return None if self.curves is None else self.curves["cmrr_se_db"]

    @property
    def cmrr_db_f(self) -> np.ndarray | None:
        """Per-sample balanced CMRR curves (``keep_samples=True`` only)."""
        return None if self.curves is None else self.curves.get("cmrr_db")

    @property
    def kept_samples(self) -> bool:
        return self.curves is not None

    def _curve_name(self, output: str) -> str:
        name = _OUTPUTS.get(output, output)
        if name in BALANCED_CURVES and name not in self.bands and \
                "cmrr_dc_db" not in self.summary.dc:
            raise MonteCarloError(f"output = {output!r}: this stage has no balanced output")
        return name

    def band_percentile(self, q: float, curve: str = "cmrr_se_db") -> np.ndarray:
        """Percentile ``q`` [%] of a banded curve at every frequency [dB] (any q)."""
        name = self._curve_name(curve)
        if name not in self.summary.curves:
            raise MonteCarloError(f"curve = {curve!r}: not banded in this run (banded: "
                                  f"{', '.join(self.summary.curves)})")
        return self.summary.curves[name].percentiles([q])[0]

    def band_at(self, at_hz: float, curve: str = "cmrr_se_db") -> dict:
        """The band of ``curve`` at ``at_hz`` [Hz]: ``{"p5": dB, …}``.

        Between grid points the band values are interpolated linearly in
        log10 f (each percentile curve, not the samples: the histograms are
        per grid frequency); +inf at either neighbour gives +inf. Outside the
        grid: an error.
        """
        name = self._curve_name(curve)
        if name not in self.bands:
            raise MonteCarloError(f"curve = {curve!r}: not banded in this run")
        j, t = _position(self.f_hz, at_hz, "at_hz")
        vals = _interpolate(self.bands[name], j, t)
        return {f"p{q:g}": float(v) for q, v in zip(self.percentiles, vals)}

    # ------------------------------------------------------------ yields
    def yield_fraction(self, spec_db: float, at_hz: float, output: str = "se") -> float:
        """Fraction of samples whose CMRR at ``at_hz`` [Hz] is ≥ ``spec_db`` [dB].

        ``output`` is ``"se"`` (single-ended CMRR, default), ``"balanced"``, or
        ``"psrr_pos"`` / ``"psrr_neg"`` (that PSRR ≥ ``spec_db``). Between
        grid points each sample's CMRR curve is interpolated linearly in log10 f.
        The spec must have been requested from :func:`run_montecarlo`
        (``yields=[(spec_db, at_hz)]``) — counted exactly as the samples went by —
        or the samples kept (``keep_samples=True``).
        """
        if output not in _OUTPUTS:
            raise MonteCarloError(f"output = {output!r}: choose from "
                                  f"{', '.join(map(repr, _OUTPUTS))}")
        self._curve_name(output)
        for spec, at, out, frac in self.yields:
            if out == output and spec == float(spec_db) and \
                    math.isclose(at, float(at_hz), rel_tol=1e-9):
                return frac
        if self.curves is not None and _OUTPUTS[output] in self.curves:
            j, t = _position(self.f_hz, at_hz, "at_hz")
            return float(np.mean(_interpolate(self.curves[_OUTPUTS[output]], j, t) >= spec_db))
        extra = "" if output == "se" else f", {output!r}"
        raise MonteCarloError(f"yield at {spec_db:g} dB, {at_hz:g} Hz ({output}) was not "
                              f"counted in this run: pass yields=[({spec_db!r}, {at_hz!r}{extra})] "
                              "to run_montecarlo (or keep_samples=True)")

    # ------------------------------------------------------------ scalar statistics
    def percentile(self, name: str, q) -> np.ndarray:
        """Percentiles ``q`` [%] of ``"cmrr_se_dc_db"``, ``"cmrr_dc_db"``,
        ``"psrr_pos_dc_db"``, ``"psrr_neg_dc_db"`` [dB] (the PSRRs when banded) or
        ``"cmrr_corner_hz"`` [Hz] (+inf where infinite)."""
        q = np.atleast_1d(np.asarray(q, dtype=float))
        if name == "cmrr_corner_hz":
            return self.summary.corner.percentiles(q, transform=lambda x: 10.0 ** x)[:, 0]
        if name not in self.summary.dc:
            raise MonteCarloError(f"{name}: not a statistic of this run (choose from "
                                  f"{', '.join([*self.summary.dc, 'cmrr_corner_hz'])})")
        return self.summary.dc[name].percentiles(q)[:, 0]

    def stats(self, name: str) -> dict:
        """``{"p5": value, …}`` at ``self.percentiles`` (null for infinite)."""
        return {f"p{q:g}": _fin(v) for q, v in zip(self.percentiles,
                                                   self.percentile(name, self.percentiles))}

    @property
    def corner_never_falls_fraction(self) -> float:
        return float(self.summary.corner.pos_inf[0]) / self.n

    def to_json(self, yield_spec: tuple[float, float] | None = None) -> dict:
        """Summary object (SI, null where infinite); bands per frequency."""
        out = {
            "n_samples": self.n,
            "seed": self.seed,
            "spreads": {k: {"kind": s.kind, "width": s.width} for k, s in self.spec.spreads},
            "percentiles": list(self.percentiles),
            "percentile_method": "linear",
            "bin_width_db": DB_BIN,
            "corner_bin_decades": DECADE_BIN,
            "cmrr_se_dc_db": self.stats("cmrr_se_dc_db"),
            "cmrr_dc_db": self.stats("cmrr_dc_db") if "cmrr_dc_db" in self.summary.dc else None,
            "cmrr_corner_hz": self.stats("cmrr_corner_hz"),
            "corner_never_falls_fraction": self.corner_never_falls_fraction,
            "f_hz": [float(f) for f in self.f_hz],
        }
        for name in _PSRR_DC.values():               # DC PSRR± when their curve is banded
            if name in self.summary.dc:
                out[name] = self.stats(name)
        for name, band in self.bands.items():
            out[f"band_{name}"] = {f"p{q:g}": [_fin(v) for v in row]
                                   for q, row in zip(self.percentiles, band)}
        if yield_spec is not None:
            spec_db, at_hz = yield_spec
            out["yield"] = {"cmrr_se_db_min": spec_db, "at_hz": at_hz,
                            "fraction": self.yield_fraction(spec_db, at_hz)}
        return out


def _check_yields(yields, f: np.ndarray, balanced: bool) -> tuple:
    out = []
    for item in yields:
        try:
            spec_db, at_hz, *rest = item
        except (TypeError, ValueError):
            raise MonteCarloError(f"yields: {item!r}: give (spec_db, at_hz[, output])") from None
        output = rest[0] if rest else "se"
        if output not in _OUTPUTS or len(rest) > 1:
            raise MonteCarloError(f"yields: {item!r}: output must be one of "
                                  f"{', '.join(map(repr, _OUTPUTS))}")
        if output == "balanced" and not balanced:
            raise MonteCarloError(f"yields: {item!r}: this stage has no balanced output")
        spec_db, at_hz = float(spec_db), float(at_hz)
        if not math.isfinite(spec_db):
            raise MonteCarloError(f"yields: spec_db = {spec_db!r}: must be finite")
        _position(f, at_hz, "yields at_hz")
        out.append((spec_db, at_hz, output))
    return tuple(out)


def run_montecarlo(design, spec: MonteCarloSpec, n: int, seed: int, f_hz=None,
                   chunk: int = 4096, percentiles=(5.0, 50.0, 95.0),
                   progress: Callable[[int], None] | None = None,
                   executor=None, *, yields=(), curves=None,
                   keep_samples: bool = False) -> MonteCarloResult:
    """Run ``n`` Monte Carlo samples of ``design`` with the spreads of ``spec``.

    Parameters
    ----------
    design : Design
    spec : MonteCarloSpec
    n : int
        Number of samples (≥ 1).
    seed : int
        Seed (≥ 0); the same seed gives identical results for any ``chunk``
        and on any executor.
    f_hz : array_like, optional
        Frequencies [Hz] for the curves (default: 200 log-spaced points over
        the design's sweep range).
    chunk : int
        Samples evaluated at once (the memory bound of the computation: about
        10 kB per sample at 100 frequencies); on a cluster a task runs up to
        :data:`TASK_CHUNKS` chunks, fewer so that every worker gets several tasks.
    percentiles : sequence of float
        Band percentiles [%].
    progress : callable, optional
        Called with the number of samples finished after each chunk (task).
    executor : None, Executor, distributed.Client or str, optional
        Where the chunks run (:mod:`freqpair.studies.executors`): None for this
        process (default), a client or a scheduler address for a Dask
        cluster. The results are identical on every executor.
    yields : sequence of (spec_db, at_hz) or (spec_db, at_hz, output)
        Yield specs counted as the samples go by (:meth:`MonteCarloResult.yield_fraction`):
        CMRR ≥ spec_db [dB] at at_hz [Hz], ``output`` ``"se"`` (default) or
        ``"balanced"`` (or PSRR ≥ spec_db: ``"psrr_pos"``, ``"psrr_neg"``); at_hz
        between grid points interpolates each sample's curve linearly in log10 f.
    curves : sequence of str, optional
        Curves to band (:data:`CURVES`: ``cmrr_se_db``, ``cmrr_db``, ``adm_db``,
        ``adm_se_db``, ``acm_se_db``, ``acm_dm_db``, ``psrr_pos_db``,
        ``psrr_neg_db``); default the CMRRs. A banded PSRR also gives the spread
        of its DC value (``percentile("psrr_neg_dc_db", q)``). PSRR± are read at
        the single-ended output (o2, or ``out`` with a second stage) against
        A_dm,se (or A_total), as :func:`freqpair.analysis.supply.psrr_db`.
    keep_samples : bool
        Also keep every sample (values, DC gains, CMRRs, corner and curves):
        8 bytes per sample and frequency per computed curve — 10⁶ samples × 100
        frequencies × 2 CMRR curves ≈ 1.6 GB. Without it the memory does not
        grow with ``n``.

    Returns
    -------
    MonteCarloResult
    """
    if not (isinstance(n, (int, np.integer)) and n >= 1):
        raise MonteCarloError(f"n = {n!r}: must be a whole number ≥ 1")
    if not (isinstance(seed, (int, np.integer)) and seed >= 0):
        raise MonteCarloError(f"seed = {seed!r}: must be a whole number ≥ 0")
    if not (isinstance(chunk, (int, np.integer)) and chunk >= 1):
        raise MonteCarloError(f"chunk = {chunk!r}: must be a whole number ≥ 1")
    f = default_grid(design) if f_hz is None else np.asarray(f_hz, dtype=float)
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise MonteCarloError("f_hz: need positive finite frequencies [Hz]")
    f = np.unique(f)
    q = tuple(float(x) for x in percentiles)
    if not q or not all(0 <= x <= 100 for x in q):
        raise MonteCarloError(f"percentiles = {percentiles!r}: each in [0, 100]")
    eng = _engine_for(design, spec, f)       # checks the keys; the local run uses it
    bal = eng.ev.balanced
    if curves is None:
        names = ("cmrr_se_db", "cmrr_db") if bal else ("cmrr_se_db",)
    else:
        names = tuple(dict.fromkeys(curves))
        for name in names:
            if name not in CURVES:
                raise MonteCarloError(f"curves: {name!r} is unknown (choose from "
                                      f"{', '.join(CURVES)})")
            if name in BALANCED_CURVES and not bal:
                raise MonteCarloError(f"curves: {name!r} needs a balanced output (this stage "
                                      "has one output)")
    ylds = _check_yields(yields, f, bal)
    request = _Request(names, ylds, tuple(_position(f, at, "at_hz") for _, at, _ in ylds),
                       bool(keep_samples), int(chunk))
    from freqpair.studies.executors import chunk_ranges, get_executor, iter_chunks, LocalExecutor
    ex = get_executor(executor)
    total = MonteCarloSummary.empty(request, f.size, bal)
    try:
        if isinstance(ex, LocalExecutor):     # one engine (one QZ) shared by all chunks
            ranges = chunk_ranges(int(n), int(chunk))
            args = ((design, spec, a, b, seed, f, request, eng) for a, b in ranges)
        else:                                 # each task builds its own engine
            del eng
            ranges = chunk_ranges(int(n), ex.chunk_size(int(n), int(chunk) * TASK_CHUNKS))
            args = ((design, spec, a, b, seed, f, request) for a, b in ranges)
        for part in iter_chunks(ex, reduce_chunk, args, [b - a for a, b in ranges], progress,
                                ordered=False):
            total.merge(part)
    finally:
        if ex is not executor:
            ex.close()
    bands = {name: total.curves[name].percentiles(q) for name in names}
    fractions = tuple((s, at, out, int(c) / int(n))
                      for (s, at, out), c in zip(ylds, total.yield_counts))
    kept = {}
    if keep_samples:
        parts = sorted(total.samples, key=lambda p: p.start)
        total.samples = []

        def cat(get):
            arrs = [get(p) for p in parts]
            if arrs[0] is None:
                return None
            return arrs[0] if len(arrs) == 1 else np.concatenate(arrs)   # one chunk: no copy
        kept = {name: cat(lambda p, name=name: getattr(p, name)) for name in _SAMPLE_FIELDS}
        kept["values"] = {k: cat(lambda p, k=k: p.values[k]) for k in spec.keys}
        kept["curves"] = {c: cat(lambda p, c=c: p.curves[c]) for c in parts[0].curves}
        del parts
    return MonteCarloResult(n=int(n), seed=int(seed), spec=spec, f_hz=f, percentiles=q,
                            bands=bands, summary=total, yields=fractions, **kept)
