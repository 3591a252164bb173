"""Monte Carlo mismatch: CMRR(f) percentile bands, DC CMRR and corner spreads, yield.

A :class:`MonteCarloSpec` gives a spread per design key; :func:`run_montecarlo`
draws ``n`` sampled designs and evaluates them all in batches
(:class:`~freqpair.studies.batch.BatchEvaluator`), chunk by chunk so memory stays
bounded.

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

Reproducibility: the random numbers of sample ``i`` for key ``k`` come from a
stream keyed by ``(seed, crc32(k), i // BLOCK)``, so results depend only on the
seed and the sample index, never on the chunking or on which other keys vary.
A chunk ``(design, spec, start, stop, seed, f_hz)`` is a pure function
(:func:`run_chunk`) — chunks may run anywhere and be concatenated.
"""
from __future__ import annotations

import math
import zlib
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.special import ndtri

from freqpair.studies.batch import BATCH_KEYS, BatchEvaluator
from freqpair.design.keys import get_value, replace_value
from freqpair.design.errors import DesignError, FreqpairError
from freqpair.circuit.frequency import s_of_hz
from freqpair.analysis.crossings import DB_3, db, search_grid
from freqpair.analysis.responses import ZERO_GAIN_RATIO

__all__ = ["Spread", "MonteCarloSpec", "MonteCarloChunk", "MonteCarloResult", "run_chunk",
           "run_montecarlo", "sample_values", "sampled_design", "default_grid", "BLOCK",
           "MonteCarloError"]

#: Samples per random-number block (fixed: part of the reproducibility contract).
BLOCK = 1024
_RELATIVE_KEYS = ("mismatch.load", "mismatch.gm")
#: Corner refinement stops at steps below this [decades] (2.3e-11 relative in f):
#: the exact CMRR carries rounding of ~1e-11 dB, i.e. ~1e-12 decades at the corner's
#: slope, so smaller steps only chase rounding (measured: ~15 rounds instead of 3–4).
XTOL_DECADES = 1e-11


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
        if not (math.isfinite(self.width) and self.width >= 0):
            raise MonteCarloError(f"spread width = {self.width!r}: must be a finite value ≥ 0")

    def unit_draws(self, u: np.ndarray) -> np.ndarray:
        """Map uniforms u ∈ (0, 1) to z (standard normal or uniform on [−1, 1))."""
        return ndtri(u) if self.kind == "normal" else 2.0 * u - 1.0


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
        """From ``{key: Spread}`` or ``{key: (kind, width)}``."""
        items = []
        for key, val in spreads.items():
            items.append((key, val if isinstance(val, Spread) else Spread(*val)))
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
    3 dB (or is infinite). ``cmrr_db_f`` is None without a balanced output.
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
    cmrr_se_db_f: np.ndarray
    cmrr_db_f: np.ndarray | None
    corner_hz: np.ndarray


