"""Pole paths: the exact poles and zeros of one gain while one design value moves.

At every value the design is rebuilt (validated, biased, stamped) and the
roots of the named gain come from the network's pencil exactly as
:func:`freqpair.analysis.poles.response_zpk` finds them (modes the gain cannot
see are cancelled). From one value to the next each root is paired with the
nearest root of the previous step (a minimum-total-distance assignment on a
log-magnitude/angle scale), so a path is one pole followed as the value
moves — two real poles that meet and split into a complex pair stay two
paths. A step that gains or loses roots starts or ends paths (None there).

DESIGN.md §7i gives the JSON form; frequencies are s/2π [Hz].
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from freqpair.analysis.poles import gain_roots
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.blas_threads import single_blas_thread
from freqpair.circuit.stage import build_stage
from freqpair.design.errors import FreqpairError
from freqpair.design.keys import get_value, replace_value

__all__ = ["Locus", "LocusError", "locus", "pair_paths"]


class LocusError(FreqpairError, ValueError):
    """A pole-path request that cannot run (names the field and the value)."""


@dataclass(frozen=True)
class Locus:
    """Pole and zero paths of one gain.

    Attributes
    ----------
    key : str
        The dotted design key that moves.
    gain : str
        The gain's name (``"adm"``, ``"a_total"``, ``"a_vneg"``, ...).
    values : tuple of float
        The key's values, in order [SI].
    poles_hz, zeros_hz : ndarray of complex, shape (n_values, n_paths)
        s/2π of each path at each value [Hz]; NaN where a path does not exist.
    errors : dict
        Value index → one-line message for values that could not be analysed.
    """

    key: str
    gain: str
    values: tuple
    poles_hz: np.ndarray
    zeros_hz: np.ndarray
    errors: dict

    def to_json(self) -> dict:
        """DESIGN.md §7i: ``{key, gain, values, poles_hz, zeros_hz}``, one list per
        value in path order (a path missing at a value is left out of that list's
        tail when it never started, else given as null)."""
        def lists(paths):
            out = []
            for row in paths:
                items = [None if not np.isfinite(z) else {"re": float(z.real),
                                                          "im": float(z.imag)} for z in row]
                while items and items[-1] is None:
                    items.pop()
                out.append(items)
            return out
        return {"key": self.key, "gain": self.gain, "values": [float(v) for v in self.values],
                "poles_hz": lists(self.poles_hz), "zeros_hz": lists(self.zeros_hz),
                "errors": {str(k): v for k, v in sorted(self.errors.items())}}


def _distance(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Pairwise distances between roots on a scale fit for decades apart: the
    difference of log-magnitudes and of angles (radians), Euclidean."""
    def coords(z):
        mag = np.log(np.maximum(np.abs(z), 1e-300))
        return mag, np.angle(z)
    ma, aa = coords(a)
    mb, ab = coords(b)
    dm = ma[:, None] - mb[None, :]
    da = np.angle(np.exp(1j * (aa[:, None] - ab[None, :])))
    return np.hypot(dm, da)


def pair_paths(steps: list) -> np.ndarray:
    """Order the roots of successive steps into paths.

    Parameters
    ----------
    steps : list of ndarray of complex
        The roots at each step (any count per step).

    Returns
    -------
    ndarray of complex, shape (n_steps, n_paths)
        NaN where a path has no root at that step. A path that loses its root
        ends; a root with no path to continue starts a new one.
    """
    from scipy.optimize import linear_sum_assignment
    nan = complex(np.nan, np.nan)
    paths: list[list] = []
    last: list = []                 # the last root of each path (None: ended)
    for k, roots in enumerate(steps):
        roots = np.asarray(roots, dtype=complex)
        alive = [i for i, z in enumerate(last) if z is not None]
        assigned = {}
        if alive and roots.size:
            cost = _distance(np.array([last[i] for i in alive]), roots)
            for r, c in zip(*linear_sum_assignment(cost)):
                assigned[alive[r]] = int(c)
        for i, path in enumerate(paths):
            if i in assigned:
                z = roots[assigned[i]]
                path.append(z)
                last[i] = z
            else:
                path.append(nan)
                last[i] = None
        used = set(assigned.values())
        for c, z in enumerate(roots):
            if c not in used:
                paths.append([nan] * k + [z])
                last.append(z)
    out = np.full((len(steps), len(paths)), nan, dtype=complex)
    for i, path in enumerate(paths):
        out[:, i] = path
    return out


def locus(design, key: str, values, gain: str | None = None) -> Locus:
    """Poles and zeros of a gain while ``key`` takes ``values``.

    Parameters
    ----------
    design : Design
    key : str
        Dotted design key (any value a sweep may move, e.g. ``"tail.capacitance"``,
        ``"second_stage.miller_capacitance"``, ``"element.tail wiring.value"``).
    values : sequence of float
        Its values [SI], in order.
    gain : str, optional
        ``"adm"``, ``"adm_se"``, ``"acm_se"``, ``"acm_dm"``, ``"acm_cm"``,
        ``"a_total"``, ``"acm_total"``, ``"a_vpos"``, ``"a_vneg"``; default the
        stage's primary gain.

    Returns
    -------
    Locus

    Raises
    ------
    LocusError
        No values, non-finite values, or no value could be analysed.
    """
    values = tuple(float(v) for v in values)
    if not values or not all(math.isfinite(v) for v in values):
        raise LocusError(f"{key}: need one or more finite values")
    get_value(design, key)
    with single_blas_thread():
        return _locus(design, key, values, gain)


def _locus(design, key, values, gain) -> Locus:
    pole_steps, zero_steps, errors = [], [], {}
    name = gain
    for i, v in enumerate(values):
        try:
            resp = StageResponses(build_stage(replace_value(design, key, v)))
            name = name or resp.primary
            poles, zeros = gain_roots(resp, name, polish=False)
        except FreqpairError as exc:
            errors[i] = str(exc)
            poles = zeros = np.zeros(0, dtype=complex)
        pole_steps.append(poles / (2 * math.pi))
        zero_steps.append(zeros / (2 * math.pi))
    if len(errors) == len(values):
        raise LocusError(f"{key}: no value could be analysed ({errors[0]})")
    return Locus(key, name, values, pair_paths(pole_steps), pair_paths(zero_steps), errors)
