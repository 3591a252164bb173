"""Hand estimates for the second edition of the stage (DESIGN.md §7), beside the exact values.

Each function returns :class:`~freqpair.analysis.hand.HandRow` rows, or none
when the design lacks the feature:

- degenerated pair: A_dm ≈ g_m·R_L/(1 + g_m·R_E) and Z_in,dm ≈ 2·(r_b + r_π + (β+1)·R_E);
- cascoded pair: the cascode's output resistance ≈ r_oc·(1 + (g_mc + g_mbc)·(r_o∥r_πc))
  (→ g_m·r_o² for MOS, capped near β·r_o for bipolar) and the cascoded gain;
- MOS body effect: the common-mode gain −g_m·R_L/(1 + 2·(g_m + g_mb)·R_tail);
- feedback divider: the pole 1/(2π·(R_f∥R_g)·(C_f + C_g)), the zero 1/(2π·R_f·C_f)
  and the C_f that cancels the pole (R_f·C_f = R_g·C_g);
- supply rejection: a resistor-loaded output follows V+ one-for-one
  (PSRR+ ≈ |A_dm,se|); the tail rail reaches o2 like a common-mode signal,
  through R_L/(2·R_tail) (PSRR− ≈ |A_dm,se|·2·R_tail/R_L);
- input impedance: Z_in,dm(0) ≈ 2·(r_b + r_π) and the input-capacitance
  corner 1/(2π·r_π·(C_π + C_μ·(1 + g_m·R_out)));
- noise: the pair's input-referred density, bipolar
  e_n² ≈ 2·4kT·(R_s + r_b + 1/(2g_m)) + 2·2qI_B·(R_s + r_b)² + 2·4kT/(g_m²·R_L),
  MOS e_n² ≈ 2·4kT·(R_s + γ_n/g_m) + 2·4kT/(g_m²·R_L), and the flicker corner
  of e_n² (where its 1/f part equals its white part).

References
----------
Gray, Hurst, Lewis, Meyer, *Analysis and Design of Analog Integrated Circuits*,
5th ed.: §3.3–3.5 (degeneration, cascode output resistance, differential pairs),
§1.5 (body effect), §9.4 (feedback networks), §11.4–11.6 (noise of
differential pairs, input-referred sources, noise figure) — from memory.
"""
from __future__ import annotations

import math

import numpy as np

from freqpair.analysis.hand_rows import TWO_PI, HandRow, _par, _row
from freqpair.circuit.constants import BOLTZMANN_J_PER_K, ELEMENTARY_CHARGE_C
from freqpair.design.quantities import format_si

__all__ = ["stage7_rows"]


def stage7_rows(analysis) -> list[HandRow]:
    """All rows of this module that apply to ``analysis``'s design."""
    rows: list[HandRow] = []
    for part in (_degeneration_rows, _cascode_rows, _body_rows, _divider_rows,
                 _supply_rows, _input_rows, _noise_rows):
        rows.extend(part(analysis))
    return rows


def _first_gain(analysis) -> complex:
    first = "adm" if analysis.stage.balanced else "adm_se"
    return complex(analysis.dc.get(first)[0])


def _degeneration_rows(analysis) -> list[HandRow]:
    d = analysis.design
    r_e = d.pair.degeneration
    if r_e <= 0 or d.load.type != "resistor" or d.pair.cascode is not None:
        return []
    ss = analysis.operating_point.small_signal
    gm, r_l = ss.gm, d.load.resistance
    a_hand = -gm * r_l / (1.0 + gm * r_e)
    note = None
    if ss.r_in != math.inf and ss.r_in / r_e < 10 * (1 + gm * r_e) / gm / r_e:
        note = f"β = {d.pair.beta:g} is not ≫ 1 + g_m·R_E: base current shunts R_E"
    if ss.ro < 10 * r_l:
        note = f"r_o = {format_si(ss.ro, 'Ω')} is not ≫ R_L = {format_si(r_l, 'Ω')}"
    if d.source.resistance + ss.rb > 0.1 * (ss.r_in if ss.r_in != math.inf else math.inf):
        note = "R_s + r_b not ≪ r_π: the input divider lowers the gain"
    return [_row("adm_degenerated_dc", "DC differential gain, degenerated pair",
                 "g_m·R_L/(1 + g_m·R_E)", _first_gain(analysis).real, a_hand, "V/V", note)]


