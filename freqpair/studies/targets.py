"""Design targets: solve one design value so that a metric meets a bound.

E.g. the largest tail capacitance that keeps the single-ended CMRR ≥ 80 dB at
100 kHz, or the smallest tail current that gives f_3dB ≥ 20 MHz. The value is
bracketed on a scan of ``[a, b]`` and refined by :func:`scipy.optimize.brentq`
on exact analyses; the returned value is then re-analysed and lies on the side
that meets the bound.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from freqpair.analysis.result import analyze
from freqpair.design.keys import get_value, replace_value
from freqpair.design.errors import FreqpairError
from freqpair.analysis.crossings import db

__all__ = ["METRICS", "TargetResult", "TargetError", "metric_value", "solve_target"]

#: metric → value used when the analysis reports None (infinite / undefined).
METRICS = {
    "adm_db": -math.inf, "a_total_db": -math.inf, "acm_se_db": -math.inf,
    "f3db_hz": math.inf, "ugf_hz": -math.inf,
    "cmrr_se_db": math.inf, "cmrr_db": math.inf, "cmrr_textbook_db": math.inf,
    "cmrr_corner_hz": math.inf,
    # loop metrics (designs with [feedback]); an infinite margin is "always met"
    "phase_margin_deg": math.inf, "gain_margin_db": math.inf, "crossover_hz": -math.inf,
    "closed_loop_f3db_hz": math.inf, "peaking_db": -math.inf, "overshoot_pct": -math.inf,
    "settling_time_s": math.inf,
    # supply rejection and input impedance (None: the rail does not reach the output,
    # or no input current flows); the corners: None = never falls 3 dB
    "psrr_pos_db": math.inf, "psrr_neg_db": math.inf,
    "psrr_pos_corner_hz": math.inf, "psrr_neg_corner_hz": math.inf,
    "zin_dm_ohm": math.inf, "zin_cm_ohm": math.inf, "zin_dm_corner_hz": math.inf,
    # noise: spot values at the first [noise] spot frequency (or at_hz), band rms
    "input_noise_v_rthz": math.inf, "output_noise_v_rthz": math.inf, "nf_db": math.inf,
    "input_rms_v": math.inf, "output_rms_v": math.inf,
}
#: metrics read from the loop analysis (need a [feedback] table)
LOOP_METRICS = ("phase_margin_deg", "gain_margin_db", "crossover_hz", "closed_loop_f3db_hz",
                "peaking_db", "overshoot_pct", "settling_time_s")
#: metrics that can be read at a frequency (``at_hz``) instead of DC
AT_FREQUENCY = ("adm_db", "acm_se_db", "cmrr_se_db", "cmrr_db", "psrr_pos_db", "psrr_neg_db",
                "zin_dm_ohm", "zin_cm_ohm", "input_noise_v_rthz", "output_noise_v_rthz",
                "nf_db")
#: metrics of the supply-rejection and input-impedance results
_PORT_METRICS = {"psrr_pos_db": "supply", "psrr_neg_db": "supply",
                 "psrr_pos_corner_hz": "supply", "psrr_neg_corner_hz": "supply",
                 "zin_dm_ohm": "input_impedance", "zin_cm_ohm": "input_impedance",
                 "zin_dm_corner_hz": "input_impedance"}
_NOISE_SPOT = {"input_noise_v_rthz": "input_v_rthz", "output_noise_v_rthz": "output_v_rthz",
               "nf_db": "nf_db"}


class TargetError(FreqpairError, ValueError):
    """A target that cannot be reached or a bad target request."""


def want_hint(face: str = "library") -> str:
    """How to ask for one edge of a feasible range, as the user's face spells it."""
    if face == "cli":
        return "give --want largest or --want smallest"
    return "give want='largest' or want='smallest'"


