"""The explorer's "Supply" view: PSRR± with corners and a target, and the input impedance.

Every number comes from :func:`freqpair.views.stage_data.supply_view` and
:func:`~freqpair.views.stage_data.input_view` (the HTML report draws the same
columns with the same figures); this module only copies them into its data
sources and writes the readout under the plots. The panel follows the
:meth:`freqpair.app.view.Explorer.add_panel` contract: it is computed only
while its tab is shown.
"""
from __future__ import annotations

import numpy as np

from freqpair.analysis.summary import format_metric
from freqpair.design.errors import FreqpairError
from freqpair.design.quantities import format_si
from freqpair.app.pinned import NO_PINS, PinnedCurves
from freqpair.views.explore import parse_target_db

__all__ = ["SupplyPanel", "supply_readout"]

_MARKS = ("corner_pos", "corner_neg", "target_pos", "target_neg")
_PSRR_COLUMNS = ("f_hz", "psrr_pos_db", "psrr_neg_db", "a_vpos_db", "a_vneg_db")
_ZIN_COLUMNS = ("f_hz", "zin_dm_ohm", "zin_cm_ohm", "zin_dm_deg", "zin_cm_deg")
_SIGN = {"pos": "+", "neg": "−"}


def _crossing_text(view: dict, sign: str, target_db: float) -> str:
    """Where PSRR± falls to the target, as the mark writes it (or why there is no mark)."""
    mark = view["marks"][f"target_{sign}"]
    if mark["text"]:
        return mark["text"][0].removeprefix("falls to target at ")
    level = getattr(view["result"], f"psrr_{sign}_db")
    if level is None:
        return "never (the rail does not reach the output)"
    if level <= target_db:
        return "already below at DC"
    return "not within the search range"


def supply_readout(supply: dict, zin: dict, target_db: float) -> dict:
    """The words of the readout under the Supply plots.

    Parameters
    ----------
    supply : dict
        A :func:`~freqpair.views.stage_data.supply_view` result.
    zin : dict
        An :func:`~freqpair.views.stage_data.input_view` result.
    target_db : float
        The PSRR target [dB].

    Returns
    -------
    dict
        ``psrr_pos``/``psrr_neg``: (DC text, corner text, target-crossing
        text), numbers formatted as the JSON values are everywhere
        (:func:`freqpair.analysis.summary.format_metric`, the marks' texts);
        ``zin``: (Z_in,dm text, Z_in,cm text, DM corner text).
    """
    s = supply["result"]
    out = {}
    for sign in ("pos", "neg"):
        level = getattr(s, f"psrr_{sign}_db")
        corner = getattr(s, f"psrr_{sign}_corner_hz")
        dc = ("∞ (the rail does not reach the output)" if level is None
              else format_metric(f"psrr_{sign}_db", level))
        corner_text = ("— (does not fall 3 dB)" if corner is None
                       else format_si(corner, "Hz"))
        out[f"psrr_{sign}"] = (dc, corner_text, _crossing_text(supply, sign, target_db))
    z = zin["result"]
    inf = "∞ (no DC input current)"
    out["zin"] = (inf if z.zin_dm_ohm is None else format_si(z.zin_dm_ohm, "Ω"),
                  inf if z.zin_cm_ohm is None else format_si(z.zin_cm_ohm, "Ω"),
                  "—" if z.zin_dm_corner_hz is None else format_si(z.zin_dm_corner_hz, "Hz"))
    return out


def _html(text: str) -> str:
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _pinned_psrr(design) -> dict:
    """A pinned design's PSRR± on its own explorer grid."""
    from freqpair.analysis.result import analyze
    from freqpair.app.limits import N_POINTS
    from freqpair.views.explore import explore_grid
    from freqpair.views.stage_data import supply_view
    return {"psrr_pin": supply_view(analyze(design), explore_grid(design, N_POINTS))["curves"]}


