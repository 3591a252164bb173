"""Bokeh figures of the loop, supply, input-impedance, noise and pole-path views.

Fed from ColumnDataSources holding the columns of :mod:`freqpair.views.stage_data`,
so the explorer (which replaces the sources' data on every change) and the
HTML report draw the same pictures. Every mark is a point with its text
beside it, both from one source (``x``, ``y``, ``text``): when the design
changes the numbers move with the marks. Bokeh is imported when a builder runs.
"""
from __future__ import annotations

from freqpair.views.plots import PALETTE, eng_formatter, freq_figure, style_figure

__all__ = ["loop_figures", "closed_loop_figure", "step_figure", "psrr_figure",
           "input_impedance_figure", "noise_figure", "locus_figure", "mark_points"]


def mark_points(fig, source, colour: str, marker: str = "circle", name: str = "mark",
                below: bool = False):
    """A mark: points (``x``, ``y``) with their ``text`` beside them, from ``source``
    (above right of the point, or below right with ``below``)."""
    pts = fig.scatter("x", "y", source=source, marker=marker, size=10, color=colour,
                      line_color=PALETTE["ink"], name=name)
    fig.text("x", "y", text="text", source=source, text_font_size="11px",
             text_color=colour, x_offset=7, y_offset=6 if below else -4,
             text_baseline="top" if below else "bottom", name=f"{name}_text")
    return pts


def _hline(fig, y: float, colour: str, name: str):
    from bokeh.models import Span
    span = Span(location=y, dimension="width", line_color=colour, line_dash="dashed",
                line_width=1, line_alpha=0.7, name=name)
    fig.add_layout(span)
    return span


def loop_figures(source, marks: dict, x_range=None, height: int = 260, pinned=None):
    """Loop gain |T| [dB] (with |β| [dB] beside it) and ∠T [deg] against frequency.

    Parameters
    ----------
    source : ColumnDataSource
        ``f_hz``, ``loop_db``, ``loop_deg``, ``beta_db``.
    marks : dict of ColumnDataSource
        ``crossover``, ``gain_margin`` (on the magnitude), ``phase_margin`` (on the phase).
    pinned : sequence of ColumnDataSource, optional
        Pinned snapshots with ``f_hz``, ``loop_db``, ``loop_deg`` (muted lines).

    Returns
    -------
    (figure, figure)
        Renderers ``"loop_db"``, ``"beta_db"``, ``"loop_deg"``; marks named by their key.
    """
    from bokeh.models import HoverTool

    from freqpair.views.plots import PIN_STYLES
    mag = freq_figure("Loop gain T = β·A", "magnitude [dB]", x_range, height=height)
    line = mag.line("f_hz", "loop_db", source=source, color=PALETTE["adm"], line_width=2,
                    legend_label="|T|", name="loop_db")
    mag.line("f_hz", "beta_db", source=source, color=PALETTE["acm_dm"], line_width=1.5,
             line_dash="dashed", legend_label="|β| (feedback network)", name="beta_db")
    _hline(mag, 0.0, PALETTE["ink"], "zero_db")
    mark_points(mag, marks["crossover"], PALETTE["corner"], "diamond", "crossover")
    mark_points(mag, marks["gain_margin"], PALETTE["target"], "triangle", "gain_margin",
                below=True)
    ph = freq_figure("Loop gain phase (continuous from 0° at DC)", "phase [deg]",
                     mag.x_range, height=height)
    ph.line("f_hz", "loop_deg", source=source, color=PALETTE["adm"], line_width=2,
            legend_label="∠T", name="loop_deg")
    _hline(ph, -180.0, PALETTE["target"], "minus_180")
    mark_points(ph, marks["phase_margin"], PALETTE["corner"], "diamond", "phase_margin")
    for k, src in enumerate(pinned or ()):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        mag.line("f_hz", "loop_db", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"loop_db_pin{k}")
        ph.line("f_hz", "loop_deg", source=src, color=colour, line_dash=dash,
                legend_label=f"pin {k + 1}", name=f"loop_deg_pin{k}")
    fmt = {"@f_hz": eng_formatter("Hz")}
    mag.add_tools(HoverTool(renderers=[line], mode="vline", formatters=fmt,
                            tooltips=[("frequency", "@f_hz{eng}"), ("|T|", "@loop_db{0.00} dB"),
                                      ("∠T", "@loop_deg{0.0}°"), ("|β|", "@beta_db{0.00} dB")]))
    for fig in (mag, ph):
        fig.legend.location = "bottom_left"
        style_figure(fig)
    return mag, ph