def metric_value(result, metric: str, at_hz: float | None = None) -> float | None:
    """A metric of an :class:`~freqpair.analysis.result.Analysis`, optionally at ``at_hz`` [Hz].

    Returns the DC/contract value (None where infinite or undefined), or, with
    ``at_hz``, the exact value at that frequency: gains, CMRR and PSRR [dB],
    |Z_in| [Ω], noise densities [V/√Hz], noise figure [dB].
    """
    if metric not in METRICS:
        raise TargetError(f"metric = {metric!r}: unknown (choose from {', '.join(METRICS)})")
    if at_hz is None:
        if metric in LOOP_METRICS:
            if result.design.feedback is None:
                raise TargetError(f"metric = {metric!r}: needs a [feedback] table in the design")
            loop = result.loop()
            v = None if loop is None else getattr(loop, metric)
        elif metric in _PORT_METRICS:
            v = getattr(getattr(result, _PORT_METRICS[metric]), metric)
        elif metric in _NOISE_SPOT:
            v = getattr(result.noise().spots[0], _NOISE_SPOT[metric])
        elif metric in ("input_rms_v", "output_rms_v"):
            v = getattr(result.noise(), metric)
        else:
            v = getattr(result, metric)
        return None if v is None or not math.isfinite(v) else float(v)
    if metric not in AT_FREQUENCY:
        raise TargetError(f"metric = {metric!r}: has no value at a frequency "
                          f"(at_hz works with {', '.join(AT_FREQUENCY)})")
    if not (math.isfinite(at_hz) and at_hz > 0):
        raise TargetError(f"at_hz = {at_hz!r}: must be a positive frequency [Hz]")
    if metric in _NOISE_SPOT:
        from freqpair.analysis.noise import noise_curves
        nc = noise_curves(result.responses, [at_hz])
        if metric == "input_noise_v_rthz":
            v = float(nc.input_v_rthz[0])
        elif metric == "output_noise_v_rthz":
            v = float(nc.output_v_rthz[0])
        else:
            part = nc.source_resistor_v2_hz()
            if part is None or part[0] <= 0:
                return None
            v = 10.0 * math.log10(float(nc.output_v2_hz[0] / part[0]))
        return v if math.isfinite(v) else None
    r = result.responses.at([at_hz])
    if metric in ("psrr_pos_db", "psrr_neg_db"):
        from freqpair.analysis.supply import psrr_db, single_ended_name
        rail = "vpos" if metric == "psrr_pos_db" else "vneg"
        v = psrr_db(r, rail, single_ended_name(result.responses))[0]
        return float(v) if math.isfinite(v) else None
    if metric in ("zin_dm_ohm", "zin_cm_ohm"):
        v = abs(complex(r.get(metric[:6])[0]))
        return float(v) if math.isfinite(v) and v <= 1e15 else None
    if metric == "adm_db":
        v = db(r.get(result.primary))[0]
    elif metric == "acm_se_db":
        v = db(r.acm_se)[0]
    elif metric == "cmrr_se_db":
        v = (db(r.adm_se) - db(r.acm_se))[0]
    else:
        if r.adm is None:
            return None
        v = (db(r.adm) - db(r.acm_dm))[0]
    return float(v) if math.isfinite(v) else None


@dataclass(frozen=True)
class TargetResult:
    """The solved design value and its verification.

    Attributes
    ----------
    key : str
    value : float
        The design value (SI) at the edge of the feasible range, on its feasible side.
    metric : str
    bound : float
    kind : str
        "min" (metric ≥ bound) or "max" (metric ≤ bound).
    at_hz : float or None
    metric_value : float or None
        The metric re-analysed at ``value``.
    met : bool
        Whether the re-analysis meets the bound.
    feasible : str
        "below" or "above": the side of ``value`` (within [a, b]) that meets the bound.
    at_range_end : bool
        True when the bound holds over the whole scan, up to this end of [a, b].
    """

    key: str
    value: float
    metric: str
    bound: float
    kind: str
    at_hz: float | None
    metric_value: float | None
    met: bool
    feasible: str
    at_range_end: bool
    design: object = None

    def to_json(self) -> dict:
        return {"key": self.key, "value": self.value, "metric": self.metric,
                "bound": self.bound, "kind": self.kind, "at_hz": self.at_hz,
                "metric_value": self.metric_value, "met": self.met,
                "feasible": self.feasible, "at_range_end": self.at_range_end}


def _describe(metric, kind, bound, at_hz):
    op = "≥" if kind == "min" else "≤"
    return f"{metric} {op} {bound:g}" + (f" at {at_hz:g} Hz" if at_hz else "")


