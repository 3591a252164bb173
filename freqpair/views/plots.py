"""Bokeh figures of freqpair's curves, fed from ColumnDataSources (lazy Bokeh import).

The figures read the column names of :func:`freqpair.views.explore.explore`
(``f_hz``, ``adm_db``, ``adm_deg``, ...), so the browser app and the HTML
report draw the same pictures from the same data. Every builder returns a
plain ``bokeh.plotting.figure`` that the caller may restyle (sizes, titles,
colours of the renderers it finds by name).
"""
from __future__ import annotations

__all__ = ["PALETTE", "GAIN_SERIES", "bode_figure", "cmrr_figure", "pole_zero_figure",
           "add_residual_axis", "eng_formatter", "eng_tick_formatter", "eng_ticks",
           "style_figure", "freq_figure", "mark_frequency",
           "CYCLE", "PIN_STYLES", "pin_legend_items", "set_legend_label", "show_legend_item",
           "set_gain_hover", "set_cmrr_balanced"]

#: freqpair's own colours: deep teal, burnt orange, plum, olive, crimson, amber; the
#: measurement in slate blue. Keys are the gain names of ``responses.RESPONSE_NAMES``
#: and the marks.
PALETTE = {
    "adm": "#0b6e69", "acm_se": "#c2571a", "acm_dm": "#6b4c9a", "cmrr_se": "#0b6e69",
    "cmrr": "#7d8431", "target": "#b23a48", "corner": "#d99a00", "pinned": "#8c8c8c",
    "measured": "#34508c", "adm_se": "#3f8f5a", "a_total": "#0b6e69", "acm_cm": "#5f7f8f",
    "acm_total": "#c2571a", "ink": "#1f2a36", "paper": "#fbf8f3", "grid": "#e6dfd3",
}

#: The same scheme as a cycle, for one curve per design (comparisons).
CYCLE = ("#0b6e69", "#c2571a", "#6b4c9a", "#7d8431", "#b23a48", "#d99a00", "#34508c")

#: Muted (colour, dash) of pinned snapshots, one per pin slot: quieter than the live
#: curves so the design on screen stays in front.
PIN_STYLES = (("#8c8c8c", "dashed"), ("#a58fbf", "dotted"), ("#b98f6c", "dotdash"),
              ("#79a3a0", "dashdot"), ("#a9a463", [8, 3, 2, 3]))

#: (column prefix, legend label) of the gain curves.
GAIN_SERIES = (("adm", "differential gain A_dm"),
               ("acm_se", "common-mode gain A_cm,se (o2)"),
               ("acm_dm", "common-mode to differential A_cm-dm"))

#: Engineering notation in JavaScript: ``v`` → "1.5 kHz" (4 significant digits, SI
#: prefix, ``UNIT`` appended), as :func:`freqpair.design.quantities.format_si` writes it.
_ENG_BODY = """
if (v == null || !isFinite(v)) { return "—"; }
if (v === 0) { return "0 " + UNIT; }
let e = Math.floor(Math.log10(Math.abs(v)) / 3) * 3;
e = Math.max(-18, Math.min(15, e));
let s = (v / Math.pow(10, e)).toPrecision(4);
if (Math.abs(Number(s)) >= 1000 && e < 15) { e += 3; s = (v / Math.pow(10, e)).toPrecision(4); }
const p = {"-18": "a", "-15": "f", "-12": "p", "-9": "n", "-6": "µ", "-3": "m", "0": "",
           "3": "k", "6": "M", "9": "G", "12": "T", "15": "P"}[String(e)];
if (s.indexOf("e") < 0 && s.indexOf(".") >= 0) { s = s.replace(/0+$/, "").replace(/\\.$/, ""); }
return s + " " + p + UNIT;
"""


def eng_formatter(unit: str):
    """A hover formatter showing a number in engineering notation with ``unit``."""
    from bokeh.models import CustomJSHover
    return CustomJSHover(code="const v = value;" + _ENG_BODY.replace("UNIT", repr(unit)))


