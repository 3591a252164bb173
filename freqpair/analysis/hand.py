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

import numpy as np

from freqpair.analysis.hand_rows import TWO_PI, HandRow, _fin, _par, _row
from freqpair.analysis.hand_more import stage7_rows
from freqpair.analysis.poles import response_zpk
from freqpair.design.quantities import format_si

__all__ = ["HandRow", "hand_table", "hand_json"]

def _nearest(poles_hz: np.ndarray, f: float | None) -> float | None:
    if f is None or poles_hz.size == 0 or not math.isfinite(f) or f <= 0:
        return None
    return float(poles_hz[np.argmin(np.abs(np.log(poles_hz / f)))])


def _near_cancelled(roots: np.ndarray, others: np.ndarray) -> np.ndarray:
    """Mask of ``roots`` with one of ``others`` within 0.1 % (a near-cancelled doublet)."""
    return np.array([others.size > 0 and np.min(np.abs(others - r)) <= 1e-3 * abs(r)
                     for r in roots], dtype=bool)


def _kept_poles_hz(zpk, pairs_once: bool = False) -> np.ndarray:
    """Pole magnitudes [Hz] of one gain, sorted, without the origin and without
    near-cancelled doublets.

    A pole with a zero within 0.1 % is a near-cancelled doublet (a common-mode mode
    leaking through mismatch): it sets no bandwidth, so hand poles are not matched
    to it. ``pairs_once`` keeps one member of each complex pair.
    """
    p = zpk.poles_rad_s[zpk.poles_rad_s != 0]
    p = p[~_near_cancelled(p, zpk.zeros_rad_s)]
    if pairs_once:
        p = p[p.imag >= 0]
    return np.sort(np.abs(p)) / TWO_PI


def _fmt(f: float) -> str:
    from freqpair.design.quantities import format_si
    return format_si(f, "Hz")


