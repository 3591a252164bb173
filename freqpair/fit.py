"""Fit a design's hidden values (tail R and C, load C, C_jc0 …) to a measurement.

The free values are fitted in log space (``x = ln p``) within bounds by
:func:`scipy.optimize.least_squares` (trust-region reflective). The residual
vector is the measurement minus the model in dB, followed — when the
measurement has a phase — by the wrapped phase residual in degrees times
``phase_weight`` (by default 20/ln10 · π/180 ≈ 0.152 dB per degree, the ratio
that makes one neper of gain and one radian of phase count the same).

Uncertainty: the Gauss–Newton covariance at the solution,
``cov = s²·(JᵀJ)⁻¹`` with ``s² = Σr²/(m − n)`` and J the Jacobian with respect
to ln p, so ``sqrt(cov_kk)`` is a relative standard uncertainty. It is
computed through the singular values of J, so a flat direction gives an
infinite uncertainty rather than a warning from a matrix inverse.

Identifiability: a value is flagged as *not identifiable* when, with the
residual noise floored at :data:`NOISE_FLOOR_DB` (0.01 dB), its relative
standard uncertainty exceeds :data:`MAX_RELATIVE_SIGMA` (50 %) — the data
cannot see it (a flat direction of the Jacobian). Such a value is left at the
design's value in the fitted design, and a warning says so. A value that ends
at a bound is kept there and flagged too (widen the bounds).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .design import Design, get_value, replace_value
from .errors import FreqpairError
from .measured import Measurement, model_response, wrap_deg

__all__ = ["FitError", "FreeValue", "FittedValue", "FitResult", "fit_design",
           "parse_free_spec", "NOISE_FLOOR_DB", "MAX_RELATIVE_SIGMA", "DEFAULT_SPAN"]

#: Residual noise floor [dB] used when judging identifiability.
NOISE_FLOOR_DB = 0.01
#: Relative standard uncertainty above which a value counts as not identifiable.
MAX_RELATIVE_SIGMA = 0.5
#: Default bounds: the design value divided / multiplied by this factor.
DEFAULT_SPAN = 10.0
#: Natural weight of a degree of phase against a dB of magnitude (1 rad ≙ 1 Np).
PHASE_WEIGHT_DB_PER_DEG = 20.0 / math.log(10.0) * math.pi / 180.0
_PENALTY_DB = 1e3
_BOUND_TOL = 1e-3   # in ln p: a value within 0.1 % of a bound is "at" it


class FitError(FreqpairError, ValueError):
    """A fit cannot be set up or run (one line naming the value)."""


@dataclass(frozen=True)
class FreeValue:
    """A design value the fit may change, with its bounds (SI units, both > 0).

    ``lower``/``upper`` None means the design value ÷/× :data:`DEFAULT_SPAN`.
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
        Standard uncertainty of ln(value), i.e. relative [1].
    lower, upper : float
        Bounds used.
    at_bound : bool
    identifiable : bool
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

    def to_json(self) -> dict:
        return {k: getattr(self, k) for k in ("key", "initial", "fitted", "estimate", "sigma",
                                              "relative_sigma", "lower", "upper", "at_bound",
                                              "identifiable")}


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
    rms_residual_db_initial : float
        RMS magnitude residual of the starting design [dB].
    rms_residual_deg : float or None
        RMS phase residual after the fit [deg] (None without phase).
    n_points : int
        Measured frequencies used.
    singular_values : tuple of float
        Singular values of the Jacobian in ln p [dB per neper], largest first.
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
    rms_residual_db_initial: float
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

    Bounds are SI numbers (``"1p"``, ``"2.2e-12"``, ``"470k"``), both above 0.
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

    from .quantities import UNIT_ALIASES
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


