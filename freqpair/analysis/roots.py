"""Brent's bracketed root finder for the crossings (f_3dB, UGF, corners).

The same algorithm as :func:`scipy.optimize.brentq` (inverse quadratic
interpolation and secant steps, falling back to bisection; Brent, *Algorithms
for Minimization without Derivatives*, 1973, ch. 4), written here so that
``freqpair analyze`` need not import :mod:`scipy.optimize` (about a fifth of a
second, more than the analysis itself). ``tests/test_roots.py`` checks it
against scipy's on the same functions.
"""
from __future__ import annotations

import math
from typing import Callable

__all__ = ["brent_root", "RootError"]

_EPS = 2.220446049250313e-16


class RootError(ValueError):
    """The interval does not bracket a root, or the iteration did not converge."""


def brent_root(f: Callable[[float], float], a: float, b: float, *, xtol: float = 2e-12,
               rtol: float = 4 * _EPS, maxiter: int = 100, fa: float | None = None,
               fb: float | None = None) -> float:
    """A root of ``f`` in ``[a, b]``, where ``f(a)`` and ``f(b)`` differ in sign.

    Parameters
    ----------
    f : callable
        A continuous real function of one real variable.
    a, b : float
        The bracket.
    xtol, rtol : float
        The root is returned once the bracket is below ``xtol + rtol·|x|``.
    maxiter : int
        Iteration limit.
    fa, fb : float, optional
        ``f(a)`` and ``f(b)`` when the caller already has them (saves two calls).

    Returns
    -------
    float
        The root, to the tolerance.

    Raises
    ------
    RootError
        When ``f(a)·f(b) > 0`` or after ``maxiter`` iterations.
    """
    xpre, xcur = float(a), float(b)
    fpre = float(f(xpre)) if fa is None else float(fa)
    fcur = float(f(xcur)) if fb is None else float(fb)
    if fpre * fcur > 0:
        raise RootError(f"f({a:g}) and f({b:g}) have the same sign")
    if fpre == 0:
        return xpre
    if fcur == 0:
        return xcur
    xblk = fblk = spre = scur = 0.0
    for _ in range(maxiter):
        if fpre != 0 and fcur != 0 and (math.copysign(1, fpre) != math.copysign(1, fcur)):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):          # keep the best point in xcur
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:               # secant
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:                          # inverse quadratic interpolation
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry    # accept the interpolation
            else:
                spre = scur = sbis         # bisect
        else:
            spre = scur = sbis
        xpre, fpre = xcur, fcur
        xcur += scur if abs(scur) > delta else (delta if sbis > 0 else -delta)
        fcur = float(f(xcur))
    raise RootError(f"no convergence in {maxiter} iterations")
