"""Bokeh view of an :class:`~freqpair.studies.measured.Overlay`: measurement, model, residual.

Bokeh is imported inside the function, so importing this module costs nothing.
The renderers carry names (``"measured"``, ``"model"``, ``"residual"``,
``"residual_zero"``) so a face can restyle them, e.g.
``fig.select(name="model")[0].glyph.line_color = "black"``.
"""
from __future__ import annotations

__all__ = ["overlay_figure", "overlay_columns"]


def overlay_columns(overlay, quantity: str = "magnitude") -> dict:
    """Columns for a ColumnDataSource: ``f_hz``, ``measured``, ``model``, ``residual``.

    Parameters
    ----------
    overlay : freqpair.studies.measured.Overlay
    quantity : {"magnitude", "phase"}
        Magnitude [dB] or phase [deg].

    Returns
    -------
    dict of lists
    """
    if quantity == "magnitude":
        cols = (overlay.measured_db, overlay.model_db, overlay.residual_db)
    elif quantity == "phase":
        if overlay.measured_deg is None:
            raise ValueError("quantity = 'phase': this measurement has no phase")
        cols = (overlay.measured_deg, overlay.model_deg, overlay.residual_deg)
    else:
        raise ValueError(f"quantity = {quantity!r}: must be 'magnitude' or 'phase'")
    return {"f_hz": [float(v) for v in overlay.f_hz],
            "measured": [float(v) for v in cols[0]],
            "model": [float(v) for v in cols[1]],
            "residual": [float(v) for v in cols[2]]}


def overlay_figure(overlay, quantity: str = "magnitude", *, width: int = 720,
                   height: int = 380):
    """A figure with the measurement (markers), the model (line) and the residual.

    The residual (measurement − model) is drawn on its own axis on the right,
    with its zero line dashed.

    Parameters
    ----------
    overlay : freqpair.studies.measured.Overlay
    quantity : {"magnitude", "phase"}
        Magnitude [dB] or phase [deg].
    width, height : int
        Size in pixels.

    Returns
    -------
    bokeh.plotting.figure
        Log frequency axis [Hz]; one ColumnDataSource shared by the renderers.
    """
    from bokeh.models import ColumnDataSource, HoverTool, LinearAxis, Range1d
    from bokeh.plotting import figure

    from freqpair.views.plots import eng_ticks
    data = overlay_columns(overlay, quantity)
    unit = "dB" if quantity == "magnitude" else "deg"
    source = ColumnDataSource(data, name="overlay")
    f = data["f_hz"]
    lo, hi = f[0], f[-1]
    if lo == hi:
        lo, hi = lo / 1.5, hi * 1.5
    values = data["measured"] + data["model"]
    v_lo, v_hi = min(values), max(values)
    pad = max(0.05 * (v_hi - v_lo), 1.0)
    res_span = max(max(abs(v) for v in data["residual"]), 0.5) * 1.2
    fig = figure(title=f"{overlay.label}: measured and model ({quantity})",
                 x_axis_type="log", x_range=Range1d(lo, hi),
                 y_range=Range1d(v_lo - pad, v_hi + pad),
                 width=width, height=height, x_axis_label="frequency",
                 y_axis_label=f"{quantity} [{unit}]", tools="pan,box_zoom,wheel_zoom,reset,save")
    eng_ticks(fig.xaxis, "Hz")
    fig.extra_y_ranges = {"residual": Range1d(-res_span, res_span)}
    fig.add_layout(LinearAxis(y_range_name="residual",
                              axis_label=f"residual, measured − model [{unit}]"), "right")
    fig.line("f_hz", "model", source=source, line_width=2, color="#1f5fa8",
             legend_label="model", name="model")
    fig.scatter("f_hz", "measured", source=source, size=6, color="#d9731a",
                legend_label="measured", name="measured")
    fig.line("f_hz", "residual", source=source, y_range_name="residual", color="#6b6b6b",
             line_width=1, legend_label="residual", name="residual")
    fig.line(x=[lo, hi], y=[0.0, 0.0], y_range_name="residual", color="#6b6b6b",
             line_dash="dashed", name="residual_zero")
    fig.add_tools(HoverTool(tooltips=[("f", "@f_hz{0.000a} Hz"),
                                      ("measured", f"@measured{{0.00}} {unit}"),
                                      ("model", f"@model{{0.00}} {unit}"),
                                      ("residual", f"@residual{{0.00}} {unit}")],
                            renderers=[fig.select(name="measured")[0]]))
    fig.legend.location = "bottom_left"
    fig.legend.click_policy = "hide"
    return fig
