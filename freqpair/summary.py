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
    for extra in getattr(result, "summary_sections", lambda: [])():
        add("")
        lines.extend(extra)
    add("")
    add(CAUTION)
    return "\n".join(lines)
