"""The explorer's view: widgets, figures and one ``update`` wired to all controls.

All numbers come from :func:`freqpair.views.explore.explore`; this module only
copies them into data sources. :func:`make_doc` builds a whole document (the
directory app's ``main.py`` calls it; tests call it on a fresh Document).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import tomli_w
from bokeh.layouts import column, row
from bokeh.models import (Button, ColumnDataSource, CustomJS, DataTable, Div, FileInput,
                          InlineStyleSheet, Select, Slider, TableColumn, TabPanel, Tabs,
                          TextInput)

from freqpair.design.files import BUILTIN_EXAMPLE, design_from_text, load_design
from freqpair.design.schema import design_to_dict, parse_design
from freqpair.design.keys import replace_value
from freqpair.design.errors import FreqpairError
from freqpair.views.explore import (
    EXPLORE_PARTS,
    KIND_CHOICES,
    EditableValue,
    curves_csv,
    design_difference,
    editable_values,
    explore,
    explore_grid,
    parse_target_db,
    switch_kind,
    with_second_stage,
)
from freqpair.views.plots import (
    GAIN_SERIES,
    PALETTE,
    bode_figure,
    cmrr_figure,
    pole_zero_figure,
    set_cmrr_balanced,
    set_gain_hover,
    set_legend_label,
    show_legend_item,
)
from freqpair.app.measured_panel import MAX_FILE_BYTES, MeasuredPanel, upload_text
from freqpair.app.sources import set_columns
from freqpair.app.limits import MAX_PINS, N_POINTS
from freqpair.app.pinned import label_pin_legends
from freqpair.app.pole_paths import PolePaths
from freqpair.app.redraw import redraw_on_new_data as _redraw_on_new_data
from freqpair.app.structure_controls import StructureControls, structure_key

__all__ = ["make_doc", "Explorer", "MAX_FILE_BYTES", "N_POINTS", "MAX_PINS", "Pin"]

#: Fixed views whose content is computed only while shown: title -> explore() part.
_LAZY_VIEWS = {"Poles & zeros": "poles_zeros", "Numbers": "metrics",
               "Hand estimates": "hand"}

SIDEBAR_PX = 410
#: Index of the Poles & zeros view in the ``views`` tabs (its pole paths are
#: computed only while it is open).
_POLES_VIEW = 2

#: Legend words of the primary gain (``explore(...)["primary"]``).
_PRIMARY_LABEL = {"adm": "differential gain A_dm",
                  "adm_se": "differential gain A_dm,se (o2)",
                  "a_total": "overall gain A_total (second stage out)"}

_SECTIONS = (("Supply & bias", ("supply.", "bias.")), ("Pair", ("pair.",)),
             ("Load", ("load.",)), ("Tail", ("tail.",)),
             ("Loop", ("feedback.", "second_stage.")),
             ("More", ("source.", "mismatch.", "sweep.")))

_DOWNLOAD_JS = """
const d = source.data;
if (!d.text || d.text.length === 0) { return; }
const blob = new Blob([d.text[0]], {type: d.mime[0]});
const url = URL.createObjectURL(blob);
const a = document.createElement("a");
a.href = url; a.download = d.filename[0];
document.body.appendChild(a); a.click(); a.remove();
setTimeout(() => URL.revokeObjectURL(url), 1000);
"""

#: Table heights: the Numbers and Hand estimates views fit a 1366×768 screen (the
#: grid scrolls inside when a design has more rows).
_TABLE_PX = 470
#: Hand-estimate rows hold up to three lines of the wrapped method text.
_HAND_ROW_PX = 42
#: Wrap the hand table's quantity and method cells (the grid's cells do not wrap).
_WRAP_CSS = """
.slick-cell.l0, .slick-cell.l4 { white-space: normal; line-height: 1.15; text-overflow: clip; }
.slick-cell { display: flex; align-items: center; }
"""

#: Repaint a legend after one of its items changes (label or visibility). Bokeh 3.7–3.9
#: rebuild the legend's entries at once, with blank swatch canvases, but paint them
#: only with the plot's next paint; when that came first (the same server message also
#: moved the curves) the legend kept blank swatches (measured in DEVELOPERS.md; 3.10
#: requests the paint itself). The microtask runs after the legend has rebuilt them.
_REPAINT_LEGEND_JS = """
Promise.resolve().then(() => {
  for (const view of Bokeh.index.find(legend)) {
    if (typeof view.request_paint === "function") { view.request_paint(); }
  }
});
"""

_CSS_HEADER = ("background:#1f2a36;color:#fbf8f3;padding:6px 12px;border-radius:4px;"
               "font-family:sans-serif;")


def _empty(columns):
    return {c: [] for c in columns}


def _repaint_legends_on_change(fig) -> None:
    """Make the page repaint ``fig``'s legends whenever one of their items changes."""
    for legend in fig.legend:
        code = CustomJS(args={"legend": legend}, code=_REPAINT_LEGEND_JS)
        for item in legend.items:
            item.js_on_change("label", code)
            item.js_on_change("visible", code)


