"""The explorer's Loop view, its phase margin in the status line and the pole paths
on the pole-zero map, in-process (a Bokeh Document driven through its widgets)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from bokeh.document import Document

import freqpair
from freqpair.design.quantities import format_si
from freqpair.analysis.summary import format_metric
from freqpair.app.loop_panel import NO_LOOP_HINT, LoopPanel
from freqpair.app.pole_paths import PATH_STEPS, TOUCH_HINT
from freqpair.app.view import make_doc

ROOT = Path(__file__).resolve().parent.parent
TWO_STAGE = ROOT / "examples" / "two_stage_miller_loop.toml"
MILLER = "second_stage.miller_capacitance"


def w(doc, name):
    model = doc.select_one({"name": name})
    assert model is not None, name
    return model


def open_view(doc, title):
    views = w(doc, "views")
    views.active = [t.title for t in views.tabs].index(title)


@pytest.fixture
def two_stage():
    doc = Document()
    ex = make_doc(doc, str(TWO_STAGE))
    return doc, ex


def loop_panel(ex) -> LoopPanel:
    return next(p for p in ex.panels if p.title == "Loop")


def mark_text(ex, key):
    texts = loop_panel(ex).marks[key].data["text"]
    return list(texts)


def want_marks(design):
    """The marks' texts from the JSON contract (DESIGN.md §4), as format_metric writes them."""
    j = freqpair.analyze(design).to_json()
    return {"crossover": ["crossover " + format_metric("crossover_hz", j["crossover_hz"])],
            "phase_margin": ["phase margin " + format_metric("phase_margin_deg",
                                                             j["phase_margin_deg"])],
            "gain_margin": ["gain margin " + format_metric("gain_margin_db", j["gain_margin_db"])],
            "overshoot": ["overshoot " + format_metric("overshoot_pct", j["overshoot_pct"])],
            "settling": ["1 % settling " + format_metric("settling_time_s",
                                                          j["settling_time_s"])]}, j


def test_loop_marks_say_the_json_numbers_and_move_after_an_edit(two_stage):
    doc, ex = two_stage
    open_view(doc, "Loop")
    want, j = want_marks(ex.design)
    for key, texts in want.items():
        # oracle: analyze(design).to_json() — the DESIGN.md §4 loop keys via format_metric
        assert mark_text(ex, key) == texts, key
    # oracle: the same JSON — the crossover mark sits at crossover_hz on the 0 dB line
    assert loop_panel(ex).marks["crossover"].data["x"] == [pytest.approx(j["crossover_hz"])]
    before = list(loop_panel(ex).marks["crossover"].data["x"])
    w(doc, f"text:{MILLER}").value = "30 pF"
    edited = freqpair.replace_value(freqpair.load_design(TWO_STAGE), MILLER, "30 pF")
    want, j = want_marks(edited)
    for key, texts in want.items():
        # oracle: analyze() of the edited design, to_json(), format_metric
        assert mark_text(ex, key) == texts, key
    after = loop_panel(ex).marks["crossover"].data["x"]
    assert after != before and after == [pytest.approx(j["crossover_hz"])]
    # the readout under the plots repeats every mark's text (what the plots label)
    texts = loop_panel(ex).readout_texts()
    assert all(t in loop_panel(ex).readout.text for t in texts) and len(texts) == 7
    assert loop_panel(ex).hint.text == ""


def test_loop_curves_are_the_loop_gain_of_the_analysis(two_stage):
    doc, ex = two_stage
    open_view(doc, "Loop")
    src = loop_panel(ex).curves.data
    f = np.asarray(src["f_hz"])
    # oracle: freqpair.analysis.loop.loop_curves on the same analysis and grid (|T| in dB)
    from freqpair.analysis.loop import loop_curves
    lc = loop_curves(freqpair.analyze(ex.design), f)
    np.testing.assert_allclose(src["loop_db"], 20 * np.log10(np.abs(lc.loop_gain)), rtol=1e-9)
    np.testing.assert_allclose(src["closed_db"], 20 * np.log10(np.abs(lc.closed_loop)),
                               rtol=1e-9)
    assert f.size == 500                         # the explorer's grid (explore_grid, 500)


