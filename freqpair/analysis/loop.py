"""The stage in a feedback loop: margins, closed-loop response and step response.

Loop gain ``T(s) = β(s) · A(s) · sign`` (DESIGN.md §2, §7e) where ``A`` is the
stage's primary gain (balanced A_dm; A_dm,se with a mirror load; A_total with
a second stage), ``sign = ±1`` makes ``T(0) > 0`` (negative feedback) and β is
the feedback factor β_f, or a divider's β(s) = Z_g/(Z_f + Z_g) with
Z_f = R_f ∥ 1/(sC_f), Z_g = R_g ∥ 1/(sC_g) — the divider alone, not loaded by
the stage.

Conventions
-----------
* Phase of T is continuous from 0° at DC. The continuity reference is the sum
  of the pole and zero angles (each factor's angle is continuous in ω); the
  value itself comes from the exact network response.
* Phase margin = 180° + ∠T at |T| = 1. With several gain crossovers the
  smallest (worst) margin is reported, as python-control does.
* Gain margin = −20·log10|T| where the continuous phase crosses an odd
  multiple of −180°. With several, the one closest to 0 dB (the worst) is
  reported, as python-control does. No crossing → infinite (None/null).
* Closed loop ``A/(1 + T)`` is solved exactly: the feedback is stamped into
  the network as one more unknown, the fed-back voltage v_fb, with the
  divider's node equation (g_f + sC_f)·v_out = (g_f + g_g + s(C_f + C_g))·v_fb
  (β_f·v_out = v_fb for a factor) and ``(G + sC)·x + sign·b·v_fb = b·v_ref``,
  so its poles are generalized eigenvalues of a real pencil, not roots of a
  polynomial.
* Step response from partial fractions of the closed loop's poles and zeros
  (pole-zero pairs of modes that the input cannot excite or the output cannot
  see are cancelled first); settling time is the last time the response
  leaves a ±1 % band around its final value, refined by root-finding.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from freqpair.analysis.crossings import DB_3, db, lowest_crossing, search_grid
from freqpair.circuit.network import FrequencySolver
from freqpair.analysis.responses import StageResponses

__all__ = ["LoopResult", "LoopCurves", "LoopModel", "loop_analysis", "loop_curves",
           "step_response", "loop_model", "cancel_pairs", "FeedbackNetwork", "feedback_network"]

#: Relative distance below which a pole and a zero cancel (unexcited/unseen modes).
CANCEL_RTOL = 1e-7
#: JSON keys added by a design with [feedback] (DESIGN.md §4).
LOOP_JSON_KEYS = ("phase_margin_deg", "gain_margin_db", "crossover_hz", "phase_crossover_hz",
                  "dc_loop_gain_db", "closed_loop_f3db_hz", "peaking_db", "closed_loop_stable",
                  "overshoot_pct", "settling_time_s")
#: Settling band (fraction of the final value).
SETTLE_BAND = 0.01


@dataclass(frozen=True)
class LoopResult:
    """Loop results of a stage with ``[feedback]`` (None where infinite/undefined).

    Attributes
    ----------
    feedback_factor : float
        β at DC (β_f, or R_g/(R_f + R_g) for a divider).
    sign : int
        +1 or −1: the sign that makes T(0) > 0.
    dc_loop_gain_db : float
        20·log10 T(0) [dB].
    phase_margin_deg : float or None
        180° + ∠T at the gain crossover [deg]; None when |T| never crosses 1.
    crossover_hz : float or None
        Gain crossover frequency (|T| = 1) of that margin [Hz].
    gain_margin_db : float or None
        −20·log10|T| at the phase crossover [dB]; None (infinite) when the
        phase never reaches −180°.
    phase_crossover_hz : float or None
        Frequency where the continuous phase crosses −180° (mod 360°) [Hz].
    closed_loop_dc_gain : float
        A/(1+T) at DC [V/V] (signed).
    closed_loop_f3db_hz : float or None
        Lowest frequency where |A_cl| is 3.01 dB below its DC value [Hz].
    peaking_db : float
        Maximum of |A_cl| above its DC value [dB] (0 when monotonic).
    closed_loop_stable : bool
        All closed-loop poles in the left half plane.
    overshoot_pct : float or None
        Step overshoot above the final value [%] (None when unstable).
    settling_time_s : float or None
        Time after which the step stays within ±1 % of its final value [s].
    peak_hz : float or None
        Frequency of the closed loop's largest magnitude [Hz] (None: monotonic).
    peak_time_s : float or None
        Time of the step's highest point [s] (None: no overshoot or unstable).
    """

    feedback_factor: float
    sign: int
    dc_loop_gain_db: float
    phase_margin_deg: float | None
    crossover_hz: float | None
    gain_margin_db: float | None
    phase_crossover_hz: float | None
    closed_loop_dc_gain: float
    closed_loop_f3db_hz: float | None
    peaking_db: float
    closed_loop_stable: bool
    overshoot_pct: float | None
    settling_time_s: float | None
    peak_hz: float | None = None
    peak_time_s: float | None = None

    def to_json(self) -> dict:
        """The loop keys of the JSON contract (DESIGN.md §4; None → null)."""
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        out = {
            "phase_margin_deg": fin(self.phase_margin_deg),
            "gain_margin_db": fin(self.gain_margin_db),
            "crossover_hz": fin(self.crossover_hz),
            "phase_crossover_hz": fin(self.phase_crossover_hz),
            "dc_loop_gain_db": fin(self.dc_loop_gain_db),
            "closed_loop_f3db_hz": fin(self.closed_loop_f3db_hz),
            "peaking_db": fin(self.peaking_db),
            "closed_loop_stable": bool(self.closed_loop_stable),
            "overshoot_pct": fin(self.overshoot_pct),
            "settling_time_s": fin(self.settling_time_s),
        }
        assert tuple(out) == LOOP_JSON_KEYS
        return out


@dataclass(frozen=True)
class LoopCurves:
    """Loop quantities on a frequency grid.

    Attributes
    ----------
    f_hz : ndarray
        Frequencies [Hz].
    loop_gain : ndarray of complex
        T(j2πf) [V/V].
    loop_phase_deg : ndarray
        Phase of T, continuous from 0° at DC [deg].
    closed_loop : ndarray of complex
        A/(1+T) [V/V].
    beta : ndarray of complex
        β(j2πf) [V/V] (constant for a feedback factor).
    """

    f_hz: np.ndarray
    loop_gain: np.ndarray
    loop_phase_deg: np.ndarray
    closed_loop: np.ndarray
    beta: np.ndarray | None = None


@dataclass(frozen=True)
class FeedbackNetwork:
    """β(s) = (g_f + sC_f)/(g_f + g_g + s(C_f + C_g)), the unloaded divider; a
    feedback factor is g_f = β_f, g_g = 1 − β_f, C_f = C_g = 0.

    Attributes
    ----------
    g_f, g_g : float
        Conductances of the series (output → feedback node) and shunt
        (feedback node → ground) branches [S] (for a factor: β_f and 1 − β_f).
    c_f, c_g : float
        Their capacitances [F].
    """

    g_f: float
    g_g: float
    c_f: float = 0.0
    c_g: float = 0.0

    @property
    def dc(self) -> float:
        """β(0)."""
        return self.g_f / (self.g_f + self.g_g)

    def at(self, s) -> np.ndarray:
        """β(s) [V/V] at complex frequencies ``s`` [rad/s]."""
        s = np.asarray(s, dtype=complex)
        return (self.g_f + s * self.c_f) / (self.g_f + self.g_g + s * (self.c_f + self.c_g))

    @property
    def zero_rad_s(self) -> np.ndarray:
        """The zero of β [rad/s]: −1/(R_f·C_f) (none without C_f)."""
        return np.array([-self.g_f / self.c_f], dtype=complex) if self.c_f > 0 else \
            np.zeros(0, dtype=complex)

    @property
    def pole_rad_s(self) -> np.ndarray:
        """The pole of β [rad/s]: −1/((R_f∥R_g)·(C_f + C_g)) (none without C)."""
        c = self.c_f + self.c_g
        return np.array([-(self.g_f + self.g_g) / c], dtype=complex) if c > 0 else \
            np.zeros(0, dtype=complex)


def feedback_network(feedback) -> FeedbackNetwork:
    """The :class:`FeedbackNetwork` of a ``[feedback]`` table, or of a β_f given as a number."""
    if isinstance(feedback, (int, float)):
        beta = float(feedback)
        return FeedbackNetwork(beta, 1.0 - beta)
    if feedback.type == "factor":
        return FeedbackNetwork(feedback.factor, 1.0 - feedback.factor)
    return FeedbackNetwork(1.0 / feedback.series_resistance, 1.0 / feedback.shunt_resistance,
                           feedback.series_capacitance, feedback.shunt_capacitance)


def cancel_pairs(zeros: np.ndarray, poles: np.ndarray, rtol: float = CANCEL_RTOL):
    """Remove pole-zero pairs closer than ``rtol`` (relative) from each other.

    Returns
    -------
    zeros, poles : ndarray
        The remaining zeros and poles [rad/s].
    """
    zeros = list(np.asarray(zeros, dtype=complex))
    poles = list(np.asarray(poles, dtype=complex))
    kept_z = []
    for z in zeros:
        if poles:
            d = np.abs(np.asarray(poles) - z)
            k = int(np.argmin(d))
            if d[k] <= rtol * max(abs(z), abs(poles[k])):
                poles.pop(k)
                continue
        kept_z.append(z)
    return np.asarray(kept_z, dtype=complex), np.asarray(poles, dtype=complex)


def _factor_phase(roots: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Σ over roots r of the continuous angle change of (jω − r) from ω = 0 [rad]."""
    total = np.zeros_like(w, dtype=float)
    for r in roots:
        a = -r.real
        if a != 0.0:
            total += np.arctan((w - r.imag) / a) - np.arctan(-r.imag / a)
        else:  # on the jω axis: a step of π where ω passes Im r
            total += 0.5 * np.pi * (np.sign(w - r.imag) - np.sign(-r.imag))
    return total


