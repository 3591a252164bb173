"""Compensation solving: the value of one part that reaches a target phase margin.

* :func:`smallest_miller_cap` — the smallest ``second_stage.miller_capacitance``
  whose phase margin reaches the target;
* :func:`nulling_resistor_for` — the smallest ``second_stage.nulling_resistance``
  that does;
* :func:`feedback_factor_limit` — the feedback factor β_f at which the phase
  margin drops below the target (the largest β_f that still meets it);
* :func:`series_capacitance_for` — the smallest capacitor C_f across a feedback
  divider's series resistor that reaches the target (DESIGN.md §7e).

Each scans a log grid over the bounds on the exact loop (margins as in
:mod:`freqpair.analysis.loop`), then refines the first crossing of the target with
``brentq``. When the target cannot be met inside the bounds, a
:class:`CompensationError` says so in one line ("cannot reach ... within [a, b]").
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from freqpair.design.keys import replace_value
from freqpair.design.errors import DesignError, FreqpairError
from freqpair.design.quantities import format_si

__all__ = ["CompensationResult", "CompensationError", "smallest_miller_cap",
           "nulling_resistor_for", "feedback_factor_limit", "series_capacitance_for",
           "phase_margin_of", "DEFAULT_BOUNDS"]

#: Search bounds used when none are given (SI units).
DEFAULT_BOUNDS = {
    "second_stage.miller_capacitance": (10e-15, 1e-9),
    "second_stage.nulling_resistance": (0.0, 1e6),
    "feedback.factor": (1e-4, 1.0),
    "feedback.series_capacitance": (0.0, 1e-9),
}
_UNITS = {"second_stage.miller_capacitance": "F", "second_stage.nulling_resistance": "Ω",
          "feedback.factor": "", "feedback.series_capacitance": "F"}
_GRID_POINTS = 25


class CompensationError(FreqpairError, ValueError):
    """A compensation target that cannot be met within the given bounds."""


@dataclass(frozen=True)
class CompensationResult:
    """A solved compensation value.

    Attributes
    ----------
    key : str
        Dotted design key that was solved for.
    value : float
        Its value (SI: F, Ω or a ratio).
    target_pm_deg : float
        The target phase margin [deg].
    phase_margin_deg : float
        The phase margin reached at ``value`` [deg] (inf: |T| below 1).
    crossover_hz : float or None
        Gain crossover frequency at ``value`` [Hz].
    design : Design
        The design with ``value`` filled in.
    """

    key: str
    value: float
    target_pm_deg: float
    phase_margin_deg: float
    crossover_hz: float | None
    design: object

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"key": self.key, "value": float(self.value),
                "target_pm_deg": float(self.target_pm_deg),
                "phase_margin_deg": fin(self.phase_margin_deg),
                "crossover_hz": fin(self.crossover_hz)}


def _margins(design):
    """(phase margin [deg] or inf, crossover [Hz] or None) of a design's loop."""
    from freqpair.analysis.loop import LoopModel
    from freqpair.analysis.responses import StageResponses
    from freqpair.circuit.stage import build_stage
    resp = StageResponses(build_stage(design))
    sw = design.sweep
    model = LoopModel(resp, resp.primary, design.feedback, (sw.start, sw.stop))
    if model.a0 == 0:
        raise CompensationError("the amplifier's DC gain is zero: there is no loop to "
                                "compensate")
    pm, wc, _, _ = model.margins()
    return (math.inf if pm is None else pm), wc


def phase_margin_of(design, key: str | None = None, value: float | None = None) -> float:
    """Phase margin [deg] of ``design`` (with ``key`` set to ``value`` if given);
    +inf when |T| never reaches 1."""
    if key is not None:
        design = replace_value(design, key, float(value))
    return _margins(design)[0]


def _grid(lo: float, hi: float) -> np.ndarray:
    if lo == 0:
        return np.concatenate([[0.0], np.logspace(math.log10(hi) - 6, math.log10(hi),
                                                  _GRID_POINTS)])
    return np.logspace(math.log10(lo), math.log10(hi), _GRID_POINTS)


def _check(design, key, target, bounds, need_second_stage):
    if design.feedback is None:
        raise DesignError("feedback: missing table (compensation needs [feedback] factor = β_f)")
    if need_second_stage and design.second_stage is None:
        raise DesignError(f"second_stage: missing table ({key} needs a second stage)")
    if not (isinstance(target, (int, float)) and math.isfinite(target) and 0 < target < 180):
        raise DesignError(f"target phase margin = {target!r}: must be between 0° and 180°")
    lo, hi = DEFAULT_BOUNDS[key] if bounds is None else (float(bounds[0]), float(bounds[1]))
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 <= lo < hi):
        raise DesignError(f"range = [{lo!r}, {hi!r}]: need 0 ≤ a < b, both finite")
    if key == "feedback.factor" and lo == 0:
        raise DesignError("range: the feedback factor's lower bound must be above 0")
    kind = design.feedback.type
    if key == "feedback.factor" and kind != "factor":
        raise DesignError(f"feedback.type = {kind!r}: a divider has no factor to solve; "
                          "solve its series_capacitance, or set the resistances")
    if key.startswith("feedback.series") and kind != "divider":
        raise DesignError(f"feedback.type = {kind!r}: series_capacitance belongs to a "
                          "divider (feedback.type = \"divider\")")
    return lo, hi


