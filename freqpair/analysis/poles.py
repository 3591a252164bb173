"""Exact poles and zeros of the stage's named gains, and the rational response rebuilt.

Poles are the finite generalized eigenvalues of the descriptor pencil
(G, −C); zeros of one gain those of the augmented pencil
[[G, b], [l, 0]] against [[C, 0], [0, 0]] (see :mod:`freqpair.circuit.network`).
A mode that the excitation does not reach, or the output does not see (the
common-mode modes in a matched pair's differential path), appears both as a
pole and as a zero at the same place: such coincident pairs are reported as
*cancelled* (``ResponseZPK.cancelled_rad_s``) and left out of the rational
response, never dropped silently.

The gain ``k`` of ``H(s) = k·Π(s − z)/Π(s − p)`` matches the direct DC solve
(or, when the gain is zero at DC or a pole sits at the origin, the direct
solve at a reference frequency). Frequencies inside are rad/s; Hz at the edge.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from freqpair.design.errors import FreqpairError
from freqpair.circuit.frequency import s_of_hz
from freqpair.analysis.responses import ZERO_GAIN_RATIO

__all__ = ["ResponseZPK", "response_zpk", "gain_roots", "pole_zero_json", "CANCEL_REL_TOL",
           "ORIGIN_REL_TOL", "RESPONSE_LABELS"]

#: A pole and a zero closer than this (relative to their magnitude) cancel.
CANCEL_REL_TOL = 1e-9
#: A root smaller than this fraction of the pencil's frequency scale sits at the origin.
ORIGIN_REL_TOL = 1e-12
#: Imaginary parts below this fraction of the magnitude are rounding (the root is real).
REAL_REL_TOL = 1e-10

RESPONSE_LABELS = {
    "adm": "A_dm (balanced)",
    "adm_se": "A_dm,se (at o2)",
    "acm_se": "A_cm,se",
    "acm_dm": "A_cm-dm",
    "acm_cm": "A_cm-cm",
    "a_total": "A_total",
    "acm_total": "A_cm,total",
    "a_vpos": "A_vpos (positive rail to the single-ended output)",
    "a_vneg": "A_vneg (negative rail to the single-ended output)",
}


class PoleZeroError(FreqpairError, ValueError):
    """A requested response does not exist for this stage (names it)."""


def _frozen(a) -> np.ndarray:
    a = np.array(a, dtype=complex)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class ResponseZPK:
    """One gain as zeros, poles and gain: ``H(s) = k·Π(s − z)/Π(s − p)``.

    Attributes
    ----------
    name : str
        Response name (``"adm"``, ``"adm_se"``, ``"acm_se"``, ``"acm_dm"``, ...).
    zeros_rad_s, poles_rad_s : ndarray of complex
        Finite zeros and poles [rad/s], cancelled pairs removed, sorted by magnitude;
        complex roots come in exact conjugate pairs.
    gain : float
        k (real), in the response's units per (rad/s)^(n_z − n_p).
    cancelled_rad_s : tuple of (complex, complex)
        Coincident (pole, zero) pairs [rad/s] left out of the rational response.
    identically_zero : bool
        True when the gain is zero to rounding at every frequency (e.g. A_cm-dm of
        a perfectly matched pair); then there are no poles or zeros and ``gain`` is 0.
    reference_hz : float
        Frequency [Hz] at which ``gain`` was matched to the direct solve (0 = DC).
    """

    name: str
    zeros_rad_s: np.ndarray
    poles_rad_s: np.ndarray
    gain: float
    cancelled_rad_s: tuple = ()
    identically_zero: bool = False
    reference_hz: float = 0.0

    @property
    def zeros_at_infinity(self) -> int:
        """Number of zeros at infinity (poles − finite zeros; high-frequency roll-off order)."""
        return max(self.poles_rad_s.size - self.zeros_rad_s.size, 0)

    def zpk(self) -> tuple[np.ndarray, np.ndarray, float]:
        """``(zeros [rad/s], poles [rad/s], k)`` as plain arrays."""
        return np.array(self.zeros_rad_s), np.array(self.poles_rad_s), float(self.gain)

    def evaluate_s(self, s) -> np.ndarray:
        """The rational response at complex frequencies ``s`` [rad/s]."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        return self.gain * _ratio(s, self.zeros_rad_s, self.poles_rad_s)

    def evaluate(self, f_hz) -> np.ndarray:
        """The rational response at frequencies ``f_hz`` [Hz] (complex array)."""
        return self.evaluate_s(s_of_hz(np.atleast_1d(np.asarray(f_hz, dtype=float))))

    def transfer_function(self):
        """The gain as a :class:`control.TransferFunction` [s in rad/s], built from
        the zeros, poles and gain (not through a state-space conversion)."""
        import control
        z, p, k = self.zpk()
        return control.zpk(z, p, k)


# ---------------------------------------------------------------- helpers

