"""Bokeh figures for reports: Bode magnitude/phase, CMRR, and overlays of several designs.

The Bode and CMRR figures are the explorer's own (:mod:`freqpair.views.plots`), fed
from an analysis instead of the app's data sources, in the same colours.
Every builder returns plain Bokeh objects (``figure``) that the caller may
restyle (titles, sizes, colours, ranges) before showing or embedding them.
Bokeh is imported inside the functions, so importing this module costs
nothing and the computation core never depends on it.
"""
from __future__ import annotations

import numpy as np

from freqpair.analysis.crossings import db
from freqpair.views.plots import CYCLE
from freqpair.analysis.responses import GAIN_NAMES, RESPONSE_NAMES

__all__ = ["PALETTE", "bode_figures", "cmrr_figure", "overlay_figure", "response_label",
           "curve_columns"]

#: freqpair's plot colours, cycled one per design (the scheme of :mod:`freqpair.views.plots`).
PALETTE = list(CYCLE)

_SHORT = {"adm": "A_dm (balanced)", "adm_se": "A_dm,se (o2)", "acm_se": "A_cm,se (o2)",
          "acm_dm": "A_cm-dm (balanced)", "acm_cm": "A_cm-cm", "a_total": "A_total",
          "acm_total": "A_cm,total", "a_vpos": "A_vpos (V+ → output)",
          "a_vneg": "A_vneg (V− → output)"}


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
    from freqpair.circuit.frequency import FrequencyGrid
    grid = FrequencyGrid(f_hz) if f_hz is not None else None
    r = analysis.curves(grid)
    names = names or list(GAIN_NAMES)
    cols = {"frequency_hz": r.f_hz}
    for n in names:
        v = r.get(n)
        if v is None or not np.any(np.abs(v) > 0):
            continue
        from freqpair.views.export import zero_to_rounding
        zero = zero_to_rounding(analysis, v)
        mag = np.where(zero, np.nan, db(v))
        if not np.any(np.isfinite(mag)):
            continue
        cols[f"{n}_db"] = _finite(mag)
        cols[f"{n}_deg"] = _finite(np.where(zero, np.nan, np.degrees(np.unwrap(np.angle(v)))))
    return cols


def _source(cols: dict):
    """A ColumnDataSource with the column names of :mod:`freqpair.views.plots` (``f_hz``, ...)."""
    from bokeh.models import ColumnDataSource
    data = {("f_hz" if k == "frequency_hz" else k): np.asarray(v, dtype=float)
            for k, v in cols.items()}
    return ColumnDataSource(data)


def _line(fig, x, y, colour, label, dash="solid"):
    from bokeh.models import ColumnDataSource
    src = ColumnDataSource({"f_hz": np.asarray(x, dtype=float), "y": np.asarray(y, dtype=float)})
    return fig.line("f_hz", "y", source=src, line_color=colour, line_width=2, line_dash=dash,
                    legend_label=label, name=label)


def _legend(fig):
    from freqpair.views.plots import style_figure
    style_figure(fig)      # legend look (the figure had no legend when first styled)
    if fig.legend:
        fig.legend.location = "bottom_left"


def bode_figures(analysis, names=None, f_hz=None):
    """Magnitude and phase of the stage's gains (shared frequency axis).

    Built with :func:`freqpair.views.plots.bode_figure`, the explorer's own figure.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    names : list of str, optional
        Gains to draw (default: all that exist and are not identically zero).
    f_hz : array_like, optional
        Frequencies [Hz] (default: the design's sweep).

    Returns
    -------
    (bokeh.plotting.figure, bokeh.plotting.figure)
        Magnitude [dB] and phase [deg] figures; f_3dB and the unity-gain
        frequency are marked on the magnitude figure. Line renderers are named
        after the gains (``"adm"``, ``"acm_se"``, ...).
    """
    from freqpair.views.plots import PALETTE, bode_figure, mark_frequency
    cols = curve_columns(analysis, names, f_hz)
    series = [(k[:-3], response_label(k[:-3])) for k in cols if k.endswith("_db")]
    source = _source(cols)
    mag = bode_figure(source, "magnitude", series=series, title="Gain magnitude", height=300)
    ph = bode_figure(source, "phase", series=series, title="Gain phase (unwrapped)",
                     x_range=mag.x_range, height=240)
    mark_frequency(mag, analysis.f3db_hz, "f_3dB", PALETTE["ink"])
    mark_frequency(mag, analysis.ugf_hz, "unity gain", PALETTE["pinned"])
    return mag, ph


def cmrr_figure(analysis, f_hz=None):
    """CMRR versus frequency [dB], single-ended and (when defined) balanced.

    Built with :func:`freqpair.views.plots.cmrr_figure`; the CMRR corner is marked.

    Returns
    -------
    bokeh.plotting.figure or None
        None when the common-mode gain is zero everywhere (CMRR infinite).
    """
    from bokeh.models import ColumnDataSource

    from freqpair.views.plots import cmrr_figure as plot_cmrr
    cols = curve_columns(analysis, ["adm", "adm_se", "acm_se", "acm_dm"], f_hz)
    f = cols["frequency_hz"]
    nan = np.full(f.shape, np.nan)
    se = "adm_se_db" in cols and "acm_se_db" in cols
    bal = "adm_db" in cols and "acm_dm_db" in cols
    if not (se or bal):
        return None
    data = {"f_hz": f,
            "cmrr_se_db": cols["adm_se_db"] - cols["acm_se_db"] if se else nan,
            "cmrr_db": cols["adm_db"] - cols["acm_dm_db"] if bal else nan}
    corner = {"f_hz": [], "cmrr_db": []}
    fc = analysis.cmrr_corner_hz
    if fc is not None:
        r = analysis.responses.at([fc])
        corner = {"f_hz": [fc], "cmrr_db": [float(db(r.adm_se[0]) - db(r.acm_se[0]))]}
    fig = plot_cmrr(ColumnDataSource(data), ColumnDataSource(corner), balanced=bal,
                    title="Common-mode rejection", height=300)
    if not se:
        fig.select(name="cmrr_se")[0].visible = False
    return fig