@dataclass(frozen=True)
class Pin:
    """One pinned snapshot: its number (1, 2, ... since the last clear), the pin
    slot it is drawn in (colour and dash) and the design it shows."""

    number: int
    slot: int
    design: object


class Explorer:
    """State and callbacks of one browser session.

    Parameters
    ----------
    doc : bokeh.document.Document
    design : Design
        The design shown first.
    note : str
        A message shown at start (e.g. why a design file was not used).

    Attributes
    ----------
    design : Design
        The last design that analysed without error (what is on screen).
    data : dict
        The last :func:`~freqpair.views.explore.explore` result on screen.
    touched : str or None
        The design key of the numeric value the user set last (text box or
        slider); the pole-zero map draws its pole paths.
    """

    def __init__(self, doc, design, note: str = ""):
        self.doc = doc
        self.design = design
        self.data = None
        self.analysis = None
        self.panels: list = []    # view panels computed only while shown (see add_panel)
        self._stale: set = set()
        self._stale_parts: set = set(EXPLORE_PARTS)   # tables computed only while shown
        self.touched = None
        self.pole_paths = PolePaths()
        self._paths_stale = True
        self._views = None
        self._syncing = False
        self._downloads = 0
        self.curves = ColumnDataSource(name="curves_source")
        self.pin_sources = [ColumnDataSource(name=f"pin_source:{k}") for k in range(MAX_PINS)]
        self.pins: list[Pin] = []
        self._pin_count = 0
        self._figures = None
        self.corner = ColumnDataSource(_empty(("f_hz", "cmrr_db")), name="corner_source")
        self.target = ColumnDataSource(_empty(("f_hz", "cmrr_db")), name="target_source")
        self.target_line = ColumnDataSource(_empty(("f_hz", "cmrr_db")), name="target_line")
        self.pz = ColumnDataSource(_empty(("kind", "re_hz", "im_hz", "mag_hz", "abs_re_hz",
                                           "half_plane")), name="pz_source")
        self.metrics = ColumnDataSource(_empty(("quantity", "value")), name="metrics_source")
        self.hand = ColumnDataSource(_empty(("quantity", "exact", "approx", "error",
                                             "method")), name="hand_source")
        self.downloads = ColumnDataSource(_empty(("filename", "text", "mime", "n")),
                                          name="downloads")
        self.downloads.js_on_change("data", CustomJS(args={"source": self.downloads},
                                                     code=_DOWNLOAD_JS))
        self.message = Div(name="message", text="", sizing_mode="stretch_width")
        self.header = Div(name="header", sizing_mode="stretch_width")
        self.target_input = TextInput(name="cmrr_target", title="CMRR target [dB]",
                                      value="60", width=120)
        self.target_input.on_change("value", lambda a, o, n: self.apply(self.design))
        self.controls = Tabs(name="controls", tabs=[], width=SIDEBAR_PX)
        self.measured = MeasuredPanel(self._measurement_changed, self._say, SIDEBAR_PX)
        self._files = None
        self._rows: dict = {}        # design key -> (line, text box, slider or None)
        self._loop_fixed = None      # the Loop tab's headings and second-stage button
        self.structure = StructureControls(self)
        self.kind_selects = {}
        self.texts: dict = {}     # design key -> TextInput
        self.sliders: dict = {}   # design key -> Slider
        for section, choices in KIND_CHOICES.items():
            sel = Select(name=f"kind:{section}", title=f"{section} kind",
                         options=list(choices), width=120)
            sel.on_change("value", self._kind_callback(section))
            self.kind_selects[section] = sel
        # first result: fills the sources before the figures are built
        if not self.apply(design):
            self.design = parse_design(design_to_dict(design))
        self._build_controls()
        for src in self.pin_sources:
            src.data = {k: v[:0] for k, v in self.curves.data.items()}
        if note:
            self._say(note, bad=True)
        from freqpair.app.panels import make_panels
        for panel in make_panels():
            self.add_panel(panel)
        doc.title = "freqpair explorer"
        doc.add_root(self._layout())

    # ------------------------------------------------------------- layout
    def _layout(self):
        grid = self.curves
        pins = self.pin_sources
        mag = bode_figure(grid, "magnitude", pinned=pins, height=270)
        phase = bode_figure(grid, "phase", pinned=pins, x_range=mag.x_range, height=210)
        phase.legend.visible = False
        mag.xaxis.axis_label = None
        # the balanced CMRR is always drawn (empty for a stage with one output) so a
        # load switched to resistors shows it; _label_curves shows its legend item
        cmrr = cmrr_figure(grid, self.corner, self.target, self.target_line, pinned=pins,
                           balanced=True, height=480)
        mag.name, phase.name, cmrr.name = "gains_figure", "phase_figure", "cmrr_figure"
        self._figures = (mag, phase, cmrr)
        self._label_curves()
        pz = pole_zero_figure(self.pz, height=460)
        pz.name = "pole_zero_figure"
        self.pole_paths.attach(pz)
        self.measured.add_to(mag, cmrr)
        for fig in (mag, phase, cmrr):
            _repaint_legends_on_change(fig)
        self.measured.show(self.data)
        metrics = DataTable(source=self.metrics, name="metrics_table", index_position=None,
                            columns=[TableColumn(field="quantity", title="quantity", width=290),
                                     TableColumn(field="value", title="value", width=230)],
                            width=520, height=_TABLE_PX)
        hand = DataTable(source=self.hand, name="hand_table", index_position=None,
                         columns=[TableColumn(field="quantity", title="quantity", width=200),
                                  TableColumn(field="exact", title="exact", width=78),
                                  TableColumn(field="approx", title="by hand", width=78),
                                  TableColumn(field="error", title="error", width=62),
                                  TableColumn(field="method", title="method (and where it "
                                                                    "does not hold)", width=482)],
                         width=900, height=_TABLE_PX, row_height=_HAND_ROW_PX,
                         stylesheets=[InlineStyleSheet(css=_WRAP_CSS)])
        for table in (metrics, hand):
            _redraw_on_new_data(table)
        self._views = main = Tabs(name="views", sizing_mode="stretch_width", tabs=[
            TabPanel(title="Gains", child=column(mag, phase, sizing_mode="stretch_width")),
            TabPanel(title="CMRR", child=column(cmrr, sizing_mode="stretch_width")),
            TabPanel(title="Poles & zeros", child=column(self.pole_paths.caption, pz,
                                                         sizing_mode="stretch_width")),
            TabPanel(title="Numbers", child=column(Div(text="<b>Exact results</b>"), metrics)),
            TabPanel(title="Hand estimates", child=column(
                Div(text="<b>Hand estimates beside the exact values</b> <small>(textbook "
                         "formulas; the method column says where one does not hold)</small>"),
                hand)),
        ])
        self._fixed_views = len(main.tabs)
        # a panel's figures join the page when its view is first opened: until then
        # every message to the page walks a document half the size (_show_panel)
        self._built = set()
        for panel in self.panels:
            main.tabs.append(TabPanel(title=panel.title, child=Div(text="")))
        main.on_change("active", lambda a, o, n: self._view_opened(n))
        sidebar = column(
            row(*self.kind_selects.values()),
            row(self.target_input, Div(text="<small>Type values like <code>4.7 pF</code>, "
                                       "press Enter; sliders act on release.</small>",
                                       width=260)),
            self.controls,
            width=SIDEBAR_PX)
        return column(self.header, self.message, row(sidebar, main, sizing_mode="stretch_width"),
                      sizing_mode="stretch_width", styles={"background": "#f3efe7",
                                                           "padding": "6px"})

    def _files_block(self):
        """Pins, downloads, the design loader and the measurement overlay (the "Files" tab)."""
        pin = Button(label="Pin curves", name="pin", width=92, button_type="primary")
        pin.on_click(self.pin)
        unpin = Button(label="Clear pins", name="clear_pins", width=92)
        unpin.on_click(self.clear_pins)
        save = Button(label="Save design", name="save_design", width=92)
        save.on_click(self.save_design)
        csv = Button(label="Curves CSV", name="save_csv", width=92)
        csv.on_click(self.save_csv)
        upload = FileInput(name="file", accept=".toml", width=SIDEBAR_PX - 20)
        upload.on_change("value", lambda a, o, n: self.load_file(n, upload.filename))
        return column(
            Div(text="<b>Compare and files</b>"),
            row(pin, unpin, save, csv),
            Div(text=f"<small>Load a design file (TOML, up to {MAX_FILE_BYTES // 1024} kB):"
                     "</small>"),
            upload,
            Div(text="<b>Measurement against the model</b>"),
            self.measured.widgets())

    # ------------------------------------------------------------- controls
    def _build_controls(self):
        """(Re)build the value controls from the current design.

        A value's line (label, box, slider) is made once per session and kept
        in its tab's column, hidden while the design lacks the key (another kind,
        no loop). A rebuild then only flips lines' visibility; the column's
        children change only when a key is seen for the first time. Changing a
        layout's children makes the server re-walk the whole document (≈ 80 ms
        for this one) and send new models; a whole new sidebar cost ≈ 0.4 s of
        server time per kind switch.
        """
        values = editable_values(self.design)
        self.texts, self.sliders = {}, {}
        columns = []
        for title, prefixes in _SECTIONS:
            rows = [self._value_row(ev) for ev in values if ev.key.startswith(prefixes)]
            if title == "Loop":
                rows = self._loop_rows(rows)
            elif title == "Pair":
                rows = self.structure.pair_rows(rows, SIDEBAR_PX)
            elif title == "More":
                rows = rows + self.structure.element_rows(SIDEBAR_PX)
            columns.append(rows)
        if not self.controls.tabs:
            if self._files is None:
                self._files = self._files_block()
            # a tab of values is at most _VALUES_PX tall and scrolls inside when a
            # device has more keys (a MOS pair with body effect and noise keys):
            # the page itself never needs scrolling on a 1366×768 screen
            self.controls.tabs = [TabPanel(title=title, child=column(
                *rows, spacing=0, height=_VALUES_PX, sizing_mode="fixed",
                width=SIDEBAR_PX - 10, styles={"overflow-y": "auto", "overflow-x": "hidden"}))
                                  for (title, _), rows in zip(_SECTIONS, columns)] + [
                TabPanel(title="Files", child=self._files)]
        else:
            reusable = {id(v[0]) for v in self._rows.values()}
            reusable.update(id(x) for x in self._loop_fixed or ())
            for panel, rows in zip(self.controls.tabs, columns):
                _show_lines(panel.child, rows, reusable)
        self._sync_kinds()
        self._sync_controls()

    def _loop_rows(self, rows):
        """The "Loop" tab: the feedback factor (empty box: no loop) and the second stage,
        with a button that adds (freqpair's default values) or removes it."""
        feedback = [r for r in rows if r.name.startswith("row:feedback.")]
        stage = [r for r in rows if not r.name.startswith("row:feedback.")]
        if not feedback:
            # no loop: the factor's own line (one per session), its box empty, no slider
            if "feedback.factor" not in self._rows:
                ev = EditableValue("feedback.factor", "feedback factor β_f", 0.1, "", "log",
                                   -3.0, 0.0)
                self._rows[ev.key] = (self._new_value_row(ev), self.texts[ev.key],
                                      self.sliders.get(ev.key))
                self.texts.pop(ev.key)
                self.sliders.pop(ev.key, None)
            line, fb, slider = self._rows["feedback.factor"]
            fb.placeholder = "none"
            if fb.value:
                self._syncing = True
                try:
                    fb.value = ""
                finally:
                    self._syncing = False
            slider.visible = False
            self.texts["feedback.factor"] = fb
            feedback = [line]
        elif "feedback.factor" in self.sliders:
            self.sliders["feedback.factor"].visible = True
        if self._loop_fixed is None:
            toggle = Button(name="second_stage_toggle", width=170, margin=(4, 5, 4, 5))
            toggle.on_click(self.toggle_second_stage)
            self._loop_fixed = (
                _heading("Feedback", "a fixed factor or a divider; an empty β_f box: no loop"),
                _heading("Second stage", "a gain stage on o2; with it the gain plotted "
                                         "and the loop use A_total"),
                toggle)
        heading_fb, heading_stage, toggle = self._loop_fixed
        has = self.design.second_stage is not None
        toggle.label = "Remove second stage" if has else "Add second stage"
        return [heading_fb, self.structure.feedback_row(), *feedback, heading_stage, toggle,
                *stage]

    def _value_row(self, ev):
        """One compact line per value: label, entry box and (not for counts) a slider
        (made once per key and session, then reused)."""
        cached = self._rows.get(ev.key)
        if cached is not None:
            line, text, slider = cached
            self.texts[ev.key] = text
            if slider is not None:
                self.sliders[ev.key] = slider
            return line
        line = self._new_value_row(ev)
        self._rows[ev.key] = (line, self.texts[ev.key], self.sliders.get(ev.key))
        return line

    def _new_value_row(self, ev):
        text = TextInput(name=f"text:{ev.key}", value=ev.text, width=_TEXT_PX, margin=_MARGIN,
                         height=_ROW_PX)
        text.on_change("value", self._text_callback(ev.key))
        self.texts[ev.key] = text
        label = _label(_short_label(ev), ev.key)
        if ev.scale == "int":
            return row(label, text, name=f"row:{ev.key}")
        step = 0.01 if ev.scale == "log" else (ev.slider_hi - ev.slider_lo) / 200
        slider = Slider(name=f"slider:{ev.key}", start=ev.slider_lo, end=ev.slider_hi,
                        value=min(max(ev.slider_value(), ev.slider_lo), ev.slider_hi),
                        step=step, show_value=False, title=None, width=_SLIDER_PX,
                        margin=(6, 5, 0, 8), bar_color=PALETTE["adm"])
        slider.on_change("value_throttled", self._slider_callback(ev))
        self.sliders[ev.key] = slider
        return row(label, text, slider, name=f"row:{ev.key}")

    def _text_callback(self, key):
        def cb(attr, old, new):
            if not self._syncing:
                self.edit(key, new)
        return cb

    def _slider_callback(self, ev):
        def cb(attr, old, new):
            if not self._syncing and not self.edit(ev.key, ev.from_slider(new)):
                self._sync_controls()     # the slider goes back to the value on screen
        return cb

    def _kind_callback(self, section):
        def cb(attr, old, new):
            if self._syncing or new == getattr(self.design, section).type:
                return
            try:
                design = switch_kind(self.design, section, new)
            except FreqpairError as exc:
                self._say(f"{exc} — kept the last good result", bad=True)
                design = None
            if design is not None and self.apply(design):
                self._build_controls()
            else:
                self._sync_kinds()        # the selector goes back to the kind on screen
        return cb

    def _sync_kinds(self):
        """Show the current design's kinds in the kind selectors."""
        self._syncing = True
        try:
            for section, sel in self.kind_selects.items():
                sel.value = getattr(self.design, section).type
        finally:
            self._syncing = False

    def _sync_controls(self):
        """Show the current design's values in the text boxes and sliders."""
        self._syncing = True
        try:
            for ev in editable_values(self.design):
                text = self.texts.get(ev.key)
                if text is not None and text.value != ev.text:
                    text.value = ev.text
                slider = self.sliders.get(ev.key)
                if slider is not None:
                    pos = ev.slider_value()
                    if not slider.start <= pos <= slider.end:
                        slider.update(start=ev.slider_lo, end=ev.slider_hi)
                    slider.value = pos
        finally:
            self._syncing = False

    # ------------------------------------------------------------- actions
    def edit(self, key: str, value) -> bool:
        """Set one design value (text in engineering notation or a number) and update."""
        try:
            if key == "feedback.factor" and str(value).strip() == "":
                data = design_to_dict(self.design)
                data.pop("feedback", None)
                design = parse_design(data)
            else:
                if isinstance(value, str):
                    value = value.strip()
                design = replace_value(self.design, key, value)
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return False
        before = self.touched
        if design.feedback is not None or key != "feedback.factor":
            self.touched = key          # the pole paths follow the value set last
        if not self._apply_and_rebuild(design):
            self.touched = before
            return False
        return True

    def _apply_and_rebuild(self, design) -> bool:
        """Apply ``design``; rebuild the controls when the stage's structure changed (an
        optional section, the loop kind, a cascode, degeneration on/off, the elements)."""
        before = structure_key(self.design)
        ok = self.apply(design)
        if ok and structure_key(design) != before:
            self._build_controls()
        return ok

    def apply_structure(self, make) -> bool:
        """Apply ``make(self.design)`` (a cascode, element or loop-kind change); a refused
        change (one line) keeps the last good design and its selectors."""
        try:
            design = make(self.design)
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            design = None
        if design is not None and self._apply_and_rebuild(design):
            return True
        self._syncing = True
        try:
            self.structure.sync()
        finally:
            self._syncing = False
        return False

    def toggle_second_stage(self) -> bool:
        """Add a second stage (freqpair's default values) or remove the one there is."""
        try:
            design = with_second_stage(self.design, self.design.second_stage is None)
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return False
        return self._apply_and_rebuild(design)

    def _target_db(self) -> float:
        return parse_target_db(self.target_input.value, "CMRR target")

    def apply(self, design, need_measured: bool = False) -> bool:
        """Analyse ``design`` and show it; on any error keep the last good result.

        With ``need_measured`` a measurement that cannot be compared with the
        design is an error too (used when a measurement or its kind is chosen).
        """
        measurement = self.measured.measurement
        try:
            target = self._target_db()
            from freqpair.analysis.result import analyze
            analysis = analyze(design)
            # the curves, marks and status; the tables and the pole-zero map are
            # computed when their view is shown (_fill_part)
            data = explore(design, explore_grid(design, N_POINTS), target_db=target,
                           analysis=analysis, measurement=measurement, parts=())
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return False
        except Exception as exc:   # never let a session die on one bad value
            msg = str(exc).splitlines()[0] if str(exc) else ""
            self._say(f"could not analyse this design ({exc.__class__.__name__}: {msg}) — "
                      "kept the last good result", bad=True)
            return False
        if need_measured and data["measured_note"]:
            self._say(f"{data['measured_note']} — kept the last good result", bad=True)
            return False
        self.design = design
        self.data = data
        self.analysis = analysis
        self._show(data)
        return True

    # ------------------------------------------------------------- view panels
    def add_panel(self, panel) -> None:
        """Add a view that is computed only while it is shown.

        ``panel`` has a ``title`` (its tab's words), ``layout()`` (the Bokeh
        model, built once when the view is first opened, fed from the panel's
        own data sources) and
        ``show(explorer)`` (fill those sources from ``explorer.analysis`` and
        ``explorer.design``). ``show`` runs when the panel's tab is opened and,
        while it is open, after every accepted change; a hidden panel is only
        marked stale, so a change costs nothing for views nobody looks at.
        Panels are added before the layout is built (in :meth:`__init__`).
        """
        self.panels.append(panel)
        self._stale.add(len(self.panels) - 1)

    def _panel_index(self, active):
        if active is None or self._views is None:
            return None
        k = active - self._fixed_views
        return k if 0 <= k < len(self.panels) else None

    def _refresh_panels(self, active) -> None:
        """Mark every panel and table stale and show the open one (inside a hold)."""
        self._stale = set(range(len(self.panels)))
        self._stale_parts = set(EXPLORE_PARTS)
        self._paths_stale = True
        self._show_panel(self._panel_index(active))
        self._fill_part(self._part_of(active))
        if active == _POLES_VIEW:
            self._show_paths()

    def _part_of(self, active):
        """The :data:`EXPLORE_PARTS` entry the fixed view ``active`` shows (or None)."""
        if active is None or self._views is None or active >= self._fixed_views:
            return None
        return _LAZY_VIEWS.get(self._views.tabs[active].title)

    def _fill_part(self, part) -> None:
        """Compute one table (or the pole-zero map) of the design on screen, if stale."""
        if part is None or part not in self._stale_parts or self.analysis is None:
            return
        try:
            data = explore(self.design, self.data["curves"]["f_hz"],
                           target_db=self.data["target_db"], analysis=self.analysis,
                           measurement=self.measured.measurement, parts=(part,))
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return
        self.data[part] = data[part]
        set_columns({"poles_zeros": self.pz, "metrics": self.metrics,
                     "hand": self.hand}[part], data[part])
        self._stale_parts.discard(part)

    def _show_paths(self) -> None:
        """The pole paths of the touched value (only while Poles & zeros is open)."""
        if not self._paths_stale or self.analysis is None:
            return
        try:
            self.pole_paths.show(self)
        except FreqpairError as exc:
            self.pole_paths.clear(f"no pole paths: {exc}")
            self._say(f"pole paths: {exc}", bad=True)
        except Exception as exc:    # never let a session die on one bad value
            self.pole_paths.clear(f"no pole paths ({exc.__class__.__name__})")
            self._say(f"pole paths: could not follow {self.touched} "
                      f"({exc.__class__.__name__})", bad=True)
        self._paths_stale = False

    def _show_panel(self, k) -> None:
        if k is None or k not in self._stale or self.analysis is None:
            return
        if k not in self._built:                 # first opened: build its figures
            # a new TabPanel (the page redraws the tabs; a changed child alone it
            # would not draw)
            tabs = list(self._views.tabs)
            i = self._fixed_views + k
            tabs[i] = TabPanel(title=tabs[i].title, child=self.panels[k].layout())
            self._views.tabs = tabs
            self._built.add(k)
        if self.show_panel(self.panels[k]):
            self._stale.discard(k)

    def show_panel(self, panel) -> bool:
        """Fill ``panel`` from the design on screen (its own controls call this too).

        Any error is one line in the status (the panel keeps what it showed) and
        False; the session carries on.
        """
        try:
            panel.show(self)
        except Exception as exc:     # never let a session die on one bad value
            text = str(exc) if isinstance(exc, FreqpairError) else (
                f"could not compute the view ({exc.__class__.__name__}: "
                f"{str(exc).splitlines()[0] if str(exc) else ''})")
            self._say(f"{panel.title}: {text} — kept the last good result", bad=True)
            return False
        return True

    def _view_opened(self, active) -> None:
        k = self._panel_index(active)
        part = self._part_of(active)
        paths = active == _POLES_VIEW and self._paths_stale
        if (k is None or k not in self._stale) and not paths and (
                part is None or part not in self._stale_parts):
            return
        self.doc.hold("combine")
        try:
            self._show_panel(k)
            self._fill_part(part)
            if paths:
                self._show_paths()
        finally:
            self.doc.unhold()

    def show_view(self, title: str) -> None:
        """Open the view (tab) called ``title``, as a click on its tab would."""
        titles = [t.title for t in self._views.tabs]
        self._views.active = titles.index(title)

    def _measurement_changed(self) -> bool:
        return self.apply(self.design, need_measured=True)

    def _show(self, data):
        f = data["curves"]["f_hz"]
        self.doc.hold("combine")
        try:
            # only changed columns go to the page (freqpair.app.sources)
            set_columns(self.curves, data["curves"])
            set_columns(self.corner, data["corner"])
            set_columns(self.target, data["target"])
            set_columns(self.target_line, {"f_hz": [float(f[0]), float(f[-1])],
                                           "cmrr_db": [data["target_db"]] * 2})
            self.measured.show(data)
            name = self.design.name or "(unnamed design)"
            self.header.text = (f"<div style='{_CSS_HEADER}'><b>freqpair explorer</b> — "
                                f"{_html(name)}</div>")
            self._say(_status(data), bad=False)
            self._label_curves()
            self._refresh_panels(self._views.active if self._views is not None else None)
        finally:
            self.doc.unhold()
        self._sync_controls()   # outside the hold: its own callbacks are muted here

    def _say(self, text: str, bad: bool):
        colour, bg = ("#8a1c2b", "#f9e3e5") if bad else ("#1f2a36", "#e4efe9")
        self.message.text = (f"<div style='padding:4px 10px;background:{bg};color:{colour};"
                             f"border-radius:3px;font-family:sans-serif'>{_html(text)}</div>")
        self.message_text = text

    def pin(self) -> Pin:
        """Keep the current curves as a snapshot drawn beside the live ones.

        Up to :data:`MAX_PINS` snapshots are kept; one more drops the oldest
        (with a note). Each is named in the legends by what differs from the
        design on screen (:func:`freqpair.views.explore.design_difference`).
        """
        self._pin_count += 1
        note = ""
        if len(self.pins) >= MAX_PINS:
            dropped = self.pins.pop(0)
            note = (f" — pin {dropped.number} dropped (at most {MAX_PINS} pins; "
                    "Clear pins removes all)")
        pin = Pin(self._pin_count, (self._pin_count - 1) % MAX_PINS, self.design)
        self.pins.append(pin)
        self.doc.hold("combine")
        try:
            self.pin_sources[pin.slot].data = dict(self.curves.data)
            self._label_pins()
            self._refresh_pinned_panels()
        finally:
            self.doc.unhold()
        self._say(f"pinned the curves on screen as pin {pin.number}{note}", bad=False)
        return pin

    def clear_pins(self):
        """Remove every pinned snapshot (numbering starts again at 1)."""
        self.doc.hold("combine")
        try:
            for src in self.pin_sources:
                src.data = {k: [] for k in self.curves.data}
            self.pins, self._pin_count = [], 0
            self._label_pins()
            self._refresh_pinned_panels()
        finally:
            self.doc.unhold()

    def _refresh_pinned_panels(self) -> None:
        """Panels draw the pins too: mark them stale and show the open one."""
        self._stale = set(range(len(self.panels)))
        self._show_panel(self._panel_index(self._views.active if self._views is not None
                                           else None))

    def pin_labels(self) -> list[str]:
        """Legend words of the pins, oldest first (``"pin 1: C_tail 2 pF"``)."""
        texts = [design_difference(p.design, self.design) for p in self.pins]
        out = []
        for i, (pin, text) in enumerate(zip(self.pins, texts)):
            group = [j for j, t in enumerate(texts) if t == text]
            if text and len(group) > 1:       # same words for several pins: tell them apart
                k = group.index(i)
                other = self.pins[group[k + 1] if k + 1 < len(group) else group[k - 1]]
                extra = design_difference(pin.design, other.design, limit=1)
                text = f"{text}, {extra}" if extra else text
            out.append(f"pin {pin.number}: {text or 'as now'}")
        return out

    def _label_curves(self):
        """Legends and hovers name the curves of the design on screen: the primary gain
        by its kind, and only the gains and CMRRs it has (e.g. no A_cm-dm and no
        balanced CMRR with a mirror load)."""
        if self._figures is None or self.data is None:
            return
        mag, phase, cmrr = self._figures
        curves = self.data["curves"]
        primary = _PRIMARY_LABEL[self.data["primary"]]
        labels = {p: primary if p == "adm" else label for p, label in GAIN_SERIES}
        shown = [p for p, _ in GAIN_SERIES if np.isfinite(curves[f"{p}_db"]).any()]
        for fig, quantity in ((mag, "magnitude"), (phase, "phase")):
            set_legend_label(fig, "adm", primary)
            for p, _ in GAIN_SERIES:
                show_legend_item(fig, p, p in shown)
            set_gain_hover(fig, quantity, [(p, labels[p]) for p in shown])
        set_cmrr_balanced(cmrr, bool(np.isfinite(curves["cmrr_db"]).any()))
        self._label_pins()

    def _label_pins(self):
        """Show each slot's legend item with its pin's name; hide empty slots."""
        if self._figures is None:
            return
        label_pin_legends(self._figures, [(p.slot, text) for p, text
                                          in zip(self.pins, self.pin_labels())])

    def _download(self, filename, text, mime):
        self._downloads += 1
        self.downloads.data = {"filename": [filename], "text": [text], "mime": [mime],
                               "n": [self._downloads]}

    def save_design(self):
        """Offer the current design as a TOML file download."""
        self._download("design.toml", tomli_w.dumps(design_to_dict(self.design)),
                       "application/toml")

    def save_csv(self):
        """Offer the current curves as a CSV download."""
        self._download("curves.csv", curves_csv(self.data["curves"]), "text/csv")

    def load_file(self, b64: str, filename: str | None = None) -> bool:
        """Load a design from a FileInput value (base64 TOML)."""
        name = filename or "uploaded file"
        if not b64:
            return False
        try:
            text = upload_text(b64, name, "design file")
            design = design_from_text(text, origin=name)
        except FreqpairError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return False
        if self.apply(design):
            self._build_controls()
            return True
        return False


