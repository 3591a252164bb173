"""Pole paths on the explorer's pole-zero map (DESIGN.md §7i).

While the Poles & zeros view is open, the map also draws the path of every
pole and zero of the plotted gain as the value the user touched last (a text
box or a slider, :attr:`freqpair.app.view.Explorer.touched`) moves over its
slider's range in :data:`PATH_STEPS` steps (log spacing for a log slider), from
:func:`freqpair.views.stage_data.locus_view` — the report's pole paths. The
design on screen stays highlighted by the map's own markers; hovering a path
step shows the value there. Steps where the design cannot be analysed (e.g.
an infeasible bias) are left out and counted in the caption.
"""
from __future__ import annotations

import dataclasses

import numpy as np

__all__ = ["PolePaths", "PATH_STEPS", "TOUCH_HINT", "path_values"]

#: Values per path.
PATH_STEPS = 25
#: What the caption says before any value was touched.
TOUCH_HINT = "touch a value to see its pole paths"

_LINES = ("xs", "ys", "kind")
_POINTS = ("x", "y", "kind", "value", "value_text")


def path_values(ev, steps: int = PATH_STEPS) -> np.ndarray:
    """The values [SI] a path runs over: ``ev``'s slider range in ``steps`` steps.

    Parameters
    ----------
    ev : freqpair.views.explore.EditableValue
    steps : int

    Returns
    -------
    ndarray
        Log-spaced for a log slider (its range is in decades), evenly spaced
        otherwise; whole numbers (without repeats) for a count.
    """
    if ev.scale == "log":
        return 10.0 ** np.linspace(ev.slider_lo, ev.slider_hi, steps)
    values = np.linspace(ev.slider_lo, ev.slider_hi, steps)
    if ev.scale == "int":
        values = np.unique(np.round(values))
    return values


def _value_text(ev, v: float) -> str:
    return dataclasses.replace(ev, value=float(v)).text


class PolePaths:
    """The path layer of the pole-zero map and its caption.

    Attributes
    ----------
    lines : ColumnDataSource
        One multi-line per path (``xs``, ``ys``, ``kind``).
    points : ColumnDataSource
        Every step's roots: ``x`` (|Re|/2π), ``y`` (Im/2π), ``kind``, ``value``
        (the key's value [SI]) and ``value_text`` (as the text box writes it).
    caption : Div
        The key and range, or :data:`TOUCH_HINT`.
    key : str or None
        The key the paths on screen follow; ``values`` its values (None before).
    computed : int
        How many times the paths were computed (for tests of the lazy contract).
    """

    def __init__(self):
        from bokeh.models import ColumnDataSource, Div
        self.lines = ColumnDataSource({c: [] for c in _LINES}, name="path_lines")
        self.points = ColumnDataSource({c: [] for c in _POINTS}, name="path_points")
        self.caption = Div(name="paths_caption", text=_caption(TOUCH_HINT),
                           sizing_mode="stretch_width")
        self.key = None
        self.values = None
        self.computed = 0
        self._hover = None

    def attach(self, fig) -> None:
        """Draw the paths on ``fig`` (the pole-zero map), beneath its own markers."""
        from bokeh.models import HoverTool
        from bokeh.transform import factor_cmap

        from freqpair.views.plots import PALETTE, eng_formatter
        cmap = factor_cmap("kind", [PALETTE["adm"], PALETTE["acm_se"]], ["pole", "zero"])
        lines = fig.multi_line("xs", "ys", source=self.lines, line_color=cmap, line_alpha=0.45,
                               line_width=2, name="pole_paths")
        steps = fig.scatter("x", "y", source=self.points, size=5, color=cmap, alpha=0.55,
                            name="path_steps")
        fig.renderers = [lines, steps] + [r for r in fig.renderers if r not in (lines, steps)]
        self._hover = HoverTool(renderers=[steps], name="path_hover",
                                formatters={"@x": eng_formatter("Hz"), "@y": eng_formatter("Hz")},
                                tooltips=_tooltips("value"))
        fig.add_tools(self._hover)

    def clear(self, text: str = TOUCH_HINT) -> None:
        """No paths; the caption says ``text``."""
        if len(self.points.data["x"]) or len(self.lines.data["xs"]):
            self.lines.data = {c: [] for c in _LINES}
            self.points.data = {c: [] for c in _POINTS}
        self.key = self.values = None
        self.caption.text = _caption(text)

    def show(self, explorer) -> None:
        """Compute and draw the paths of ``explorer.touched`` around the design on screen."""
        from freqpair.views.explore import editable_values
        from freqpair.views.stage_data import locus_view
        key = explorer.touched
        ev = next((e for e in editable_values(explorer.design) if e.key == key), None)
        if ev is None:
            self.clear()
            return
        self.computed += 1
        slider = explorer.sliders.get(key)
        if slider is not None:          # the range the user sees on the slider
            ev = dataclasses.replace(ev, slider_lo=float(slider.start),
                                     slider_hi=float(slider.end))
        values = path_values(ev)
        view = locus_view(explorer.design, key, values)
        points = dict(view["points"])
        points["value_text"] = [_value_text(ev, v) for v in points["value"]]
        self.lines.data = dict(view["paths"])
        self.points.data = points
        self.key, self.values = key, values
        skipped = len(view["locus"].errors)
        text = (f"paths: {_words(ev)} from {_value_text(ev, values[0])} to "
                f"{_value_text(ev, values[-1])}, {len(values)} steps")
        if skipped:
            text += f" ({skipped} left out: the design cannot be analysed there)"
        self.caption.text = _caption(text + " — hover a step for its value")
        tips = _tooltips(_words(ev))
        if self._hover is not None and self._hover.tooltips != tips:
            self._hover.tooltips = tips


def _tooltips(label: str) -> list:
    return [("", "@kind path"), (label, "@value_text"), ("|re|/2π", "@x{eng}"),
            ("im/2π", "@y{eng}")]


def _caption(text: str) -> str:
    safe = str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return f"<span style='font-family:sans-serif;font-size:13px'>{safe}</span>"


def _words(ev) -> str:
    """The value's plain words (``"second stage miller capacitance"``)."""
    return ev.label.replace(".", " ")
