"""The explorer's "Noise" view: e_n(f), who contributes at a chosen frequency, band rms.

Every number comes from :func:`freqpair.views.stage_data.noise_view` (the HTML
report draws the same columns); this module copies them into its data
sources. The panel follows the :meth:`freqpair.app.view.Explorer.add_panel`
contract: it is computed only while its tab is shown.
"""
from __future__ import annotations

import numpy as np

from freqpair.design.errors import DesignError, FreqpairError
from freqpair.design.quantities import format_si, parse_si
from freqpair.app.redraw import redraw_on_new_data
from freqpair.app.pinned import NO_PINS, PinnedCurves

__all__ = ["NoisePanel", "parse_frequency", "noise_readout", "CONTRIBUTOR_COLUMNS"]

#: Columns of the contributors' table source (texts shown, numbers beside them).
CONTRIBUTOR_COLUMNS = ("name", "share", "density", "share_pct", "density_v_rthz")


def parse_frequency(text: str, what: str = "noise at") -> float:
    """A frequency typed as ``"1 kHz"`` or ``"1000"`` [Hz], > 0.

    Raises
    ------
    DesignError
        One line naming the field and the value.
    """
    try:
        value = parse_si(str(text).strip(), field=what, unit="hertz")
    except ValueError as exc:
        raise DesignError(str(exc)) from None
    if not (value > 0 and np.isfinite(value)):
        raise DesignError(f"{what} = {text!r}: must be greater than 0")
    return value


def noise_readout(view: dict) -> dict:
    """The words of the readout beside the noise plot.

    Parameters
    ----------
    view : dict
        A :func:`~freqpair.views.stage_data.noise_view` result.

    Returns
    -------
    dict
        ``spot`` (e_n at the chosen frequency), ``at`` (that frequency),
        ``band`` ("10 Hz … 100 kHz"), ``input_rms``, ``output_rms``: texts in
        engineering notation (:func:`freqpair.design.quantities.format_si`).
    """
    res = view["result"]
    lo, hi = res.band_hz
    spot = view["marks"]["spot"]
    en = spot["y"][0] if spot["y"] else None
    return {"spot": format_si(en, "V/√Hz"), "at": format_si(view["at_hz"], "Hz"),
            "band": f"{format_si(lo, 'Hz')} … {format_si(hi, 'Hz')}",
            "input_rms": format_si(res.input_rms_v, "V"),
            "output_rms": format_si(res.output_rms_v, "V")}


def _html(text: str) -> str:
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _pinned_density(design) -> dict:
    """A pinned design's input-referred density on its own explorer grid."""
    from freqpair.analysis.noise import noise_curves
    from freqpair.analysis.result import analyze
    from freqpair.app.limits import N_POINTS
    from freqpair.views.explore import explore_grid
    f = explore_grid(design, N_POINTS)
    return {"noise_pin": {"f_hz": f,
                          "en_v_rthz": noise_curves(analyze(design).responses, f).input_v_rthz}}