class SupplyPanel:
    """PSRR+ and PSRR− against frequency (corners and the target crossings marked), the
    input impedance |Z_in,dm|, |Z_in,cm| (DM corner marked) and a readout of the numbers.

    Attributes
    ----------
    title : str
        The tab's words.
    computed : int
        How many times the view was computed (the explorer computes it only
        while it is shown).
    target_db : float
        The last accepted PSRR target [dB].
    readout : dict
        The last :func:`supply_readout` shown.
    """

    title = "Supply"

    def __init__(self):
        from bokeh.models import ColumnDataSource, Div, TextInput
        self.computed = 0
        self.target_db = 60.0
        self.readout = None
        self._explorer = None
        self.psrr = ColumnDataSource({c: [] for c in _PSRR_COLUMNS}, name="psrr_source")
        self.marks = {k: ColumnDataSource({"x": [], "y": [], "text": []}, name=f"psrr_{k}_source")
                      for k in _MARKS}
        self.target_line = ColumnDataSource({"f_hz": [], "y": []}, name="psrr_target_line")
        self.zin = ColumnDataSource({c: [] for c in _ZIN_COLUMNS}, name="zin_source")
        self.zin_marks = {"corner": ColumnDataSource({"x": [], "y": [], "text": []},
                                                     name="zin_corner_source")}
        self.target_input = TextInput(name="psrr_target_input", title="PSRR target [dB]",
                                      value="60", width=120)
        self.target_input.on_change("value", lambda a, o, n: self._target_changed(n))
        self.readout_div = Div(name="supply_readout", text="", width=760)
        self.pinned = PinnedCurves({"psrr_pin": ("f_hz", "psrr_pos_db", "psrr_neg_db")},
                                   _pinned_psrr)
        self._figures = ()
        self._layout = None

    # ------------------------------------------------------------- contract
    def layout(self):
        """The tab's content (built once): PSRR plot, Z_in plot, then the target box
        and the readout."""
        if self._layout is not None:
            return self._layout
        from bokeh.layouts import column, row

        from freqpair.views.stage_plots import input_impedance_figure, psrr_figure
        psrr = psrr_figure(self.psrr, self.marks, target_line=self.target_line, height=235,
                           pinned=self.pinned.sources)
        psrr.name = "psrr_figure"
        self._figures = (psrr,)
        self.pinned.show(NO_PINS, self._figures)       # no pin yet: legend items hidden
        zin = input_impedance_figure(self.zin, self.zin_marks, x_range=psrr.x_range,
                                     height=185)
        zin.name = "zin_figure"
        # the readout beside the target box, under the plots (all of it within 1366×768)
        self._layout = column(psrr, zin, row(self.target_input, self.readout_div),
                              sizing_mode="stretch_width")
        return self._layout

    def show(self, explorer) -> None:
        """Compute the view for the explorer's design on screen and show it.

        An error leaves the sources as they were (the explorer says it in one
        line: :meth:`freqpair.app.view.Explorer.show_panel`).
        """
        from freqpair.views.stage_data import input_view, supply_view
        self._explorer = explorer
        f = np.asarray(explorer.curves.data["f_hz"], dtype=float)
        supply = supply_view(explorer.analysis, f, self.target_db)
        zin = input_view(explorer.analysis, f)
        readout = supply_readout(supply, zin, self.target_db)
        self.computed += 1
        self.psrr.data = {k: np.asarray(v, dtype=float) for k, v in supply["curves"].items()}
        for k in _MARKS:
            self.marks[k].data = dict(supply["marks"][k])
        self.target_line.data = {"f_hz": [float(f[0]), float(f[-1])],
                                 "y": [self.target_db, self.target_db]}
        self.zin.data = {k: np.asarray(v, dtype=float) for k, v in zin["curves"].items()}
        self.zin_marks["corner"].data = dict(zin["marks"]["corner"])
        self.readout = readout
        self.readout_div.text = self._readout_html(readout)
        self.pinned.show(explorer, self._figures)      # pinned designs' PSRR±, muted

    # ------------------------------------------------------------- helpers
    def _readout_html(self, r: dict) -> str:
        t = f"{self.target_db:g} dB"
        lines = []
        for sign in ("pos", "neg"):
            dc, corner, cross = r[f"psrr_{sign}"]
            where = (f"falls to {t} at {_html(cross)}" if cross.endswith("Hz")
                     else f"{t} target: {_html(cross)}")
            lines.append(f"<b>PSRR{_SIGN[sign]}</b> at DC {_html(dc)} · corner {_html(corner)}"
                         f" · {where}")
        dm, cm, corner = r["zin"]
        lines.append(f"<b>Z_in</b> differential {_html(dm)} · common-mode {_html(cm)} · "
                     f"differential corner {_html(corner)}")
        return ("<div style='font-family:sans-serif;font-size:13px;line-height:1.45'>"
                + "<br>".join(lines) + "<br><small>The rails driven one at a time (inputs "
                "at 0), seen at the single-ended output: PSRR = |A_se/A_rail|; the triangles "
                "mark where each PSRR falls to the target.</small></div>")

    def _target_changed(self, text: str) -> None:
        say = self._explorer._say if self._explorer is not None else None
        try:
            value = parse_target_db(text, "PSRR target")
        except FreqpairError as exc:
            if say is not None:
                say(f"{exc} — kept the last good result", bad=True)
            return
        old = self.target_db
        self.target_db = value
        if self._explorer is None or self._explorer.analysis is None:
            return            # shown (and computed) when the tab opens
        doc = self._explorer.doc
        doc.hold("combine")
        try:
            shown = self._explorer.show_panel(self)
        finally:
            doc.unhold()
        if not shown:
            self.target_db = old
            return
        say(f"PSRR target {value:g} dB", bad=False)
