"""The explorer's measurement overlay: a CSV loader, a kind selector, markers and residual.

:func:`measurement_from_upload` turns a browser upload (base64 text) into a
:class:`freqpair.studies.measured.Measurement` without Bokeh. :class:`MeasuredPanel`
owns the widgets, the data source ``measured_source`` and the renderers it adds
to the gain and CMRR figures (markers, and the residual on a secondary axis); the
explorer hands it each new :func:`freqpair.views.explore.explore` result.
"""
from __future__ import annotations

import base64
import binascii
import dataclasses

import numpy as np

from freqpair.studies.measured import KINDS, MeasurementError, parse_measurement_text
from freqpair.app.sources import set_columns

__all__ = ["measurement_from_upload", "MeasuredPanel", "MEASURED_COLUMNS", "MAX_FILE_BYTES",
           "upload_text"]

#: Largest measurement (or design) file the app accepts [bytes].
MAX_FILE_BYTES = 256 * 1024
#: Columns of the ``measured_source`` data source.
MEASURED_COLUMNS = ("f_hz", "measured_db", "model_db", "residual_db")


def upload_text(b64: str, name: str, what: str) -> str:
    """The UTF-8 text of a browser upload (FileInput value, base64).

    Raises
    ------
    MeasurementError
        Too large (over :data:`MAX_FILE_BYTES`), not base64 or not UTF-8 text
        (one line naming the file).
    """
    size = len(b64) * 3 // 4
    if size > MAX_FILE_BYTES:
        raise MeasurementError(f"{name}: too large ({size // 1024} kB; the limit for a {what} "
                               f"is {MAX_FILE_BYTES // 1024} kB)")
    try:
        return base64.b64decode(b64, validate=True).decode("utf-8-sig")
    except (binascii.Error, UnicodeDecodeError):
        raise MeasurementError(f"{name}: not a UTF-8 text file") from None


def measurement_from_upload(text: str, name: str, kind: str):
    """Parse measurement CSV text as ``kind``.

    The CSV reader also uses the kind to recognise the magnitude column (a
    column named "CMRR" is the magnitude of a ``cmrr`` file). The selector in
    the app says what was measured, so when the chosen kind does not name a
    column, the columns a reading under another kind finds are used, with the
    chosen kind.

    Returns
    -------
    freqpair.studies.measured.Measurement

    Raises
    ------
    MeasurementError
        One line naming the file, line and value (from the chosen kind's reading).
    """
    try:
        return parse_measurement_text(text, kind, origin=name)
    except MeasurementError as first:
        for other in KINDS:
            if other == kind:
                continue
            try:
                m = parse_measurement_text(text, other, origin=name)
            except MeasurementError:
                continue
            return dataclasses.replace(m, kind=kind)
        raise first from None


