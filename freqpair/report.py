"""One standalone HTML report of an analysis (works offline: Bokeh inlined).

:func:`report_html` builds the page: a drawn picture of the stage, the
operating point, the gains, bandwidth, CMRR and its corner, poles and zeros,
the hand-vs-exact table, loop margins (with ``[feedback]``), interactive
Bode and CMRR plots, a measurement against the model (when given) and the
cautions. :func:`write_report` writes it
atomically. Every number shown in the metric table is the one
``Analysis.to_json()`` gives, formatted by :func:`format_metric`.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from html import escape

from .quantities import format_si
from .summary import CAUTION

__all__ = ["format_metric", "MetricRow", "metric_rows", "operating_point_rows", "report_html",
           "write_report", "page", "METRIC_LABELS", "compact_html"]

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
}

_OP_UNITS = {"ic": ("I_C", "A"), "id": ("I_D", "A"), "gm": ("g_m", "S"), "rpi": ("r_pi", "Ω"),
             "ro": ("r_o", "Ω"), "cpi": ("C_pi", "F"), "cmu": ("C_mu", "F"),
             "cgs": ("C_gs", "F"), "cgd": ("C_gd", "F"), "vce": ("V_CE", "V"),
             "vcb": ("V_CB", "V"), "vds": ("V_DS", "V"), "vgs": ("V_GS", "V")}


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
        if k in ("name", "operating_point", "poles_hz", "zeros_hz", "hand"):
            continue   # shown in the poles/zeros and hand sections
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


# ------------------------------------------------------------------ HTML pieces
STYLE = """
body{font-family:system-ui,sans-serif;margin:0;background:#f4f2ec;color:#222;}
main{max-width:1100px;margin:0 auto;padding:18px 24px 40px;}
header.fp{background:#1f3b57;color:#f4f2ec;padding:14px 24px;}
header.fp h1{margin:0;font-size:21px;font-weight:600;}
header.fp p{margin:4px 0 0;font-size:13px;opacity:.85;}
section.fp{background:#fff;border:1px solid #dcd8cc;border-radius:8px;padding:12px 18px;
margin:14px 0;}
section.fp h2{font-size:16px;margin:2px 0 10px;color:#1f3b57;}
table.fp{border-collapse:collapse;font-size:13px;}
table.fp th,table.fp td{padding:3px 12px 3px 4px;border-bottom:1px solid #ece9e0;
text-align:left;vertical-align:top;}
table.fp td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap;}
table.fp td.differs{background:#ffe8cc;font-weight:600;}
.grid2{display:flex;flex-wrap:wrap;gap:18px;align-items:flex-start;}
.note{font-size:12px;color:#555;}
.caution{border-left:4px solid #c2410c;background:#fff6ef;padding:8px 12px;font-size:13px;}
.schematic svg{max-width:100%;height:auto;}
"""


def table(rows, header=None, num_cols=(), css=None) -> str:
    """An HTML table from rows of already-formatted cells (escaped here).

    ``css`` (optional) gives a class per cell: ``css[i][j]`` or None.
    """
    out = ['<table class="fp">']
    if header:
        out.append("<tr>" + "".join(f"<th>{escape(str(h))}</th>" for h in header) + "</tr>")
    for i, row in enumerate(rows):
        cells = []
        for j, cell in enumerate(row):
            classes = []
            if j in num_cols:
                classes.append("num")
            if css and css[i][j]:
                classes.append(css[i][j])
            cls = f' class="{" ".join(classes)}"' if classes else ""
            cells.append(f"<td{cls}>{escape(str(cell))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "".join(out)


def section(title: str, inner: str, ident: str = "") -> str:
    """A titled block of the page."""
    idattr = f' id="{escape(ident)}"' if ident else ""
    return f'<section class="fp"{idattr}><h2>{escape(title)}</h2>{inner}</section>'


def page(title: str, subtitle: str, body: str, plots: dict | None = None,
         data: dict | None = None) -> str:
    """A complete standalone HTML document.

    Parameters
    ----------
    title, subtitle : str
        Plain text (escaped here).
    body : str
        HTML of the sections; may contain ``{{plot:NAME}}`` placeholders.
    plots : dict, optional
        Bokeh models by placeholder name; embedded with inline resources.
    data : dict, optional
        Machine-readable copy of the numbers, embedded as JSON.

    Returns
    -------
    str
    """
    head_extra = ""
    if plots:
        from bokeh.embed import components
        from bokeh.resources import INLINE
        script, divs = components(plots)
        for name, div in divs.items():
            body = body.replace("{{plot:" + name + "}}", div)
        head_extra = INLINE.render() + script
    if data is not None:
        payload = json.dumps(data, allow_nan=False).replace("</", "<\\/")
        body += f'<script type="application/json" id="freqpair-data">{payload}</script>'
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{escape(title)}</title>"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<style>{STYLE}</style>{head_extra}</head><body>"
            f"<header class=\"fp\"><h1>{escape(title)}</h1><p>{escape(subtitle)}</p></header>"
            f"<main>{body}</main></body></html>\n")


def _pole_zero_html(analysis) -> str:
    from .poles import pole_zero_table
    rows = []
    for r in pole_zero_table(analysis):
        contrib = ", ".join(f"{lab} {share * 100:.0f} %" for lab, share in
                            (r.contributors or [])[:3])
        rows.append((r.kind, format_si(r.f_hz, "Hz"), format_si(r.re_hz, "Hz"),
                     format_si(r.im_hz, "Hz"), "—" if r.q is None else f"{r.q:.3g}", contrib))
    return table(rows, ["kind", "|f|", "Re", "Im", "Q", "main contributors"], (1, 2, 3, 4))


def _hand_html(analysis) -> str:
    from .hand import hand_table
    rows = []
    for r in hand_table(analysis):
        unit = r.unit or ""
        fmt = (lambda v: "—" if v is None else format_si(v, unit))
        err = "—" if r.error_pct is None else f"{r.error_pct:+.1f} %"
        rows.append((r.label, r.method, fmt(r.exact), fmt(r.approx), err, r.note or ""))
    return table(rows, ["quantity", "hand method", "exact", "hand", "error", "note"], (2, 3, 4))


def _loop_html(analysis) -> str:
    if analysis.design.feedback is None:
        return '<p class="note">No [feedback] table in the design: no loop margins.</p>'
    from .loop import loop_analysis
    lr = loop_analysis(analysis)
    if lr is None:
        return '<p class="note">No loop result for this design.</p>'
    keys = ["phase_margin_deg", "gain_margin_db", "crossover_hz", "closed_loop_f3db_hz",
            "peaking_db", "overshoot_pct", "settling_time_s"]
    rows = [(k.replace("_", " "), format_metric(k, getattr(lr, k, None))) for k in keys
            if hasattr(lr, k)]
    return (f'<p class="note">Feedback factor β_f = {analysis.design.feedback.factor:g}.</p>'
            + table(rows, ["quantity", "value"], (1,)))


def _measured_section(ov, origin: str):
    """HTML and figure of the "Measurement against the model" section."""
    from bokeh.layouts import column

    from .measured_plots import overlay_figure
    rows = [("measured kind", f"{ov.kind} — {ov.label}"),
            ("file", origin),
            ("points", str(len(ov.f_hz))),
            ("frequency range", f"{format_si(float(ov.f_hz[0]), 'Hz')} … "
                                f"{format_si(float(ov.f_hz[-1]), 'Hz')}"),
            ("residual rms (measured − model)", f"{ov.rms_residual_db:.2f} dB"),
            ("largest |residual|", f"{ov.max_abs_residual_db:.2f} dB")]
    if ov.rms_residual_deg is not None:
        rows.append(("phase residual rms", f"{ov.rms_residual_deg:.1f}°"))
    figs = [overlay_figure(ov)]
    if ov.measured_deg is not None:
        figs.append(overlay_figure(ov, "phase"))
    from .plots import PALETTE, style_figure
    for fig in figs:        # freqpair's one colour scheme (renderers found by name)
        fig.sizing_mode = "stretch_width"
        fig.select(name="model")[0].glyph.line_color = PALETTE["adm"]
        marks = fig.select(name="measured")[0].glyph
        marks.line_color, marks.fill_color = PALETTE["measured"], "white"
        marks.line_width = 2
        fig.select(name="residual")[0].glyph.line_color = PALETTE["acm_dm"]
        style_figure(fig)
    html = (table(rows, ["quantity", "value"], (1,))
            + '<p class="note">Markers: the measurement; line: the exact model at the measured '
              "frequencies; the residual (measured − model) is read on the right-hand axis.</p>"
            + "{{plot:measured}}")
    return section("Measurement against the model", html, "measured"), column(
        *figs, sizing_mode="stretch_width")


def report_html(analysis, measurement=None) -> str:
    """The whole report of one analysis as a standalone HTML document.

    Parameters
    ----------
    analysis : freqpair.analysis.Analysis
    measurement : freqpair.measured.Measurement, optional
        A bench measurement: adds the section "Measurement against the model"
        (:func:`freqpair.measured.overlay`: residual rms and largest residual
        [dB], overlay plot) and ``measured`` (the overlay's JSON) in the
        embedded data.

    Returns
    -------
    str
        UTF-8 HTML; plotting resources are inlined (no network access needed).
    """
    from .report_plots import bode_figures, cmrr_figure
    from .schematic import stage_svg
    from bokeh.layouts import column

    d = analysis.design
    data = analysis.to_json()
    rows = metric_rows(analysis, data)
    metric_tbl = table([(r.label, r.text) for r in rows], ["quantity", "value"], (1,))
    op_tbl = table(operating_point_rows(analysis), ["each pair device", "value"], (1,))
    kinds = (f"pair {d.pair.type}, load {d.load.type}, tail {d.tail.type}"
             + (", second stage" if d.second_stage is not None else ""))
    body = [
        section("The stage", f'<div class="grid2"><div class="schematic">{stage_svg(d)}</div>'
                f'<div>{op_tbl}<p class="note">{escape(kinds)}</p></div></div>', "stage"),
        section("Gains, bandwidth and common-mode rejection", metric_tbl, "metrics"),
        section("Bode plot", "{{plot:bode}}", "bode"),
    ]
    mag, ph = bode_figures(analysis)
    plots = {"bode": column(mag, ph, sizing_mode="stretch_width")}
    cm = cmrr_figure(analysis)
    if cm is not None:
        body.append(section("CMRR versus frequency", "{{plot:cmrr}}", "cmrr"))
        plots["cmrr"] = cm
    else:
        body.append(section("CMRR versus frequency", '<p class="note">The common-mode gain is '
                            "zero at every frequency: CMRR is infinite.</p>", "cmrr"))
    body.append(section("Poles and zeros", _pole_zero_html(analysis), "poles"))
    body.append(section("Hand estimates beside the exact numbers", _hand_html(analysis), "hand"))
    body.append(section("Loop margins", _loop_html(analysis), "loop"))
    if measurement is not None:
        from .measured import overlay
        ov = overlay(analysis, measurement)
        html, plots["measured"] = _measured_section(ov, measurement.origin)
        body.append(html)
        data = dict(data, measured=ov.to_json())
    body.append(section("Cautions", f'<p class="caution">{escape(CAUTION)}</p>', "cautions"))
    title = d.name or "freqpair report"
    from . import __version__
    return page(title, f"freqpair {__version__} — exact small-signal analysis of a "
                       "differential stage", "".join(body), plots, data)


def write_report(analysis, path, measurement=None) -> None:
    """Write :func:`report_html` to ``path`` atomically (temporary file, then rename).

    An interrupted run leaves the old file or none, never half a report.
    """
    from .design import atomic_write_text
    atomic_write_text(path, report_html(analysis, measurement))


def compact_html(analysis) -> str:
    """A small HTML table of the metrics (what ``Analysis._repr_html_`` shows).

    Returns
    -------
    str
        One ``<div>`` with the design name, the kinds and the metric table.
    """
    d = analysis.design
    rows = [(r.label, r.text) for r in metric_rows(analysis)]
    kinds = f"pair {d.pair.type}, load {d.load.type}, tail {d.tail.type}"
    return (f'<div class="freqpair-analysis"><strong>{escape(d.name or "freqpair analysis")}'
            f"</strong><br><small>{escape(kinds)}</small>"
            + table(rows, None, (1,)) + "</div>")