def _output_resistance_at(analysis, node: str) -> float:
    """Exact small-signal resistance [Ω] from ``node`` to AC ground at DC, with every
    source at 0 (the network's own G solved for a test current)."""
    net = analysis.stage.network
    G = analysis.responses.solver.G
    e = np.zeros(G.shape[0])
    e[net.node_names.index(node)] = 1.0
    return float(np.linalg.solve(G, e)[net.node_names.index(node)])


def _cascode_rows(analysis) -> list[HandRow]:
    d = analysis.design
    casc = analysis.operating_point.cascode
    if casc is None:
        return []
    ss = analysis.operating_point.small_signal
    cs = casc.small_signal
    r_total = _output_resistance_at(analysis, "o2")
    if d.load.type == "resistor":
        r_load = d.load.resistance * (1 - d.mismatch.load / 2)
    else:
        lss = analysis.stage.load_small_signal
        r_load = lss.ro
    g_casc = 1.0 / r_total - (0.0 if r_load == math.inf else 1.0 / r_load)
    r_casc_exact = math.inf if g_casc <= 0 else 1.0 / g_casc
    r_below = _par(ss.ro, cs.r_in)
    r_hand = cs.ro * (1.0 + (cs.gm + cs.gmb) * r_below) + r_below
    note = None
    if cs.kind == "bipolar" and r_hand > 0.5 * d.pair.cascode.beta * cs.ro:
        note = "bipolar cascode near its β·r_o limit (base current of the cascode)"
    if d.pair.degeneration > 0:
        note = "degenerated pair below the cascode: r_o of the pair device is raised"
    rows = [_row("cascode_rout_ohm", "cascode output resistance (at o2)",
                 "r_oc·(1 + (g_mc + g_mbc)·(r_o∥r_πc)) + r_o∥r_πc  (≈ g_m·r_o²)",
                 r_casc_exact, r_hand, "Ω", note)]
    r_out = _par(r_load, r_hand)
    a_hand = ss.gm * r_out * (1.0 if d.load.type == "mirror" else 1.0)
    if analysis.stage.balanced:
        a_hand = -a_hand
    else:
        a_hand = ss.gm * _par(analysis.stage.load_small_signal.ro, r_hand)
    rows.append(_row("adm_cascode_dc", "DC differential gain, cascoded pair",
                     "g_m·(R_load ∥ R_out,cascode)", _first_gain(analysis).real, a_hand,
                     "V/V", None if d.pair.degeneration == 0 else note))
    return rows


def _body_rows(analysis) -> list[HandRow]:
    d = analysis.design
    ss = analysis.operating_point.small_signal
    tail = analysis.stage.tail
    if ss.kind != "mos" or ss.gmb == 0 or d.load.type != "resistor" or tail is None \
            or d.pair.degeneration > 0:
        return []
    r_t, r_l = tail.resistance, d.load.resistance
    hand = -ss.gm * r_l / (1.0 + 2.0 * (ss.gm + ss.gmb) * r_t)
    without = -ss.gm * r_l / (1.0 + 2.0 * ss.gm * r_t)
    note = None
    if ss.ro < 10 * 2 * r_t:
        note = f"r_o = {format_si(ss.ro, 'Ω')} is not ≫ 2·R_tail: it carries common-mode current"
    return [_row("acm_se_body_dc", "DC common-mode gain with body effect",
                 f"−g_m·R_L/(1 + 2·(g_m + g_mb)·R_tail) (without g_mb: {without:.4g})",
                 complex(analysis.dc.acm_se[0]).real, hand, "V/V", note)]