def _ratio(s: np.ndarray, zeros: np.ndarray, poles: np.ndarray) -> np.ndarray:
    """Π(s − z)/Π(s − p), interleaved by magnitude so partial products stay in range."""
    zs = zeros[np.argsort(np.abs(zeros))]
    ps = poles[np.argsort(np.abs(poles))]
    out = np.ones(s.shape, dtype=complex)
    m = min(zs.size, ps.size)
    for i in range(m):
        out *= (s - zs[i]) / (s - ps[i])
    for z in zs[m:]:
        out *= (s - z)
    for p in ps[m:]:
        out /= (s - p)
    return out


def _refine(A: np.ndarray, E: np.ndarray, roots: np.ndarray, steps: int = 3) -> np.ndarray:
    """Polish eigenvalues of the pencil A + s·E by two-sided Rayleigh-quotient iteration.

    One frequency scale cannot condition roots that span many decades; a few
    inverse-iteration steps at each root restore full relative accuracy. A
    step that would move a root by more than 1e-3 of its magnitude, or by more
    than a quarter of its distance to the nearest other root, is refused (it
    would be converging to a neighbour: two poles 0.08 % apart were once both
    polished onto the same value).
    """
    out = np.array(roots, dtype=complex)
    n = A.shape[0]
    ones = np.ones(n)
    start = out.copy()
    for i, lam0 in enumerate(out):
        if lam0 == 0:
            continue
        others = np.delete(start, i)
        reach = 1e-3 * abs(lam0)
        if others.size:
            reach = min(reach, 0.25 * float(np.min(np.abs(others - lam0))))
        lam = lam0
        try:
            M = A + lam * E
            v = np.linalg.solve(M, ones)
            u = np.linalg.solve(M.conj().T, ones)
            for _ in range(steps):
                den = np.vdot(u, E @ v)
                if den == 0 or not np.isfinite(den):
                    break
                new = -np.vdot(u, A @ v) / den
                if not np.isfinite(new) or abs(new - lam0) > reach:
                    break
                lam = new
                M = A + lam * E
                v = np.linalg.solve(M, E @ v)
                u = np.linalg.solve(M.conj().T, E.conj().T @ u)
                v /= np.linalg.norm(v)
                u /= np.linalg.norm(u)
                if not (np.all(np.isfinite(v)) and np.all(np.isfinite(u))):
                    break
        except np.linalg.LinAlgError:
            pass     # exactly singular at lam: lam is already an eigenvalue
        out[i] = lam
    return out


def _augmented(G, C, b, l):
    n = G.shape[0]
    Ga = np.zeros((n + 1, n + 1))
    Ca = np.zeros((n + 1, n + 1))
    Ga[:n, :n] = G
    Ga[:n, n] = b
    Ga[n, :n] = l
    Ca[:n, :n] = C
    return Ga, Ca


def _clean(roots: np.ndarray, s0: float, snap_origin: bool = True) -> np.ndarray:
    """Snap roots at the origin to 0 (when ``snap_origin``) and near-real roots to
    real; rebuild complex roots as exact conjugate pairs; sort by magnitude."""
    out = []
    for r in np.asarray(roots, dtype=complex):
        mag = abs(r)
        if snap_origin and mag <= ORIGIN_REL_TOL * s0:
            out.append(0j)
        elif abs(r.imag) <= REAL_REL_TOL * mag:
            out.append(complex(r.real, 0.0))
        elif r.imag > 0:
            out.extend([r, r.conjugate()])
    arr = np.array(out, dtype=complex)
    return arr[np.lexsort((arr.imag, np.abs(arr)))] if arr.size else arr


def _cancel(poles: np.ndarray, zeros: np.ndarray, s0: float):
    """Remove coincident (pole, zero) pairs; returns (poles, zeros, pairs)."""
    free = list(range(poles.size))
    kept_z = []
    pairs = []
    floor = ORIGIN_REL_TOL * s0
    for z in zeros:
        if not free:
            kept_z.append(z)
            continue
        d = np.abs(poles[free] - z)
        j = int(np.argmin(d))
        if d[j] <= CANCEL_REL_TOL * max(abs(z), abs(poles[free[j]])) + floor:
            pairs.append((complex(poles[free[j]]), complex(z)))
            free.pop(j)
        else:
            kept_z.append(z)
    return poles[free], np.array(kept_z, dtype=complex), tuple(pairs)


def _check_name(responses, name: str) -> None:
    if name not in RESPONSE_LABELS:
        raise PoleZeroError(f"response {name!r}: unknown (one of {', '.join(RESPONSE_LABELS)})")
    if responses.dc().get(name) is None:
        raise PoleZeroError(f"response {name!r}: not defined for this stage")


