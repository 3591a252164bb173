"""Monte Carlo mismatch: CMRR(f) percentile bands, DC CMRR and corner spreads, yield.

A :class:`MonteCarloSpec` gives a spread per design key; :func:`run_montecarlo`
draws ``n`` sampled designs and evaluates them all in batches
(:class:`~freqpair.batch.BatchEvaluator`), chunk by chunk so memory stays
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

from .batch import BATCH_KEYS, BatchEvaluator
from .design import get_value, replace_value
from .errors import DesignError, FreqpairError
from .frequency import s_of_hz
from .metrics import DB_3, db, search_grid
from .responses import ZERO_GAIN_RATIO

__all__ = ["Spread", "MonteCarloSpec", "MonteCarloChunk", "MonteCarloResult", "run_chunk",
           "run_montecarlo", "sample_values", "sampled_design", "default_grid", "BLOCK",
           "MonteCarloError"]

#: Samples per random-number block (fixed: part of the reproducibility contract).
BLOCK = 1024
#: Sample × frequency elements evaluated per batch (bounds memory: ~40 MB).
BATCH_ELEMENTS = 40_000
_RELATIVE_KEYS = ("mismatch.load", "mismatch.gm")


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
        """Lowest f [Hz] where CMRR_se = level, per sample (vectorised bracketing + Illinois)."""
        n = level.size
        out = np.full(n, np.inf)
        live = np.isfinite(level)
        d = curve - level[:, None]
        lo = np.full(n, np.nan)
        hi = np.full(n, np.nan)
        below = live & (d[:, 0] <= 0)
        cross = (d[:, :-1] > 0) & (d[:, 1:] <= 0)
        has = live & ~below & cross.any(axis=1)
        if cross.shape[1]:
            idx = np.argmax(cross, axis=1)
            lo[has], hi[has] = self.f_hz[idx[has]], self.f_hz[idx[has] + 1]
        for ext, mask in ((self.low_ext, below), (self.high_ext, live & ~below & ~has)):
            sel = np.nonzero(mask)[0]
            if sel.size == 0:
                continue
            grid = np.concatenate([ext, [self.f_hz[0]]]) if ext is self.low_ext else \
                np.concatenate([[self.f_hz[-1]], ext])
            if grid.size < 2:
                continue
            g = self.ev.on_grid(s_of_hz(grid), dG[sel], dC[sel])
            de = _ratio_db(g.adm_se, g.acm_se, ref[sel][:, None]) - level[sel][:, None]
            if ext is self.low_ext:
                de[:, 0] = np.maximum(de[:, 0], 1e-300)   # treat the lowest point as DC-like
            cr = (de[:, :-1] > 0) & (de[:, 1:] <= 0)
            ok = cr.any(axis=1)
            j = np.argmax(cr, axis=1)
            lo[sel[ok]], hi[sel[ok]] = grid[j[ok]], grid[j[ok] + 1]
        todo = np.nonzero(np.isfinite(lo))[0]
        if todo.size:
            out[todo] = self._refine(lo[todo], hi[todo], level[todo], dG[todo], dC[todo],
                                     ref[todo])
        return out

    def _refine(self, lo, hi, level, dG, dC, ref):
        """Illinois (modified regula falsi) in log10 f, all samples at once.

        The bracket [a, b] keeps f(a) > 0 ≥ f(b); iteration stops when every
        bracket is narrower than 1e-13 decades or hits the level exactly.
        """
        a, b = np.log10(lo), np.log10(hi)
        fa = self.cmrr_se_at(lo, dG, dC, ref) - level
        fb = self.cmrr_se_at(hi, dG, dC, ref) - level
        side = np.zeros(a.size, dtype=int)
        c = 0.5 * (a + b)
        done = fb == 0
        c = np.where(done, b, c)
        for _ in range(200):
            act = np.nonzero(~done)[0]
            if act.size == 0:
                break
            A, B, FA, FB = a[act], b[act], fa[act], fb[act]
            with np.errstate(divide="ignore", invalid="ignore"):
                C = B - FB * (B - A) / (FB - FA)
            C = np.where(np.isfinite(C) & (C > A) & (C < B), C, 0.5 * (A + B))
            FC = self.cmrr_se_at(10.0 ** C, dG[act], dC[act], ref[act]) - level[act]
            c[act] = C
            pos = FC > 0                      # root lies in [C, B]
            sd = side[act]
            fa[act] = np.where(pos, FC, np.where(sd == -1, 0.5 * FA, FA))
            a[act] = np.where(pos, C, A)
            fb[act] = np.where(pos, np.where(sd == 1, 0.5 * FB, FB), FC)
            b[act] = np.where(pos, B, C)
            side[act] = np.where(pos, 1, -1)
            done[act] = (FC == 0) | (b[act] - a[act] <= 1e-13)
        return 10.0 ** c


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
    n = stop - start
    cse = np.empty((n, f_hz.size))
    cbal = np.empty((n, f_hz.size)) if bal else None
    step = max(1, BATCH_ELEMENTS // max(f_hz.size, 1))
    s = s_of_hz(f_hz)
    for i in range(0, n, step):
        g = ev.on_grid(s, dG[i:i + step], dC[i:i + step])
        cse[i:i + step] = _ratio_db(g.adm_se, g.acm_se, ref[i:i + step, None])
        if bal:
            cbal[i:i + step] = _ratio_db(g.adm, g.acm_dm, ref[i:i + step, None])
    if not np.all(np.isfinite(cse) | (cse == np.inf)):
        raise MonteCarloError("a sampled network is singular at some frequency")
    corner = eng.corners(cse, cmrr_se_dc - DB_3, dG, dC, ref)
    return MonteCarloChunk(start, stop, values, dc.adm, dc.adm_se, dc.acm_se, dc.acm_dm,
                           cmrr_se_dc, cmrr_dc, cse, cbal, corner)


def _percentiles(x: np.ndarray, q, axis=0) -> np.ndarray:
    """Percentiles that tolerate +inf (an infinite CMRR): inf where reached."""
    big = np.where(np.isinf(x), 1e300, x)
    p = np.percentile(big, q, axis=axis)
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
                   progress: Callable[[int], None] | None = None) -> MonteCarloResult:
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
        Samples per chunk (memory and progress granularity only).
    percentiles : sequence of float
        Band percentiles [%].
    progress : callable, optional
        Called with the number of samples finished after each chunk.

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
    eng = _Engine(design, spec, f)
    parts = []
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        parts.append(run_chunk(design, spec, start, stop, seed, f, engine=eng))
        if progress is not None:
            progress(stop - start)

    def cat(name):
        arrs = [getattr(p, name) for p in parts]
        return None if arrs[0] is None else np.concatenate(arrs)

    values = {k: np.concatenate([p.values[k] for p in parts]) for k in spec.keys}
    cse, cbal = cat("cmrr_se_db_f"), cat("cmrr_db_f")
    q = tuple(float(x) for x in percentiles)
    return MonteCarloResult(
        n=int(n), seed=int(seed), spec=spec, f_hz=f, percentiles=q,
        band_cmrr_se_db=_percentiles(cse, q), band_cmrr_db=None if cbal is None else
        _percentiles(cbal, q), cmrr_se_dc_db=cat("cmrr_se_dc_db"), cmrr_dc_db=cat("cmrr_dc_db"),
        corner_hz=cat("corner_hz"), cmrr_se_db_f=cse, cmrr_db_f=cbal, dc_acm_dm=cat("dc_acm_dm"),
        dc_adm=cat("dc_adm"), values=values)