def _descendants(lines) -> list:
    """Every layout and widget inside ``lines`` (and the lines themselves)."""
    out, todo = [], list(lines)
    while todo:
        x = todo.pop()
        out.append(x)
        todo.extend(getattr(x, "children", None) or ())
    return out


def _show_lines(col, lines, reusable: set) -> None:
    """Show exactly ``lines`` in column ``col``, in that order.

    Lines made once per session (ids in ``reusable``) that the design does not
    use now stay in the column, hidden, to be shown again later; any other
    line the column held is dropped. The column's children are replaced only
    when a line is new to it or the order differs (the first time a key is
    seen, or a structure control's fresh line); otherwise only ``visible``
    flags change. A reused line nested in a fresh container (e.g. the pair's
    rows behind the cascode switch) leaves the column's top level.
    """
    inside = {id(x) for x in _descendants(lines)}
    children = list(col.children)
    hidden = [x for x in children if id(x) not in inside and id(x) in reusable]
    position = {id(x): k for k, x in enumerate(children)}
    order = [position.get(id(x)) for x in lines]
    if (None in order or order != sorted(order)
            or len(children) != len(lines) + len(hidden)):
        col.children = list(lines) + hidden
    for x in _descendants(lines):
        if id(x) in reusable and not x.visible:
            x.visible = True
    for x in hidden:
        if x.visible:
            x.visible = False