def closed_loop_figure(source, marks: dict, x_range=None, height: int = 240, pinned=None):
    """Closed-loop gain |A/(1+T)| [dB] with its −3 dB point and peaking marked.

    ``source``: ``f_hz``, ``closed_db``; ``marks``: ``closed_f3db``, ``peaking``.
    """
    from bokeh.models import HoverTool

    from freqpair.views.plots import PIN_STYLES
    fig = freq_figure("Closed-loop gain A/(1+T)", "magnitude [dB]", x_range, height=height)
    line = fig.line("f_hz", "closed_db", source=source, color=PALETTE["a_total"], line_width=2,
                    legend_label="|A/(1+T)|", name="closed_db")
    for k, src in enumerate(pinned or ()):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        fig.line("f_hz", "closed_db", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"closed_db_pin{k}")
    mark_points(fig, marks["closed_f3db"], PALETTE["corner"], "diamond", "closed_f3db")
    mark_points(fig, marks["peaking"], PALETTE["target"], "triangle", "peaking", below=True)
    fig.add_tools(HoverTool(renderers=[line], mode="vline",
                            formatters={"@f_hz": eng_formatter("Hz")},
                            tooltips=[("frequency", "@f_hz{eng}"),
                                      ("closed loop", "@closed_db{0.00} dB")]))
    fig.legend.location = "bottom_left"
    style_figure(fig)
    return fig


def step_figure(source, marks: dict, height: int = 240, pinned=None):
    """Closed-loop step response with the ±1 % settling band, overshoot and settling marked.

    ``source``: ``t_s``, ``y``, ``band_lo``, ``band_hi``; ``marks``: ``overshoot``, ``settling``.
    """
    from bokeh.models import HoverTool
    from bokeh.plotting import figure

    from freqpair.views.plots import PIN_STYLES
    fig = figure(title="Step response (1 V reference step)", height=height,
                 sizing_mode="stretch_width", tools="pan,wheel_zoom,box_zoom,reset,save",
                 active_scroll=None)
    fig.xaxis.axis_label = "time [s]"
    fig.yaxis.axis_label = "output [V]"
    from bokeh.models import CustomJSTickFormatter
    fig.xaxis.formatter = CustomJSTickFormatter(code=_ENG_TICK_JS.replace("UNIT", "'s'"))
    fig.varea("t_s", "band_lo", "band_hi", source=source, fill_color=PALETTE["corner"],
              fill_alpha=0.18, legend_label="±1 % of the final value", name="settle_band")
    line = fig.line("t_s", "y", source=source, color=PALETTE["a_total"], line_width=2,
                    legend_label="output", name="step")
    for k, src in enumerate(pinned or ()):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        fig.line("t_s", "y", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"step_pin{k}")
    mark_points(fig, marks["overshoot"], PALETTE["target"], "triangle", "overshoot")
    mark_points(fig, marks["settling"], PALETTE["corner"], "diamond", "settling", below=True)
    fig.add_tools(HoverTool(renderers=[line], mode="vline",
                            formatters={"@t_s": eng_formatter("s"), "@y": eng_formatter("V")},
                            tooltips=[("time", "@t_s{eng}"), ("output", "@y{eng}")]))
    fig.legend.location = "bottom_right"
    style_figure(fig)
    return fig


_ENG_TICK_JS = """
const v = tick;
if (v === 0) { return "0"; }
let e = Math.floor(Math.log10(Math.abs(v)) / 3) * 3;
e = Math.max(-18, Math.min(15, e));
const p = {"-18": "a", "-15": "f", "-12": "p", "-9": "n", "-6": "µ", "-3": "m", "0": "",
           "3": "k", "6": "M", "9": "G", "12": "T", "15": "P"}[String(e)];
let s = (v / Math.pow(10, e)).toPrecision(3);
if (s.indexOf(".") >= 0) { s = s.replace(/0+$/, "").replace(/\\.$/, ""); }
return s + " " + p + UNIT;
"""


