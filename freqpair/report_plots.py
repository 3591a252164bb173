"""Bokeh figures for reports: Bode magnitude/phase, CMRR, and overlays of several designs.

Every builder returns plain Bokeh objects (``figure``) that the caller may
restyle (titles, sizes, colours, ranges) before showing or embedding them.
Bokeh is imported inside the functions, so importing this module costs
nothing and the computation core never depends on it.
"""
from __future__ import annotations

import numpy as np

from .metrics import db
from .responses import RESPONSE_NAMES

__all__ = ["PALETTE", "bode_figures", "cmrr_figure", "overlay_figure", "response_label",
           "curve_columns"]

#: freqpair's plot colours (cycled).
PALETTE = ["#1b5e9e", "#c2410c", "#2f7d32", "#7b2d8e", "#b8860b", "#0e7c86", "#a61e4d"]

_SHORT = {"adm": "A_dm (balanced)", "adm_se": "A_dm,se (o2)", "acm_se": "A_cm,se (o2)",
          "acm_dm": "A_cm-dm (balanced)", "acm_cm": "A_cm-cm", "a_total": "A_total",
          "acm_total": "A_cm,total"}


def response_label(name: str) -> str:
    """Short legend label of a named gain (see ``responses.RESPONSE_NAMES``)."""
    if name not in RESPONSE_NAMES:
        raise KeyError(f"{name}: unknown response")
    return _SHORT[name]


def _finite(values: np.ndarray) -> np.ndarray:
    """Non-finite values become NaN (a gap in the line, never a point at −∞)."""
    v = np.asarray(values, dtype=float).copy()
    v[~np.isfinite(v)] = np.nan
    return v


def curve_columns(analysis, names=None, f_hz=None) -> dict[str, np.ndarray]:
    """Magnitude [dB] and unwrapped phase [deg] of the named gains on ``f_hz`` [Hz].

    Returns
    -------
    dict
        ``frequency_hz`` and, per gain that exists and is not zero everywhere,
        ``<name>_db`` and ``<name>_deg``.
    """
    from .frequency import FrequencyGrid
    grid = FrequencyGrid(f_hz) if f_hz is not None else None
    r = analysis.curves(grid)
    names = names or [n for n in RESPONSE_NAMES]
    cols = {"frequency_hz": r.f_hz}
    for n in names:
        v = r.get(n)
        if v is None or not np.any(np.abs(v) > 0):
            continue
        from .export import zero_to_rounding
        zero = zero_to_rounding(analysis, v)
        mag = np.where(zero, np.nan, db(v))
        if not np.any(np.isfinite(mag)):
            continue
        cols[f"{n}_db"] = _finite(mag)
        cols[f"{n}_deg"] = _finite(np.where(zero, np.nan, np.degrees(np.unwrap(np.angle(v)))))
    return cols


def _new_figure(title, y_label, x_range=None, height=300, width=760):
    from bokeh.models import HoverTool
    from bokeh.plotting import figure
    kw = {"x_range": x_range} if x_range is not None else {}
    fig = figure(title=title, x_axis_type="log", height=height, width=width,
                 x_axis_label="frequency [Hz]", y_axis_label=y_label,
                 tools="pan,wheel_zoom,box_zoom,reset,save", sizing_mode="stretch_width", **kw)
    fig.add_tools(HoverTool(tooltips=[("f", "@x{0.000a}Hz"), ("value", "@y{0.00}")],
                            mode="vline"))
    fig.title.text_font_size = "13px"
    fig.background_fill_color = "#fcfcfa"
    fig.grid.grid_line_color = "#e3e1d8"
    return fig


def _marker(fig, f_hz, label, colour):
    from bokeh.models import Label, Span
    if f_hz is None:
        return
    fig.add_layout(Span(location=float(f_hz), dimension="height", line_color=colour,
                        line_dash="dashed", line_width=1.2))
    fig.add_layout(Label(x=float(f_hz), y=8, x_units="data", y_units="screen", text=label,
                         text_font_size="11px", text_color=colour, x_offset=4))


def _line(fig, x, y, colour, label, dash="solid"):
    from bokeh.models import ColumnDataSource
    src = ColumnDataSource({"x": np.asarray(x, dtype=float), "y": np.asarray(y, dtype=float)})
    return fig.line("x", "y", source=src, line_color=colour, line_width=2, line_dash=dash,
                    legend_label=label)


def _legend(fig):
    if fig.legend:
        fig.legend.location = "bottom_left"
        fig.legend.click_policy = "hide"
        fig.legend.label_text_font_size = "11px"
        fig.legend.background_fill_alpha = 0.8