def _loop_curve(a, f, what):
    from freqpair.analysis.loop import loop_curves
    lc = loop_curves(a, f)
    if lc is None:
        return None
    if what == "loop":
        return db(lc.loop_gain)
    if what == "loop_phase":
        return lc.loop_phase_deg
    return db(lc.closed_loop)


def _psrr_curve(a, f, rail):
    from freqpair.analysis.supply import psrr_db, single_ended_name
    y = psrr_db(a.responses.at(f), rail, single_ended_name(a.responses))
    return np.where(np.isfinite(y), y, np.nan)


def _noise_curve(a, f):
    from freqpair.analysis.noise import noise_curves
    return noise_curves(a.responses, f).input_v_rthz * 1e9


#: quantities computed per design on the shared frequencies (None: the design lacks it)
_EXTRA_QUANTITIES = {
    "loop": lambda a, f: _loop_curve(a, f, "loop"),
    "loop_phase": lambda a, f: _loop_curve(a, f, "loop_phase"),
    "closed": lambda a, f: _loop_curve(a, f, "closed"),
    "psrr_pos": lambda a, f: _psrr_curve(a, f, "vpos"),
    "psrr_neg": lambda a, f: _psrr_curve(a, f, "vneg"),
    "noise": _noise_curve,
}


def overlay_figure(analyses, quantity: str = "primary", labels=None, f_hz=None):
    """One curve per design on a shared axis, for comparisons.

    Parameters
    ----------
    analyses : list of Analysis
    quantity : {"primary", "cmrr_se", "phase", "loop", "loop_phase", "closed", "psrr_pos",
                "psrr_neg", "noise"}
        "primary": each design's main differential gain [dB]; "phase": its
        phase [deg]; "cmrr_se": single-ended CMRR [dB]; "loop", "loop_phase",
        "closed": loop gain [dB], its continuous phase [deg] and the closed loop
        [dB] (designs with [feedback]); "psrr_pos"/"psrr_neg" [dB]; "noise":
        input-referred density [nV/√Hz].
    labels : list of str, optional
        Legend entries (default: design names).
    f_hz : array_like, optional
        Common frequencies [Hz] (default: the union of the designs' sweeps).

    Returns
    -------
    bokeh.plotting.figure
    """
    from bokeh.models import HoverTool

    from freqpair.views.plots import eng_formatter, freq_figure
    titles = {"primary": ("Differential gain", "magnitude [dB]"),
              "phase": ("Differential gain phase", "phase [deg]"),
              "cmrr_se": ("CMRR single-ended", "CMRR [dB]"),
              "loop": ("Loop gain |T|", "magnitude [dB]"),
              "loop_phase": ("Loop gain phase", "phase [deg]"),
              "closed": ("Closed-loop gain", "magnitude [dB]"),
              "psrr_pos": ("PSRR+ (positive rail)", "PSRR [dB]"),
              "psrr_neg": ("PSRR− (negative rail)", "PSRR [dB]"),
              "noise": ("Input-referred noise density", "e_n [nV/√Hz]")}
    if quantity not in titles:
        raise ValueError(f"quantity = {quantity!r}: expected one of {sorted(titles)}")
    if f_hz is None:
        lo = min(a.design.sweep.start for a in analyses)
        hi = max(a.design.sweep.stop for a in analyses)
        f_hz = np.logspace(np.log10(lo), np.log10(hi), int(np.log10(hi / lo) * 50) + 1)
    labels = labels or [a.design.name or f"design {i + 1}" for i, a in enumerate(analyses)]
    fig = freq_figure(*titles[quantity], height=300)
    for i, (a, label) in enumerate(zip(analyses, labels)):
        colour = PALETTE[i % len(PALETTE)]
        if quantity in _EXTRA_QUANTITIES:
            y = _EXTRA_QUANTITIES[quantity](a, np.asarray(f_hz, dtype=float))
            if y is None:
                continue
            cols = {"frequency_hz": np.asarray(f_hz, dtype=float)}
        elif quantity == "cmrr_se":
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
    unit = {"phase": "°", "loop_phase": "°", "noise": " nV/√Hz"}.get(quantity, " dB")
    fig.add_tools(HoverTool(tooltips=[("design", "$name"), ("frequency", "@f_hz{eng}"),
                                      ("value", "@y{0.00}" + unit)],
                            formatters={"@f_hz": eng_formatter("Hz")}))
    if not fig.renderers:
        from bokeh.models import Label
        fig.add_layout(Label(x=10, y=10, x_units="screen", y_units="screen",
                             text="infinite for every design (zero common-mode gain)"))
        fig.scatter([float(f_hz[0])], [0.0], alpha=0)   # keeps the axes drawable
    _legend(fig)
    return fig