def psrr_figure(source, marks: dict, target_line=None, x_range=None, height: int = 300,
                pinned=None):
    """PSRR+ and PSRR− [dB] against frequency, corners and target crossings marked.

    ``source``: ``f_hz``, ``psrr_pos_db``, ``psrr_neg_db``; ``marks``: ``corner_pos``,
    ``corner_neg``, ``target_pos``, ``target_neg``; ``target_line``: ``f_hz``, ``y``.
    """
    from bokeh.models import HoverTool

    from freqpair.views.plots import PIN_STYLES
    fig = freq_figure("Supply rejection at the single-ended output", "PSRR [dB]", x_range,
                      height=height)
    pos = fig.line("f_hz", "psrr_pos_db", source=source, color=PALETTE["adm"], line_width=2,
                   legend_label="PSRR+ (positive rail)", name="psrr_pos")
    fig.line("f_hz", "psrr_neg_db", source=source, color=PALETTE["acm_se"], line_width=2,
             legend_label="PSRR− (negative rail)", name="psrr_neg")
    for k, src in enumerate(pinned or ()):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        fig.line("f_hz", "psrr_pos_db", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"psrr_pos_pin{k}")
        fig.line("f_hz", "psrr_neg_db", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"psrr_neg_pin{k}")
    if target_line is not None:
        fig.line("f_hz", "y", source=target_line, color=PALETTE["target"], line_dash="dotdash",
                 line_width=1.5, legend_label="PSRR target", name="psrr_target")
    mark_points(fig, marks["corner_pos"], PALETTE["adm"], "diamond", "corner_pos")
    mark_points(fig, marks["corner_neg"], PALETTE["acm_se"], "diamond", "corner_neg")
    mark_points(fig, marks["target_pos"], PALETTE["target"], "triangle", "target_pos")
    mark_points(fig, marks["target_neg"], PALETTE["target"], "triangle", "target_neg")
    fig.add_tools(HoverTool(renderers=[pos], mode="vline",
                            formatters={"@f_hz": eng_formatter("Hz")},
                            tooltips=[("frequency", "@f_hz{eng}"),
                                      ("PSRR+", "@psrr_pos_db{0.00} dB"),
                                      ("PSRR−", "@psrr_neg_db{0.00} dB")]))
    fig.legend.location = "bottom_left"
    style_figure(fig)
    return fig


def input_impedance_figure(source, marks: dict, x_range=None, height: int = 260):
    """|Z_in,dm| and |Z_in,cm| [Ω] on log axes, the DM corner marked.

    ``source``: ``f_hz``, ``zin_dm_ohm``, ``zin_cm_ohm``, ``zin_dm_deg``, ``zin_cm_deg``.
    """
    from bokeh.models import CustomJSTickFormatter, HoverTool
    fig = freq_figure("Input impedance (R_s not included)", "|Z_in| [Ω]", x_range,
                      height=height, y_axis_type="log")
    fig.yaxis.formatter = CustomJSTickFormatter(code=_ENG_TICK_JS.replace("UNIT", "'Ω'"))
    dm = fig.line("f_hz", "zin_dm_ohm", source=source, color=PALETTE["adm"], line_width=2,
                  legend_label="differential |Z_in,dm|", name="zin_dm")
    fig.line("f_hz", "zin_cm_ohm", source=source, color=PALETTE["acm_se"], line_width=2,
             legend_label="common-mode |Z_in,cm|", name="zin_cm")
    mark_points(fig, marks["corner"], PALETTE["corner"], "diamond", "zin_corner")
    fmt = {"@f_hz": eng_formatter("Hz"), "@zin_dm_ohm": eng_formatter("Ω"),
           "@zin_cm_ohm": eng_formatter("Ω")}
    fig.add_tools(HoverTool(renderers=[dm], mode="vline", formatters=fmt,
                            tooltips=[("frequency", "@f_hz{eng}"),
                                      ("|Z_in,dm|", "@zin_dm_ohm{eng}"),
                                      ("∠Z_in,dm", "@zin_dm_deg{0.0}°"),
                                      ("|Z_in,cm|", "@zin_cm_ohm{eng}")]))
    fig.legend.location = "bottom_left"
    style_figure(fig)
    return fig