class MeasuredPanel:
    """Widgets, source and renderers of the measurement overlay.

    Parameters
    ----------
    on_change : callable
        Called with no arguments when the measurement (or its kind) changes and
        the explorer should recompute; it returns False when the new state
        could not be shown (the panel then goes back to the last good one).
    say : callable
        ``say(text, bad)`` shows a message line.
    """

    def __init__(self, on_change, say, width: int):
        from bokeh.models import Button, ColumnDataSource, FileInput, Select
        self._on_change = on_change
        self._say = say
        self.measurement = None
        self._text = self._name = None
        self._syncing = False
        self.source = ColumnDataSource({c: [] for c in MEASURED_COLUMNS}, name="measured_source")
        self.kind = Select(name="measured_kind", title="measured kind", value="cmrr",
                           options=[(k, k) for k in KINDS], width=125)
        self.kind.on_change("value", self._kind_changed)
        self.upload = FileInput(name="measured_file", accept=".csv,.txt,.tsv",
                                width=width - 20)
        self.upload.on_change("value", lambda a, o, n: self.load(n, self.upload.filename))
        self.clear_button = Button(label="Clear", name="clear_measured", width=80)
        self.clear_button.on_click(self.clear)
        self._views = {}          # plot key -> (residual range, residual axis, renderers)
        self._legend_items = []

    # ------------------------------------------------------------- figures
    def add_to(self, gains_fig, cmrr_fig):
        """Draw the markers, the model at the measured points and the residual (on a
        secondary axis) on the gain and CMRR figures, hidden until a measurement shows."""
        from freqpair.views.plots import PALETTE, add_residual_axis
        for key, fig in (("gains", gains_fig), ("cmrr", cmrr_fig)):
            model = fig.line("f_hz", "model_db", source=self.source, color=PALETTE["measured"],
                             line_dash="dotted", line_width=1.5,
                             legend_label="model at measured points", name=f"measured_model_{key}")
            marks = fig.scatter("f_hz", "measured_db", source=self.source, marker="circle",
                                size=7, fill_color="white", line_color=PALETTE["measured"],
                                line_width=2, legend_label="measured", name=f"measured_{key}")
            rng, axis, residual = add_residual_axis(fig, self.source, f"residual_{key}")
            renderers = [model, marks, *residual]
            self._views[key] = (rng, axis, renderers)
            for item in fig.legend[0].items:
                if set(item.renderers) & set(renderers):
                    self._legend_items.append((key, item))
        self.show(None)

    def widgets(self):
        """The sidebar block: kind, file and clear button."""
        from bokeh.layouts import column, row
        from bokeh.models import Div
        return column(row(self.kind, column(Div(text="", height=14), self.clear_button)),
                      Div(text="<small>Choose the kind, then a CSV file (up to "
                               f"{MAX_FILE_BYTES // 1024} kB): markers on the gain or CMRR "
                               "plot, the residual on its right-hand axis.</small>",
                          width=380),
                      self.upload)

    # ------------------------------------------------------------- state
    def show(self, data) -> None:
        """Copy the ``measured`` part of an explore result into the source and views."""
        view = data.get("measured") if data else None
        if view is None:
            set_columns(self.source, {c: [] for c in MEASURED_COLUMNS})
            plot = None
        else:
            set_columns(self.source, {c: np.asarray(v, float)
                                      for c, v in view["columns"].items()})
            plot = view["plot"]
        for key, (rng, axis, renderers) in self._views.items():
            on = key == plot
            axis.visible = on
            for r in renderers:
                r.visible = on
            if on:
                span = max(1.0, 1.2 * view["max_abs_residual_db"])
                rng.update(start=-span, end=span)
        for key, item in self._legend_items:
            item.visible = key == plot

    def load(self, b64: str, filename: str | None = None) -> bool:
        """Read a measurement upload (FileInput value) as the selected kind and show it."""
        if not b64:
            return False
        name = filename or "uploaded file"
        try:
            text = upload_text(b64, name, "measurement file")
            measurement = measurement_from_upload(text, name, self.kind.value)
        except MeasurementError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            return False
        return self._replace(measurement, text, name)

    def _kind_changed(self, attr, old, new):
        if self._syncing or self._text is None:
            return
        try:
            measurement = measurement_from_upload(self._text, self._name, new)
        except MeasurementError as exc:
            self._say(f"{exc} — kept the last good result", bad=True)
            self._set_kind(old)
            return
        if not self._replace(measurement, self._text, self._name):
            self._set_kind(old)

    def _set_kind(self, kind):
        self._syncing = True
        try:
            self.kind.value = kind
        finally:
            self._syncing = False

    def _replace(self, measurement, text, name) -> bool:
        old = (self.measurement, self._text, self._name)
        self.measurement, self._text, self._name = measurement, text, name
        if self._on_change():
            return True
        self.measurement, self._text, self._name = old
        return False

    def clear(self) -> None:
        """Remove the measurement from every view."""
        self.measurement = self._text = self._name = None
        self._on_change()