def eng_tick_formatter(unit: str):
    """An axis tick formatter writing ticks in engineering notation with ``unit``
    ("100 kHz", "−50 MHz") — the notation of every number freqpair prints."""
    from bokeh.models import CustomJSTickFormatter
    return CustomJSTickFormatter(code="const v = tick;" + _ENG_BODY.replace("UNIT", repr(unit)))


def eng_ticks(axis, unit: str = "Hz") -> None:
    """Give ``axis`` (an axis or a splattable list of axes) engineering-notation tick labels
    with ``unit``; labels that would overlap are left out."""
    from bokeh.models import NoOverlap
    axis.formatter = eng_tick_formatter(unit)
    axis.major_label_policy = NoOverlap()


def style_figure(fig) -> None:
    """freqpair's look: warm paper background, quiet grid, ink-coloured text."""
    fig.background_fill_color = PALETTE["paper"]
    fig.border_fill_color = "#ffffff"
    fig.outline_line_color = PALETTE["grid"]
    for grid in (fig.xgrid, fig.ygrid):
        grid.grid_line_color = PALETTE["grid"]
    for axis in (fig.xaxis, fig.yaxis):
        axis.axis_label_text_font_style = "normal"
        axis.axis_label_text_color = PALETTE["ink"]
        axis.major_label_text_color = PALETTE["ink"]
    fig.title.text_color = PALETTE["ink"]
    fig.title.text_font_size = "13px"
    fig.toolbar.logo = None
    if fig.legend:
        fig.legend.background_fill_alpha = 0.8
        fig.legend.label_text_font_size = "11px"
        fig.legend.spacing = 0
        fig.legend.padding = 4
        fig.legend.click_policy = "hide"


def freq_figure(title, y_label, x_range=None, **kw):
    """An empty figure with a log frequency axis [Hz] in freqpair's look (no renderers yet).

    ``height`` (pixels, default 260) and other ``figure`` keywords pass through.
    """
    fig = _freq_figure(title, y_label, x_range, **kw)
    style_figure(fig)
    return fig


def mark_frequency(fig, f_hz, label: str, colour: str | None = None) -> None:
    """A dashed vertical line at ``f_hz`` [Hz] with a small label (nothing when None)."""
    from bokeh.models import Label, Span
    if f_hz is None:
        return
    colour = colour or PALETTE["ink"]
    fig.add_layout(Span(location=float(f_hz), dimension="height", line_color=colour,
                        line_dash="dashed", line_width=1.2, line_alpha=0.7))
    fig.add_layout(Label(x=float(f_hz), y=8, x_units="data", y_units="screen", text=label,
                         text_font_size="11px", text_color=colour, x_offset=4))


def _pin_sources(pinned):
    """``pinned`` as a list of sources (None, one source, or a sequence of them)."""
    if pinned is None:
        return []
    return list(pinned) if isinstance(pinned, (list, tuple)) else [pinned]


def _pin_lines(fig, pinned, col: str, prefix: str) -> None:
    """One muted line of column ``col`` per pin source; legend item ``"pin <k>"``."""
    for k, src in enumerate(_pin_sources(pinned)):
        colour, dash = PIN_STYLES[k % len(PIN_STYLES)]
        fig.line("f_hz", col, source=src, color=colour, line_dash=dash, line_width=1.5,
                 line_alpha=0.9, legend_label=f"pin {k + 1}", name=f"{prefix}_pin{k}")


def pin_legend_items(fig, slot: int) -> list:
    """Legend items of pin slot ``slot`` in ``fig`` (renderers named ``*_pin<slot>``)."""
    if not fig.legend:
        return []
    tag = f"_pin{slot}"
    return [item for item in fig.legend[0].items
            if any((r.name or "").endswith(tag) for r in item.renderers)]


def set_legend_label(fig, renderer_name: str, text: str) -> None:
    """Relabel the legend item holding the renderer named ``renderer_name``."""
    from bokeh.core.properties import value
    for item in (fig.legend[0].items if fig.legend else []):
        if any(r.name == renderer_name for r in item.renderers):
            if item.label != value(text):
                item.label = value(text)


def show_legend_item(fig, renderer_name: str, shown: bool) -> None:
    """Show or hide the legend item holding the renderer named ``renderer_name``."""
    for item in (fig.legend[0].items if fig.legend else []):
        if any(r.name == renderer_name for r in item.renderers) and item.visible != shown:
            item.visible = shown