class LoopModel:
    """The loop of one stage: exact open-loop and closed-loop responses.

    Parameters
    ----------
    responses : StageResponses
    primary : str
        Name of the stage's primary gain (see ``StageResponses.primary``).
    feedback_factor : float
        β_f (> 0).
    sweep : tuple of float
        (start, stop) of the design's sweep [Hz], widening the search grid.
    """

    def __init__(self, responses: StageResponses, primary: str, feedback,
                 sweep=(1.0, 1e10)):
        self.responses = responses
        self.primary = primary
        self.network = feedback_network(feedback)
        self.beta = self.network.dc
        solver = responses.solver
        self.l, kind = responses.output_row(primary)
        self.b = responses.excitation(kind)
        self.a0 = float(np.real(self.l @ np.linalg.solve(solver.G, self.b)))
        self.sign = 1 if self.a0 >= 0 else -1
        poles = solver.poles()
        zeros = solver.zeros(self.b, self.l)
        zeros, poles = cancel_pairs(zeros, poles)
        # T = β·A: the divider's zero and pole join the amplifier's
        self.zeros_rad_s = np.concatenate([zeros, self.network.zero_rad_s])
        self.poles_rad_s = np.concatenate([poles, self.network.pole_rad_s])
        self.grid_hz = search_grid(np.concatenate([poles, self.network.pole_rad_s]), *sweep)
        self.closed = self._closed_solver(solver)
        self._open = FrequencySolver(solver.G, solver.C, self.b[:, None], self.l[None, :])

    def _closed_solver(self, solver) -> FrequencySolver:
        """The closed loop with v_fb as one more unknown (see the module notes)."""
        n = solver.n
        net = self.network
        G = np.zeros((n + 1, n + 1))
        C = np.zeros((n + 1, n + 1))
        G[:n, :n] = solver.G
        C[:n, :n] = solver.C
        G[:n, n] = self.sign * self.b
        G[n, :n] = net.g_f * self.l
        G[n, n] = -(net.g_f + net.g_g)
        C[n, :n] = net.c_f * self.l
        C[n, n] = -(net.c_f + net.c_g)
        b = np.append(self.b, 0.0)
        l = np.append(self.l, 0.0)
        self._closed_b, self._closed_l = b, l
        return FrequencySolver(G, C, b[:, None], l[None, :])

    # ---------------------------------------------------------------- open loop
    def beta_at(self, f_hz) -> np.ndarray:
        """β(j2πf) [V/V]."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        return self.network.at(2j * np.pi * f)

    def loop_gain(self, f_hz) -> np.ndarray:
        """T(j2πf) [V/V], exact."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        return self.sign * self.beta_at(f) * self._open.response(2j * np.pi * f)[:, 0, 0]

    def loop_phase_deg(self, f_hz, values=None) -> np.ndarray:
        """Phase of T [deg], continuous from 0° at DC."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        t = self.loop_gain(f) if values is None else values
        w = 2 * np.pi * f
        ref = _factor_phase(self.zeros_rad_s, w) - _factor_phase(self.poles_rad_s, w)
        diff = np.angle(t * np.exp(-1j * ref))
        return np.degrees(ref + diff)

    # ---------------------------------------------------------------- closed loop
    def closed_loop(self, f_hz) -> np.ndarray:
        """A/(1+T) at j2πf [V/V], exact."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        return self.closed.response(2j * np.pi * f)[:, 0, 0]

    def closed_loop_dc(self) -> float:
        return float(np.real(self.closed.dc()[0, 0]))

    def closed_loop_zpk(self):
        """Closed-loop zeros, poles [rad/s] (unexcited/unseen modes cancelled) and DC gain."""
        z, p = cancel_pairs(self.closed.zeros(self._closed_b, self._closed_l),
                            self.closed.poles())
        return z, p, self.closed_loop_dc()

    # ---------------------------------------------------------------- margins
    def _crossings(self, func, level, grid, values):
        d = np.asarray(values, dtype=float) - level
        idx = np.nonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)[0]
        out = [float(grid[i]) for i in np.nonzero(d == 0)[0]]
        for i in idx:
            x = brentq(lambda x: float(func(np.array([10.0 ** x]))[0]) - level,
                       math.log10(grid[i]), math.log10(grid[i + 1]), xtol=1e-13, rtol=1e-13)
            out.append(10.0 ** x)
        return sorted(out)

    def margins(self):
        """(phase_margin_deg, crossover_hz, gain_margin_db, phase_crossover_hz)."""
        grid = self.grid_hz
        t = self.loop_gain(grid)
        mag_db = db(t)
        phase = self.loop_phase_deg(grid, t)
        pm = wc = None
        for f in self._crossings(lambda f: db(self.loop_gain(f)), 0.0, grid, mag_db):
            m = 180.0 + float(self.loop_phase_deg(f)[0])
            if pm is None or m < pm:
                pm, wc = m, f
        gm = wp = None
        lo = math.floor((phase.min() - 180.0) / 360.0)
        hi = math.ceil((phase.max() + 180.0) / 360.0)
        for k in range(lo, hi + 1):
            level = 180.0 + 360.0 * k
            for f in self._crossings(self.loop_phase_deg, level, grid, phase):
                g = -float(db(self.loop_gain(f))[0])
                if gm is None or abs(g) < abs(gm):
                    gm, wp = g, f
        return pm, wc, gm, wp

    def phase_margin_deg(self) -> float:
        """Phase margin [deg]; +inf when |T| never crosses 1."""
        pm = self.margins()[0]
        return math.inf if pm is None else pm

    # ---------------------------------------------------------------- step
    def step(self, t_s=None):
        """Closed-loop step response for a 1 V reference step.

        Returns
        -------
        t : ndarray
            Time [s].
        y : ndarray
            Output [V].
        """
        z, p, h0 = self.closed_loop_zpk()
        c = _step_coefficients(z, p)
        t = _time_grid(p, c) if t_s is None else np.atleast_1d(np.asarray(t_s, dtype=float))
        return t, h0 * _step_shape(c, p, t)