def _fmt(key, v):
    return format_si(v, _UNITS[key]) if _UNITS[key] else f"{v:.4g}"


def _solve(design, key, target, lo, hi, rising: bool) -> CompensationResult:
    """First value in [lo, hi] where the margin reaches (rising) or drops below
    (not rising) ``target``; refined by brentq in log (or linear) steps."""
    xs = _grid(lo, hi)
    pms = np.array([phase_margin_of(design, key, x) for x in xs])
    ok = pms >= target
    rng = f"{key} within [{_fmt(key, lo)}, {_fmt(key, hi)}]"
    if rising:
        if not ok.any():
            k = int(np.argmax(pms))
            raise CompensationError(
                f"cannot reach a {target:g}° phase margin with {rng} "
                f"(best {pms[k]:.1f}° at {_fmt(key, xs[k])})")
        i = int(np.argmax(ok))
        if i == 0:
            return _result(design, key, xs[0], target)
        a, b = xs[i - 1], xs[i]
    else:
        if not ok[0]:
            raise CompensationError(
                f"cannot reach a {target:g}° phase margin with {rng}: already "
                f"{pms[0]:.1f}° at {_fmt(key, xs[0])}")
        if ok.all():
            raise CompensationError(
                f"the phase margin stays at or above {target:g}° for {rng} "
                f"({pms[-1]:.1f}° at {_fmt(key, xs[-1])}): the limit lies beyond the range")
        i = int(np.argmin(ok))
        a, b = xs[i - 1], xs[i]

    def f(u):
        x = 10.0 ** u if a > 0 else u
        pm = phase_margin_of(design, key, x)
        return (min(pm, 1e3) - target)

    ua, ub = (math.log10(a), math.log10(b)) if a > 0 else (a, b)
    u = brentq(f, ua, ub, xtol=1e-12, rtol=1e-10)
    if f(u) < 0:
        # brentq's root may lie up to its tolerance on the side that misses the
        # target: step to the side that meets it (at worst the bracket end, which does)
        good = ub if rising else ua
        step = math.copysign(4 * (1e-12 + 1e-10 * abs(u)), good - u)
        u = u + step if abs(step) < abs(good - u) and f(u + step) >= 0 else good
    x = 10.0 ** u if a > 0 else u
    if not rising:      # report the largest value still meeting the target
        x = min(x, b)
    return _result(design, key, x, target)


def _result(design, key, value, target) -> CompensationResult:
    solved = replace_value(design, key, float(value))
    pm, wc = _margins(solved)
    return CompensationResult(key, float(value), float(target), pm, wc, solved)


def smallest_miller_cap(design, target_pm_deg: float, bounds=None) -> CompensationResult:
    """Smallest Miller capacitor [F] giving at least ``target_pm_deg`` phase margin.

    Parameters
    ----------
    design : Design
        With ``[second_stage]`` and ``[feedback]``.
    target_pm_deg : float
        Target phase margin [deg].
    bounds : (float, float), optional
        Search range [F]; default 10 fF … 1 nF.

    Returns
    -------
    CompensationResult

    Raises
    ------
    CompensationError
        "cannot reach ... within [a, b]" when no value in the range meets the target.
    """
    key = "second_stage.miller_capacitance"
    lo, hi = _check(design, key, target_pm_deg, bounds, True)
    return _solve(design, key, target_pm_deg, lo, hi, rising=True)


def nulling_resistor_for(design, target_pm_deg: float, bounds=None) -> CompensationResult:
    """Smallest nulling resistor [Ω] (in series with the Miller capacitor) giving
    at least ``target_pm_deg`` phase margin; default range 0 … 1 MΩ.

    Raises
    ------
    CompensationError
        When no value in the range meets the target, or the design has no
        Miller capacitor.
    """
    key = "second_stage.nulling_resistance"
    lo, hi = _check(design, key, target_pm_deg, bounds, True)
    if design.second_stage.miller_capacitance == 0:
        raise DesignError("second_stage.miller_capacitance = 0: a nulling resistor needs a "
                          "Miller capacitor")
    return _solve(design, key, target_pm_deg, lo, hi, rising=True)


def feedback_factor_limit(design, target_pm_deg: float, bounds=None) -> CompensationResult:
    """The feedback factor β_f at which the phase margin drops to ``target_pm_deg``:
    the largest β_f in the range that still meets it (default range 1e-4 … 1).

    Raises
    ------
    CompensationError
        When even the smallest β_f misses the target, or the margin stays above
        the target across the whole range.
    """
    key = "feedback.factor"
    lo, hi = _check(design, key, target_pm_deg, bounds, False)
    return _solve(design, key, target_pm_deg, lo, hi, rising=False)


def series_capacitance_for(design, target_pm_deg: float, bounds=None) -> CompensationResult:
    """Smallest capacitor C_f [F] across the feedback divider's series resistor
    giving at least ``target_pm_deg`` phase margin (default range 0 … 1 nF).

    The divider's node capacitance C_g (the stage's input, the wiring) puts a
    pole in β(s) that eats phase at the crossover; C_f adds the zero that
    cancels it (exactly at R_f·C_f = R_g·C_g).

    Raises
    ------
    CompensationError
        When no value in the range meets the target.
    DesignError
        Without a divider ``[feedback]``.
    """
    key = "feedback.series_capacitance"
    lo, hi = _check(design, key, target_pm_deg, bounds, False)
    return _solve(design, key, target_pm_deg, lo, hi, rising=True)