def _gain_tips(series, quantity: str) -> list:
    suffix, unit = ("_db", " dB") if quantity == "magnitude" else ("_deg", "°")
    return [("frequency", "@f_hz{eng}")] + [(name, f"@{p}{suffix}{{0.00}}{unit}")
                                            for p, name in series]


def _cmrr_tips(balanced: bool) -> list:
    rows = [("frequency", "@f_hz{eng}"), ("CMRR single-ended", "@cmrr_se_db{0.00} dB")]
    return rows + ([("CMRR balanced", "@cmrr_db{0.00} dB")] if balanced else [])


def _tools_named(fig, name: str) -> list:
    """``fig``'s tools named ``name`` (its tool list, not ``fig.select``: that walks
    every model the figure references, ≈ 30 ms per call on an explorer figure)."""
    return [tool for tool in fig.tools if tool.name == name]


def set_gain_hover(fig, quantity: str, series) -> None:
    """Let the hover of a :func:`bode_figure` name ``series`` ((prefix, label) pairs)."""
    tips = _gain_tips(series, quantity)
    for tool in _tools_named(fig, "gain_hover"):
        if tool.tooltips != tips:
            tool.tooltips = tips


def set_cmrr_balanced(fig, shown: bool) -> None:
    """Show the balanced CMRR of a :func:`cmrr_figure` in its legend and hover, or not
    (a stage with one output has none; its curve is then empty)."""
    show_legend_item(fig, "cmrr", shown)
    tips = _cmrr_tips(shown)
    for tool in _tools_named(fig, "cmrr_hover"):
        if tool.tooltips != tips:
            tool.tooltips = tips


def _hide_empty_pins(fig, pinned) -> None:
    for k, src in enumerate(_pin_sources(pinned)):
        empty = not src.data or not len(next(iter(src.data.values()), []))
        for item in pin_legend_items(fig, k):
            item.visible = not empty


def _freq_figure(title, y_label, x_range=None, **kw):
    from bokeh.plotting import figure
    args = dict(x_axis_type="log", title=title, tools="pan,wheel_zoom,box_zoom,reset,save",
                active_scroll=None, sizing_mode="stretch_width", height=kw.pop("height", 260))
    if x_range is not None:
        args["x_range"] = x_range
    fig = figure(**args, **kw)
    fig.xaxis.axis_label = "frequency"
    eng_ticks(fig.xaxis, "Hz")
    fig.yaxis.axis_label = y_label
    return fig


def bode_figure(source, quantity: str = "magnitude", series=GAIN_SERIES, pinned=None,
                title: str | None = None, x_range=None, height: int = 260):
    """Magnitude [dB] or phase [deg] of the gains against frequency (log axis, Hz).

    Parameters
    ----------
    source : ColumnDataSource
        Columns ``f_hz`` and ``<prefix>_db`` / ``<prefix>_deg`` per series.
    quantity : {"magnitude", "phase"}
    series : sequence of (prefix, label)
        Which gains to draw; colours from :data:`PALETTE` by prefix.
    pinned : ColumnDataSource or sequence of them, optional
        Snapshots with the same columns, each drawn in its own muted colour and
        dash (:data:`PIN_STYLES`) with a legend item ``"pin <k>"`` (hidden while
        its source is empty; relabel it through :func:`pin_legend_items`).
    title : str, optional
    x_range : Range, optional
        Share the frequency range with another figure.
    height : int
        Pixels.

    Returns
    -------
    bokeh.plotting.figure
        Line renderers are named ``"<prefix>"`` and ``"<prefix>_pin<k>"`` (k from 0).
    """
    from bokeh.models import HoverTool
    if quantity not in ("magnitude", "phase"):
        raise ValueError(f"quantity = {quantity!r}: must be 'magnitude' or 'phase'")
    suffix, label = ("_db", "gain [dB]") if quantity == "magnitude" else ("_deg", "phase [deg]")
    fig = _freq_figure(title or ("Gains — magnitude" if quantity == "magnitude"
                                 else "Gains — phase"), label, x_range, height=height)
    renderers = []
    for prefix, name in series:
        col = prefix + suffix
        r = fig.line("f_hz", col, source=source, color=PALETTE[prefix], line_width=2,
                     legend_label=name, name=prefix)
        renderers.append(r)
    for prefix, _ in series:
        _pin_lines(fig, pinned, prefix + suffix, prefix)
    _hide_empty_pins(fig, pinned)
    fig.add_tools(HoverTool(renderers=renderers[:1], tooltips=_gain_tips(series, quantity),
                            mode="vline", formatters={"@f_hz": eng_formatter("Hz")},
                            name="gain_hover"))
    fig.legend.location = "bottom_left"
    style_figure(fig)
    return fig


