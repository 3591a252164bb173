"""Mergeable histograms on fixed bins: percentiles without keeping the samples.

A :class:`BinnedCounts` holds one histogram per row (e.g. one per frequency of
a Monte Carlo run). Bin ``k`` of every row holds the values ``x`` with
``floor(x / width) == k``; ``width`` is a power of two, so a value's bin is
exact (no rounding) and the same wherever it is computed. Only the window of
bins between a row's smallest and largest finite value is stored, so memory
follows the *spread* of the values (bins per unit of value × range), not their
number. ``−inf`` and ``+inf`` are counted apart (a CMRR that is infinite
because the common-mode gain is zero to rounding), and the exact finite
minimum and maximum of each row are kept.

Merging adds integer counts and takes minima/maxima: exact, and the same in
any order — chunks of a run may be merged as they finish, on any executor.

Percentiles follow numpy's default definition (``method="linear"``): for ``n``
values and percentile ``q`` the virtual rank is ``h = (n − 1)·q/100`` and the
answer ``x₍⌊h⌋₎ + (h − ⌊h⌋)·(x₍⌊h⌋+1₎ − x₍⌊h⌋₎)`` (0-based order statistics).
Each order statistic needed is read from its bin: the true value lies in
``[k·w, (k+1)·w)`` and the estimate is placed in that bin by its rank inside
the bin (the first and last ranks of a row are the exact minimum and maximum),
so every order statistic — and hence every percentile — is within one bin
width ``w`` of the exact one.
"""
from __future__ import annotations

import math

import numpy as np

__all__ = ["BinnedCounts", "DB_BIN", "DECADE_BIN", "lerp_percentile_index"]

#: Bin width for values in dB: 1/256 dB, so a percentile is within 0.0039 dB.
DB_BIN = 2.0 ** -8
#: Bin width for frequencies binned as log10(f): 2^-17 decade, so a percentile of a
#: frequency is within a factor 10^(2^-17) (1.76e-5 relative).
DECADE_BIN = 2.0 ** -17
#: Largest |value / width| binned (int64 keys and exact float integers stay far away).
_KEY_LIMIT = 2.0 ** 50


def lerp_percentile_index(n: int, q) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """numpy's ``method="linear"`` ranks: (lower rank, upper rank, weight) per ``q`` [%]."""
    quantiles = np.true_divide(np.asarray(q, dtype=float), 100)
    virtual = (n - 1) * quantiles
    lower = np.floor(virtual)
    gamma = virtual - lower
    lower = lower.astype(np.int64)
    upper = np.minimum(lower + 1, n - 1)
    return lower, upper, gamma


def _lerp(a, b, t):
    """numpy's ``_lerp`` (the same rounding), with infinities handled: the result is
    the lower value where the weight is 0 or both are equal, +inf (−inf) where the
    upper (lower) value is +inf (−inf)."""
    a, b, t = (np.asarray(x, dtype=float) for x in (a, b, t))
    with np.errstate(invalid="ignore"):
        diff = b - a
        out = a + diff * t
        out = np.where(t >= 0.5, b - diff * (1 - t), out)
    out = np.where(b == np.inf, np.inf, out)
    out = np.where(a == -np.inf, -np.inf, out)
    return np.where((t == 0) | (a == b), a, out)