def solve_target(design, key: str, metric: str, bound: float, kind: str = "min",
                 bounds=(None, None), at_hz: float | None = None, want: str | None = None,
                 scan_points: int = 13, rtol: float = 1e-9,
                 face: str = "library") -> TargetResult:
    """Solve the design value ``key`` so that ``metric`` meets ``bound``.

    Parameters
    ----------
    design : Design
    key : str
        Dotted design key (e.g. ``"tail.capacitance"``, ``"bias.tail_current"``).
    metric : str
        A name from :data:`METRICS` (units: dB or Hz).
    bound : float
        The limit [dB or Hz].
    kind : {"min", "max"}
        "min": the metric must be at least ``bound``; "max": at most.
    bounds : (float, float)
        Search range [a, b] of the design value (SI); log-scanned when both > 0
        and b/a > 10.
    at_hz : float, optional
        Read the metric at this frequency [Hz] (see :func:`metric_value`).
    want : {"largest", "smallest"}, optional
        Which edge of the feasible set to return; by default the one edge
        inside [a, b] when the feasible set touches one end.
    scan_points : int
        Points of the bracketing scan.
    rtol : float
        Relative tolerance on the design value.
    face : {"library", "cli"}
        Who asks: messages name the option as that face spells it
        (``want='largest'`` in Python, ``--want largest`` on the command line).

    Returns
    -------
    TargetResult

    Raises
    ------
    TargetError
        One line: "cannot reach … within [a, b]" when no scanned value meets
        the bound, or a bad request.
    """
    if kind not in ("min", "max"):
        raise TargetError(f"kind = {kind!r}: must be 'min' (metric ≥ bound) or 'max'")
    if want not in (None, "largest", "smallest"):
        raise TargetError(f"want = {want!r}: must be 'largest' or 'smallest'")
    if metric not in METRICS:
        raise TargetError(f"metric = {metric!r}: unknown (choose from {', '.join(METRICS)})")
    a, b = bounds
    if a is None or b is None or not (math.isfinite(a) and math.isfinite(b) and b > a):
        raise TargetError(f"bounds = {bounds!r}: need a finite range [a, b] with b > a")
    if not math.isfinite(bound):
        raise TargetError(f"bound = {bound!r}: must be finite")
    get_value(design, key)
    use_log = a > 0 and b / a > 10
    fwd = (lambda x: math.log10(x)) if use_log else (lambda x: x)
    inv = (lambda y: 10.0 ** y) if use_log else (lambda y: y)
    sign = 1.0 if kind == "min" else -1.0
    cache = {}

    def margin(x):
        """> 0 (or = 0) where the bound is met; -inf where the point cannot be analysed."""
        if x not in cache:
            try:
                res = analyze(replace_value(design, key, x))
                v = metric_value(res, metric, at_hz)
                v = METRICS[metric] if v is None else v
                cache[x] = (sign * (v - bound), v)
            except TargetError:
                raise
            except FreqpairError:
                cache[x] = (-math.inf, None)
        return cache[x][0]

    ys = np.linspace(fwd(a), fwd(b), scan_points)
    xs = [inv(float(y)) for y in ys]
    xs[0], xs[-1] = a, b
    ok = [margin(x) >= 0 for x in xs]
    what = _describe(metric, kind, bound, at_hz)
    if not any(ok):
        best = max(xs, key=lambda x: margin(x))
        bv = cache[best][1]
        raise TargetError(f"cannot reach {what} with {key} within [{a:g}, {b:g}] "
                          f"(best {metric} = {bv if bv is None else format(bv, '.6g')} "
                          f"at {key} = {best:g})")
    if want is None:
        if ok[0] and not ok[-1]:
            want = "largest"
        elif ok[-1] and not ok[0]:
            want = "smallest"
        elif all(ok):
            raise TargetError(f"{what} holds over all of {key} ∈ [{a:g}, {b:g}]; "
                              f"{want_hint(face)} (or widen the range)")
        else:
            raise TargetError(f"{what} holds on several parts of [{a:g}, {b:g}] for {key}; "
                              f"{want_hint(face)}")
    order = range(len(xs) - 1, -1, -1) if want == "largest" else range(len(xs))
    i = next(k for k in order if ok[k])
    j = i + 1 if want == "largest" else i - 1
    if j < 0 or j >= len(xs):
        x_star, at_end = xs[i], True
    else:
        at_end = False
        g = lambda y: margin(inv(y))   # noqa: E731
        y_ok, y_bad = fwd(xs[i]), fwd(xs[j])
        if math.isinf(g(y_bad)):       # the far point fails outright: bisect to the edge
            for _ in range(80):
                mid = 0.5 * (y_ok + y_bad)
                if g(mid) >= 0:
                    y_ok = mid
                else:
                    y_bad = mid
                if abs(inv(y_bad) - inv(y_ok)) <= rtol * abs(inv(y_ok)):
                    break
        else:
            root = brentq(g, min(y_ok, y_bad), max(y_ok, y_bad), xtol=1e-15, rtol=1e-13)
            y_ok = root if g(root) >= 0 else y_ok
            # step from the root toward the feasible point until the bound is met
            step = (fwd(xs[i]) - root) * 1e-12
            y = root
            while g(y) < 0 and abs(y - fwd(xs[i])) > 0:
                y = y + step
                step *= 2
                if (y - fwd(xs[i])) * (root - fwd(xs[i])) <= 0:
                    y = fwd(xs[i])
                    break
            y_ok = y
        x_star = inv(y_ok)
    final = replace_value(design, key, x_star)
    res = analyze(final)
    v = metric_value(res, metric, at_hz)
    vv = METRICS[metric] if v is None else v
    met = sign * (vv - bound) >= 0
    feasible = "below" if want == "largest" else "above"
    return TargetResult(key, float(x_star), metric, float(bound), kind, at_hz, v, bool(met),
                        feasible, at_end, final)