def _step_coefficients(z, p):
    """c_i with y(t)/y(∞) = 1 − Σ c_i·exp(p_i t) (simple poles)."""
    c = np.empty(p.size, dtype=complex)
    for i, pi in enumerate(p):
        num = np.prod(1.0 - pi / z) if z.size else 1.0
        others = np.delete(p, i)
        den = np.prod(1.0 - pi / others) if others.size else 1.0
        c[i] = num / den
    return c


def _step_shape(c, p, t):
    t = np.asarray(t, dtype=float)
    return 1.0 - np.real(np.exp(np.outer(t, p)) @ c)


def _time_grid(p, c, floor=1e-6 * SETTLE_BAND):
    """Time grid [s] from the closed-loop poles: each mode sampled until its
    term falls below ``floor`` of the final value, finer for oscillating modes."""
    pieces = [np.zeros(1)]
    decay = np.abs(p.real)
    for pi, ci, a in zip(p, c, decay):
        if a == 0 or abs(ci) <= floor:
            continue
        t_end = math.log(abs(ci) / floor) / a
        n = int(min(max(400, 40 * t_end * abs(pi.imag) / (2 * np.pi)), 20000))
        pieces.append(np.linspace(0.0, t_end, n))
    return np.unique(np.concatenate(pieces))


