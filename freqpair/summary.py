"""Plain-text summary of an :class:`~freqpair.analysis.Analysis` for the terminal."""
from __future__ import annotations

import math

from .quantities import format_si

__all__ = ["format_summary", "CAUTION"]

CAUTION = ("Small-signal model of one stage. Verify a design for hardware by full circuit "
           "simulation and on the bench; safety-relevant equipment follows local codes and "
           "licensed practice.")


def _db(v, unit="dB"):
    return "—" if v is None else f"{v:.2f} {unit}"


def _vv(db_value):
    return "—" if db_value is None else format_si(10 ** (db_value / 20), "V/V")


_LABEL_WIDTH = 45


def _row(label: str, value: str) -> str:
    """One aligned 'label: value' line (labels padded to one column)."""
    return f"  {label + ':':<{_LABEL_WIDTH}} {value}"


def _loop_lines(result) -> list[str]:
    """The feedback-loop section (only for designs with [feedback])."""
    from .loop import loop_analysis
    r = loop_analysis(result)
    out = [f"Feedback loop (β_f = {result.design.feedback.factor:g})"]
    if r is None:
        out.append("  no loop: the amplifier's DC gain is zero")
        return out
    deg = (lambda v, none: none if v is None else f"{v:.2f}°")
    out.append(f"  {'DC loop gain T(0):':<45} {_db(r.dc_loop_gain_db)}")
    out.append(f"  {'phase margin:':<45} {deg(r.phase_margin_deg, '∞ (|T| stays below 1)')}"
               + (f" at {format_si(r.crossover_hz, 'Hz')}" if r.crossover_hz else ""))
    out.append(f"  {'gain margin:':<45} "
               + (_db(r.gain_margin_db) + f" at {format_si(r.phase_crossover_hz, 'Hz')}"
                  if r.gain_margin_db is not None else "∞ (phase never reaches −180°)"))
    out.append(f"  {'closed-loop DC gain:':<45} {r.closed_loop_dc_gain:.6g} V/V")
    out.append(f"  {'closed-loop −3 dB frequency:':<45} {format_si(r.closed_loop_f3db_hz, 'Hz')}")
    out.append(f"  {'closed-loop peaking:':<45} {_db(r.peaking_db)}")
    if not r.closed_loop_stable:
        out.append(f"  {'step response:':<45} UNSTABLE (a closed-loop pole in the "
                   "right half plane)")
    else:
        out.append(f"  {'step overshoot:':<45} {r.overshoot_pct:.2f} %")
        out.append(f"  {'1 % settling time:':<45} {format_si(r.settling_time_s, 's')}")
    return out


