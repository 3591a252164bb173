"""The explorer's "Loop" view: loop gain, closed loop and step of a design with feedback.

The curves, marks and texts are :func:`freqpair.views.stage_data.loop_view`'s,
drawn by the figures of :mod:`freqpair.views.stage_plots` — the same the HTML
report draws — from the loop numbers the explorer's analysis already holds
(``explorer.data["loop"]``), so the view cannot disagree with the report, the
metrics table or the status line. Pinned designs keep their loop curves (drawn
muted); a readout under the plots repeats the marks' texts as plain text.
"""
from __future__ import annotations

import numpy as np

from freqpair.app.pinned import PinnedCurves, label_pin_legends

__all__ = ["LoopPanel", "NO_LOOP_HINT"]

#: What the view says for a design without ``[feedback]``.
NO_LOOP_HINT = ("set a feedback factor or divider in the Loop tab to see the loop gain, "
                "closed loop and step")

#: The marks in reading order (keys of ``loop_view(...)["marks"]``).
MARK_KEYS = ("crossover", "phase_margin", "gain_margin", "closed_f3db", "peaking",
             "overshoot", "settling")
_CURVES = ("f_hz", "loop_db", "loop_deg", "beta_db", "closed_db")
_STEP = ("t_s", "y", "band_lo", "band_hi")
_PIN_CURVES = ("f_hz", "loop_db", "loop_deg", "closed_db")
_PIN_STEP = ("t_s", "y")
#: Plot height: the four plots and the readout fit a 1366×768 screen.
_PLOT_PX = 212


def _empty(columns) -> dict:
    return {c: np.zeros(0) for c in columns}


def _html(text: str) -> str:
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


class LoopPanel:
    """Loop gain |T| and ∠T with crossover and margins, closed loop with its −3 dB
    point and peaking, and the step with overshoot and the 1 % settling band.

    Attributes
    ----------
    curves, step : ColumnDataSource
        The design on screen (``loop_view`` columns; empty without a loop).
    marks : dict of ColumnDataSource
        One per :data:`MARK_KEYS` (``x``, ``y``, ``text``).
    pinned, pinned_step : list of ColumnDataSource
        One per pin slot: the pinned design's loop curves and step.
    hint, readout : Div
        The no-loop hint and the marks' texts as plain text.
    computed : int
        How many times the view was filled (for tests of the lazy contract).
    """

    title = "Loop"

    def __init__(self):
        from bokeh.models import ColumnDataSource, Div
        self.curves = ColumnDataSource(_empty(_CURVES), name="loop_curves")
        self.step = ColumnDataSource(_empty(_STEP), name="loop_step")
        self.marks = {k: ColumnDataSource({"x": [], "y": [], "text": []},
                                          name=f"loop_mark:{k}") for k in MARK_KEYS}
        self._pins = PinnedCurves({"loop_pin": _PIN_CURVES, "loop_pin_step": _PIN_STEP},
                                  _pinned_loop)
        self.pinned = self._pins.groups["loop_pin"]
        self.pinned_step = self._pins.groups["loop_pin_step"]
        self.hint = Div(name="loop_hint", text="", sizing_mode="stretch_width")
        self.readout = Div(name="loop_readout", text="", sizing_mode="stretch_width")
        self.figures = ()
        self.computed = 0

    def layout(self):
        """The view's plots: |T| and ∠T on the left, closed loop and step on the right."""
        from bokeh.layouts import column, row

        from freqpair.views.stage_plots import closed_loop_figure, loop_figures, step_figure
        mag, ph = loop_figures(self.curves, self.marks, height=_PLOT_PX, pinned=self.pinned)
        closed = closed_loop_figure(self.curves, self.marks, x_range=mag.x_range, height=_PLOT_PX,
                                    pinned=self.pinned)
        step = step_figure(self.step, self.marks, height=_PLOT_PX, pinned=self.pinned_step)
        mag.name, ph.name = "loop_gain_figure", "loop_phase_figure"
        closed.name, step.name = "closed_loop_figure", "step_figure"
        mag.xaxis.axis_label = None
        self.figures = (mag, ph, closed, step)
        label_pin_legends(self.figures, [])        # no pin yet: legend items hidden
        return column(self.hint,
                      row(column(mag, ph, sizing_mode="stretch_width"),
                          column(closed, step, sizing_mode="stretch_width"),
                          sizing_mode="stretch_width"),
                      self.readout, sizing_mode="stretch_width")

    # ------------------------------------------------------------- filling
    def show(self, explorer) -> None:
        """Fill the sources from ``explorer``'s design, analysis and pins."""
        from freqpair.views.stage_data import loop_view
        from freqpair.design.errors import FreqpairError
        self.computed += 1
        view, hint = None, NO_LOOP_HINT
        if explorer.design.feedback is not None:
            try:
                view = loop_view(explorer.analysis, explorer.data["curves"]["f_hz"],
                                 result=explorer.data["loop"])
            except FreqpairError:
                raise
            except Exception as exc:    # never let a session die on one bad value
                hint = f"the loop could not be computed ({exc.__class__.__name__})"
                explorer._say(f"Loop: {hint}", bad=True)
        if view is None:
            self.curves.data = _empty(_CURVES)
            self.step.data = _empty(_STEP)
            for src in self.marks.values():
                src.data = {"x": [], "y": [], "text": []}
            self.hint.text = _note(hint)
            self.readout.text = ""
        else:
            self.curves.data = {k: view["curves"][k] for k in _CURVES}
            self.step.data = {k: view["step"][k] for k in _STEP}
            for k, src in self.marks.items():
                src.data = dict(view["marks"][k])
            res = view["result"]
            if res is None:
                self.hint.text = _note("no loop numbers: the differential gain is zero")
            elif not res.closed_loop_stable:
                self.hint.text = _note("the closed loop is unstable (right half-plane poles): "
                                       "no step response")
            else:
                self.hint.text = ""
            self.readout.text = _readout(view["marks"])
        self._pins.show(explorer, self.figures)     # pinned designs' loops, muted

    def readout_texts(self) -> list[str]:
        """The marks' texts on screen, in :data:`MARK_KEYS` order (missing ones left out)."""
        return [t for k in MARK_KEYS for t in self.marks[k].data["text"]]


def _pinned_loop(design) -> dict | None:
    """A pinned design's loop curves and step on its own explorer grid (None: no loop)."""
    if design.feedback is None:
        return None
    from freqpair.analysis.result import analyze
    from freqpair.app.limits import N_POINTS
    from freqpair.views.explore import explore_grid
    from freqpair.views.stage_data import loop_view
    view = loop_view(analyze(design), explore_grid(design, N_POINTS))
    return {"loop_pin": view["curves"], "loop_pin_step": view["step"]}


def _note(text: str) -> str:
    return (f"<div style='padding:4px 10px;background:#fbf3df;color:#5b4a1a;"
            f"border-radius:3px;font-family:sans-serif'>{_html(text)}</div>")


def _readout(marks: dict) -> str:
    """The marks' texts as one line of plain text (what the plots label)."""
    texts = [t for k in MARK_KEYS for t in marks[k]["text"]]
    if not texts:
        return ""
    items = " · ".join(f"<span>{_html(t)}</span>" for t in texts)
    return f"<div style='font-family:sans-serif;font-size:13px'>{items}</div>"