def noise_figure(source, marks: dict, x_range=None, height: int = 280, pinned=None):
    """Input-referred noise density e_n [V/√Hz] (log-log), the chosen frequency marked.

    ``source``: ``f_hz``, ``en_v_rthz``; ``marks``: ``spot``.
    """
    from bokeh.models import CustomJSTickFormatter, HoverTool

    from freqpair.views.plots import PIN_STYLES
    fig = freq_figure("Input-referred noise density", "e_n [V/√Hz]", x_range, height=height,
                      y_axis_type="log")
    fig.yaxis.formatter = CustomJSTickFormatter(code=_ENG_TICK_JS.replace("UNIT", "'V'"))
    line = fig.line("f_hz", "en_v_rthz", source=source, color=PALETTE["adm"], line_width=2,
                    legend_label="e_n (input-referred)", name="en")
    for k, src in enumerate(pinned or ()):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        fig.line("f_hz", "en_v_rthz", source=src, color=colour, line_dash=dash,
                 legend_label=f"pin {k + 1}", name=f"en_pin{k}")
    mark_points(fig, marks["spot"], PALETTE["corner"], "diamond", "noise_spot")
    fig.add_tools(HoverTool(renderers=[line], mode="vline",
                            formatters={"@f_hz": eng_formatter("Hz"),
                                        "@en_v_rthz": eng_formatter("V/√Hz")},
                            tooltips=[("frequency", "@f_hz{eng}"), ("e_n", "@en_v_rthz{eng}")]))
    fig.legend.location = "top_right"
    style_figure(fig)
    return fig


def locus_figure(paths, points, current, key_label: str = "value", height: int = 340):
    """Pole and zero paths on the pole-zero map (|Re|/2π log axis [Hz], Im/2π [Hz]).

    Parameters
    ----------
    paths : ColumnDataSource
        ``xs``, ``ys``, ``kind`` (one multi-line per path).
    points : ColumnDataSource
        ``x``, ``y``, ``kind``, ``value``: every step's roots (hover shows the value).
    current : ColumnDataSource
        The design on screen: ``abs_re_hz``, ``im_hz``, ``kind`` (highlighted).
    """
    from bokeh.models import CDSView, CustomJSTickFormatter, GroupFilter, HoverTool
    from bokeh.plotting import figure
    from bokeh.transform import factor_cmap
    fig = figure(x_axis_type="log", title="Pole (×) and zero (○) paths", height=height,
                 sizing_mode="stretch_width", tools="pan,wheel_zoom,box_zoom,reset,save",
                 active_scroll=None)
    fig.xaxis.axis_label = "|real part| / 2π [Hz]"
    fig.yaxis.axis_label = "imaginary part / 2π [Hz]"
    fig.xaxis.formatter = CustomJSTickFormatter(code=_ENG_TICK_JS.replace("UNIT", "'Hz'"))
    fig.yaxis.formatter = CustomJSTickFormatter(code=_ENG_TICK_JS.replace("UNIT", "'Hz'"))
    cmap = factor_cmap("kind", [PALETTE["adm"], PALETTE["acm_se"]], ["pole", "zero"])
    fig.multi_line("xs", "ys", source=paths, line_color=cmap, line_alpha=0.55, line_width=2,
                   name="paths")
    steps = fig.scatter("x", "y", source=points, size=5, color=cmap, alpha=0.6, name="steps")
    fig.scatter("abs_re_hz", "im_hz", source=current, marker="x", size=15, line_width=3,
                color=PALETTE["ink"], name="current_poles",
                view=CDSView(filter=GroupFilter(column_name="kind", group="pole")),
                legend_label="this design: poles")
    fig.scatter("abs_re_hz", "im_hz", source=current, marker="circle", size=12, fill_alpha=0,
                line_width=2.5, line_color=PALETTE["ink"], name="current_zeros",
                view=CDSView(filter=GroupFilter(column_name="kind", group="zero")),
                legend_label="this design: zeros")
    fig.add_tools(HoverTool(renderers=[steps],
                            formatters={"@x": eng_formatter("Hz"), "@y": eng_formatter("Hz"),
                                        "@value": eng_formatter("")},
                            tooltips=[("", "@kind"), (key_label, "@value{eng}"),
                                      ("|re|/2π", "@x{eng}"), ("im/2π", "@y{eng}")]))
    fig.legend.location = "top_left"
    style_figure(fig)
    return fig
