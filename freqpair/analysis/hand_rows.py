"""One hand estimate beside its exact value: the row type every hand table uses."""
from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["HandRow", "TWO_PI"]

TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class HandRow:
    """One approximation beside its exact value.

    Attributes
    ----------
    key : str
        Stable identifier (JSON key), e.g. ``"miller_input_pole_hz"``.
    label : str
        What is approximated, in plain words.
    method : str
        The published method / formula used.
    exact, approx : float or None
        Exact and approximate values in ``unit`` (None when undefined).
    error_pct : float or None
        100·(approx − exact)/|exact| [%]; None when either is undefined or exact is 0.
    unit : str
        ``"Hz"`` or ``"V/V"``.
    note : str or None
        Why the approximation is outside its validity here; None when it holds.
    """

    key: str
    label: str
    method: str
    exact: float | None
    approx: float | None
    error_pct: float | None
    unit: str
    note: str | None = None


def _fin(v):
    return None if v is None or not math.isfinite(v) else float(v)


def _row(key, label, method, exact, approx, unit, note=None) -> HandRow:
    exact, approx = _fin(exact), _fin(approx)
    err = None
    if exact is not None and approx is not None and exact != 0:
        err = 100.0 * (approx - exact) / abs(exact)
    return HandRow(key, label, method, exact, approx, err, unit, note)


def _par(*rs) -> float:
    g = sum(0.0 if r == math.inf else 1.0 / r for r in rs)
    return math.inf if g == 0 else 1.0 / g