def format_summary(result) -> str:
    """A readable multi-line summary: operating point, gains, bandwidth, CMRR."""
    d = result.design
    op = result.operating_point
    ss = op.small_signal
    lines = []
    add = lines.append
    add(f"freqpair analysis — {d.name or '(unnamed design)'}")
    add(f"  pair {d.pair.type}, load {d.load.type}, tail {d.tail.type}"
        + (", second stage" if d.second_stage is not None else ""))
    add("")
    add("Operating point (each pair device)")
    if op.kind == "bipolar":
        add(f"  I_C  = {format_si(ss.current, 'A')}    g_m = {format_si(ss.gm, 'S')}    "
            f"r_pi = {format_si(ss.r_in, 'Ω')}    r_o = {format_si(ss.ro, 'Ω')}")
        add(f"  C_pi = {format_si(ss.c_in, 'F')}    C_mu = {format_si(ss.c_fb, 'F')}    "
            f"V_CE = {format_si(op.v_out_common, 'V')}    V_CB = {format_si(op.v_cb, 'V')}")
    else:
        add(f"  I_D  = {format_si(ss.current, 'A')}    g_m = {format_si(ss.gm, 'S')}    "
            f"r_o = {format_si(ss.ro, 'Ω')}    V_GS = {format_si(op.v_gs, 'V')}")
        add(f"  C_gs = {format_si(ss.c_in, 'F')}    C_gd = {format_si(ss.c_fb, 'F')}    "
            f"V_DS = {format_si(op.v_out_common, 'V')}    V_ov = {format_si(op.v_ov, 'V')}")
    tail = result.tail
    if tail is None:
        add("  tail: ideal current source")
    else:
        add(f"  tail (Norton view): R = {format_si(tail.resistance, 'Ω')}, "
            f"C = {format_si(tail.capacitance, 'F')}"
            + (f" (+ pair's own {format_si(tail.pair_capacitance, 'F')})"
               if tail.pair_capacitance else ""))
    for text in result.stage.tail_detail.get("summary", ()):
        add(f"    {text}")
    lss = result.stage.load_small_signal
    if lss is not None:
        cname = "C_pi" if lss.kind == "bipolar" else "C_gs"
        add(f"  mirror load ({d.load.device.type}, each device): g_m = {format_si(lss.gm, 'S')}, "
            f"r_o = {format_si(lss.ro, 'Ω')}, {cname} = {format_si(lss.c_in, 'F')}")
    add("")
    add("Gains at DC")
    gain_name = {"adm": "differential gain A_dm (balanced)",
                 "adm_se": "differential gain A_dm,se (at o2)",
                 "a_total": "overall gain A_total (second-stage output)"}[result.primary]
    if result.primary == "a_total":
        add(_row("first stage A_dm at o2", f"{_db(result.adm_db_first)}  ({_vv(result.adm_db_first)})"))
    add(_row(gain_name, f"{_db(result.adm_db)}  ({_vv(result.adm_db)})"))
    add(_row("common-mode gain A_cm,se", f"{_db(result.acm_se_db)}  ({_vv(result.acm_se_db)})"
             if result.acm_se_db is not None else "0 V/V (zero to rounding)"))
    add("")
    add("Bandwidth")
    add(_row("−3 dB frequency f_3dB", format_si(result.f3db_hz, 'Hz')))
    add(_row("unity-gain frequency", format_si(result.ugf_hz, 'Hz')))
    add("")
    add("Common-mode rejection")
    add(_row("CMRR single-ended (DC)", _db(result.cmrr_se_db) if result.cmrr_se_db is not None
             else "∞ (common-mode gain is zero)"))
    if result.stage.balanced:
        add(_row("CMRR balanced (DC)", _db(result.cmrr_db) if result.cmrr_db is not None
                 else "∞ (perfectly matched)"))
        if result.cmrr_textbook_db is not None:
            add(_row("A_dm / A_cm-cm (textbook ratio)", _db(result.cmrr_textbook_db)))
    add(_row("CMRR corner (−3 dB)", format_si(result.cmrr_corner_hz, 'Hz')
             if result.cmrr_corner_hz is not None
             else "— (CMRR is infinite)" if result.cmrr_se_db is None
             else "— (CMRR does not fall 3 dB)"))
    add("")
    lines.extend(pole_zero_section(result))
    if d.feedback is not None:
        add("")
        lines.extend(_loop_lines(result))
    for extra in getattr(result, "summary_sections", lambda: [])():
        add("")
        lines.extend(extra)
    add("")
    add(CAUTION)
    return "\n".join(lines)


def pole_zero_section(result, top: int = 3) -> list[str]:
    """Poles and zeros of the primary gain (with what sets each) and the
    hand-versus-exact table."""
    from .hand import hand_table
    from .poles import RESPONSE_LABELS, pole_zero_table, response_zpk
    zpk = response_zpk(result)
    out = [f"Poles and zeros of {RESPONSE_LABELS[zpk.name]}  (s/2π; pairs as re ± j·im)"]
    if zpk.identically_zero:
        out.append("  (the gain is zero at every frequency)")
    for row in pole_zero_table(result, top=top):
        where = format_si(row.re_hz, "Hz")
        if row.is_pair:
            where += f" ± j{format_si(row.im_hz, 'Hz')}  |s|/2π = {format_si(row.f_hz, 'Hz')}, Q = {row.q:.3g}"
        who = ", ".join(f"{label} {100 * share:.0f} %" for label, share in row.contributors)
        note = f"  [{row.note}]" if row.note else ""
        out.append(f"  {row.kind:<4}  {where}{note}")
        if who:
            out.append(f"  {'      set by:':<45} {who}")
    if zpk.cancelled_rad_s:
        out.append(f"  cancelled pole-zero pairs (modes this gain does not see): "
                   + ", ".join(format_si(abs(p) / (2 * math.pi), "Hz")
                               for p, _ in zpk.cancelled_rad_s if p.imag >= 0))
    out.append("")
    out.append("Hand analysis beside the exact answer")
    out.append(f"  {'quantity':<44}{'exact':>14}{'hand':>14}{'error':>10}")
    for r in hand_table(result):
        unit = r.unit
        ex = "—" if r.exact is None else format_si(r.exact, unit)
        ap = "—" if r.approx is None else format_si(r.approx, unit)
        er = "—" if r.error_pct is None else f"{r.error_pct:+.1f} %"
        out.append(f"  {r.label:<44}{ex:>14}{ap:>14}{er:>10}")
        out.append(f"      method: {r.method}")
        if r.note:
            out.append(f"      note: {r.note}")
    return out