def cmrr_figure(source, corner, target=None, target_line=None, pinned=None, balanced=True,
                title: str = "CMRR against frequency", x_range=None, height: int = 320):
    """CMRR [dB] against frequency with the corner, the target and its crossing.

    Parameters
    ----------
    source : ColumnDataSource
        Columns ``f_hz``, ``cmrr_se_db`` and ``cmrr_db`` (balanced).
    corner, target : ColumnDataSource
        Points ``f_hz``, ``cmrr_db``: the CMRR corner; where CMRR falls to the target.
        ``target`` may be None (no target drawn).
    target_line : ColumnDataSource, optional
        ``f_hz``, ``cmrr_db``: two points drawing the target level.
    pinned : ColumnDataSource or sequence of them, optional
        Snapshots, drawn as in :func:`bode_figure` (renderers ``"cmrr_se_pin<k>"``).
    balanced : bool
        Also draw the balanced CMRR.

    Returns
    -------
    bokeh.plotting.figure
        Renderers named ``"cmrr_se"``, ``"cmrr"``, ``"corner"``, ``"target"``,
        ``"target_cross"``.
    """
    from bokeh.models import HoverTool
    fig = _freq_figure(title, "CMRR [dB]", x_range, height=height)
    main = fig.line("f_hz", "cmrr_se_db", source=source, color=PALETTE["cmrr_se"], line_width=2,
                    legend_label="CMRR single-ended (o2)", name="cmrr_se")
    if balanced:
        fig.line("f_hz", "cmrr_db", source=source, color=PALETTE["cmrr"], line_width=1.5,
                 line_alpha=0.8, legend_label="CMRR balanced", name="cmrr")
    _pin_lines(fig, pinned, "cmrr_se_db", "cmrr_se")
    _hide_empty_pins(fig, pinned)
    if target_line is not None:
        fig.line("f_hz", "cmrr_db", source=target_line, color=PALETTE["target"],
                 line_dash="dotdash", line_width=1.5, legend_label="CMRR target", name="target")
    c = fig.scatter("f_hz", "cmrr_db", source=corner, marker="diamond", size=13,
                    color=PALETTE["corner"], line_color=PALETTE["ink"],
                    legend_label="CMRR corner (−3 dB)", name="corner")
    marks = [c]
    if target is not None:
        marks.append(fig.scatter("f_hz", "cmrr_db", source=target, marker="triangle", size=12,
                                 color=PALETTE["target"], line_color=PALETTE["ink"],
                                 legend_label="falls to target", name="target_cross"))
    fmt = {"@f_hz": eng_formatter("Hz")}
    fig.add_tools(HoverTool(renderers=[main], mode="vline", formatters=fmt,
                            tooltips=_cmrr_tips(balanced), name="cmrr_hover"))
    fig.add_tools(HoverTool(renderers=marks, formatters=fmt,
                            tooltips=[("at", "@f_hz{eng}"), ("CMRR", "@cmrr_db{0.00} dB")]))
    fig.legend.location = "bottom_left"
    style_figure(fig)
    return fig