def _divider_rows(analysis) -> list[HandRow]:
    fb = analysis.design.feedback
    if fb is None or fb.type != "divider":
        return []
    from freqpair.analysis.loop import feedback_network
    net = feedback_network(fb)
    r_f, r_g = fb.series_resistance, fb.shunt_resistance
    c_f, c_g = fb.series_capacitance, fb.shunt_capacitance
    rows = []
    p = net.pole_rad_s
    pole_exact = float(abs(p[0]) / TWO_PI) if p.size else None
    pole_hand = 1.0 / (TWO_PI * _par(r_f, r_g) * (c_f + c_g)) if c_f + c_g > 0 else None
    rows.append(_row("divider_pole_hz", "feedback divider pole",
                     "1/(2π·(R_f∥R_g)·(C_f + C_g))", pole_exact, pole_hand, "Hz",
                     None if p.size else "no capacitance at the divider: β is flat"))
    z = net.zero_rad_s
    zero_exact = float(abs(z[0]) / TWO_PI) if z.size else None
    zero_hand = 1.0 / (TWO_PI * r_f * c_f) if c_f > 0 else None
    rows.append(_row("divider_zero_hz", "feedback divider zero", "1/(2π·R_f·C_f)",
                     zero_exact, zero_hand, "Hz",
                     None if z.size else "no C_f: the divider has no zero"))
    # the C_f that makes β flat: the one where |β| at high frequency equals β(0)
    cf_exact = None
    if c_g > 0:
        # β(∞) = C_f/(C_f + C_g) equals β(0) = R_g/(R_f + R_g) exactly there
        b0 = net.dc
        cf_exact = b0 * c_g / (1.0 - b0)
    rows.append(_row("divider_cancel_cf", "C_f that cancels the divider pole",
                     "R_f·C_f = R_g·C_g → C_f = R_g·C_g/R_f", cf_exact,
                     r_g * c_g / r_f if c_g > 0 else None, "F",
                     None if c_g > 0 else "no C_g: nothing to cancel"))
    return rows


def _supply_rows(analysis) -> list[HandRow]:
    d = analysis.design
    sup = analysis.supply
    if d.load.type != "resistor" or d.second_stage is not None:
        return []
    a_se = abs(complex(analysis.dc.adm_se[0]))
    rows = []
    pos_hand = 20 * math.log10(a_se) if a_se > 0 else None
    pol = analysis.operating_point.polarity
    load_key, tail_key = ("psrr_pos_db", "psrr_neg_db") if pol > 0 else ("psrr_neg_db",
                                                                         "psrr_pos_db")
    rows.append(_row(f"{load_key}_dc", f"{'PSRR+' if pol > 0 else 'PSRR−'} (load rail)",
                     "the output follows its load rail one-for-one: PSRR ≈ |A_dm,se|",
                     getattr(sup, load_key), pos_hand, "dB",
                     None if d.element == () else "added elements may tie to the rails"))
    tail = analysis.stage.tail
    note = None
    if tail is None:
        tail_hand = None
        note = "ideal tail: the tail rail does not reach the output"
    else:
        tail_hand = 20 * math.log10(a_se * 2 * tail.resistance / d.load.resistance)
        if analysis.operating_point.small_signal.ro < 10 * 2 * tail.resistance:
            note = "r_o is not ≫ 2·R_tail: the load rail path through r_o also counts"
    rows.append(_row(f"{tail_key}_dc", f"{'PSRR−' if pol > 0 else 'PSRR+'} (tail rail)",
                     "the tail rail acts like a common-mode input: A ≈ R_L/(2·R_tail)",
                     getattr(sup, tail_key), tail_hand, "dB", note))
    return rows


def _input_rows(analysis) -> list[HandRow]:
    d = analysis.design
    ss = analysis.operating_point.small_signal
    zin = analysis.input_impedance
    rows = []
    if ss.kind == "bipolar":
        hand = 2.0 * (ss.rb + ss.r_in + (d.pair.beta + 1.0) * d.pair.degeneration)
        note = None
        if ss.ro < 10 * (d.load.resistance if d.load.type == "resistor" else ss.ro):
            note = "r_o not ≫ the load: the Early effect lowers the input resistance"
        rows.append(_row("zin_dm_dc", "DC differential input impedance",
                         "2·(r_b + r_π + (β+1)·R_E)", zin.zin_dm_ohm, hand, "Ω", note))
        r_out = (_par(d.load.resistance, ss.ro) if d.load.type == "resistor"
                 else _par(ss.ro, analysis.stage.load_small_signal.ro))
        note = None
        if d.pair.cascode is not None:
            r_out = 1.0 / analysis.operating_point.cascode.small_signal.gm
            note = "cascoded pair: the collector sees about 1/g_m of the cascode"
        c_eff = ss.c_in + ss.c_fb * (1.0 + ss.gm * (d.pair.degeneration + r_out))
        f_hand = 1.0 / (TWO_PI * ss.r_in * c_eff) if c_eff > 0 else None
        if ss.rb > 0.1 * ss.r_in:
            note = "r_b not ≪ r_π: the series r_b sets a floor"
        rows.append(_row("zin_dm_corner_hz", "input-capacitance corner of Z_in,dm",
                         "1/(2π·r_π·(C_π + C_μ·(1 + g_m·(R_E + R_out))))", zin.zin_dm_corner_hz,
                         f_hand, "Hz", note))
    return rows


