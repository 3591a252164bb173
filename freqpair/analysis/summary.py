"""An analysis in words: metric labels and formatting, the terminal summary, a notebook table.

Every shown number is the one ``Analysis.to_json()`` gives, formatted by
:func:`format_metric`. This text lives beside the result (not with the
Bokeh views) because the result prints itself: ``str(result)`` is the
terminal summary and ``result._repr_html_()`` the notebook table.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from freqpair.design.quantities import format_si

__all__ = ["format_summary", "CAUTION", "METRIC_LABELS", "format_metric", "MetricRow",
           "metric_rows", "operating_point_rows", "compact_html"]

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
    from freqpair.analysis.loop import loop_analysis
    r = loop_analysis(result)
    fb = result.design.feedback
    out = [f"Feedback loop (β_f = {fb.factor:g})" if fb.type != "divider" else
           f"Feedback loop (divider R_f = {format_si(fb.series_resistance, 'Ω')} ∥ "
           f"{format_si(fb.series_capacitance, 'F')} over R_g = "
           f"{format_si(fb.shunt_resistance, 'Ω')} ∥ {format_si(fb.shunt_capacitance, 'F')}, "
           f"β(0) = {fb.factor:g}; the divider alone, not loaded by the stage)"]
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


def _supply_lines(result) -> list[str]:
    """PSRR± at DC and their corners (DESIGN.md §7f)."""
    s = result.supply
    out = ["Supply rejection (at the single-ended output)"]
    for sign, db_v, corner in (("+", s.psrr_pos_db, s.psrr_pos_corner_hz),
                               ("−", s.psrr_neg_db, s.psrr_neg_corner_hz)):
        if db_v is None:
            out.append(_row(f"PSRR{sign} (DC)", "∞ (the rail does not reach the output)"))
            continue
        out.append(_row(f"PSRR{sign} (DC)", _db(db_v)))
        out.append(_row(f"PSRR{sign} corner (−3 dB)", format_si(corner, "Hz")
                        if corner is not None else "— (does not fall 3 dB)"))
    return out


def _input_lines(result) -> list[str]:
    """Input impedance at DC and the DM corner (DESIGN.md §7g)."""
    z = result.input_impedance
    inf = "∞ (no DC input current)"
    out = ["Input impedance (R_s not included)"]
    out.append(_row("differential |Z_in,dm| (DC)", format_si(z.zin_dm_ohm, "Ω")
                    if z.zin_dm_ohm is not None else inf))
    out.append(_row("common-mode |Z_in,cm| (DC)", format_si(z.zin_cm_ohm, "Ω")
                    if z.zin_cm_ohm is not None else inf))
    if z.zin_dm_ohm is not None:
        out.append(_row("Z_in,dm corner (−3 dB)", format_si(z.zin_dm_corner_hz, "Hz")
                        if z.zin_dm_corner_hz is not None else "— (does not fall 3 dB)"))
    return out


def _noise_lines(result) -> list[str]:
    """Spot noise, the largest contributors and the band rms (DESIGN.md §7h)."""
    from freqpair.analysis.noise import NOISE_CAUTION
    n = result.noise()
    lo, hi = n.band_hz
    out = ["Noise (input-referred; all sources uncorrelated)"]
    for spot in n.spots:
        f = format_si(spot.f_hz, "Hz")
        out.append(_row(f"e_n at {f}", format_si(spot.input_v_rthz, "V/√Hz")
                        + f"  (output {format_si(spot.output_v_rthz, 'V/√Hz')})"))
        if spot.nf_db is not None:
            out.append(_row(f"noise figure at {f} (R_s = "
                            f"{format_si(result.design.source.resistance, 'Ω')})",
                            f"{spot.nf_db:.2f} dB"))
        top = ", ".join(f"{name} {100 * share:.0f} %" for name, share in spot.contributors[:4])
        out.append(_row("      largest contributors", top or "—"))
    from freqpair.analysis.noise import optimum_source_resistance
    f0 = n.spots[0].f_hz
    r_opt, nf_min = optimum_source_resistance(result.design, f0)
    out.append(_row(f"R_s for the lowest noise figure at {format_si(f0, 'Hz')}",
                    f"{format_si(r_opt, 'Ω')}  (NF {nf_min:.2f} dB)"))
    out.append(_row(f"input rms, {format_si(lo, 'Hz')} … {format_si(hi, 'Hz')}",
                    format_si(n.input_rms_v, "V")))
    out.append(_row(f"output rms, {format_si(lo, 'Hz')} … {format_si(hi, 'Hz')}",
                    format_si(n.output_rms_v, "V")))
    out.append("  " + NOISE_CAUTION)
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
        if ss.gmb:
            add(f"  g_mb = {format_si(ss.gmb, 'S')} (body effect, V_SB from the body rail)"
                + (f"    C_sb = {format_si(ss.c_sb, 'F')}" if ss.c_sb else ""))
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
    lines.extend(_supply_lines(result))
    add("")
    lines.extend(_input_lines(result))
    add("")
    lines.extend(_noise_lines(result))
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
    from freqpair.analysis.hand import hand_table
    from freqpair.analysis.poles import RESPONSE_LABELS, response_zpk
    from freqpair.analysis.pole_table import pole_zero_table
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


#: Labels of the JSON metric keys, in display order.
METRIC_LABELS = {
    "adm_db": "differential gain A_dm at DC",
    "a_total_db": "overall gain A_total at DC",
    "f3db_hz": "−3 dB frequency f_3dB",
    "ugf_hz": "unity-gain frequency",
    "acm_se_db": "common-mode gain A_cm,se at DC",
    "cmrr_se_db": "CMRR single-ended at DC",
    "cmrr_db": "CMRR balanced at DC",
    "cmrr_textbook_db": "A_dm / A_cm-cm (textbook ratio)",
    "cmrr_corner_hz": "CMRR corner (−3 dB)",
    "tail.resistance": "tail Norton resistance",
    "tail.capacitance": "tail Norton capacitance",
    "phase_margin_deg": "phase margin",
    "gain_margin_db": "gain margin",
    "crossover_hz": "loop crossover frequency",
    "phase_crossover_hz": "phase crossover (−180°) frequency",
    "dc_loop_gain_db": "DC loop gain T(0)",
    "closed_loop_f3db_hz": "closed-loop −3 dB frequency",
    "peaking_db": "closed-loop peaking",
    "closed_loop_stable": "closed loop stable",
    "overshoot_pct": "step overshoot",
    "settling_time_s": "1 % settling time",
    "beta_dc": "feedback factor at DC β(0)",
    "psrr_pos_db": "PSRR+ at DC (positive rail)",
    "psrr_pos_corner_hz": "PSRR+ corner (−3 dB)",
    "psrr_neg_db": "PSRR− at DC (negative rail)",
    "psrr_neg_corner_hz": "PSRR− corner (−3 dB)",
    "zin_dm_ohm": "differential input impedance |Z_in,dm| at DC",
    "zin_cm_ohm": "common-mode input impedance |Z_in,cm| at DC",
    "zin_dm_corner_hz": "Z_in,dm corner (−3 dB)",
}

#: keys that exist only for a stage with a balanced (two-output) load
BALANCED_ONLY = ("cmrr_db", "cmrr_textbook_db")

_NULL_TEXT = {
    "ugf_hz": "none (gain ≤ 1)",
    "f3db_hz": "none",
    "acm_se_db": "zero",
    "cmrr_se_db": "∞",
    "cmrr_db": "∞ (matched)",
    "cmrr_textbook_db": "∞",
    "cmrr_corner_hz": "none",
    "tail.resistance": "∞ (ideal)",
    "tail.capacitance": "— (ideal)",
    "phase_margin_deg": "no crossing",
    "gain_margin_db": "no crossing",
    "crossover_hz": "no crossing",
    "phase_crossover_hz": "no crossing",
    "overshoot_pct": "— (unstable)",
    "settling_time_s": "— (unstable)",
    "beta_dc": "— (no loop)",
    "psrr_pos_db": "∞ (the rail does not reach the output)",
    "psrr_neg_db": "∞ (the rail does not reach the output)",
    "psrr_pos_corner_hz": "none",
    "psrr_neg_corner_hz": "none",
    "zin_dm_ohm": "∞ (no DC input current)",
    "zin_cm_ohm": "∞ (no DC input current)",
    "zin_dm_corner_hz": "none",
}

_OP_UNITS = {"ic": ("I_C", "A"), "id": ("I_D", "A"), "gm": ("g_m", "S"), "rpi": ("r_pi", "Ω"),
             "ro": ("r_o", "Ω"), "cpi": ("C_pi", "F"), "cmu": ("C_mu", "F"),
             "cgs": ("C_gs", "F"), "cgd": ("C_gd", "F"), "vce": ("V_CE", "V"),
             "vcb": ("V_CB", "V"), "vds": ("V_DS", "V"), "vgs": ("V_GS", "V"),
             "gmb": ("g_mb", "S")}


def format_metric(key: str, value, balanced: bool = True) -> str:
    """Text of one JSON metric as the reports show it.

    Parameters
    ----------
    key : str
        JSON key (dotted for nested ones, e.g. ``"tail.resistance"``).
    value : float, bool or None
        SI value; None means infinite or undefined (see DESIGN.md §4).
    balanced : bool
        False for a stage with a single output (mirror load): its balanced-only
        keys are "not applicable" rather than infinite.

    Returns
    -------
    str
        dB to 0.01 dB, degrees to 0.1°, frequencies [Hz], resistances [Ω] and
        capacitances [F] in engineering notation (4 significant digits).
    """
    if key in BALANCED_ONLY and not balanced:
        return "— (single-ended output)"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return _NULL_TEXT.get(key, "—")
    if key.endswith("_db"):
        return f"{value:.2f} dB"
    if key.endswith("_deg"):
        return f"{value:.1f}°"
    if key.endswith("_hz"):
        return format_si(value, "Hz")
    if key.endswith("resistance"):
        return format_si(value, "Ω")
    if key.endswith("capacitance"):
        return format_si(value, "F")
    if key.endswith("_pct"):
        return f"{value:.2f} %"
    if key.endswith("_ohm"):
        return format_si(value, "Ω")
    if key.endswith("_s"):
        return format_si(value, "s")
    return f"{value:.6g}"


@dataclass(frozen=True)
class MetricRow:
    """One line of the metric table: JSON key, label, SI value, shown text."""

    key: str
    label: str
    value: float | None
    text: str


def _flat(data: dict) -> dict:
    out = {}
    for k, v in data.items():
        if k in ("name", "operating_point", "poles_hz", "zeros_hz", "hand", "noise"):
            continue   # shown in the poles/zeros, hand and noise sections
        if isinstance(v, dict):
            for k2, v2 in v.items():
                if not isinstance(v2, (dict, list)):
                    out[f"{k}.{k2}"] = v2
        elif isinstance(v, (int, float)) or v is None:
            out[k] = v
    return out


def metric_rows(analysis, data: dict | None = None) -> list[MetricRow]:
    """The scalar metrics of ``analysis.to_json()`` as labelled, formatted rows.

    Keys with a known label come first in display order; other scalar keys
    (added by later versions of the JSON contract) follow under their own name.
    """
    flat = _flat(data if data is not None else analysis.to_json())
    order = [k for k in METRIC_LABELS if k in flat] + sorted(k for k in flat
                                                            if k not in METRIC_LABELS)
    balanced = analysis.stage.balanced
    return [MetricRow(k, METRIC_LABELS.get(k, k), flat[k], format_metric(k, flat[k], balanced))
            for k in order]


def operating_point_rows(analysis) -> list[tuple[str, str]]:
    """(symbol, formatted value) per operating-point key of the JSON."""
    rows = []
    for key, value in analysis.to_json()["operating_point"].items():
        sym, unit = _OP_UNITS.get(key, (key, ""))
        rows.append((sym, format_si(value, unit) if value is not None else "∞"))
    return rows


def _html_table(rows) -> str:
    """Two-column HTML table (label, right-aligned value), cells escaped."""
    from html import escape
    body = "".join(f'<tr><td>{escape(str(a))}</td><td class="num">{escape(str(b))}</td></tr>'
                   for a, b in rows)
    return f'<table class="fp">{body}</table>'


def compact_html(analysis) -> str:
    """A small HTML table of the metrics (what ``Analysis._repr_html_`` shows).

    Returns
    -------
    str
        One ``<div>`` with the design name, the kinds and the metric table.
    """
    from html import escape
    d = analysis.design
    rows = [(r.label, r.text) for r in metric_rows(analysis)]
    kinds = f"pair {d.pair.type}, load {d.load.type}, tail {d.tail.type}"
    return (f'<div class="freqpair-analysis"><strong>{escape(d.name or "freqpair analysis")}'
            f"</strong><br><small>{escape(kinds)}</small>"
            + _html_table(rows) + "</div>")