_TEXT_PX, _SLIDER_PX, _LABEL_PX = 96, 130, 132
#: Height of a tab of values [px]: twelve lines; longer tabs scroll inside.
_VALUES_PX = 372
_MARGIN = (1, 4, 1, 4)
_ROW_PX = 28


def _label(text: str, key: str = "") -> Div:
    """The label of one compact control line (the full design key as its tooltip)."""
    return Div(text=f"<span title='{_html(key)}' style='font-size:12px'>{_html(text)}</span>",
               width=_LABEL_PX, margin=(6, 4, 0, 4))


def _heading(title: str, note: str) -> Div:
    return Div(text=f"<b>{_html(title)}</b> <small>({_html(note)})</small>",
               width=SIDEBAR_PX - 20, margin=(8, 4, 2, 4))


def _short_label(ev) -> str:
    """The value's words without the section its tab already names."""
    label = ev.label
    section = ev.key.split(".", 1)[0].replace("_", " ")
    if label.startswith(section + "."):
        label = label[len(section) + 1:]
    return label.replace(".", " ")


def _html(text: str) -> str:
    return (str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;"))


def _status(data) -> str:
    from freqpair.design.quantities import format_si
    corner = format_si(data["cmrr_corner_hz"], "Hz")
    cross = data["target_cross_hz"]
    text = (f"f_3dB {format_si(data['f3db_hz'], 'Hz')} · CMRR corner {corner} · "
            f"CMRR falls to {data['target_db']:g} dB at "
            f"{format_si(cross, 'Hz') if cross is not None else '— (not in range)'}")
    if data.get("loop") is not None:
        from freqpair.analysis.summary import format_metric
        pm, fc = data["phase_margin_deg"], data["crossover_hz"]
        text += f" · phase margin {format_metric('phase_margin_deg', pm)}"
        if fc is not None:      # else the words say "no crossing", as the reports do
            text += f" at {format_metric('crossover_hz', fc)}"
    if data.get("measured") is not None:
        text += f" · measured − model rms {data['measured']['rms_residual_db']:.2f} dB"
    elif data.get("measured_note"):
        text += f" · measurement not compared: {data['measured_note']}"
    return text


def make_doc(doc, design_path: str | None = None, design=None) -> Explorer:
    """Build the explorer into ``doc``.

    Parameters
    ----------
    doc : bokeh.document.Document
    design_path : str, optional
        A design file; default the built-in example.
    design : Design, optional
        A design object (takes precedence over ``design_path``).

    Returns
    -------
    Explorer
        The session's state (tests drive it through the document's widgets).
    """
    note = ""
    if design is None:
        if design_path:
            try:
                design = load_design(design_path)
            except FreqpairError as exc:
                note = f"{exc} — showing the built-in example instead"
        if design is None:
            design = design_from_text(BUILTIN_EXAMPLE, origin="built-in example")
    return Explorer(doc, design, note)
