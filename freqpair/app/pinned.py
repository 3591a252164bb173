"""Pinned designs' curves on a view's plots (one data source per pin slot).

The explorer keeps up to :data:`~freqpair.app.limits.MAX_PINS` pinned
designs (:class:`freqpair.app.view.Pin`); a view that draws them muted beside
the live curves holds a :class:`PinnedCurves`, which computes each pin's
columns once (when the view first shows it), forgets pins that were dropped,
and names the legend items as the explorer's other plots do.
"""
from __future__ import annotations

from freqpair.app.limits import MAX_PINS

__all__ = ["PinnedCurves", "label_pin_legends", "NO_PINS"]


def label_pin_legends(figures, shown) -> None:
    """Show each slot's legend items with its pin's words and hide the other slots'.

    Parameters
    ----------
    figures : iterable of bokeh figures
        Plots whose pinned renderers are named ``*_pin<slot>`` with legend items.
    shown : iterable of (int, str)
        (slot, words) of the pins drawn.
    """
    from bokeh.core.properties import value

    from freqpair.views.plots import pin_legend_items
    by_slot = dict(shown)
    for fig in figures:
        for slot in range(MAX_PINS):
            for item in pin_legend_items(fig, slot):
                on = slot in by_slot
                if item.visible != on:
                    item.visible = on
                if on and item.label != value(by_slot[slot]):
                    item.label = value(by_slot[slot])


class _NoPins:
    """Stands for an explorer without pins (before a view is first shown)."""

    pins: tuple = ()

    @staticmethod
    def pin_labels() -> list:
        return []


#: No pinned design: :meth:`PinnedCurves.show` with it hides every pin's legend item.
NO_PINS = _NoPins()


class PinnedCurves:
    """Sources per pin slot, filled with each pinned design's columns.

    Parameters
    ----------
    groups : dict of str to tuple of str
        One group of sources per entry: sources are called ``"{group}:{slot}"``
        and hold the given columns (e.g. a loop view's curves and its step).
    compute : callable
        ``compute(design) -> {group: {column: values}}`` for a pinned design, or
        None when the design has none (e.g. no loop); an exception leaves that
        pin out.

    Attributes
    ----------
    groups : dict of str to list of ColumnDataSource
        Each group's sources, one per slot.
    sources : list of ColumnDataSource
        The first group's sources (what a one-group view draws).
    """

    def __init__(self, groups: dict, compute):
        from bokeh.models import ColumnDataSource
        self._columns = {g: tuple(cols) for g, cols in groups.items()}
        self.groups = {g: [ColumnDataSource({c: [] for c in cols}, name=f"{g}:{k}")
                           for k in range(MAX_PINS)]
                       for g, cols in self._columns.items()}
        self.sources = next(iter(self.groups.values()))
        self._compute = compute
        self._cache: dict = {}        # pin number -> its groups' columns (None: not drawn)

    def _columns_of(self, pin):
        if pin.number not in self._cache:
            try:
                self._cache[pin.number] = self._compute(pin.design)
            except Exception:        # a pin that cannot be drawn is left out, not fatal
                self._cache[pin.number] = None
        return self._cache[pin.number]

    def show(self, explorer, figures) -> None:
        """Fill the slots from ``explorer.pins`` and label the legends of ``figures``."""
        pins = list(explorer.pins)
        self._cache = {n: v for n, v in self._cache.items() if n in {p.number for p in pins}}
        by_slot = {p.slot: p for p in pins}
        for slot in range(MAX_PINS):
            pin = by_slot.get(slot)
            got = None if pin is None else self._columns_of(pin)
            for group, columns in self._columns.items():
                src = self.groups[group][slot]
                if got is None:
                    if any(len(v) for v in src.data.values()):
                        src.data = {c: [] for c in columns}
                else:
                    src.data = {c: got[group][c] for c in columns}
        shown = [(p.slot, words) for p, words in zip(pins, explorer.pin_labels())
                 if self._cache.get(p.number) is not None]
        label_pin_legends(figures, shown)