def pole_zero_figure(source, title: str = "Poles (×) and zeros (○)", height: int = 320):
    """Pole-zero map: |Re s|/2π on a log axis [Hz], Im s/2π [Hz]; right half-plane in red.

    Parameters
    ----------
    source : ColumnDataSource
        Columns ``kind`` ("pole"/"zero"), ``re_hz``, ``im_hz``, ``mag_hz``,
        ``abs_re_hz``, ``half_plane`` ("left"/"right").

    Returns
    -------
    bokeh.plotting.figure
        Renderers named ``"poles"`` and ``"zeros"``.
    """
    from bokeh.models import CDSView, GroupFilter, HoverTool
    from bokeh.plotting import figure
    from bokeh.transform import factor_cmap
    fig = figure(x_axis_type="log", title=title, height=height, sizing_mode="stretch_width",
                 tools="pan,wheel_zoom,box_zoom,reset,save", active_scroll=None)
    fig.xaxis.axis_label = "|real part| / 2π  (decay rate)"
    fig.yaxis.axis_label = "imaginary part / 2π"
    eng_ticks(fig.xaxis, "Hz")
    eng_ticks(fig.yaxis, "Hz")
    cmap = factor_cmap("half_plane", [PALETTE["adm"], PALETTE["target"]], ["left", "right"])
    poles = fig.scatter("abs_re_hz", "im_hz", source=source, marker="x", size=14, line_width=2.5,
                        color=cmap, view=CDSView(filter=GroupFilter(column_name="kind",
                                                                    group="pole")),
                        legend_label="pole", name="poles")
    zeros = fig.scatter("abs_re_hz", "im_hz", source=source, marker="circle", size=11,
                        fill_alpha=0, line_width=2, line_color=cmap,
                        view=CDSView(filter=GroupFilter(column_name="kind", group="zero")),
                        legend_label="zero (red: right half-plane)", name="zeros")
    fmt = {"@re_hz": eng_formatter("Hz"), "@im_hz": eng_formatter("Hz"),
           "@mag_hz": eng_formatter("Hz")}
    fig.add_tools(HoverTool(renderers=[poles, zeros], formatters=fmt,
                            tooltips=[("", "@kind, @half_plane half-plane"),
                                      ("real/2π", "@re_hz{eng}"), ("imag/2π", "@im_hz{eng}"),
                                      ("|s|/2π", "@mag_hz{eng}")]))
    fig.legend.location = "top_left"
    style_figure(fig)
    return fig


def add_residual_axis(fig, source, range_name: str = "residual"):
    """Draw a measurement's residual [dB] on a secondary axis at the right of ``fig``.

    Parameters
    ----------
    fig : bokeh.plotting.figure
        A frequency figure (log axis, Hz).
    source : ColumnDataSource
        Columns ``f_hz`` [Hz] and ``residual_db`` (measured − model) [dB]; also
        ``measured_db`` and ``model_db`` for the hover.

    Returns
    -------
    (Range1d, LinearAxis, list of renderers)
        The residual's y range (the caller sets ``start``/``end``), its axis and
        the renderers (the markers named ``range_name``, a thin line, the zero line),
        so the caller can show or hide them.
    """
    from bokeh.models import HoverTool, LinearAxis, Range1d
    rng = Range1d(-1.0, 1.0)
    fig.extra_y_ranges = dict(fig.extra_y_ranges, **{range_name: rng})
    axis = LinearAxis(y_range_name=range_name, axis_label="measured − model [dB]",
                      axis_label_text_color=PALETTE["acm_dm"],
                      major_label_text_color=PALETTE["acm_dm"], axis_label_text_font_style="normal")
    fig.add_layout(axis, "right")
    zero = fig.line("f_hz", 0.0, source=source, y_range_name=range_name, color=PALETTE["acm_dm"],
                    line_dash="dashed", line_width=1, line_alpha=0.6)
    line = fig.line("f_hz", "residual_db", source=source, y_range_name=range_name,
                    color=PALETTE["acm_dm"], line_width=1, line_alpha=0.7)
    marks = fig.scatter("f_hz", "residual_db", source=source, y_range_name=range_name,
                        marker="square", size=5, color=PALETTE["acm_dm"],
                        legend_label="residual (right axis)", name=range_name)
    fig.add_tools(HoverTool(renderers=[marks], formatters={"@f_hz": eng_formatter("Hz")},
                            tooltips=[("frequency", "@f_hz{eng}"),
                                      ("measured", "@measured_db{0.00} dB"),
                                      ("model", "@model_db{0.00} dB"),
                                      ("measured − model", "@residual_db{0.00} dB")]))
    return rng, axis, [zero, line, marks]