class NoisePanel:
    """Input-referred noise density with a spot mark at a chosen frequency, the
    contributors there and the band's rms.

    Attributes
    ----------
    title : str
        The tab's words.
    computed : int
        How many times the view was computed (only while it is shown).
    at_hz : float or None
        The frequency the user chose [Hz]; None: the design's first noise spot.
    view : dict
        The last :func:`~freqpair.views.stage_data.noise_view` result shown.
    """

    title = "Noise"

    def __init__(self):
        from bokeh.models import ColumnDataSource, DataTable, Div, TableColumn, TextInput
        self.computed = 0
        self.at_hz = None
        self.view = None
        self.readout = None
        self._explorer = None
        self._shown_at = None     # the text the box was given by show()
        self.curves = ColumnDataSource({"f_hz": [], "en_v_rthz": [], "out_v_rthz": []},
                                       name="noise_source")
        self.marks = {"spot": ColumnDataSource({"x": [], "y": [], "text": []},
                                               name="noise_spot_source")}
        self.contributors = ColumnDataSource({c: [] for c in CONTRIBUTOR_COLUMNS},
                                             name="noise_contributors")
        self.at_input = TextInput(name="noise_at", title="at [Hz]", value="", width=110)
        self.at_input.on_change("value", lambda a, o, n: self._at_changed(n))
        self.table = DataTable(source=self.contributors, name="noise_table",
                               index_position=None, width=430, height=250,
                               columns=[TableColumn(field="name", title="source", width=170),
                                        TableColumn(field="share", title="share of the power",
                                                    width=120),
                                        TableColumn(field="density", title="its part of e_n",
                                                    width=130)])
        redraw_on_new_data(self.table)
        self.readout_div = Div(name="noise_readout", text="", width=460)
        self.pinned = PinnedCurves({"noise_pin": ("f_hz", "en_v_rthz")}, _pinned_density)
        self._figures = ()
        self._layout = None

    # ------------------------------------------------------------- contract
    def layout(self):
        """The tab's content (built once): the e_n plot, then the frequency box, the
        readout and the contributors' table side by side."""
        if self._layout is not None:
            return self._layout
        from bokeh.layouts import column, row
        from bokeh.models import Div

        from freqpair.analysis.noise import NOISE_CAUTION
        from freqpair.views.stage_plots import noise_figure
        fig = noise_figure(self.curves, self.marks, height=280, pinned=self.pinned.sources)
        fig.name = "noise_figure"
        self._figures = (fig,)
        self.pinned.show(NO_PINS, self._figures)       # no pin yet: legend items hidden
        caution = Div(text=f"<small>{_html(NOISE_CAUTION)}</small>", width=460)
        left = column(row(self.at_input, Div(text="<small>Type a frequency like "
                                                  "<code>1 kHz</code>, press Enter: the "
                                                  "mark and the table move there.</small>",
                                             width=300)),
                      self.readout_div, caution)
        self._layout = column(fig, row(left, self.table), sizing_mode="stretch_width")
        return self._layout

    def show(self, explorer) -> None:
        """Compute the view for the explorer's design on screen and show it.

        An error leaves the sources as they were (the explorer says it in one
        line: :meth:`freqpair.app.view.Explorer.show_panel`).
        """
        from freqpair.views.stage_data import noise_view
        self._explorer = explorer
        f = np.asarray(explorer.curves.data["f_hz"], dtype=float)
        view = noise_view(explorer.analysis, f, self.at_hz)
        readout = noise_readout(view)
        self.computed += 1
        self.view, self.readout = view, readout
        self.curves.data = {k: np.asarray(v, dtype=float) for k, v in view["curves"].items()}
        self.marks["spot"].data = dict(view["marks"]["spot"])
        self.contributors.data = {c: list(view["contributors"][c])
                                  for c in CONTRIBUTOR_COLUMNS}
        self.readout_div.text = self._readout_html(readout)
        self.pinned.show(explorer, self._figures)      # pinned designs' e_n, muted
        if self.at_hz is None:          # the box shows the design's first spot
            self._shown_at = readout["at"]
            self.at_input.value = readout["at"]

    # ------------------------------------------------------------- helpers
    @staticmethod
    def _readout_html(r: dict) -> str:
        return ("<div style='font-family:sans-serif;font-size:13px;line-height:1.5'>"
                f"<b>e_n</b> {_html(r['spot'])} at {_html(r['at'])}<br>"
                f"<b>rms over {_html(r['band'])}</b>: input {_html(r['input_rms'])}, "
                f"output {_html(r['output_rms'])}</div>")

    def _at_changed(self, text: str) -> None:
        # show() writes the first spot into the box; under the document's hold that
        # change reaches this callback later, and it is not the user's choice
        if self.at_hz is None and text == self._shown_at:
            return
        ex = self._explorer
        try:
            value = None if not str(text).strip() else parse_frequency(text)
        except FreqpairError as exc:
            if ex is not None:
                ex._say(f"{exc} — kept the last good result", bad=True)
            return
        old = self.at_hz
        self.at_hz = value
        if ex is None or ex.analysis is None:
            return            # computed when the tab opens
        ex.doc.hold("combine")
        try:
            shown = ex.show_panel(self)
        finally:
            ex.doc.unhold()
        if not shown:
            self.at_hz = old
            return
        ex._say(f"noise at {self.readout['at']}: e_n {self.readout['spot']}", bad=False)