def hand_table(analysis) -> list[HandRow]:
    """Textbook approximations beside the exact values of one analysed design.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis

    Returns
    -------
    list of HandRow
        Rows (keys): ``adm_dc``, ``miller_input_pole_hz``, ``output_pole_hz``,
        ``octc_f3db_hz``, ``gbw_hz``, ``mirror_pole_hz`` (mirror load only),
        ``cmrr_corner_hz``, ``acm_se_dc``, ``acm_dm_dc`` (resistor load only); with a
        second stage also ``two_stage_dominant_pole_hz``, ``two_stage_split_pole_hz``,
        ``miller_zero_hz``, ``two_stage_gbw_hz`` and ``a_total_dc`` (see
        :func:`_two_stage_rows`). Frequencies in Hz, gains in V/V (signed).
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
    p_hz = _kept_poles_hz(response_zpk(analysis, first))
    f_out = (1.0 / (TWO_PI * r_out * c_out_miller)
             if c_out_miller > 0 and math.isfinite(r_out) else None)
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
        miller_note = ("second stage present: its Miller capacitor is not in this formula "
                       "(see the two-stage rows)")
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
        out_note = ("second stage present: its Miller capacitor is not in this formula "
                    "(see the two-stage rows)")
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
    if second:
        # single-ended gain at o2: g_m·R_1 with a mirror load, g_m·R_1/2 with resistors
        a1_se = gm * r_out * divider * (1.0 if mirror else 0.5)
        rows.extend(_two_stage_rows(analysis, r_out, c_out_miller, a1_se, mirror))

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
    rows.extend(stage7_rows(analysis))
    return rows


#: "≫" in the validity notes of the two-stage rows: a factor of ten.
MUCH = 10.0


def _two_stage_rows(analysis, r_1: float, c_1: float, a1_se: float,
                    mirror: bool) -> list[HandRow]:
    """Pole splitting, Miller zero, GBW and DC gain of the two-stage amplifier.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
        A design with a ``[second_stage]``.
    r_1 : float
        First-stage output resistance at o2 [Ω]: r_o2∥r_o4 (mirror load) or R_L∥r_o.
    c_1 : float
        Capacitance at o2 to AC ground without the Miller capacitor [F] (load, C_cs,
        mirror device, second-stage input, the pair's C_mu with its Miller factor).
    a1_se : float
        Hand DC gain v_o2/v_id of the first stage [V/V] (positive).
    mirror : bool
        Mirror load (G_m1 = g_m1) rather than resistors (G_m1 = g_m1/2 at o2).

    Returns
    -------
    list of HandRow
        ``two_stage_dominant_pole_hz``, ``two_stage_split_pole_hz``, ``miller_zero_hz``
        (signed s/2π [Hz]: > 0 right half plane), ``two_stage_gbw_hz``, ``a_total_dc``.
        Exact values come from the exact zeros and poles of A_total: the dominant pole
        is the slowest kept pole, the split pole the kept pole nearest the hand value
        among the others, the zero the real zero of A_total on the hand value's side
        of the plane nearest to it (within 10×).

    References
    ----------
    Gray, Hurst, Lewis, Meyer, *Analysis and Design of Analog Integrated Circuits*,
    5th ed., §9.4 (two-stage op-amp frequency response and compensation: pole
    splitting, right-half-plane zero, nulling resistor) — from memory.
    """
    st = analysis.design.second_stage
    gm2, r_2, c_2 = st.gm, st.output_resistance, st.load_capacitance
    c_c, r_z = st.miller_capacitance, st.nulling_resistance
    zpk = response_zpk(analysis, "a_total")
    p_hz = _kept_poles_hz(zpk, pairs_once=True)
    rows: list[HandRow] = []
    no_cc = "no Miller capacitor (C_c = 0): no pole splitting, no Miller zero"

    # --- dominant pole
    gain2 = gm2 * r_2
    tau_miller = gm2 * r_1 * r_2 * c_c
    tau_rest = r_1 * (c_1 + c_c) + r_2 * (c_2 + c_c)
    f_p1 = 1.0 / (TWO_PI * tau_miller) if c_c > 0 else None
    ex_p1 = float(p_hz[0]) if p_hz.size else None
    p1_note = None
    if c_c == 0:
        p1_note = no_cc
    elif gain2 < MUCH:
        p1_note = f"g_m2·R_2 = {gain2:.3g} is not ≫ 1"
    elif tau_miller < MUCH * tau_rest:
        p1_note = (f"the Miller time constant g_m2·R_1·R_2·C_c = {format_si(tau_miller, 's')} "
                   f"is not ≫ R_1·(C_1+C_c) + R_2·(C_2+C_c) = {format_si(tau_rest, 's')}")
    elif p_hz.size >= 2 and p_hz[1] < MUCH * p_hz[0]:
        p1_note = (f"next pole {_fmt(p_hz[1])} within 10× of {_fmt(p_hz[0])}: "
                   "no dominant pole")
    rows.append(_row("two_stage_dominant_pole_hz", "two-stage dominant pole (pole splitting)",
                     "Miller: 1/(2π·g_m2·R_1·R_2·C_c), R_1 = " +
                     ("r_o2∥r_o4" if mirror else "R_L∥r_o") + ", R_2 = second-stage R_out",
                     ex_p1, f_p1, "Hz", p1_note))

    # --- non-dominant (split) pole
    den = c_1 * c_2 + c_c * (c_1 + c_2)
    f_p2 = gm2 * c_c / (TWO_PI * den) if (c_c > 0 and den > 0) else None
    rest = p_hz[1:]
    ex_p2 = _nearest(rest, f_p2) if f_p2 is not None else (
        float(rest[0]) if rest.size else None)
    p2_note = None
    if c_c == 0:
        p2_note = no_cc
    elif f_p2 is None:
        p2_note = "no capacitance at o2 or at the output: the split pole is at infinity"
    else:
        kept = zpk.poles_rad_s[zpk.poles_rad_s.imag > 0]
        cplx = [pk for pk in kept if ex_p2 is not None
                and abs(abs(pk) / TWO_PI - ex_p2) <= 1e-9 * ex_p2]
        f_rz = (1.0 / (TWO_PI * r_z * c_1 * c_c / (c_1 + c_c))) if (r_z > 0 and c_1 > 0) else None
        others = [f for f in rest if ex_p2 is not None and 1 / 3 < f / ex_p2 < 3
                  and abs(f - ex_p2) > 1e-9 * ex_p2]
        if cplx:
            q = abs(cplx[0]) / (2 * abs(cplx[0].real))
            p2_note = (f"the exact poles form a complex pair (Q = {q:.3g}): "
                       "they are not split apart")
        elif c_c < MUCH * max(c_1, c_2):
            p2_note = (f"C_c = {format_si(c_c, 'F')} is not ≫ C_1 = {format_si(c_1, 'F')}, "
                       f"C_2 = {format_si(c_2, 'F')}: a rough estimate")
        elif f_rz is not None and f_rz < MUCH * f_p2:
            p2_note = (f"the nulling resistor adds a pole near 1/(2π·R_z·(C_1 in series with "
                       f"C_c)) = {_fmt(f_rz)}, within 10× of the split pole: it moves it")
        elif p1_note is not None:
            p2_note = p1_note
        elif others:
            p2_note = (f"another pole ({_fmt(others[0])}) lies within 3× of the split pole: "
                       "the two-pole formula leaves it out")
    rows.append(_row("two_stage_split_pole_hz", "two-stage non-dominant pole (split)",
                     "Miller: g_m2·C_c/(2π·(C_1·C_2 + C_c·(C_1 + C_2))), C_1 at o2, "
                     "C_2 at the output (both without C_c)", ex_p2, f_p2, "Hz", p2_note))

    # --- Miller zero (signed: > 0 in the right half plane)
    x = 1.0 / gm2 - r_z
    f_z = ex_z = None
    z_note = None
    if c_c == 0:
        z_note = no_cc
    elif abs(x) <= 1e-9 / gm2:
        z_note = "R_z = 1/g_m2: the Miller zero is at infinity"
    else:
        f_z = 1.0 / (TWO_PI * c_c * x)
        z = zpk.zeros_rad_s
        z = z[~_near_cancelled(z, zpk.poles_rad_s)]
        z = z[(np.abs(z.imag) <= 1e-9 * np.abs(z)) & (np.sign(z.real) == np.sign(f_z))]
        cand = z.real / TWO_PI
        if cand.size:
            best = float(cand[np.argmin(np.abs(np.log(cand / f_z)))])
            ex_z = best if 0.1 < best / f_z < 10 else None
        if x < 0:
            z_note = "R_z > 1/g_m2: the zero is in the left half plane (phase lead)"
    rows.append(_row("miller_zero_hz", "Miller zero (s/2π; + = right half plane)",
                     "1/(2π·C_c·(1/g_m2 − R_z))", ex_z, f_z, "Hz", z_note))

    # --- gain-bandwidth
    gbw = a1_se / (TWO_PI * r_1 * c_c) if c_c > 0 else None
    g_note = None
    if c_c == 0:
        g_note = no_cc
    elif gain2 < MUCH:
        g_note = f"g_m2·R_2 = {gain2:.3g} is not ≫ 1"
    elif ex_p2 is not None and ex_p2 < gbw:
        g_note = (f"second pole {_fmt(ex_p2)} below the gain-bandwidth: "
                  "the one-pole roll-off does not reach unity gain")
    elif ex_p2 is not None and ex_p2 < 3 * gbw:
        g_note = (f"second pole {_fmt(ex_p2)} within 3× of the gain-bandwidth: "
                  "it lowers the unity-gain frequency")
    elif f_z is not None and abs(f_z) < 3 * gbw:
        g_note = (f"the Miller zero ({_fmt(f_z)}) lies within 3× of the "
                  "gain-bandwidth: it lifts the gain")
    elif p1_note is not None and c_c > 0:
        g_note = p1_note
    rows.append(_row("two_stage_gbw_hz", "two-stage unity-gain frequency",
                     "G_m1/(2π·C_c), G_m1 = " + ("g_m1" if mirror else "g_m1/2 (output o2)") +
                     "·r_pi/(r_pi+R_s+r_b)", analysis.ugf_hz, gbw, "Hz", g_note))

    # --- overall DC gain
    rows.append(_row("a_total_dc", "DC overall gain A_total",
                     "A_dm,se(0)·(−g_m2·R_2), A_dm,se(0) by hand: " +
                     ("g_m·(r_o∥r_o,mirror)" if mirror else "(g_m/2)·(R_L∥r_o)") +
                     "·r_pi/(r_pi+R_s+r_b)",
                     complex(analysis.dc.a_total[0]).real, -a1_se * gain2, "V/V"))
    return rows


def hand_json(analysis) -> dict:
    """The JSON ``hand`` object: key → {"exact", "approx", "error_pct"} (null if undefined)."""
    return {r.key: {"exact": _fin(r.exact), "approx": _fin(r.approx),
                    "error_pct": _fin(r.error_pct)} for r in hand_table(analysis)}
