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

from freqpair.design.quantities import format_si
from freqpair.analysis.summary import (
    CAUTION,
    METRIC_LABELS,
    format_metric,
    metric_rows,
    operating_point_rows,
)

__all__ = ["report_html", "write_report", "page", "section", "table"]

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
    from freqpair.analysis.pole_table import pole_zero_table
    rows = []
    for r in pole_zero_table(analysis):
        contrib = ", ".join(f"{lab} {share * 100:.0f} %" for lab, share in
                            (r.contributors or [])[:3])
        rows.append((r.kind, format_si(r.f_hz, "Hz"), format_si(r.re_hz, "Hz"),
                     format_si(r.im_hz, "Hz"), "—" if r.q is None else f"{r.q:.3g}", contrib))
    return table(rows, ["kind", "|f|", "Re", "Im", "Q", "main contributors"], (1, 2, 3, 4))


def _hand_html(analysis) -> str:
    from freqpair.analysis.hand import hand_table
    rows = []
    for r in hand_table(analysis):
        unit = r.unit or ""
        fmt = (lambda v: "—" if v is None else format_si(v, unit))
        err = "—" if r.error_pct is None else f"{r.error_pct:+.1f} %"
        rows.append((r.label, r.method, fmt(r.exact), fmt(r.approx), err, r.note or ""))
    return table(rows, ["quantity", "hand method", "exact", "hand", "error", "note"], (2, 3, 4))


def _loop_html(analysis) -> str:
    if analysis.design.feedback is None:
        return ('<p class="note">No [feedback] table in the design: no loop margins. Set a '
                "feedback factor or a divider to see the loop gain, the closed loop and the "
                "step response.</p>")
    from freqpair.analysis.loop import loop_analysis
    lr = loop_analysis(analysis)
    if lr is None:
        return '<p class="note">No loop result for this design.</p>'
    keys = ["phase_margin_deg", "gain_margin_db", "crossover_hz", "closed_loop_f3db_hz",
            "peaking_db", "overshoot_pct", "settling_time_s"]
    rows = [(k.replace("_", " "), format_metric(k, getattr(lr, k, None))) for k in keys
            if hasattr(lr, k)]
    return (f'<p class="note">Feedback factor β_f = {analysis.design.feedback.factor:g}.</p>'
            + table(rows, ["quantity", "value"], (1,)))


def _source(cols: dict):
    from bokeh.models import ColumnDataSource
    import numpy as np
    return ColumnDataSource({k: (np.asarray(v) if not isinstance(v, list) else v)
                             for k, v in cols.items()})


def _grid(analysis):
    from freqpair.circuit.frequency import FrequencyGrid
    return FrequencyGrid.from_design(analysis.design).f_hz


def _stability_section(analysis):
    """HTML and figures of the "Stability" section (designs with [feedback])."""
    from bokeh.layouts import column

    from freqpair.views.stage_data import loop_view
    from freqpair.views.stage_plots import closed_loop_figure, loop_figures, step_figure
    view = loop_view(analysis, _grid(analysis))
    res = view["result"]
    fb = analysis.design.feedback
    if fb.type == "divider":
        what = (f"Feedback divider R_f = {format_si(fb.series_resistance, 'Ω')} ∥ "
                f"C_f = {format_si(fb.series_capacitance, 'F')}, R_g = "
                f"{format_si(fb.shunt_resistance, 'Ω')} ∥ C_g = "
                f"{format_si(fb.shunt_capacitance, 'F')}: β(0) = {analysis.beta_dc:.6g} "
                "(the divider alone, not loaded by the stage).")
    else:
        what = f"Feedback factor β_f = {fb.factor:g}."
    if res is None:
        return section("Stability", f'<p class="note">{escape(what)} The amplifier\'s DC gain '
                       "is zero: there is no loop.</p>", "stability"), None
    marks = {k: _source(v) for k, v in view["marks"].items()}
    mag, ph = loop_figures(_source(view["curves"]), marks)
    cl = closed_loop_figure(_source(view["curves"]), marks, x_range=mag.x_range)
    figs = [mag, ph, cl]
    if view["step"]["t_s"].size:
        figs.append(step_figure(_source(view["step"]), marks))
    keys = ["phase_margin_deg", "crossover_hz", "gain_margin_db", "phase_crossover_hz",
            "closed_loop_f3db_hz", "peaking_db", "overshoot_pct", "settling_time_s"]
    rows = [(METRIC_LABELS.get(k, k), format_metric(k, getattr(res, k))) for k in keys]
    html = (f'<p class="note">{escape(what)} T = β·A·sign (T(0) > 0); the marks on the plots '
            "are the numbers below.</p>" + table(rows, ["quantity", "value"], (1,))
            + "{{plot:stability}}")
    return section("Stability", html, "stability"), column(*figs, sizing_mode="stretch_width")


def _supply_section(analysis):
    from freqpair.views.stage_data import supply_view
    from freqpair.views.stage_plots import psrr_figure
    view = supply_view(analysis, _grid(analysis))
    marks = {k: _source(v) for k, v in view["marks"].items()}
    fig = psrr_figure(_source(view["curves"]), marks)
    s = view["result"]
    rows = [(METRIC_LABELS.get(k, k), format_metric(k, getattr(s, k)))
            for k in ("psrr_pos_db", "psrr_pos_corner_hz", "psrr_neg_db", "psrr_neg_corner_hz")]
    html = ('<p class="note">The rails driven one at a time (inputs at 0), seen at the '
            "single-ended output; PSRR = |A_se/A_rail|.</p>"
            + table(rows, ["quantity", "value"], (1,)) + "{{plot:supply}}")
    return section("Supply rejection", html, "supply"), fig