def test_without_a_loop_the_view_shows_the_hint_and_empty_plots(two_stage):
    doc, ex = two_stage
    open_view(doc, "Loop")
    w(doc, "text:feedback.factor").value = ""
    panel = loop_panel(ex)
    # oracle: DESIGN.md §3 — without [feedback] there is no loop gain to draw
    assert NO_LOOP_HINT in panel.hint.text
    assert all(len(s.data["x"]) == 0 for s in panel.marks.values())
    assert len(panel.curves.data["f_hz"]) == 0 and len(panel.step.data["t_s"]) == 0
    assert "phase margin" not in ex.message_text
    w(doc, "text:feedback.factor").value = "0.5"      # the loop comes back
    assert mark_text(ex, "phase_margin") == want_marks(ex.design)[0]["phase_margin"]
    assert panel.hint.text == ""


def test_status_line_shows_phase_margin_and_crossover(two_stage):
    doc, ex = two_stage
    w(doc, f"text:{MILLER}").value = "30 pF"
    j = freqpair.analyze(ex.design).to_json()
    # oracle: analyze(design).to_json() phase_margin_deg and crossover_hz via format_metric
    want = (f"phase margin {format_metric('phase_margin_deg', j['phase_margin_deg'])} at "
            f"{format_metric('crossover_hz', j['crossover_hz'])}")
    assert want in ex.message_text
    assert ex.data["phase_margin_deg"] == j["phase_margin_deg"]
    assert ex.data["crossover_hz"] == j["crossover_hz"]


def test_pins_keep_their_loop_curves_named_as_the_other_pins(two_stage):
    doc, ex = two_stage
    open_view(doc, "Loop")
    panel = loop_panel(ex)
    pinned_design = ex.design
    shown = np.array(panel.curves.data["loop_db"])
    ex.pin()
    w(doc, f"text:{MILLER}").value = "30 pF"
    # oracle: the loop curve on screen when the pin was taken (a snapshot does not follow)
    np.testing.assert_allclose(panel.pinned[0].data["loop_db"], shown, rtol=1e-12)
    assert len(panel.pinned_step[0].data["t_s"]) > 0
    labels = ex.pin_labels()
    mag = panel.figures[0]
    items = {item.label.value: item.visible for item in mag.legend[0].items}
    assert items[labels[0]] is True             # named as on the gain plots
    assert not items["pin 2"]
    assert pinned_design.second_stage.miller_capacitance == pytest.approx(8e-12)
    ex.clear_pins()
    assert all(len(s.data["f_hz"]) == 0 for s in panel.pinned)
    items = [item for item in mag.legend[0].items
             if any((r.name or "").startswith("loop_db_pin") for r in item.renderers)]
    assert not any(item.visible for item in items)


def test_loop_view_is_computed_only_while_open(two_stage):
    doc, ex = two_stage
    panel = loop_panel(ex)
    assert panel.computed == 0
    ex.edit(MILLER, "12 pF")
    assert panel.computed == 0                  # hidden: nothing computed
    open_view(doc, "Loop")
    assert panel.computed == 1


def _roots_by_value(points):
    out = {}
    for x, y, kind, v in zip(points["x"], points["y"], points["kind"], points["value"]):
        out.setdefault((kind, v), []).append((x, y))
    return {k: sorted(v) for k, v in out.items()}