def _noise_rows(analysis) -> list[HandRow]:
    d = analysis.design
    ss = analysis.operating_point.small_signal
    res = analysis.noise()
    spot = res.spots[0]
    k_t = BOLTZMANN_J_PER_K * d.bias.temperature
    r_s = d.source.resistance
    gm = ss.gm
    if d.load.type == "resistor":
        load = 2.0 * 4.0 * k_t / (gm * gm * d.load.resistance)
    else:
        load = 2.0 * 4.0 * k_t * 2.0 * (analysis.stage.load_small_signal.gm / gm ** 2) * (2 / 3)
    if ss.kind == "bipolar":
        i_b = ss.current / d.pair.beta
        fc = d.pair.flicker_corner
        base_white = 2.0 * 2.0 * ELEMENTARY_CHARGE_C * i_b * (r_s + ss.rb) ** 2
        white = 2.0 * 4.0 * k_t * (r_s + ss.rb + 1.0 / (2.0 * gm)) + base_white + load
        en2 = white + base_white * fc / spot.f_hz
        flicker_share = base_white / white
        method = "√(2·4kT·(R_s + r_b + 1/(2g_m)) + 2·2qI_B·(R_s + r_b)² + 2·4kT/(g_m²·R_L))"
    else:
        fc = d.pair.flicker_corner
        channel = 2.0 * 4.0 * k_t * d.pair.noise_gamma / gm
        white = 2.0 * 4.0 * k_t * r_s + channel + load
        en2 = white + channel * fc / spot.f_hz
        flicker_share = channel / white
        method = "√(2·4kT·(R_s + γ_n·(1 + f_c/f)/g_m) + 2·4kT/(g_m²·R_L))"
    note = None
    if d.load.type == "mirror":
        note = "mirror load: its devices' noise taken as channel noise with γ_n = 2/3"
    if d.second_stage is not None:
        note = "second stage present: its own noise is not in the model either"
    if d.pair.degeneration > 0 or d.pair.cascode is not None:
        note = "degeneration or cascode present: not in this formula"
    rows = [_row("noise_en_spot", f"input-referred noise at {format_si(spot.f_hz, 'Hz')}",
                 method, spot.input_v_rthz, math.sqrt(en2), "V/√Hz", note)]
    if flicker_share is not None and d.pair.flicker_corner > 0:
        exact = _flicker_corner_hz(analysis)
        rows.append(_row("noise_flicker_corner_hz", "flicker corner of e_n²",
                         "f_c × (the flicker-bearing term's share of the white e_n²)",
                         exact, d.pair.flicker_corner * flicker_share, "Hz", note))
    return rows


def _flicker_corner_hz(analysis) -> float | None:
    """Lowest frequency where e_n²(f) = 2 × its white part (root-found)."""
    from freqpair.analysis.crossings import lowest_crossing
    from freqpair.analysis.noise import noise_curves
    resp = analysis.responses

    def ratio_db(f):
        nc = noise_curves(resp, f)
        white = nc.white_output_v2_hz()
        return 10.0 * np.log10(nc.output_v2_hz / white)

    lo = 1e-6 * max(s.flicker_corner_hz for s in analysis.stage.noise_sources)
    hi = 1e6 * max(s.flicker_corner_hz for s in analysis.stage.noise_sources)
    grid = np.logspace(math.log10(lo), math.log10(hi), 121)
    # ratio falls with f; find where it crosses 10·log10(2)
    return lowest_crossing(ratio_db, 10.0 * math.log10(2.0), grid)