def _overshoot_and_settling(p, c, with_peak_time: bool = False):
    """Overshoot [%] and 1 % settling time [s] of y/y(∞) = 1 − Σ c_i e^{p_i t}
    (and the time of the peak [s] with ``with_peak_time``)."""
    t = _time_grid(p, c)
    shape = lambda x: _step_shape(c, p, x)                          # noqa: E731
    y = shape(t)
    k = int(np.argmax(y))
    peak, t_peak = y[k], float(t[k])
    if 0 < k < t.size - 1:
        res = minimize_scalar(lambda x: -shape([x])[0], bounds=(t[k - 1], t[k + 1]),
                              method="bounded", options={"xatol": 1e-12 * t[k + 1]})
        if -res.fun > peak:
            peak, t_peak = -res.fun, float(res.x)
    overshoot = float(max(0.0, peak - 1.0) * 100.0)
    err = np.abs(y - 1.0) - SETTLE_BAND
    out = np.nonzero(err > 0)[0]
    if out.size == 0:
        settling = 0.0
    elif int(out[-1]) == t.size - 1:
        settling = None
    else:
        j = int(out[-1])
        g = lambda x: abs(shape([x])[0] - 1.0) - SETTLE_BAND        # noqa: E731
        settling = float(brentq(g, t[j], t[j + 1], xtol=1e-15, rtol=1e-13))
    if with_peak_time:
        return overshoot, settling, t_peak
    return overshoot, settling