class BinnedCounts:
    """Per-row histograms on bins of a fixed width (see the module notes).

    Parameters
    ----------
    width : float
        Bin width, a power of two (e.g. :data:`DB_BIN`).
    n_rows : int
        Number of histograms (rows).

    Attributes
    ----------
    n, neg_inf, pos_inf : ndarray of int64 (n_rows,)
        Values counted, of which −inf and +inf.
    vmin, vmax : ndarray (n_rows,)
        Exact smallest and largest finite value (+inf / −inf where none).
    lo : ndarray of int64 (n_rows,)
        First bin of each row's stored window.
    counts : list of (ndarray of int64 or None)
        Each row's counts over its window (None: no finite value).
    """

    def __init__(self, width: float, n_rows: int):
        m, e = math.frexp(width)
        if not (width > 0 and m == 0.5):
            raise ValueError(f"width = {width!r}: must be a power of two")
        self.width = float(width)
        self.n_rows = int(n_rows)
        self.n = np.zeros(n_rows, dtype=np.int64)
        self.neg_inf = np.zeros(n_rows, dtype=np.int64)
        self.pos_inf = np.zeros(n_rows, dtype=np.int64)
        self.vmin = np.full(n_rows, np.inf)
        self.vmax = np.full(n_rows, -np.inf)
        self.lo = np.zeros(n_rows, dtype=np.int64)
        self.counts: list = [None] * n_rows

    # ------------------------------------------------------------ building
    @classmethod
    def of(cls, values, width: float) -> "BinnedCounts":
        """Histograms of ``values`` ``(n_values, n_rows)`` (a 1-D array is one row).

        Raises
        ------
        ValueError
            On NaN, or a finite value too large for the bins (|x| ≥ 2^50·width).
        """
        v = np.asarray(values, dtype=float)
        if v.ndim == 1:
            v = v[:, None]
        n_v, n_rows = v.shape
        h = cls(width, n_rows)
        if n_v == 0:
            return h
        h.n[:] = n_v
        scale = 1.0 / width                       # exact: width is a power of two
        vmin, vmax = v.min(axis=0), v.max(axis=0)
        if np.all(np.isfinite(vmin)) and np.all(np.isfinite(vmax)):
            fin = None                            # the common case: no mask needed
        else:
            if np.isnan(vmin).any() or np.isnan(vmax).any():
                raise ValueError("cannot bin NaN")
            fin = np.isfinite(v)
            h.neg_inf = np.count_nonzero(v == -np.inf, axis=0).astype(np.int64)
            h.pos_inf = np.count_nonzero(v == np.inf, axis=0).astype(np.int64)
            vmin = np.where(fin, v, np.inf).min(axis=0)
            vmax = np.where(fin, v, -np.inf).max(axis=0)
        h.vmin, h.vmax = vmin, vmax
        has = np.isfinite(vmin)
        kmin = np.floor(np.where(has, vmin, 0.0) * scale)       # floor is monotonic: the
        kmax = np.floor(np.where(has, vmax, 0.0) * scale)       # extremes' bins bound all
        if np.any(np.abs(kmin) >= _KEY_LIMIT) or np.any(np.abs(kmax) >= _KEY_LIMIT):
            raise ValueError("a value is too large to bin")
        h.lo = kmin.astype(np.int64)
        span = np.where(has, kmax - kmin + 1, 0).astype(np.int64)
        t = v * scale
        np.floor(t, out=t)
        if fin is not None:
            t[~fin] = 0.0                         # not counted (masked below); castable
        total = int(span.sum())
        if total <= 4 * t.size:
            # narrow rows: one count over all rows' windows laid end to end
            starts = np.zeros(n_rows, dtype=np.int64)
            np.cumsum(span[:-1], out=starts[1:])
            t += starts - kmin                    # exact integers
            idx = t.astype(np.int64)
            flat = np.bincount(idx.ravel() if fin is None else idx[fin], minlength=total)
            for r in np.nonzero(has)[0]:
                h.counts[r] = flat[starts[r]:starts[r] + span[r]]
        else:
            # wide rows (long tails): one count per row, each over its own window
            t -= kmin                             # exact integers: each row's bins from 0
            keys = np.empty((n_rows, n_v), dtype=np.int64)
            keys[...] = t.T
            for r in np.nonzero(has)[0]:
                row = keys[r] if fin is None else keys[r][fin[:, r]]
                h.counts[r] = np.bincount(row, minlength=int(span[r]))
        return h

    # ------------------------------------------------------------ merging
    def merge(self, other: "BinnedCounts") -> "BinnedCounts":
        """Add ``other``'s counts to these (in place; ``other`` is not changed)."""
        if other.width != self.width or other.n_rows != self.n_rows:
            raise ValueError("cannot merge histograms of different bins or rows")
        self.n += other.n
        self.neg_inf += other.neg_inf
        self.pos_inf += other.pos_inf
        np.minimum(self.vmin, other.vmin, out=self.vmin)
        np.maximum(self.vmax, other.vmax, out=self.vmax)
        for r, oc in enumerate(other.counts):
            if oc is None:
                continue
            olo = int(other.lo[r])
            sc = self.counts[r]
            if sc is None:
                self.counts[r] = np.array(oc, dtype=np.int64)      # own copy
                self.lo[r] = olo
                continue
            slo = int(self.lo[r])
            lo, hi = min(slo, olo), max(slo + sc.size, olo + oc.size)
            if lo < slo or hi > slo + sc.size:      # grow, with slack on the growing side
                pad = (hi - lo) // 8
                new_lo = lo - pad if lo < slo else lo
                new_hi = hi + pad if hi > slo + sc.size else hi
                grown = np.zeros(new_hi - new_lo, dtype=np.int64)
                grown[slo - new_lo:slo - new_lo + sc.size] = sc
                sc, slo = grown, new_lo
                self.counts[r], self.lo[r] = sc, slo
            sc[olo - slo:olo - slo + oc.size] += oc
        return self

    # ------------------------------------------------------------ reading
    def order_statistics(self, row: int, ranks) -> np.ndarray:
        """Estimates of the 0-based order statistics ``ranks`` of one row (see module notes)."""
        ranks = np.asarray(ranks, dtype=np.int64)
        out = np.empty(ranks.shape)
        neg, pos, n = int(self.neg_inf[row]), int(self.pos_inf[row]), int(self.n[row])
        n_fin = n - neg - pos
        out[ranks < neg] = -np.inf
        out[ranks >= n - pos] = np.inf
        fin = (ranks >= neg) & (ranks < n - pos)
        if fin.any():
            r = ranks[fin] - neg
            counts = self.counts[row]
            cum = np.cumsum(counts)
            b = np.searchsorted(cum, r, side="right")
            c = counts[b]
            inside = r - (cum[b] - c)
            est = (self.lo[row] + b + (inside + 0.5) / c) * self.width
            est = np.clip(est, self.vmin[row], self.vmax[row])
            est = np.where(r == 0, self.vmin[row], est)
            est = np.where(r == n_fin - 1, self.vmax[row], est)
            out[fin] = est
        return out

    def percentiles(self, q, transform=None) -> np.ndarray:
        """Percentiles ``q`` [%] of every row, shape ``(len(q), n_rows)`` (NaN for an
        empty row). ``transform`` maps the order statistics before they are
        interpolated (e.g. ``lambda x: 10**x`` for frequencies binned in log10)."""
        q = np.atleast_1d(np.asarray(q, dtype=float))
        out = np.full((q.size, self.n_rows), np.nan)
        for row in range(self.n_rows):
            n = int(self.n[row])
            if n == 0:
                continue
            lower, upper, gamma = lerp_percentile_index(n, q)
            a, b = np.split(self.order_statistics(row, np.concatenate([lower, upper])), 2)
            if transform is not None:
                with np.errstate(over="ignore"):
                    a, b = transform(a), transform(b)
            out[:, row] = _lerp(a, b, gamma)
        return out

    @property
    def nbytes(self) -> int:
        """Bytes held by the counts and the per-row arrays."""
        return sum(c.nbytes for c in self.counts if c is not None) + 7 * 8 * self.n_rows

    # ------------------------------------------------------------ pickling (to and from workers)
    def __getstate__(self):
        state = dict(self.__dict__)
        packed = []
        for c in self.counts:            # smallest unsigned type that holds the counts
            if c is None:
                packed.append(None)
                continue
            top = int(c.max()) if c.size else 0
            dt = np.uint8 if top < 2 ** 8 else np.uint16 if top < 2 ** 16 else \
                np.uint32 if top < 2 ** 32 else np.int64
            packed.append(c.astype(dt))
        state["counts"] = packed
        return state

    def __setstate__(self, state):
        state["counts"] = [None if c is None else c.astype(np.int64) for c in state["counts"]]
        self.__dict__.update(state)

    def __eq__(self, other):
        """Same bins, counts, infinities and extremes (the stored windows may differ)."""
        if not isinstance(other, BinnedCounts):
            return NotImplemented
        if (self.width, self.n_rows) != (other.width, other.n_rows):
            return False
        for name in ("n", "neg_inf", "pos_inf", "vmin", "vmax"):
            if not np.array_equal(getattr(self, name), getattr(other, name)):
                return False
        for r in range(self.n_rows):
            if self._trimmed(r) != other._trimmed(r):
                return False
        return True

    def _trimmed(self, row):
        c = self.counts[row]
        if c is None:
            return None
        nz = np.nonzero(c)[0]
        if nz.size == 0:
            return None
        return int(self.lo[row] + nz[0]), c[nz[0]:nz[-1] + 1].tobytes()

    __hash__ = None

    def __repr__(self):
        return (f"BinnedCounts(width={self.width!r}, rows={self.n_rows}, "
                f"values={int(self.n.sum())}, {self.nbytes} bytes)")
