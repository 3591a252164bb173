"""Only changed columns go to the page (freqpair.app.sources.set_columns)."""
import numpy as np
from bokeh.document import Document
from bokeh.models import ColumnDataSource

from freqpair.app.sources import same_column, set_columns


def _events(source, data):
    doc = Document()
    doc.add_root(source)
    seen = []
    doc.on_change(lambda ev: seen.append(ev))
    sent = set_columns(source, data)
    return sent, seen


def test_only_the_changed_column_is_sent_and_the_source_holds_all_new_values():
    src = ColumnDataSource({"f_hz": np.array([1.0, 2.0]), "db": np.array([3.0, np.nan]),
                            "text": ["a", "b"]})
    sent, seen = _events(src, {"f_hz": np.array([1.0, 2.0]), "db": np.array([3.0, 4.0]),
                               "text": ["a", "b"]})
    assert sent == ["db"]
    assert len(seen) == 1 and seen[0].cols == ["db"]          # one message, one column
    assert list(src.data["db"]) == [3.0, 4.0] and list(src.data["text"]) == ["a", "b"]


def test_nothing_is_sent_when_nothing_changed_nan_included():
    src = ColumnDataSource({"x": np.array([np.nan, 1.0]), "t": ["q", "r"]})
    sent, seen = _events(src, {"x": np.array([np.nan, 1.0]), "t": ["q", "r"]})
    assert sent == [] and seen == []


def test_new_row_count_or_new_columns_replace_the_whole_data():
    src = ColumnDataSource({"x": [1.0, 2.0]})
    sent, seen = _events(src, {"x": [1.0, 2.0, 3.0]})
    assert sent == ["x"] and len(seen) == 1 and seen[0].cols is None
    src = ColumnDataSource({"x": [1.0]})
    sent, _ = _events(src, {"x": [1.0], "y": [2.0]})
    assert sorted(sent) == ["x", "y"] and list(src.data["y"]) == [2.0]


def test_same_column_tells_apart_values_types_and_lengths():
    assert same_column([1.0, float("nan")], [1.0, float("nan")])
    assert not same_column([1.0, 2.0], [1.0, 2.5])
    assert not same_column(["1"], [1])
    assert not same_column(np.array([1.0, 2.0]), np.array([1.0]))
    assert same_column(np.array([1, 2]), [1, 2])
    assert not same_column([[1.0, 2.0]], [[1.0, 3.0]])        # multi-line columns