def response_zpk(analysis, name: str | None = None) -> ResponseZPK:
    """Exact zeros, poles and gain of one named gain.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    name : str, optional
        ``"adm"``, ``"adm_se"``, ``"acm_se"``, ``"acm_dm"`` (also ``"acm_cm"``,
        ``"a_total"``, ``"acm_total"``); default the primary gain.

    Returns
    -------
    ResponseZPK
        Poles and zeros [rad/s] with coincident pairs cancelled; gain matched to
        the direct solve at DC (or at a reference frequency when the DC gain is zero).

    Raises
    ------
    PoleZeroError
        Unknown response, or one this stage does not have.
    """
    cache = _cache_of(analysis)
    name = name or analysis.primary
    if name in cache:
        return cache[name]
    resp = analysis.responses
    _check_name(resp, name)
    solver = resp.solver
    s0 = solver.s0
    all_poles = _poles(resp, polish=True)

    # probe points: DC and j·|p| for every pole (and j·s0)
    probe_w = np.unique(np.concatenate([np.abs(all_poles[all_poles != 0]), [s0]]))
    probe_f = probe_w / (2 * math.pi)
    h_dc = complex(resp.dc().get(name)[0])
    h_probe = resp.gain(name, probe_f)
    prim_dc = abs(complex(resp.dc().get(analysis.primary)[0]))
    prim_probe = np.abs(resp.gain(analysis.primary, probe_f))
    reference = max(prim_dc, float(prim_probe.max()))
    if max(abs(h_dc), float(np.abs(h_probe).max())) <= ZERO_GAIN_RATIO * reference:
        empty = _frozen([])
        result = ResponseZPK(name, empty, empty, 0.0, (), True, 0.0)
        cache[name] = result
        return result

    zeros = _zeros(resp, name, abs(h_dc) <= ZERO_GAIN_RATIO * reference, polish=True)
    poles, zeros, pairs = _cancel(all_poles, zeros, s0)
    has_origin = bool(np.any(poles == 0) or np.any(zeros == 0))
    if not has_origin and abs(h_dc) > ZERO_GAIN_RATIO * reference:
        s_ref, h_ref, f_ref = 0j, h_dc, 0.0
    else:
        i = int(np.argmax(np.abs(h_probe)))
        f_ref = float(probe_f[i])
        s_ref, h_ref = complex(s_of_hz(f_ref)), complex(h_probe[i])
    k = h_ref / complex(_ratio(np.array([s_ref]), zeros, poles)[0])
    result = ResponseZPK(name, _frozen(zeros), _frozen(poles), float(k.real), pairs, False,
                         f_ref)
    cache[name] = result
    return result


def _poles(resp, polish: bool) -> np.ndarray:
    """The network's poles [rad/s]; the DC solve exists (G is regular), so none sits
    at the origin: a slow pole far below the pencil's scale is kept, never snapped."""
    solver = resp.solver
    roots = solver.poles()
    if polish:
        roots = _refine(solver.G, solver.C, roots)
    return _clean(roots, solver.s0, snap_origin=False)


def _zeros(resp, name: str, dc_is_zero: bool, polish: bool) -> np.ndarray:
    """Zeros of one gain [rad/s]; a zero sits at the origin only when the DC gain
    is zero (to rounding)."""
    solver = resp.solver
    l, kind = resp.output_row(name)
    b = resp.excitation(kind)
    roots = solver.zeros(b, l)
    if polish:
        roots = _refine(*_augmented(solver.G, solver.C, b, l), roots)
    return _clean(roots, solver.s0, snap_origin=dc_is_zero)


def gain_roots(resp, name: str, polish: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Poles and zeros [rad/s] of one named gain of a :class:`StageResponses`,
    coincident pole-zero pairs cancelled (as :func:`response_zpk` finds them,
    without its gain and probes). ``polish=False`` skips the Rayleigh polishing
    (faster; roots then carry the eigenvalue solver's accuracy).
    """
    _check_name(resp, name)
    h_dc = abs(complex(resp.dc().get(name)[0]))
    ref = abs(complex(resp.dc().get(resp.primary)[0]))
    poles = _poles(resp, polish)
    zeros = _zeros(resp, name, h_dc <= ZERO_GAIN_RATIO * ref, polish)
    poles, zeros, _ = _cancel(poles, zeros, resp.solver.s0)
    return poles, zeros


def _cache_of(analysis) -> dict:
    """A per-Analysis cache (Analysis is frozen; the dict lives beside it)."""
    cache = analysis.__dict__.get("_zpk_cache")
    if cache is None:
        cache = {}
        object.__setattr__(analysis, "_zpk_cache", cache)
    return cache


def _json_roots(roots) -> list[dict]:
    out = []
    for r in roots:
        re, im = r.real / (2 * math.pi), r.imag / (2 * math.pi)
        if math.isfinite(re) and math.isfinite(im):
            out.append({"re": float(re), "im": float(im)})
    return out


def pole_zero_json(analysis) -> dict:
    """JSON keys ``poles_hz`` and ``zeros_hz`` for the primary gain (s/2π, signs kept,
    cancelled pairs removed)."""
    zpk = response_zpk(analysis, analysis.primary)
    return {"poles_hz": _json_roots(zpk.poles_rad_s), "zeros_hz": _json_roots(zpk.zeros_rad_s)}