def bode_figures(analysis, names=None, f_hz=None):
    """Magnitude and phase of the stage's gains (shared frequency axis).

    Parameters
    ----------
    analysis : freqpair.analysis.Analysis
    names : list of str, optional
        Gains to draw (default: all that exist and are not identically zero).
    f_hz : array_like, optional
        Frequencies [Hz] (default: the design's sweep).

    Returns
    -------
    (bokeh.plotting.figure, bokeh.plotting.figure)
        Magnitude [dB] and phase [deg] figures; f_3dB and the unity-gain
        frequency are marked on the magnitude figure.
    """
    cols = curve_columns(analysis, names, f_hz)
    f = cols["frequency_hz"]
    mag = _new_figure("Gain magnitude", "magnitude [dB]")
    ph = _new_figure("Gain phase (unwrapped)", "phase [deg]", x_range=mag.x_range, height=240)
    i = 0
    for key in cols:
        if not key.endswith("_db"):
            continue
        name = key[:-3]
        colour = PALETTE[i % len(PALETTE)]
        i += 1
        _line(mag, f, cols[key], colour, response_label(name))
        _line(ph, f, cols[f"{name}_deg"], colour, response_label(name))
    _marker(mag, analysis.f3db_hz, "f_3dB", "#555555")
    _marker(mag, analysis.ugf_hz, "unity gain", "#888888")
    _legend(mag)
    _legend(ph)
    return mag, ph


def cmrr_figure(analysis, f_hz=None):
    """CMRR versus frequency [dB], single-ended and (when defined) balanced.

    Returns
    -------
    bokeh.plotting.figure or None
        None when the common-mode gain is zero everywhere (CMRR infinite).
    """
    cols = curve_columns(analysis, ["adm", "adm_se", "acm_se", "acm_dm"], f_hz)
    f = cols["frequency_hz"]
    fig = _new_figure("Common-mode rejection", "CMRR [dB]")
    drawn = False
    if "adm_se_db" in cols and "acm_se_db" in cols:
        _line(fig, f, cols["adm_se_db"] - cols["acm_se_db"], PALETTE[0], "CMRR single-ended (o2)")
        drawn = True
    if "adm_db" in cols and "acm_dm_db" in cols:
        _line(fig, f, cols["adm_db"] - cols["acm_dm_db"], PALETTE[1], "CMRR balanced", "dashed")
        drawn = True
    if not drawn:
        return None
    _marker(fig, analysis.cmrr_corner_hz, "CMRR corner", "#555555")
    _legend(fig)
    return fig


def overlay_figure(analyses, quantity: str = "primary", labels=None, f_hz=None):
    """One curve per design on a shared axis, for comparisons.

    Parameters
    ----------
    analyses : list of Analysis
    quantity : {"primary", "cmrr_se", "phase"}
        "primary": each design's main differential gain [dB]; "phase": its
        phase [deg]; "cmrr_se": single-ended CMRR [dB].
    labels : list of str, optional
        Legend entries (default: design names).
    f_hz : array_like, optional
        Common frequencies [Hz] (default: the union of the designs' sweeps).

    Returns
    -------
    bokeh.plotting.figure
    """
    titles = {"primary": ("Differential gain", "magnitude [dB]"),
              "phase": ("Differential gain phase", "phase [deg]"),
              "cmrr_se": ("CMRR single-ended", "CMRR [dB]")}
    if quantity not in titles:
        raise ValueError(f"quantity = {quantity!r}: expected one of {sorted(titles)}")
    if f_hz is None:
        lo = min(a.design.sweep.start for a in analyses)
        hi = max(a.design.sweep.stop for a in analyses)
        f_hz = np.logspace(np.log10(lo), np.log10(hi), int(np.log10(hi / lo) * 50) + 1)
    labels = labels or [a.design.name or f"design {i + 1}" for i, a in enumerate(analyses)]
    fig = _new_figure(*titles[quantity])
    for i, (a, label) in enumerate(zip(analyses, labels)):
        colour = PALETTE[i % len(PALETTE)]
        if quantity == "cmrr_se":
            cols = curve_columns(a, ["adm_se", "acm_se"], f_hz)
            if "acm_se_db" not in cols:
                continue
            y = cols["adm_se_db"] - cols["acm_se_db"]
        else:
            cols = curve_columns(a, [a.primary], f_hz)
            key = f"{a.primary}_{'deg' if quantity == 'phase' else 'db'}"
            if key not in cols:
                continue
            y = cols[key]
        _line(fig, cols["frequency_hz"], y, colour, f"{i + 1}: {label}")
    if not fig.renderers:
        from bokeh.models import Label
        fig.add_layout(Label(x=10, y=10, x_units="screen", y_units="screen",
                             text="infinite for every design (zero common-mode gain)"))
        fig.scatter([float(f_hz[0])], [0.0], alpha=0)   # keeps the axes drawable
    _legend(fig)
    return fig