def loop_model(analysis) -> LoopModel | None:
    """The :class:`LoopModel` of an analysed design, or None without ``[feedback]``."""
    fb = analysis.design.feedback
    if fb is None:
        return None
    sw = analysis.design.sweep
    return LoopModel(analysis.responses, analysis.primary, fb, (sw.start, sw.stop))


def loop_analysis(analysis) -> LoopResult | None:
    """Margins, closed-loop bandwidth and peaking, step overshoot and settling.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis

    Returns
    -------
    LoopResult or None
        None when the design has no ``[feedback]`` table or its gain is zero.
    """
    model = loop_model(analysis)
    if model is None or model.a0 == 0:
        return None
    pm, wc, gm, wp = model.margins()
    h0 = model.closed_loop_dc()
    z, p, _ = model.closed_loop_zpk()
    stable = bool(np.all(p.real < 0))
    cl_grid = search_grid(p, *model.grid_hz[[0, -1]])
    cl_db = db(model.closed_loop(cl_grid))
    dc_db = 20 * math.log10(abs(h0))
    f3 = lowest_crossing(lambda f: db(model.closed_loop(f)), dc_db - DB_3, cl_grid, cl_db)
    peaking, f_peak = _peaking_db(model, cl_grid, cl_db, dc_db)
    overshoot = settling = t_peak = None
    if stable:
        overshoot, settling, t_peak = _overshoot_and_settling(p, _step_coefficients(z, p),
                                                              with_peak_time=True)
    return LoopResult(model.beta, model.sign, 20 * math.log10(model.beta * abs(model.a0)),
                      pm, wc, gm, wp, h0, f3, peaking, stable, overshoot, settling,
                      f_peak if peaking > 0 else None, t_peak if overshoot else None)


def _peaking_db(model, grid, values_db, dc_db) -> tuple[float, float]:
    """(peaking above the DC value [dB], frequency of the maximum [Hz])."""
    k = int(np.argmax(values_db))
    best, f_best = float(values_db[k]), float(grid[k])
    if 0 < k < grid.size - 1:
        res = minimize_scalar(lambda x: -float(db(model.closed_loop(10.0 ** x))[0]),
                              bounds=(math.log10(grid[k - 1]), math.log10(grid[k + 1])),
                              method="bounded", options={"xatol": 1e-10})
        if -res.fun > best:
            best, f_best = -res.fun, 10.0 ** res.x
    return float(max(0.0, best - dc_db)), f_best


def loop_curves(analysis, f_hz=None) -> LoopCurves | None:
    """Loop gain, its continuous phase and the closed-loop gain on ``f_hz`` [Hz]
    (default: the design's sweep). None without ``[feedback]``."""
    model = loop_model(analysis)
    if model is None:
        return None
    if f_hz is None:
        from freqpair.circuit.frequency import FrequencyGrid
        f_hz = FrequencyGrid.from_design(analysis.design).f_hz
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    t = model.loop_gain(f)
    return LoopCurves(f, t, model.loop_phase_deg(f, t), model.closed_loop(f), model.beta_at(f))


def step_response(analysis, t_s=None):
    """Closed-loop step response for a 1 V step of the reference input.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    t_s : array_like, optional
        Times [s]; default a grid chosen from the closed-loop poles.

    Returns
    -------
    t : ndarray
        Time [s].
    y : ndarray
        Output [V] (approaches the closed-loop DC gain).
    """
    model = loop_model(analysis)
    if model is None:
        return None
    return model.step(t_s)
