"""Crossings on the exact response: bracket on a grid, refine by root-finding.

Frequencies such as f_3dB, the unity-gain frequency and the CMRR corner are
"the lowest frequency where a curve reaches a level". They are bracketed on a
search grid chosen from the network's natural frequencies (not the plotting
grid) and refined with Brent's method (:func:`freqpair.analysis.roots.brent_root`) on the
exact response.
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np
from freqpair.analysis.roots import brent_root

__all__ = ["search_grid", "lowest_crossing", "db", "DB_3"]

DB_3 = 20.0 * math.log10(math.sqrt(2.0))   # 3.0103 dB

F_MIN_HZ = 1e-9
F_MAX_HZ = 1e18


def db(x) -> np.ndarray:
    """20·log10|x| [dB]; zero maps to −inf (callers turn that into null)."""
    mag = np.abs(x)
    if np.all(mag > 0):                        # the usual case: no zero to guard
        return 20.0 * np.log10(mag)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(mag)


def search_grid(pole_rad_s: np.ndarray, f_lo_hz: float, f_hi_hz: float,
                points_per_decade: int = 40) -> np.ndarray:
    """Log grid [Hz] from 3 decades below the slowest natural frequency to 3
    decades above the fastest (and at least the sweep range)."""
    mags = np.abs(pole_rad_s) / (2 * np.pi)
    mags = mags[mags > 0]
    lo, hi = f_lo_hz, f_hi_hz
    if mags.size:
        lo = min(lo, mags.min() / 1e3)
        hi = max(hi, mags.max() * 1e3)
    lo = max(lo, F_MIN_HZ)
    hi = min(hi, F_MAX_HZ)
    n = int(math.ceil(math.log10(hi / lo) * points_per_decade)) + 1
    return np.logspace(math.log10(lo), math.log10(hi), n)


def lowest_crossing(curve_db: Callable[[np.ndarray], np.ndarray], level_db: float,
                    grid_hz: np.ndarray, values_db: np.ndarray | None = None) -> float | None:
    """Lowest frequency [Hz] where ``curve_db(f) == level_db``, or None.

    Parameters
    ----------
    curve_db : callable
        Exact curve in dB as a function of frequency [Hz] (vectorised).
    level_db : float
        The level [dB].
    grid_hz : ndarray
        Bracketing grid [Hz], increasing.
    values_db : ndarray, optional
        ``curve_db(grid_hz)`` if already computed.
    """
    if values_db is None:
        values_db = curve_db(grid_hz)
    d = np.asarray(values_db, dtype=float) - level_db
    d = np.where(np.isnan(d), np.inf, d)
    sign = np.sign(d)
    hits = np.nonzero(sign[:-1] * sign[1:] <= 0)[0]
    if hits.size == 0:
        return None
    i = int(hits[0])
    if d[i] == 0:
        return float(grid_hz[i])
    if d[i + 1] == 0:
        return float(grid_hz[i + 1])
    if not (np.isfinite(d[i]) and np.isfinite(d[i + 1])):
        return float(grid_hz[i + 1])

    def g(x):
        return float(curve_db(np.array([10.0 ** x]))[0] - level_db)

    a, b = math.log10(grid_hz[i]), math.log10(grid_hz[i + 1])
    ga, gb = g(a), g(b)
    if ga * gb > 0:
        # the grid and the exact re-evaluation disagree in sign only by rounding
        # (a curve lying on the level within ~1e-12 dB): the nearer end is the answer
        return float(grid_hz[i] if abs(ga) <= abs(gb) else grid_hz[i + 1])
    if ga == 0 or gb == 0:
        return float(grid_hz[i] if ga == 0 else grid_hz[i + 1])
    x = brent_root(g, a, b, xtol=1e-13, rtol=1e-13, maxiter=200, fa=ga, fb=gb)
    return 10.0 ** x
