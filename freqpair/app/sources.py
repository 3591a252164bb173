"""Send the page only what changed in a data source.

Replacing a ColumnDataSource's ``data`` sends every column; after a typical
edit only some of them differ (the frequency grid never does, a table's
quantity column seldom). :func:`set_columns` compares the new columns with
the source's and sends only the changed ones (one "columns changed" message:
the page keeps the others), or nothing when nothing changed.
"""
from __future__ import annotations

import numpy as np

__all__ = ["set_columns", "same_column"]


def same_column(a, b) -> bool:
    """True when two columns hold the same values (NaN equals NaN; order matters)."""
    if a is b:
        return True
    if len(a) != len(b):
        return False
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        x, y = np.asarray(a), np.asarray(b)
        if x.dtype.kind in "fc" and y.dtype.kind in "fc":
            return x.shape == y.shape and bool(np.array_equal(x, y, equal_nan=True))
        if x.dtype.kind in "fciub" and y.dtype.kind in "fciub":
            return x.shape == y.shape and bool(np.array_equal(x, y))
    try:
        return all(_same_item(u, v) for u, v in zip(a, b))
    except TypeError:
        return False


def _same_item(u, v) -> bool:
    if isinstance(u, float) and isinstance(v, float) and u != u and v != v:
        return True                    # NaN in a list
    if isinstance(u, (list, tuple, np.ndarray)) or isinstance(v, (list, tuple, np.ndarray)):
        return same_column(u, v)
    return type(u) is type(v) and u == v


def set_columns(source, data: dict) -> list[str]:
    """Make ``source.data`` equal ``data``, sending the page only changed columns.

    Parameters
    ----------
    source : bokeh.models.ColumnDataSource
    data : dict
        Column name -> values (all of the source's new columns).

    Returns
    -------
    list of str
        The columns that were sent (all of them when the set of names or the
        row count changed, none when nothing did).
    """
    old = source.data
    new_len = {len(v) for v in data.values()}
    if set(old) != set(data) or {len(v) for v in old.values()} != new_len:
        source.data = dict(data)
        return list(data)
    changed = {k: v for k, v in data.items() if not same_column(old[k], v)}
    if changed:
        source.data.update(changed)
    return list(changed)
