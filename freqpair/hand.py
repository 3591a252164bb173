"""Hand analysis beside the exact answer: textbook approximations, each by its method.

Every row holds the exact value (from the full two-sided network), the hand
approximation (from the nominal device values and the differential or
common-mode half circuit), the error in %, and a short note when the
approximation is used outside the regime where it holds.

References
----------
Gray, Hurst, Lewis, Meyer, *Analysis and Design of Analog Integrated Circuits*,
5th ed.: §3.5 (differential pairs: common-mode gain, mismatch conversion),
§4.3.5 (active load), §7.2 (Miller effect, dominant pole), §7.3 (open-circuit
time constants) — from memory.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .poles import response_zpk
from .quantities import format_si

__all__ = ["HandRow", "hand_table", "hand_json"]

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


def _nearest(poles_hz: np.ndarray, f: float | None) -> float | None:
    if f is None or poles_hz.size == 0 or not math.isfinite(f) or f <= 0:
        return None
    return float(poles_hz[np.argmin(np.abs(np.log(poles_hz / f)))])


def _fmt(f: float) -> str:
    from .quantities import format_si
    return format_si(f, "Hz")


def hand_table(analysis) -> list[HandRow]:
    """Textbook approximations beside the exact values of one analysed design.

    Parameters
    ----------
    analysis : freqpair.analysis.Analysis

    Returns
    -------
    list of HandRow
        Rows (keys): ``adm_dc``, ``miller_input_pole_hz``, ``output_pole_hz``,
        ``octc_f3db_hz``, ``gbw_hz``, ``mirror_pole_hz`` (mirror load only),
        ``cmrr_corner_hz``, ``acm_se_dc``, ``acm_dm_dc`` (resistor load only).
        Frequencies in Hz, gains in V/V (signed).
    """
    stage = analysis.stage
    d = analysis.design
    ss = analysis.operating_point.small_signal
    mirror = d.load.type == "mirror"
    lss = stage.load_small_signal
    second = d.second_stage is not None
    first = "adm" if stage.balanced else "adm_se"
    dc = analysis.dc

    gm, rpi, ro = ss.gm, ss.r_in, ss.ro
    cpi, cmu, ccs = ss.c_in, ss.c_fb, ss.c_out
    rs_rb = d.source.resistance + ss.rb
    r_in = _par(rpi, rs_rb) if rs_rb > 0 else 0.0
    divider = 1.0 if rpi == math.inf else rpi / (rpi + rs_rb)
    if mirror:
        r_out = _par(ro, lss.ro)
        c_out = d.load.capacitance + ccs + lss.c_out + lss.c_fb
    else:
        r_out = _par(d.load.resistance, ro)
        c_out = d.load.capacitance + ccs
    if second:
        c_out += d.second_stage.input_capacitance
    c_out_miller = c_out + cmu * (1.0 + 1.0 / (gm * r_out))
    rows: list[HandRow] = []

    # --- DC differential gain (half circuit)
    a_hand = gm * r_out * divider
    if stage.balanced:
        a_hand = -a_hand
    rows.append(_row("adm_dc", "DC differential gain " + ("A_dm" if stage.balanced else "A_dm,se"),
                     "half circuit: g_m·(R_L∥r_o)·r_pi/(r_pi+R_s+r_b)" if not mirror else
                     "active load: g_m·(r_o∥r_o,mirror)·r_pi/(r_pi+R_s+r_b)",
                     complex(dc.get(first)[0]).real, a_hand, "V/V"))

    # --- poles of the first stage
    zpk = response_zpk(analysis, first)
    p = zpk.poles_rad_s[zpk.poles_rad_s != 0]
    z = zpk.zeros_rad_s
    # a pole with a zero within 0.1 % is a near-cancelled doublet (a common-mode mode
    # leaking through mismatch): it sets no bandwidth, so hand poles are not matched to it
    near_cancelled = np.array([z.size > 0 and np.min(np.abs(z - pk)) <= 1e-3 * abs(pk)
                               for pk in p], dtype=bool)
    p_hz = np.sort(np.abs(p[~near_cancelled])) / TWO_PI
    f_out = 1.0 / (TWO_PI * r_out * c_out_miller) if c_out_miller > 0 else None
    f_in = None
    miller_note = None
    if r_in > 0 and (cpi + cmu) > 0:
        f_in = 1.0 / (TWO_PI * r_in * (cpi + cmu * (1.0 + gm * r_out)))
    else:
        miller_note = "no source or base resistance: the input node has no pole"
    ex_in = _nearest(p_hz, f_in)
    ex_out = _nearest(p_hz, f_out)
    if f_in is not None and f_out is not None and p_hz.size >= 2:
        # two hand poles against the two slowest exact poles, in order of frequency
        # (pole splitting moves both, so "nearest" would pair both with one pole)
        ex_in, ex_out = (p_hz[0], p_hz[1]) if f_in <= f_out else (p_hz[1], p_hz[0])
        ex_in, ex_out = float(ex_in), float(ex_out)
    if miller_note is None and f_out is not None and 0.1 < f_in / f_out < 10:
        miller_note = (f"input and output poles within 10× ({_fmt(f_in)} vs {_fmt(f_out)}): "
                       "the Miller split does not hold")
    if miller_note is None and ex_in is not None and p_hz.size and ex_in > p_hz[0] * 1.0001:
        miller_note = (f"R_s + r_b = {rs_rb:.4g} Ω too small: the input pole is not dominant "
                       f"(dominant pole {_fmt(p_hz[0])})")
    if second and miller_note is None:
        miller_note = "second stage present: its Miller capacitor is not in this formula"
    rows.append(_row("miller_input_pole_hz", "input pole (Miller)",
                     "Miller: 1/(2π·((R_s+r_b)∥r_pi)·(C_pi + C_mu·(1+g_m·R_out)))",
                     ex_in, f_in, "Hz", miller_note))
    out_note = None
    if f_in is not None and f_out is not None and 0.1 < f_in / f_out < 10:
        out_note = "input and output poles within 10×: the Miller split does not hold"
    elif f_in is not None and f_out is not None and f_in < f_out:
        out_note = ("the input pole dominates: above it the Miller gain is not constant, so "
                    "this estimate ignores pole splitting")
    elif second:
        out_note = "second stage present: its Miller capacitor is not in this formula"
    rows.append(_row("output_pole_hz", "output pole",
                     "Miller: 1/(2π·R_out·(C_L + C_cs + C_mu·(1+1/(g_m·R_out))))",
                     ex_out, f_out, "Hz", out_note))

    # --- mirror pole
    taus = [r_in * cpi, cmu * (r_in + r_out + gm * r_in * r_out), r_out * c_out]
    if mirror:
        c_m = 2 * lss.c_in + lss.c_out + ccs + cmu + lss.c_fb
        f_m = lss.gm / (TWO_PI * c_m) if c_m > 0 else None
        taus.append(c_m / lss.gm)
        rows.append(_row("mirror_pole_hz", "mirror pole",
                         "g_m,mirror/(2π·(2C_pi,mirror + C_cs + C_mu + C_mu,mirror))",
                         _nearest(p_hz, f_m), f_m, "Hz"))

    # --- open-circuit time constants, dominant-pole GBW
    tau = sum(taus)
    f_octc = 1.0 / (TWO_PI * tau) if tau > 0 else None
    octc_note = None
    exact_f3 = analysis.f3db_hz if not second else None
    if second:
        octc_note = "second stage present: the exact f_3dB is the overall gain's"
    elif p_hz.size >= 2 and p_hz[1] < 4 * p_hz[0]:
        octc_note = (f"no dominant pole (second pole {_fmt(p_hz[1])} within 4× of "
                     f"{_fmt(p_hz[0])}): a rough estimate")
    rows.append(_row("octc_f3db_hz", "−3 dB frequency", "open-circuit time constants: "
                     "1/(2π·Σ R_k0·C_k)", exact_f3, f_octc, "Hz", octc_note))
    a0 = abs(complex(dc.get(analysis.primary)[0]))
    gbw = a0 * analysis.f3db_hz if (analysis.f3db_hz and a0 > 1) else None
    gbw_note = None
    if gbw is None:
        gbw_note = "|A_dm(0)| ≤ 1 or no f_3dB: no unity-gain frequency"
    else:
        pz = response_zpk(analysis, analysis.primary).poles_rad_s
        ph = np.sort(np.abs(pz[pz != 0])) / TWO_PI
        if ph.size >= 2 and ph[1] < gbw:
            gbw_note = (f"second pole {_fmt(ph[1])} below the gain-bandwidth: "
                        "the single-pole assumption fails")
    rows.append(_row("gbw_hz", "unity-gain frequency", "dominant pole: |A_dm(0)|·f_3dB",
                     analysis.ugf_hz, gbw, "Hz", gbw_note))

    # --- common mode
    tail = stage.tail
    r_t = tail.resistance if tail is not None else math.inf
    c_t = tail.capacitance if tail is not None else 0.0
    f_tail = 1.0 / (TWO_PI * r_t * c_t) if (math.isfinite(r_t) and c_t > 0) else None
    tail_note = None
    if tail is None:
        tail_note = "ideal tail: no tail zero"
    elif f_tail is None:
        tail_note = "no tail capacitance: the tail zero is at infinity"
    else:
        near = [f for f in p_hz if 0.1 < f / f_tail < 10]
        if 2 * cmu > 0.1 * c_t:
            tail_note = (f"C_mu feed-through shifts the zero: needs C_tail ≫ 2·C_mu "
                         f"({format_si(c_t, 'F')} vs {format_si(2 * cmu, 'F')})")
        elif near:
            tail_note = (f"a differential-gain pole ({_fmt(near[0])}) lies within 10× of the "
                         "tail zero: both set the corner")
    rows.append(_row("cmrr_corner_hz", "CMRR corner", "tail zero: 1/(2π·R_tail·C_tail)",
                     analysis.cmrr_corner_hz, f_tail, "Hz", tail_note))
    if not mirror:
        r_l = d.load.resistance
        loop = 2 * gm * r_t
        cm_note = None
        if tail is None:
            cm_note = "ideal tail: the formula gives 0"
        elif loop < 20:
            cm_note = f"2·g_m·R_tail = {loop:.3g} is not ≫ 1"
        elif rpi != math.inf and rpi * gm * ro < 30 * 2 * r_t:
            cm_note = (f"β·r_o = {format_si(rpi * gm * ro, 'Ω')} is not ≫ 2·R_tail = {format_si(2 * r_t, 'Ω')} "
                       "(r_o and base current carry common-mode current)")
        acm_hand = -r_l / (2 * r_t) + 0.0
        zero_ref = 1e-12 * abs(complex(dc.get(first)[0]))
        exact_cm = complex(dc.acm_se[0]).real
        exact_cm = 0.0 if abs(exact_cm) <= zero_ref else exact_cm
        rows.append(_row("acm_se_dc", "DC common-mode gain A_cm,se",
                         "common-mode half circuit: −R_L/(2·R_tail)",
                         exact_cm, acm_hand, "V/V", cm_note))
        mm = d.mismatch
        conv = -(r_l / (2 * r_t)) * (mm.load + mm.gm) + 0.0
        conv_note = cm_note
        if cm_note is None and mm.gm != 0 and ro < 30 * 2 * r_t:
            conv_note = (f"r_o = {format_si(ro, 'Ω')} is not ≫ 2·R_tail = {format_si(2 * r_t, 'Ω')}: g_m mismatch "
                         "also converts the common-mode current in r_o")
        if mm.load == 0 and mm.gm == 0:
            conv_note = "perfectly matched: both are zero"
        exact_cd = complex(dc.acm_dm[0]).real
        if abs(exact_cd) <= zero_ref:
            exact_cd = 0.0
        rows.append(_row("acm_dm_dc", "DC common-mode to differential gain A_cm-dm",
                         "mismatch: −(R_L/(2·R_tail))·(ΔR_L/R_L + Δg_m/g_m)",
                         exact_cd, conv, "V/V", conv_note))
    return rows


def hand_json(analysis) -> dict:
    """The JSON ``hand`` object: key → {"exact", "approx", "error_pct"} (null if undefined)."""
    return {r.key: {"exact": _fin(r.exact), "approx": _fin(r.approx),
                    "error_pct": _fin(r.error_pct)} for r in hand_table(analysis)}