def _ratio_db(num, den, ref):
    """20·log10|num/den|, +inf where |den| ≤ 1e-12·ref (zero to rounding)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = db(num) - db(den)
    return np.where(np.abs(den) <= ZERO_GAIN_RATIO * ref, np.inf, out)


class _Engine:
    """Evaluator plus the nominal search range used to bracket corners."""

    def __init__(self, design, spec, f_hz):
        self.ev = BatchEvaluator(design, spec.keys)
        self.f_hz = np.asarray(f_hz, dtype=float)
        poles = self.ev.solver.poles()
        sg = search_grid(poles, design.sweep.start, design.sweep.stop, points_per_decade=20)
        self.low_ext = sg[sg < self.f_hz[0]]
        self.high_ext = sg[sg > self.f_hz[-1]]

    def cmrr_se_at(self, f, dG, dC, ref):
        g = self.ev.paired(s_of_hz(f), dG, dC)
        return _ratio_db(g.adm_se, g.acm_se, ref)

    def corners(self, curve, level, dG, dC, ref):
        """Lowest f [Hz] where CMRR_se = level, per sample (vectorised bracketing + secant).

        Each sample's crossing is bracketed on the run's grid (or the nominal
        search range beyond it); up to four grid points around the bracket seed
        the refinement (:meth:`_refine`).
        """
        n = level.size
        out = np.full(n, np.inf)
        live = np.isfinite(level)
        # per sample: log10 f and level difference at grid points j−1 … j+2 (bracket j, j+1)
        xs = np.full((n, 4), np.nan)
        ds = np.full((n, 4), np.nan)

        def seed(rows, grid, values, vrows, j):
            """Fill xs, ds of samples ``rows`` from rows ``vrows`` of ``values`` (× grid)
            at grid points j−1 … j+2."""
            k = j[:, None] + np.arange(-1, 3)
            edge = (k < 0) | (k >= grid.size)
            k = np.clip(k, 0, grid.size - 1)
            xs[rows] = np.where(edge, np.nan, np.log10(grid)[k])
            ds[rows] = np.where(edge, np.nan, values[vrows[:, None], k] - level[rows][:, None])

        def first_fall(above):
            """Index j of the first grid step from above the level to at/below it (−1: none)."""
            if above.shape[1] < 2:
                return np.full(above.shape[0], -1)
            cross = above[:, :-1] & ~above[:, 1:]
            j = np.argmax(cross, axis=1)
            return np.where(cross[np.arange(len(j)), j], j, -1)

        above = curve > level[:, None]             # booleans only: no n × n_f float copy
        below = live & ~above[:, 0]
        j = first_fall(above)
        has = live & ~below & (j >= 0)
        sel = np.nonzero(has)[0]
        if sel.size:
            seed(sel, self.f_hz, curve, sel, j[sel])
        for ext, mask in ((self.low_ext, below), (self.high_ext, live & ~below & ~has)):
            sel = np.nonzero(mask)[0]
            if sel.size == 0:
                continue
            grid = np.concatenate([ext, [self.f_hz[0]]]) if ext is self.low_ext else \
                np.concatenate([[self.f_hz[-1]], ext])
            if grid.size < 2:
                continue
            cse, _ = self.ev.cmrr_on_grid(s_of_hz(grid), dG[sel], dC[sel], ref[sel])
            if ext is self.low_ext:                   # treat the lowest point as DC-like
                cse[:, 0] = np.maximum(cse[:, 0], np.nextafter(level[sel], np.inf))
            je = first_fall(cse > level[sel][:, None])
            ok = je >= 0
            if ok.any():
                seed(sel[ok], grid, cse, np.nonzero(ok)[0], je[ok])
        todo = np.nonzero(np.isfinite(xs[:, 1]))[0]
        if todo.size:
            out[todo] = self._refine(xs[todo], ds[todo], level[todo], dG[todo], dC[todo],
                                     ref[todo])
        return out

    def _refine(self, xs, ds, level, dG, dC, ref):
        """Safeguarded secant in log10 f, all samples at once.

        ``xs, ds`` (n, 4): log10 f and CMRR − level at grid points j−1 … j+2 (NaN
        where absent); the root lies in [xs[:, 1], xs[:, 2]] (ds[:, 1] > 0 ≥ ds[:, 2]).
        The first trial point is the inverse cubic (or quadratic, or linear)
        interpolant of the grid values at level 0; the second interpolates through
        those grid points and the first point together (degree up to 4); then
        secant steps through the two latest points, replaced by the regula falsi
        point of the current bracket when they leave it or fail to halve it
        (Illinois weights). Stops
        when a step is below :data:`XTOL_DECADES` (the returned point is that
        last step's end), the level is hit exactly or the bracket is that narrow.
        Every sample's sequence depends on its own values only.
        """
        a, b = xs[:, 1].copy(), xs[:, 2].copy()
        fa, fb = ds[:, 1].copy(), ds[:, 2].copy()
        n = a.size
        x = _inverse_interpolation(xs, ds, a, b, ((1, 2), (0, 1, 2), (1, 2, 3), (0, 1, 2, 3)))
        x = np.where(np.isfinite(x), x, 0.5 * (a + b))
        # the grid end with the smaller |d| is the secant partner of the first point
        near = np.abs(fa) < np.abs(fb)
        xp, fp = np.where(near, a, b), np.where(near, fa, fb)
        side = np.zeros(n, dtype=int)
        done = fb == 0
        result = np.where(done, b, x)
        width = b - a
        for it in range(100):
            act = np.nonzero(~done)[0]
            if act.size == 0:
                break
            X = x[act]
            FX = self.cmrr_se_at(10.0 ** X, dG[act], dC[act], ref[act]) - level[act]
            A, B, FA, FB, sd = a[act], b[act], fa[act], fb[act], side[act]
            pos = FX > 0                                   # root in [X, B]
            A2, B2 = np.where(pos, X, A), np.where(pos, B, X)
            FA2 = np.where(pos, FX, np.where(sd == -1, 0.5 * FA, FA))
            FB2 = np.where(pos, np.where(sd == 1, 0.5 * FB, FB), FX)
            sd2 = np.where(pos, 1, -1)
            with np.errstate(divide="ignore", invalid="ignore"):
                sec = X - FX * (X - xp[act]) / (FX - fp[act])
                rf = B2 - FB2 * (B2 - A2) / (FB2 - FA2)
            if it == 0:     # first step: interpolate through the grid points and X together
                x5 = np.column_stack([xs[act, :2], X, xs[act, 2:]])
                d5 = np.column_stack([ds[act, :2], FX, ds[act, 2:]])
                est = _inverse_interpolation(x5, d5, A2, B2,
                                             ((0, 1, 2, 3), (1, 2, 3, 4), (0, 1, 2, 3, 4)))
                sec = np.where(np.isfinite(est), est, sec)
            shrunk = (B2 - A2) <= 0.5 * width[act]
            use_sec = np.isfinite(sec) & (sec > A2) & (sec < B2) & \
                ((np.abs(sec - X) <= 0.25 * (B2 - A2)) | shrunk)
            nxt = np.where(use_sec, sec, np.where(np.isfinite(rf) & (rf > A2) & (rf < B2), rf,
                                                  0.5 * (A2 + B2)))
            a[act], b[act], fa[act], fb[act], side[act] = A2, B2, FA2, FB2, sd2
            width[act] = np.where(shrunk, B2 - A2, width[act])
            xp[act], fp[act] = X, FX
            x[act] = nxt
            fin = (FX == 0) | (np.abs(nxt - X) <= XTOL_DECADES) | (B2 - A2 <= XTOL_DECADES)
            result[act] = np.where(FX == 0, X, nxt)
            done[act] = fin
        return 10.0 ** result


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
              f_hz=None, engine: _Engine | None = None) -> MonteCarloChunk:
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
        Frequencies [Hz] of the CMRR curves (default :func:`default_grid`).

    Returns
    -------
    MonteCarloChunk
    """
    f_hz = default_grid(design) if f_hz is None else np.asarray(f_hz, dtype=float)
    eng = engine or _Engine(design, spec, f_hz)
    ev = eng.ev
    values = sample_values(design, spec, start, stop, seed)
    dG, dC = ev.deltas(values)
    dc = ev.dc(dG)
    bal = ev.balanced
    ref = np.abs(dc.adm) if bal else np.abs(dc.adm_se)
    if not np.all(np.isfinite(dc.adm_se)) or not np.all(np.isfinite(dc.acm_se)):
        bad = int(np.nonzero(~np.isfinite(dc.adm_se) | ~np.isfinite(dc.acm_se))[0][0])
        raise MonteCarloError(f"sample {start + bad}: the sampled network is singular")
    cmrr_se_dc = _ratio_db(dc.adm_se, dc.acm_se, ref)
    cmrr_dc = _ratio_db(dc.adm, dc.acm_dm, ref) if bal else None
    # curves: blocks of a fixed number of samples inside (memory bounded by the block)
    cse, cbal = ev.cmrr_on_grid(s_of_hz(f_hz), dG, dC, ref)
    if not np.all(np.isfinite(cse) | (cse == np.inf)):
        raise MonteCarloError("a sampled network is singular at some frequency")
    corner = eng.corners(cse, cmrr_se_dc - DB_3, dG, dC, ref)
    return MonteCarloChunk(start, stop, values, dc.adm, dc.adm_se, dc.acm_se, dc.acm_dm,
                           cmrr_se_dc, cmrr_dc, cse, cbal, corner)


def _percentiles(x: np.ndarray, q, axis=0) -> np.ndarray:
    """Percentiles that tolerate +inf (an infinite CMRR): inf where reached."""
    big = np.where(x == np.inf, 1e300, x)           # our own copy: percentile may reorder it
    p = np.percentile(big, q, axis=axis, overwrite_input=True)
    return np.where(p >= 1e299, np.inf, p)


def _fin(v):
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass(frozen=True)
class MonteCarloResult:
    """All samples of a Monte Carlo run and their statistics.

    Attributes
    ----------
    f_hz : ndarray (n_f,)
        Frequencies [Hz] of the curves and bands.
    percentiles : tuple of float
        The band percentiles, e.g. (5, 50, 95).
    band_cmrr_se_db : ndarray (n_p, n_f)
        Single-ended CMRR [dB] at each percentile and frequency (+inf = infinite).
    band_cmrr_db : ndarray (n_p, n_f) or None
        Balanced CMRR [dB] likewise (None without a balanced output).
    cmrr_se_dc_db, cmrr_dc_db, corner_hz : ndarray (n,)
        Per-sample DC CMRR [dB] and single-ended CMRR corner [Hz] (+inf where
        infinite / never falling).
    cmrr_se_db_f, cmrr_db_f : ndarray (n, n_f)
        Per-sample CMRR curves [dB].
    values : dict of str → ndarray (n,)
        The sampled design values (SI).
    """

    n: int
    seed: int
    spec: MonteCarloSpec
    f_hz: np.ndarray
    percentiles: tuple
    band_cmrr_se_db: np.ndarray
    band_cmrr_db: np.ndarray | None
    cmrr_se_dc_db: np.ndarray
    cmrr_dc_db: np.ndarray | None
    corner_hz: np.ndarray
    cmrr_se_db_f: np.ndarray = field(repr=False)
    cmrr_db_f: np.ndarray | None = field(repr=False)
    dc_acm_dm: np.ndarray | None = field(repr=False)
    dc_adm: np.ndarray | None = field(repr=False)
    values: dict = field(repr=False)

    def _column(self, at_hz: float, output: str) -> np.ndarray:
        curves = self.cmrr_se_db_f if output == "se" else self.cmrr_db_f
        if curves is None:
            raise MonteCarloError(f"output = {output!r}: this stage has no balanced output")
        hit = np.nonzero(np.isclose(self.f_hz, at_hz, rtol=1e-9, atol=0))[0]
        if hit.size == 0:
            raise MonteCarloError(f"at_hz = {at_hz:g} Hz: not on the Monte Carlo grid "
                                  "(include it in f_hz)")
        return curves[:, int(hit[0])]

    def yield_fraction(self, spec_db: float, at_hz: float, output: str = "se") -> float:
        """Fraction of samples whose CMRR at ``at_hz`` [Hz] is ≥ ``spec_db`` [dB].

        ``output`` is ``"se"`` (single-ended, default) or ``"balanced"``.
        """
        return float(np.mean(self._column(at_hz, output) >= spec_db))

    def stats(self, x: np.ndarray) -> dict:
        """Percentiles (at ``self.percentiles``) of a per-sample array, null for infinite."""
        return {f"p{q:g}": _fin(v) for q, v in zip(self.percentiles, _percentiles(x, self.percentiles))}

    def to_json(self, yield_spec: tuple[float, float] | None = None) -> dict:
        """Summary object (SI, null where infinite); bands per frequency."""
        out = {
            "n_samples": self.n,
            "seed": self.seed,
            "spreads": {k: {"kind": s.kind, "width": s.width} for k, s in self.spec.spreads},
            "percentiles": list(self.percentiles),
            "cmrr_se_dc_db": self.stats(self.cmrr_se_dc_db),
            "cmrr_dc_db": self.stats(self.cmrr_dc_db) if self.cmrr_dc_db is not None else None,
            "cmrr_corner_hz": self.stats(self.corner_hz),
            "corner_never_falls_fraction": float(np.mean(np.isinf(self.corner_hz))),
            "f_hz": [float(f) for f in self.f_hz],
            "band_cmrr_se_db": {f"p{q:g}": [_fin(v) for v in row]
                                for q, row in zip(self.percentiles, self.band_cmrr_se_db)},
        }
        if self.band_cmrr_db is not None:
            out["band_cmrr_db"] = {f"p{q:g}": [_fin(v) for v in row]
                                   for q, row in zip(self.percentiles, self.band_cmrr_db)}
        if yield_spec is not None:
            spec_db, at_hz = yield_spec
            out["yield"] = {"cmrr_se_db_min": spec_db, "at_hz": at_hz,
                            "fraction": self.yield_fraction(spec_db, at_hz)}
        return out


def run_montecarlo(design, spec: MonteCarloSpec, n: int, seed: int, f_hz=None,
                   chunk: int = 4096, percentiles=(5.0, 50.0, 95.0),
                   progress: Callable[[int], None] | None = None,
                   executor=None) -> MonteCarloResult:
    """Run ``n`` Monte Carlo samples of ``design`` with the spreads of ``spec``.

    Parameters
    ----------
    design : Design
    spec : MonteCarloSpec
    n : int
        Number of samples (≥ 1).
    seed : int
        Seed (≥ 0); the same seed gives identical results for any ``chunk``.
    f_hz : array_like, optional
        Frequencies [Hz] for the CMRR curves (default: 200 log-spaced points over
        the design's sweep range).
    chunk : int
        Samples per chunk (memory and progress granularity only); on a cluster
        the largest chunk, made smaller to give every worker several chunks.
    percentiles : sequence of float
        Band percentiles [%].
    progress : callable, optional
        Called with the number of samples finished after each chunk.
    executor : None, Executor, distributed.Client or str, optional
        Where the chunks run (:mod:`freqpair.studies.executors`): None for this
        process (default), a client or a scheduler address for a Dask
        cluster. The results are identical on every executor.

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
    from freqpair.studies.executors import chunk_ranges, get_executor, run_chunks, LocalExecutor
    ex = get_executor(executor)
    try:
        if isinstance(ex, LocalExecutor):     # one engine (one QZ) shared by all chunks
            eng = _Engine(design, spec, f)
            ranges = chunk_ranges(int(n), int(chunk))
            args = [(design, spec, a, b, seed, f, eng) for a, b in ranges]
        else:                                 # each task builds its own engine
            ranges = chunk_ranges(int(n), ex.chunk_size(int(n), int(chunk)))
            args = [(design, spec, a, b, seed, f) for a, b in ranges]
        parts = run_chunks(ex, run_chunk, args, [b - a for a, b in ranges], progress)
    finally:
        if ex is not executor:
            ex.close()

    def cat(name):
        arrs = [getattr(p, name) for p in parts]
        if arrs[0] is None:
            return None
        return arrs[0] if len(arrs) == 1 else np.concatenate(arrs)   # one chunk: no copy

    values = {k: np.concatenate([p.values[k] for p in parts]) for k in spec.keys}
    cse, cbal = cat("cmrr_se_db_f"), cat("cmrr_db_f")
    q = tuple(float(x) for x in percentiles)
    return MonteCarloResult(
        n=int(n), seed=int(seed), spec=spec, f_hz=f, percentiles=q,
        band_cmrr_se_db=_percentiles(cse, q), band_cmrr_db=None if cbal is None else
        _percentiles(cbal, q), cmrr_se_dc_db=cat("cmrr_se_dc_db"), cmrr_dc_db=cat("cmrr_dc_db"),
        corner_hz=cat("corner_hz"), cmrr_se_db_f=cse, cmrr_db_f=cbal, dc_acm_dm=cat("dc_acm_dm"),
        dc_adm=cat("dc_adm"), values=values)
