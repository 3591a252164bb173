"""Small page-side helpers shared by the explorer's views (tables that must redraw).

Kept apart from :mod:`freqpair.app.view` so view panels (loaded by the view)
can use them without importing the view module back.
"""
from __future__ import annotations

__all__ = ["REDRAW_TABLE_JS", "redraw_on_new_data"]

#: Redraw a DataTable's cells when its source gets new data. Bokeh 3.9's table view
#: redraws only when the table's CDSView changes, and replacing ``source.data``
#: with the same number of rows leaves the view's indices equal, so the page kept
#: the old cells (3.4–3.8 and 3.10 redraw; measured in DEVELOPERS.md). This calls
#: the table view's own ``updateGrid`` — what 3.10 connects to the source itself —
#: after the whole server message is applied (a microtask), keeping the scroll
#: position, sorting and column widths. ``rerender`` is the fallback should the
#: method ever be missing.
REDRAW_TABLE_JS = """
Promise.resolve().then(() => {
  for (const view of Bokeh.index.find(table)) {
    if (typeof view.updateGrid === "function") { view.updateGrid(); }
    else if (typeof view.rerender === "function") { view.rerender(); }
  }
});
"""


def redraw_on_new_data(table) -> None:
    """Make the page redraw ``table``'s cells whenever its source's data is replaced.

    Parameters
    ----------
    table : bokeh.models.DataTable
    """
    from bokeh.models import CustomJS
    table.source.js_on_change("data", CustomJS(args={"table": table}, code=REDRAW_TABLE_JS))