def _prepare(design: Design, free) -> list[tuple[str, float, float, float]]:
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
        if lo is None or hi is None:
            if value <= 0:
                raise FitError(f"{fv.key} = {value:g}: zero in the design, so give bounds, "
                               f"e.g. {fv.key}=LOW:HIGH")
            lo, hi = value / DEFAULT_SPAN, value * DEFAULT_SPAN
        if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
            raise FitError(f"{fv.key}: bounds {lo:g}:{hi:g} must satisfy 0 < low < high "
                           "(the fit works on logarithms)")
        out.append((fv.key, value, lo, hi))
    if not out:
        raise FitError("no free values: name at least one, e.g. tail.capacitance")
    return out


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
        The values to fit, e.g. ``["tail.capacitance=1p:10p", "tail.resistance"]``.
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
    from .responses import StageResponses
    from .stage import build_stage

    spec = _prepare(design, free)
    keys = [k for k, *_ in spec]
    init = np.array([v for _, v, _, _ in spec])
    lo = np.log([lo for *_, lo, _ in spec])
    hi = np.log([hi for *_, hi in spec])
    x0 = np.clip(np.where(init > 0, np.log(np.where(init > 0, init, 1.0)), 0.5 * (lo + hi)),
                 lo, hi)
    f = measurement.f_hz
    meas_db = measurement.magnitude_db
    phase = measurement.phase_deg if use_phase else None
    m = f.size + (f.size if phase is not None else 0)
    if m <= len(keys):
        raise FitError(f"{measurement.origin}: {m} residuals cannot fix {len(keys)} free "
                       "values; measure more frequencies")

    def design_at(x) -> Design:
        d = design
        for key, value in zip(keys, np.exp(x)):
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

    r0 = residuals(x0, strict=True)   # a bad starting design is the user's error, say so
    sol = least_squares(residuals, x0, bounds=(lo, hi), method="trf", x_scale=1.0,
                        diff_step=1e-6, xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=200)
    try:
        r = residuals(sol.x, strict=True)
    except FreqpairError as exc:
        raise FitError(f"fit ended at an infeasible design: {exc}") from None
    J = sol.jac
    n = len(keys)
    s2 = float(r @ r) / (m - n)
    s_eff2 = max(s2, NOISE_FLOOR_DB ** 2)
    _, sv, vt = np.linalg.svd(J, full_matrices=False)
    tiny = sv <= 1e-12 * (sv[0] if sv.size and sv[0] > 0 else 1.0)
    with np.errstate(divide="ignore"):
        inv_sv2 = np.where(tiny, np.inf, 1.0 / np.where(tiny, 1.0, sv) ** 2)
    # diag(V · diag(1/σ²) · Vᵀ), with 0·∞ taken as 0 (a direction the key does not move in)
    weights = vt.T ** 2
    with np.errstate(invalid="ignore"):
        var_unit = np.array([np.sum(np.where(w > 1e-24, w * inv_sv2, 0.0)) for w in weights])
    rel_sigma = np.sqrt(s2 * var_unit)
    rel_sigma_floor = np.sqrt(s_eff2 * var_unit)

    flat = []
    for i, sval in enumerate(sv):
        if tiny[i] or math.sqrt(s_eff2) / sval > MAX_RELATIVE_SIGMA:
            members = tuple(keys[k] for k in np.nonzero(np.abs(vt[i]) > 0.3)[0])
            flat.append(members)

    est = np.exp(sol.x)
    values, warnings = [], []
    d_out = design
    for k, key in enumerate(keys):
        at_bound = bool(sol.x[k] - lo[k] < _BOUND_TOL or hi[k] - sol.x[k] < _BOUND_TOL)
        ident = bool(math.isfinite(rel_sigma_floor[k]) and rel_sigma_floor[k] <= MAX_RELATIVE_SIGMA)
        rs = float(rel_sigma[k]) if math.isfinite(rel_sigma[k]) else None
        sig = float(est[k] * rs) if rs is not None else None
        fitted = float(est[k]) if ident else float(init[k])
        if not ident:
            warnings.append(f"{key}: not identifiable from this measurement (the data hardly "
                            f"change with it; relative uncertainty "
                            f"{'∞' if rs is None else f'{rel_sigma_floor[k]:.0%}'}); "
                            f"kept at the design value {init[k]:.4g}")
        elif at_bound:
            side = "lower" if sol.x[k] - lo[k] < _BOUND_TOL else "upper"
            warnings.append(f"{key}: ended at its {side} bound {est[k]:.4g}; widen the bounds "
                            "(the uncertainty shown assumes it is free)")
        if ident:
            d_out = replace_value(d_out, key, fitted)
        values.append(FittedValue(key, float(init[k]), fitted, float(est[k]), sig, rs,
                                  float(math.exp(lo[k])), float(math.exp(hi[k])), at_bound,
                                  ident))
    for members in flat:
        if len(members) > 1:
            warnings.append("flat direction: " + ", ".join(members) +
                            " trade off against each other (only a combination is seen)")
    if phase is not None and np.median(np.abs(r0[f.size:] / phase_weight)) > 150.0:
        warnings.append("the measured phase is about 180° from the model's at the start: "
                        "check the sign convention (DESIGN.md §2) or fit without phase")
    if not sol.success:
        warnings.append(f"optimiser did not converge: {sol.message}")
    nf = f.size
    rms_deg = None
    if phase is not None:
        rms_deg = float(np.sqrt(np.mean((r[nf:] / phase_weight) ** 2)))
    return FitResult(d_out, measurement.kind, tuple(values),
                     float(np.sqrt(np.mean(r[:nf] ** 2))), float(np.sqrt(np.mean(r0[:nf] ** 2))),
                     rms_deg, int(nf), tuple(float(v) for v in sv), tuple(flat), tuple(warnings),
                     int(sol.nfev))