def _input_section(analysis):
    from freqpair.views.stage_data import input_view
    from freqpair.views.stage_plots import input_impedance_figure
    view = input_view(analysis, _grid(analysis))
    fig = input_impedance_figure(_source(view["curves"]),
                                 {k: _source(v) for k, v in view["marks"].items()})
    z = view["result"]
    rows = [(METRIC_LABELS.get(k, k), format_metric(k, getattr(z, k)))
            for k in ("zin_dm_ohm", "zin_cm_ohm", "zin_dm_corner_hz")]
    html = table(rows, ["quantity", "value"], (1,)) + "{{plot:zin}}"
    return section("Input impedance", html, "zin"), fig


def _noise_section(analysis):
    from freqpair.analysis.noise import NOISE_CAUTION
    from freqpair.views.stage_data import noise_view
    from freqpair.views.stage_plots import noise_figure
    view = noise_view(analysis, _grid(analysis))
    fig = noise_figure(_source(view["curves"]),
                       {k: _source(v) for k, v in view["marks"].items()})
    res = view["result"]
    spots = []
    for s in res.spots:
        spots.append((format_si(s.f_hz, "Hz"), format_si(s.input_v_rthz, "V/√Hz"),
                      format_si(s.output_v_rthz, "V/√Hz"),
                      "—" if s.nf_db is None else f"{s.nf_db:.2f} dB"))
    lo, hi = res.band_hz
    c = view["contributors"]
    contrib = list(zip(c["name"], c["share"], c["density"]))
    html = (table(spots, ["spot frequency", "e_n (input)", "output", "noise figure"],
                  (1, 2, 3))
            + f'<p class="note">rms over {format_si(lo, "Hz")} … {format_si(hi, "Hz")}: '
              f'input {format_si(res.input_rms_v, "V")}, output '
              f'{format_si(res.output_rms_v, "V")}.</p>'
            + "{{plot:noise}}"
            + f"<p>Who contributes at {format_si(view['at_hz'], 'Hz')}:</p>"
            + table(contrib, ["source", "share of the noise power", "its part of e_n"], (1, 2))
            + f'<p class="note">{escape(NOISE_CAUTION)}</p>')
    return section("Noise", html, "noise"), fig


def _locus_section(analysis, key: str, values):
    import numpy as np

    from freqpair.analysis.poles import response_zpk
    from freqpair.views.stage_data import locus_view
    from freqpair.views.stage_plots import locus_figure
    view = locus_view(analysis.design, key, values)
    zpk = response_zpk(analysis, view["gain"])
    cur = {"abs_re_hz": [], "im_hz": [], "kind": []}
    for kind, roots in (("pole", zpk.poles_rad_s), ("zero", zpk.zeros_rad_s)):
        for r in roots:
            if r.real != 0:
                cur["abs_re_hz"].append(abs(r.real) / (2 * np.pi))
                cur["im_hz"].append(r.imag / (2 * np.pi))
                cur["kind"].append(kind)
    fig = locus_figure(_source(view["paths"]), _source(view["points"]), _source(cur),
                       key_label=key)
    vals = view["locus"].values
    html = (f'<p class="note">The exact poles and zeros of {escape(view["gain"])} while '
            f"{escape(key)} moves from {format_si(vals[0])} to {format_si(vals[-1])} "
            f"({len(vals)} values); black marks: this design.</p>" + "{{plot:locus}}")
    return section("Pole paths", html, "locus"), fig


def _measured_section(ov, origin: str):
    """HTML and figure of the "Measurement against the model" section."""
    from bokeh.layouts import column

    from freqpair.views.measured_plots import overlay_figure
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
    from freqpair.views.plots import PALETTE, style_figure
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


def report_html(analysis, measurement=None, locus=None) -> str:
    """The whole report of one analysis as a standalone HTML document.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    measurement : freqpair.studies.measured.Measurement, optional
        A bench measurement: adds the section "Measurement against the model"
        (:func:`freqpair.studies.measured.overlay`: residual rms and largest residual
        [dB], overlay plot) and ``measured`` (the overlay's JSON) in the
        embedded data.
    locus : (str, sequence of float), optional
        A design key and its values: adds the section "Pole paths".

    Returns
    -------
    str
        UTF-8 HTML; plotting resources are inlined (no network access needed).
    """
    from freqpair.views.report_plots import bode_figures, cmrr_figure
    from freqpair.views.schematic import stage_svg
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
    if d.feedback is not None:
        html, fig = _stability_section(analysis)
        body.append(html)
        if fig is not None:
            plots["stability"] = fig
    else:
        body.append(section("Stability", _loop_html(analysis), "stability"))
    for build, name in ((_supply_section, "supply"), (_input_section, "zin"),
                        (_noise_section, "noise")):
        html, plots[name] = build(analysis)
        body.append(html)
    if locus is not None:
        html, plots["locus"] = _locus_section(analysis, *locus)
        body.append(html)
    if measurement is not None:
        from freqpair.studies.measured import overlay
        ov = overlay(analysis, measurement)
        html, plots["measured"] = _measured_section(ov, measurement.origin)
        body.append(html)
        data = dict(data, measured=ov.to_json())
    body.append(section("Cautions", f'<p class="caution">{escape(CAUTION)}</p>', "cautions"))
    title = d.name or "freqpair report"
    from freqpair import __version__
    return page(title, f"freqpair {__version__} — exact small-signal analysis of a "
                       "differential stage", "".join(body), plots, data)


def write_report(analysis, path, measurement=None, locus=None) -> None:
    """Write :func:`report_html` to ``path`` atomically (temporary file, then rename).

    An interrupted run leaves the old file or none, never half a report.
    """
    from freqpair.design.files import atomic_write_text
    atomic_write_text(path, report_html(analysis, measurement, locus))