def test_pole_paths_follow_the_value_touched_last_over_its_slider_range(two_stage):
    doc, ex = two_stage
    paths = ex.pole_paths
    open_view(doc, "Poles & zeros")
    assert TOUCH_HINT in paths.caption.text and len(paths.points.data["x"]) == 0
    w(doc, f"text:{MILLER}").value = "20 pF"
    # the range the user sees on the value's slider (log10 of the value)
    slider = w(doc, f"slider:{MILLER}")
    values = 10.0 ** np.linspace(slider.start, slider.end, PATH_STEPS)
    assert paths.key == MILLER
    np.testing.assert_allclose(paths.values, values, rtol=1e-15)
    # oracle: freqpair.locus on the same design, key and values (|Re|/2π, Im/2π per step)
    res = freqpair.locus(ex.design, MILLER, values)
    want = {}
    for kind, arr in (("pole", res.poles_hz), ("zero", res.zeros_hz)):
        for i, v in enumerate(values):
            roots = [(abs(z.real), z.imag) for z in arr[i] if np.isfinite(z) and z.real != 0]
            if roots:
                want[(kind, float(v))] = sorted(roots)
    got = _roots_by_value(paths.points.data)
    assert got.keys() == want.keys()
    for k in want:
        np.testing.assert_allclose(got[k], want[k], rtol=1e-12, atol=0)
    assert len({v for _, v in got}) == PATH_STEPS
    # the caption names the key and its range as the text box writes values
    lo, hi = (format_si(float(f"{v:.4g}"), "F", digits=6) for v in (values[0], values[-1]))
    assert (f"second stage miller capacitance from {lo} to {hi}, 25 steps"
            in paths.caption.text), paths.caption.text
    # the design on screen stays highlighted (the map's own markers: the pz source)
    assert len(ex.pz.data["kind"]) > 0


def test_pole_paths_are_computed_only_while_poles_and_zeros_is_open(two_stage):
    doc, ex = two_stage
    w(doc, f"text:{MILLER}").value = "20 pF"
    assert ex.pole_paths.computed == 0            # Gains is open: nothing computed
    open_view(doc, "Poles & zeros")
    assert ex.pole_paths.computed == 1
    w(doc, "text:tail.capacitance").value = "2 pF"
    assert ex.pole_paths.computed == 2 and ex.pole_paths.key == "tail.capacitance"
    open_view(doc, "Gains")
    w(doc, "text:tail.capacitance").value = "3 pF"
    assert ex.pole_paths.computed == 2


def test_pole_path_steps_where_the_design_is_infeasible_are_left_out():
    doc = Document()
    ex = make_doc(doc)                           # the built-in example
    open_view(doc, "Poles & zeros")
    ex.edit("bias.tail_current", "1 mA")
    paths = ex.pole_paths
    res = freqpair.locus(ex.design, "bias.tail_current", paths.values)
    # oracle: freqpair.locus reports the values it could not analyse (a saturated pair at
    # the top of the tail-current slider, DESIGN.md §2); those steps have no points
    assert res.errors, "expected infeasible steps at the top of the range"
    bad = {float(paths.values[i]) for i in res.errors}
    assert not bad & set(paths.points.data["value"])
    assert f"{len(res.errors)} left out" in paths.caption.text
    assert ex.design.bias.tail_current == pytest.approx(1e-3)


def test_a_key_that_disappears_brings_the_hint_back(two_stage):
    doc, ex = two_stage
    open_view(doc, "Poles & zeros")
    ex.edit("feedback.factor", "0.3")
    assert ex.pole_paths.key == "feedback.factor"
    ex.edit("feedback.factor", "")           # no loop: the key is gone
    assert TOUCH_HINT in ex.pole_paths.caption.text
    assert len(ex.pole_paths.points.data["x"]) == 0


def test_status_line_says_no_crossing_when_the_loop_gain_stays_below_0_db(two_stage):
    doc, ex = two_stage
    w(doc, "text:feedback.factor").value = "1e-7"
    j = freqpair.analyze(ex.design).to_json()
    # oracle: analyze().to_json() has no crossover (null) for a loop gain below 0 dB at
    # DC (A_total ≈ 117 dB, β = −140 dB); format_metric writes the null as the reports do
    assert j["crossover_hz"] is None
    assert ex.message_text.endswith(" · phase margin "
                                    + format_metric("phase_margin_deg", None))
