"""Several designs side by side: overlaid curves and a metric table with differences marked.

:func:`compare_table` lines up every design's JSON metrics (the same keys
and formatting as the single-design report); a cell is marked when its value
differs from the first design's by more than a relative tolerance.
:func:`compare_html` builds the standalone page, :func:`write_compare`
writes it atomically.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from html import escape

from freqpair.analysis.summary import METRIC_LABELS, _flat, format_metric
from freqpair.views.report import page, section, table

__all__ = ["CompareTable", "compare_table", "compare_html", "write_compare", "RELATIVE_TOLERANCE"]

#: Two values count as the same when they agree to this relative tolerance.
RELATIVE_TOLERANCE = 1e-3


@dataclass(frozen=True)
class CompareTable:
    """Metrics of several designs.

    Attributes
    ----------
    labels : list of str
        One per design (column heads).
    keys : list of str
        JSON keys (dotted for nested ones), one per row.
    values : list of list
        ``values[row][design]``: SI value or None.
    texts : list of list of str
        The same, formatted as the report shows them.
    differs : list of list of bool
        True where the value differs from the first design's.
    """

    labels: list
    keys: list
    values: list
    texts: list
    differs: list


def _same(a, b, rel=RELATIVE_TOLERANCE) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, str) or isinstance(b, str):
        return a == b
    return math.isclose(a, b, rel_tol=rel, abs_tol=0.0) or a == b


def compare_table(analyses, labels=None) -> CompareTable:
    """Line up the JSON metrics of several analyses.

    Parameters
    ----------
    analyses : list of Analysis
        At least one.
    labels : list of str, optional
        Column heads (default: design names, or "design N").

    Returns
    -------
    CompareTable
    """
    if not analyses:
        raise ValueError("compare: need at least one design")
    labels = labels or [a.design.name or f"design {i + 1}" for i, a in enumerate(analyses)]
    flats = []
    for a in analyses:
        data = a.to_json()
        flat = _flat(data)
        for k, v in data["operating_point"].items():
            flat[f"operating_point.{k}"] = v
        flats.append(flat)
    seen = []
    for f in flats:
        for k in f:
            if k not in seen:
                seen.append(k)
    keys = [k for k in METRIC_LABELS if k in seen] + [k for k in seen if k not in METRIC_LABELS]
    values = [[f.get(k) for f in flats] for k in keys]
    balanced = [a.stage.balanced for a in analyses]
    texts = [[("not applicable" if k not in f else format_metric(k, f[k], bal))
              for f, bal in zip(flats, balanced)] for k in keys]
    differs = [[(i > 0 and (not _same(row[i], row[0]) or (keys[j] in flats[i]) !=
                            (keys[j] in flats[0]))) for i in range(len(row))]
               for j, row in enumerate(values)]
    return CompareTable(list(labels), keys, values, texts, differs)


def _op_text(key, value):
    from freqpair.analysis.summary import _OP_UNITS
    from freqpair.design.quantities import format_si
    sym, unit = _OP_UNITS.get(key.split(".", 1)[1], (key, ""))
    return format_si(value, unit) if value is not None else "∞"


def compare_html(analyses, labels=None) -> str:
    """Standalone HTML comparing several analyses (curves overlaid, metrics side by side).

    Returns
    -------
    str
        UTF-8 HTML with plotting resources inlined.
    """
    from freqpair.views.report_plots import overlay_figure
    from freqpair.views.schematic import stage_svg
    from freqpair.analysis.summary import CAUTION

    ct = compare_table(analyses, labels)
    rows, css = [], []
    for j, key in enumerate(ct.keys):
        label = METRIC_LABELS.get(key, key.replace("operating_point.", "operating point: "))
        texts = ct.texts[j]
        if key.startswith("operating_point."):
            texts = [_op_text(key, v) if t != "not applicable" else t
                     for v, t in zip(ct.values[j], texts)]
        rows.append([label] + texts)
        css.append([None] + ["differs" if d else None for d in ct.differs[j]])
    heads = ["quantity"] + [f"{i + 1}: {lab}" for i, lab in enumerate(ct.labels)]
    n = len(ct.labels)
    metric_tbl = table(rows, heads, tuple(range(1, n + 1)), css)
    legend = ('<p class="note">Marked cells differ from design 1 by more than '
              f"{RELATIVE_TOLERANCE * 100:g} % (or exist in only one of the two).</p>")
    pictures = "".join(f'<div class="schematic"><p class="note">{i + 1}: {escape(lab)}</p>'
                       f"{stage_svg(a.design, width=340)}</div>"
                       for i, (a, lab) in enumerate(zip(analyses, ct.labels)))
    plots = {"gain": overlay_figure(analyses, "primary", ct.labels),
             "phase": overlay_figure(analyses, "phase", ct.labels),
             "cmrr": overlay_figure(analyses, "cmrr_se", ct.labels),
             "psrr_pos": overlay_figure(analyses, "psrr_pos", ct.labels),
             "psrr_neg": overlay_figure(analyses, "psrr_neg", ct.labels),
             "noise": overlay_figure(analyses, "noise", ct.labels)}
    loops = any(a.design.feedback is not None for a in analyses)
    if loops:
        for q in ("loop", "loop_phase", "closed"):
            plots[q] = overlay_figure(analyses, q, ct.labels)
    stability = (section("Stability", '<p class="note">Designs with a [feedback] table: loop '
                         "gain, its phase (continuous from 0° at DC) and the closed loop; the "
                         "margins are in the table above.</p>{{plot:loop}}{{plot:loop_phase}}"
                         "{{plot:closed}}", "stability") if loops else "")
    body = "".join([
        section("Metrics side by side", legend + metric_tbl, "metrics"),
        section("Differential gain", "{{plot:gain}}{{plot:phase}}", "gain"),
        section("CMRR single-ended", "{{plot:cmrr}}", "cmrr"),
        stability,
        section("Supply rejection", "{{plot:psrr_pos}}{{plot:psrr_neg}}", "supply"),
        section("Noise", "{{plot:noise}}", "noise"),
        section("The stages", f'<div class="grid2">{pictures}</div>', "stages"),
        section("Cautions", f'<p class="caution">{escape(CAUTION)}</p>', "cautions"),
    ])
    data = {"designs": [a.to_json() for a in analyses]}
    return page("freqpair comparison", f"{n} designs compared", body, plots, data)


def write_compare(analyses, path, labels=None) -> None:
    """Write :func:`compare_html` to ``path`` atomically."""
    from freqpair.design.files import atomic_write_text
    atomic_write_text(path, compare_html(analyses, labels))
