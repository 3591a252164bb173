"""Fit a design's hidden values (tail R and C, load C, C_jc0, mismatch …) to a measurement.

Sizes (resistances, capacitances, currents …) are fitted in log space
(``x = ln p``); signed values — :data:`SIGNED_KEYS` (mismatch, input common
mode, supply rails) and any key whose design value or a given bound is
negative — are fitted in linear space (``x = p``). Both within bounds, by
:func:`scipy.optimize.least_squares` (trust-region reflective). The residual
vector is the measurement minus the model in dB, followed — when the
measurement has a phase — by the wrapped phase residual in degrees times
``phase_weight`` (by default 20/ln10 · π/180 ≈ 0.152 dB per degree, the ratio
that makes one neper of gain and one radian of phase count the same).

Uncertainty: the Gauss–Newton covariance at the solution,
``cov = s²·(JᵀJ)⁻¹`` with ``s² = Σr²/(m − n)`` and J the Jacobian with respect
to x: for a log value ``sqrt(cov_kk)`` is a relative standard uncertainty, for
a linear value the plain standard uncertainty in the value's own unit. It is
computed through the singular values of J, so a flat direction gives an
infinite uncertainty rather than a warning from a matrix inverse.

Identifiability: a value is flagged as *not identifiable* when, with the
residual noise floored at :data:`NOISE_FLOOR_DB` (0.01 dB), its relative
standard uncertainty exceeds :data:`MAX_RELATIVE_SIGMA` (50 %) — the data
cannot see it (a flat direction of the Jacobian). Such a value is left at the
design's value in the fitted design, and a warning says so. A value that ends
at a bound is kept there and flagged too (widen the bounds). For a linear
value the yardstick is its scale ``max(|estimate|, 1 % of the bound span)``:
not identifiable when σ (at the noise floor) exceeds 50 % of that scale.

Signs: swapping the two sides of the pair flips every mismatch sign and only
flips the sign of A_cm-dm, so magnitude data (|A_cm-dm|, balanced CMRR) cannot
tell +δ from −δ. When mismatch values are free with bounds that allow both
signs, the fit starts twice, from ±δ, and compares the two minima: if they
differ by less than :data:`SIGN_CHI2` in Σr²/s² (s² the residual variance,
floored), the sign is flagged as not identifiable (``sign_identifiable``
False, a warning) and the solution with the design's sign (+ when the design
has 0) is kept. Phase data of A_cm-dm settle the sign (it flips by 180°).
Default bounds of mismatch values are :data:`MISMATCH_BOUNDS` (±0.2).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from freqpair.design.schema import Design
from freqpair.design.keys import get_value, replace_value
from freqpair.design.errors import FreqpairError
from freqpair.studies.measured import Measurement, model_response, wrap_deg

__all__ = ["FitError", "FreeValue", "FittedValue", "FitResult", "fit_design",
           "parse_free_spec", "NOISE_FLOOR_DB", "MAX_RELATIVE_SIGMA", "DEFAULT_SPAN",
           "SIGNED_KEYS", "MISMATCH_BOUNDS", "SIGN_CHI2", "is_signed_key"]

#: Residual noise floor [dB] used when judging identifiability.
NOISE_FLOOR_DB = 0.01
#: Relative standard uncertainty above which a value counts as not identifiable.
MAX_RELATIVE_SIGMA = 0.5
#: Default bounds: the design value divided / multiplied by this factor.
DEFAULT_SPAN = 10.0
#: Natural weight of a degree of phase against a dB of magnitude (1 rad ≙ 1 Np).
PHASE_WEIGHT_DB_PER_DEG = 20.0 / math.log(10.0) * math.pi / 180.0
#: Design keys that are signed by nature, fitted in linear space ("supply.*": any rail).
SIGNED_KEYS = frozenset({"mismatch.load", "mismatch.gm", "bias.input_common_mode",
                         "supply.positive", "supply.negative"})
#: Default bounds of a free mismatch value (relative, ±20 %).
MISMATCH_BOUNDS = (-0.2, 0.2)
#: Two mirrored minima closer than this in Σr²/s² (3σ for one value) leave the sign open.
SIGN_CHI2 = 9.0
_PENALTY_DB = 1e3
_BOUND_TOL = 1e-3   # in ln p: a value within 0.1 % of a bound is "at" it


def is_signed_key(key: str) -> bool:
    """True for a design key that is signed by nature (see :data:`SIGNED_KEYS`)."""
    return key in SIGNED_KEYS or key.startswith("supply.")


def _mirror_key(key: str) -> bool:
    return key.startswith("mismatch.")


class FitError(FreqpairError, ValueError):
    """A fit cannot be set up or run (one line naming the value)."""


@dataclass(frozen=True)
class FreeValue:
    """A design value the fit may change, with its bounds (SI units).

    ``lower``/``upper`` None means the default: for a size the design value
    ÷/× :data:`DEFAULT_SPAN`; for a mismatch :data:`MISMATCH_BOUNDS`; for
    another signed value (input common mode, rails) the design value ± its
    magnitude (bounds required when it is 0). Sizes need 0 < lower < upper;
    signed values lower < upper.
    """

    key: str
    lower: float | None = None
    upper: float | None = None


@dataclass(frozen=True)
class FittedValue:
    """One fitted value (SI units).

    Attributes
    ----------
    key : str
        Dotted design key.
    initial, fitted : float
        Design value before and value after the fit (the value written to the
        fitted design; the initial one when not identifiable).
    estimate : float
        The optimiser's value (even when not identifiable).
    sigma : float or None
        Standard uncertainty of ``estimate`` (linearised; None when infinite).
    relative_sigma : float or None
        Relative standard uncertainty [1]: of ln(value) for a log value,
        ``sigma/|estimate|`` for a linear one (None when infinite or the
        estimate is 0).
    lower, upper : float
        Bounds used.
    at_bound : bool
    identifiable : bool
    space : str
        ``"log"`` (sizes) or ``"linear"`` (signed values).
    sign_identifiable : bool
        False when the data fit +value and −value equally well (a mismatch
        from magnitude data); always True for a log value.
    """

    key: str
    initial: float
    fitted: float
    estimate: float
    sigma: float | None
    relative_sigma: float | None
    lower: float
    upper: float
    at_bound: bool
    identifiable: bool
    space: str = "log"
    sign_identifiable: bool = True

    def to_json(self) -> dict:
        return {k: getattr(self, k) for k in ("key", "initial", "fitted", "estimate", "sigma",
                                              "relative_sigma", "lower", "upper", "at_bound",
                                              "identifiable", "space", "sign_identifiable")}


@dataclass(frozen=True)
class FitResult:
    """Outcome of :func:`fit_design`.

    Attributes
    ----------
    design : Design
        The fitted design (identifiable values replaced).
    kind : str
    values : tuple of FittedValue
    rms_residual_db : float
        RMS magnitude residual after the fit [dB].
    rms_residual_db_initial : float or None
        RMS magnitude residual of the starting design [dB] (None when the
        starting design's gain is exactly zero somewhere, e.g. A_cm-dm of a
        matched pair: no dB value).
    rms_residual_deg : float or None
        RMS phase residual after the fit [deg] (None without phase).
    n_points : int
        Measured frequencies used.
    singular_values : tuple of float
        Singular values of the Jacobian, largest first, per unit change of
        ln p (log values, dB per neper) or of p / scale (linear values).
    flat_directions : tuple of tuple of str
        For each flat direction of the Jacobian, the keys that move along it.
    warnings : tuple of str
        One line each: not identifiable, at a bound, optimiser trouble.
    evaluations : int
        Model evaluations by the optimiser.
    """

    design: Design
    kind: str
    values: tuple
    rms_residual_db: float
    rms_residual_db_initial: float | None
    rms_residual_deg: float | None
    n_points: int
    singular_values: tuple
    flat_directions: tuple
    warnings: tuple
    evaluations: int

    def to_json(self) -> dict:
        """Plain dict (SI units; None for infinite uncertainty)."""
        return {"kind": self.kind, "n_points": self.n_points,
                "free": [v.to_json() for v in self.values],
                "rms_residual_db": self.rms_residual_db,
                "rms_residual_db_initial": self.rms_residual_db_initial,
                "rms_residual_deg": self.rms_residual_deg,
                "singular_values": list(self.singular_values),
                "flat_directions": [list(d) for d in self.flat_directions],
                "warnings": list(self.warnings), "evaluations": self.evaluations}


def parse_free_spec(spec: str) -> FreeValue:
    """``"tail.capacitance"`` or ``"tail.capacitance=1p:10p"`` → :class:`FreeValue`.

    Bounds are SI numbers (``"1p"``, ``"2.2e-12"``, ``"470k"``); a signed value
    may have negative ones (``"mismatch.load=-0.05:0.05"``).
    """
    key, eq, rng = spec.partition("=")
    key = key.strip()
    if not key:
        raise FitError(f"free value {spec!r}: give a design key, e.g. tail.capacitance=1p:10p")
    if not eq:
        return FreeValue(key)
    lo_text, colon, hi_text = rng.partition(":")
    if not colon:
        raise FitError(f"free value {spec!r}: bounds are written LOW:HIGH, e.g. {key}=1p:10p")
    from quantiphy import Quantity

    from freqpair.design.quantities import UNIT_ALIASES
    units = set().union(*UNIT_ALIASES.values())
    bounds = []
    for text in (lo_text, hi_text):
        try:
            q = Quantity(text.strip())
            if q.units not in units:
                raise ValueError(q.units)
            value = float(q)
        except Exception:
            raise FitError(f"free value {spec!r}: bound {text.strip()!r} is not a number "
                           "with an SI prefix") from None
        bounds.append(value)
    return FreeValue(key, bounds[0], bounds[1])


def _prepare(design: Design, free) -> list[tuple[str, float, float, float, bool]]:
    """Free values → ``(key, design value, lower, upper, linear)``."""
    from freqpair.design.schema import DesignError
    out = []
    seen = set()
    for item in free:
        fv = parse_free_spec(item) if isinstance(item, str) else item
        if fv.key in seen:
            raise FitError(f"{fv.key}: given twice as a free value")
        seen.add(fv.key)
        value = get_value(design, fv.key)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise FitError(f"{fv.key} = {value!r}: not a number, cannot be fitted")
        value = float(value)
        lo, hi = fv.lower, fv.upper
        given = [b for b in (lo, hi) if b is not None]
        linear = is_signed_key(fv.key) or value < 0 or any(b < 0 for b in given)
        if linear:
            if lo is None or hi is None:
                if _mirror_key(fv.key):
                    lo, hi = MISMATCH_BOUNDS
                elif value != 0:
                    lo, hi = value - abs(value), value + abs(value)
                else:
                    raise FitError(f"{fv.key} = 0: give bounds for this signed value, "
                                   f"e.g. {fv.key}=-1:1")
            if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
                raise FitError(f"{fv.key}: bounds {lo:g}:{hi:g} must satisfy low < high")
            for bound in (lo, hi):
                try:
                    replace_value(design, fv.key, bound)
                except DesignError as exc:
                    raise FitError(f"{fv.key}: bound {bound:g} is not allowed ({exc})") from None
        else:
            if lo is None or hi is None:
                if value <= 0:
                    raise FitError(f"{fv.key} = {value:g}: zero in the design, so give bounds, "
                                   f"e.g. {fv.key}=LOW:HIGH")
                lo, hi = value / DEFAULT_SPAN, value * DEFAULT_SPAN
            if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
                raise FitError(f"{fv.key}: bounds {lo:g}:{hi:g} must satisfy 0 < low < high "
                               "(the fit works on logarithms)")
        out.append((fv.key, value, lo, hi, linear))
    if not out:
        raise FitError("no free values: name at least one, e.g. tail.capacitance")
    return out


def _starts(spec, x_base, lo, hi) -> tuple[list[np.ndarray], list[int]]:
    """Starting points: the design's, and its mirror (mismatch signs flipped) when allowed.

    Returns the starts and the indices of the mirrored (mismatch) values.
    """
    x = x_base.copy()
    mirror = [k for k, (key, _, _, _, linear) in enumerate(spec) if linear and _mirror_key(key)]
    if not mirror or any(not (lo[k] < 0 < hi[k]) for k in mirror):
        for k, (key, init, _, _, linear) in enumerate(spec):
            if linear and init == 0 and _mirror_key(key):   # δ = 0 may null the gain
                x[k] = 0.5 * (lo[k] + hi[k]) if lo[k] + hi[k] != 0 else 0.25 * hi[k]
        return [x], []
    for k in mirror:
        init = spec[k][1]
        reach = min(-lo[k], hi[k])
        s = abs(init) if 0 < abs(init) <= reach else 0.25 * reach
        x[k] = s if init >= 0 else -s
    y = x.copy()
    y[mirror] = -x[mirror]
    return [x, y], mirror


def fit_design(design: Design, measurement: Measurement, free, *, use_phase: bool = True,
               phase_weight: float = PHASE_WEIGHT_DB_PER_DEG) -> FitResult:
    """Fit free design values so the model matches a measurement.

    Parameters
    ----------
    design : Design
        Starting design (the known values and the first guesses).
    measurement : Measurement
        Measured magnitude [dB] and optional phase [deg] of ``measurement.kind``.
    free : sequence of FreeValue or str
        The values to fit, e.g. ``["tail.capacitance=1p:10p", "tail.resistance",
        "mismatch.load=-0.05:0.05"]``.
    use_phase : bool
        Fit the phase too when the measurement has it.
    phase_weight : float
        Weight of one degree of phase residual [dB/deg].

    Returns
    -------
    FitResult

    Raises
    ------
    FitError
        Bad free values, too few points, or no feasible design at the result.
    """
    from freqpair.analysis.responses import StageResponses
    from freqpair.circuit.stage import build_stage

    spec = _prepare(design, free)
    keys = [k for k, *_ in spec]
    init = np.array([v for _, v, _, _, _ in spec])
    linear = np.array([lin for *_, lin in spec], dtype=bool)
    lo_v = np.array([b for _, _, b, _, _ in spec])
    hi_v = np.array([b for _, _, _, b, _ in spec])
    lo = np.where(linear, lo_v, np.log(np.where(linear, 1.0, lo_v)))
    hi = np.where(linear, hi_v, np.log(np.where(linear, 1.0, hi_v)))
    safe_init = np.where(init > 0, init, 1.0)
    x_base = np.where(linear, init, np.where(init > 0, np.log(safe_init), 0.5 * (lo + hi)))
    x_base = np.clip(x_base, lo, hi)
    x_scale = np.where(linear, 0.25 * (hi - lo), 1.0)
    f = measurement.f_hz
    meas_db = measurement.magnitude_db
    phase = measurement.phase_deg if use_phase else None
    m = f.size + (f.size if phase is not None else 0)
    n = len(keys)
    if m <= n:
        raise FitError(f"{measurement.origin}: {m} residuals cannot fix {n} free "
                       "values; measure more frequencies")

    def values_at(x) -> np.ndarray:
        return np.where(linear, x, np.exp(np.where(linear, 0.0, x)))

    def design_at(x) -> Design:
        d = design
        for key, value in zip(keys, values_at(x)):
            d = replace_value(d, key, float(value))
        return d

    def residuals(x, strict=False):
        try:
            h = model_response(StageResponses(build_stage(design_at(x))), measurement.kind, f)
        except FreqpairError:
            if strict:
                raise
            return np.full(m, _PENALTY_DB)
        r = 20.0 * np.log10(np.abs(h)) - meas_db
        if phase is not None:
            dphi = wrap_deg(np.degrees(np.angle(h)) - phase)
            r = np.concatenate([r, phase_weight * dphi])
        return r

    starts, mirror = _starts(spec, x_base, lo, hi)
    # a bad starting design is the user's error, say so — unless only its matched sides
    # null the gain (A_cm-dm at δ = 0) and the mismatched start is fine
    try:
        r0 = residuals(x_base, strict=True)
    except FreqpairError:
        if np.array_equal(starts[0], x_base):
            raise
        residuals(starts[0], strict=True)
        r0 = None
    sols = []
    for x0 in starts:
        sol = least_squares(residuals, x0, bounds=(lo, hi), method="trf", x_scale=x_scale,
                            diff_step=1e-6, xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=200)
        try:
            r = residuals(sol.x, strict=True)
        except FreqpairError:
            r = None
        sols.append((sol, r))
    feasible = [(sol, r) for sol, r in sols if r is not None]
    if not feasible:
        try:
            residuals(sols[0][0].x, strict=True)
        except FreqpairError as exc:
            raise FitError(f"fit ended at an infeasible design: {exc}") from None
    costs = [float(r @ r) for _, r in feasible]
    best = int(np.argmin(costs))
    sign_open = False
    if len(feasible) == 2:
        s2_best = max(costs[best] / (m - n), NOISE_FLOOR_DB ** 2)
        (sa, _), (sb, _) = feasible
        opposite = all(sa.x[k] * sb.x[k] < 0 for k in mirror)
        if opposite and abs(costs[0] - costs[1]) / s2_best < SIGN_CHI2:
            sign_open = True
            best = 0      # a tie: keep the design's sign (+ when the design has 0)
    sol, r = feasible[best]
    nfev = sum(s.nfev for s, _ in sols)

    x = sol.x
    est = values_at(x)
    s2 = float(r @ r) / (m - n)
    s_eff2 = max(s2, NOISE_FLOOR_DB ** 2)
    # linear values are judged on their own scale: max(|estimate|, 1 % of the bound span)
    scale = np.where(linear, np.maximum(np.abs(est), 0.01 * (hi - lo)), 1.0)
    J = sol.jac * scale
    _, sv, vt = np.linalg.svd(J, full_matrices=False)
    tiny = sv <= 1e-12 * (sv[0] if sv.size and sv[0] > 0 else 1.0)
    with np.errstate(divide="ignore"):
        inv_sv2 = np.where(tiny, np.inf, 1.0 / np.where(tiny, 1.0, sv) ** 2)
    # diag(V · diag(1/σ²) · Vᵀ), with 0·∞ taken as 0 (a direction the key does not move in)
    weights = vt.T ** 2
    with np.errstate(invalid="ignore"):
        var_unit = np.array([np.sum(np.where(w > 1e-24, w * inv_sv2, 0.0)) for w in weights])
    scaled_sigma = np.sqrt(s2 * var_unit)           # in ln p, or in units of `scale`
    scaled_sigma_floor = np.sqrt(s_eff2 * var_unit)

    flat = []
    for i, sval in enumerate(sv):
        if tiny[i] or math.sqrt(s_eff2) / sval > MAX_RELATIVE_SIGMA:
            members = tuple(keys[k] for k in np.nonzero(np.abs(vt[i]) > 0.3)[0])
            flat.append(members)

    values, warnings = [], []
    d_out = design
    for k, key in enumerate(keys):
        at_lo, at_hi = x[k] - lo[k], hi[k] - x[k]
        tol = _BOUND_TOL * (hi[k] - lo[k]) if linear[k] else _BOUND_TOL
        at_bound = bool(at_lo < tol or at_hi < tol)
        ident = bool(math.isfinite(scaled_sigma_floor[k])
                     and scaled_sigma_floor[k] <= MAX_RELATIVE_SIGMA)
        if not math.isfinite(scaled_sigma[k]):
            sig = rs = None
        elif linear[k]:
            sig = float(scale[k] * scaled_sigma[k])
            rs = sig / abs(est[k]) if est[k] != 0 else None
        else:
            rs = float(scaled_sigma[k])
            sig = float(est[k] * rs)
        fitted = float(est[k]) if ident else float(init[k])
        if not ident:
            judged = scaled_sigma_floor[k]
            warnings.append(f"{key}: not identifiable from this measurement (the data hardly "
                            f"change with it; relative uncertainty "
                            f"{'∞' if not math.isfinite(judged) else f'{judged:.0%}'}); "
                            f"kept at the design value {init[k]:.4g}")
        elif at_bound:
            side = "lower" if at_lo < tol else "upper"
            warnings.append(f"{key}: ended at its {side} bound {est[k]:.4g}; widen the bounds "
                            "(the uncertainty shown assumes it is free)")
        sign_ok = not (sign_open and k in mirror)
        if not sign_ok and ident:
            warnings.append(f"{key}: sign not identifiable from magnitude data; phase data "
                            f"needed (+{abs(est[k]):.4g} and −{abs(est[k]):.4g} fit equally "
                            "well: swapping the sides gives the same magnitude); kept the "
                            f"{'design' if init[k] != 0 else 'positive'} sign")
        if ident:
            d_out = replace_value(d_out, key, fitted)
        values.append(FittedValue(key, float(init[k]), fitted, float(est[k]), sig, rs,
                                  float(lo_v[k]), float(hi_v[k]), at_bound, ident,
                                  "linear" if linear[k] else "log", sign_ok))
    for members in flat:
        if len(members) > 1:
            warnings.append("flat direction: " + ", ".join(members) +
                            " trade off against each other (only a combination is seen)")
    if phase is not None:
        # judged at the best of the starts: a free mismatch may flip the sign itself
        off = []
        for x0 in starts:
            try:
                rs0 = residuals(x0, strict=True)
            except FreqpairError:
                continue
            off.append(np.median(np.abs(rs0[f.size:] / phase_weight)))
        if off and min(off) > 150.0:
            warnings.append("the measured phase is about 180° from the model's at the start: "
                            "check the sign convention (DESIGN.md §2) or fit without phase")
    if not sol.success:
        warnings.append(f"optimiser did not converge: {sol.message}")
    nf = f.size
    rms_deg = None
    if phase is not None:
        rms_deg = float(np.sqrt(np.mean((r[nf:] / phase_weight) ** 2)))
    rms0 = None if r0 is None else float(np.sqrt(np.mean(r0[:nf] ** 2)))
    return FitResult(d_out, measurement.kind, tuple(values),
                     float(np.sqrt(np.mean(r[:nf] ** 2))), rms0,
                     rms_deg, int(nf), tuple(float(v) for v in sv), tuple(flat), tuple(warnings),
                     int(nfev))
