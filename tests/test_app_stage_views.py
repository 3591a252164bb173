"""The explorer's Supply and Noise views and the second-edition controls, in-process.

Every check compares what the app shows with an independent computation: the
library's own ``analyze(design).to_json()`` on the same design written as a
TOML file, or the definitions of DESIGN.md §7 (a crossing is where the curve
meets the target; shares sum to one).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from bokeh.document import Document

import freqpair
from freqpair.analysis.summary import format_metric
from freqpair.app.view import make_doc
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.quantities import format_si, parse_si
from freqpair.design.schema import design_to_dict, parse_design

ROOT = Path(__file__).resolve().parent.parent
INSTRUMENTATION = ROOT / "examples" / "npn_degenerated_instrumentation.toml"
CASCODE_LOOP = ROOT / "examples" / "nmos_cascode_divider_loop.toml"


def w(doc, name):
    model = doc.select_one({"name": name})
    assert model is not None, name
    return model


def session(path=None):
    doc = Document()
    return doc, make_doc(doc, str(path) if path else None)


def panel(ex, title):
    return next(p for p in ex.panels if p.title == title)


def open_view(ex, title):
    """Click the view's tab (what the page does: the Tabs' ``active`` changes)."""
    titles = [t.title for t in ex._views.tabs]
    ex._views.active = titles.index(title)
    return next((p for p in ex.panels if p.title == title), None)


def base():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


# ------------------------------------------------------------------ Supply view
@pytest.mark.parametrize("path", [None, INSTRUMENTATION, CASCODE_LOOP])
def test_supply_marks_and_readout_are_the_json_psrr_values_as_formatted(path):
    doc, ex = session(path)
    sp = open_view(ex, "Supply")
    # oracle: the library's JSON answer for the same design file (DESIGN.md §7f, §7g)
    design = freqpair.load_design(path) if path else base()
    j = freqpair.analyze(design).to_json()
    text = sp.readout_div.text
    for sign, word in (("pos", "PSRR+"), ("neg", "PSRR−")):
        dc, corner, _ = sp.readout[f"psrr_{sign}"]
        value = j[f"psrr_{sign}_db"]
        assert dc == (format_metric(f"psrr_{sign}_db", value) if value is not None
                      else "∞ (the rail does not reach the output)")
        fc = j[f"psrr_{sign}_corner_hz"]
        mark = sp.marks[f"corner_{sign}"].data
        if fc is None:
            assert corner == "— (does not fall 3 dB)" and list(mark["x"]) == []
        else:
            assert corner == format_si(fc, "Hz")
            assert mark["x"][0] == pytest.approx(fc, rel=1e-12)
            assert mark["text"][0] == f"{word} corner {format_si(fc, 'Hz')}"
            # the corner mark sits 3.01 dB below the DC value (DESIGN.md §7f)
            assert mark["y"][0] == pytest.approx(value - 3.0103, abs=1e-3)
        assert dc in text and corner in text
    dm, cm, zc = sp.readout["zin"]
    assert dm == (format_si(j["zin_dm_ohm"], "Ω") if j["zin_dm_ohm"] is not None
                  else "∞ (no DC input current)")
    assert cm == (format_si(j["zin_cm_ohm"], "Ω") if j["zin_cm_ohm"] is not None
                  else "∞ (no DC input current)")
    assert zc == (format_si(j["zin_dm_corner_hz"], "Hz") if j["zin_dm_corner_hz"] else "—")
    assert dm in text and cm in text


def test_psrr_target_crossing_is_where_the_curve_meets_the_target():
    from freqpair.analysis.supply import psrr_db, single_ended_name
    doc, ex = session()
    sp = open_view(ex, "Supply")
    w(doc, "psrr_target_input").value = "30 dB"
    mark = sp.marks["target_pos"].data
    a = freqpair.analyze(base())
    se = single_ended_name(a.responses)
    fx = mark["x"][0]
    # oracle: DESIGN.md §7f definition — PSRR+ = |A_se/A_vpos| equals the target at the
    # lowest such frequency (above it at a slightly lower frequency)
    at = psrr_db(a.responses.at([fx, fx * 0.98]), "vpos", se)
    assert at[0] == pytest.approx(30.0, abs=1e-3)
    assert at[1] > 30.0
    assert mark["text"][0] == "falls to target at " + format_si(fx, "Hz")
    assert sp.readout["psrr_pos"][2] == format_si(fx, "Hz")
    assert "falls to 30 dB at " + format_si(fx, "Hz") in sp.readout_div.text
    assert list(sp.target_line.data["y"]) == [30.0, 30.0]


def test_bad_psrr_target_is_refused_in_one_line_and_the_marks_stay():
    doc, ex = session()
    sp = open_view(ex, "Supply")
    w(doc, "psrr_target_input").value = "30"
    before = {k: dict(s.data) for k, s in sp.marks.items()}
    w(doc, "psrr_target_input").value = "thirty"
    # oracle: the error contract of DESIGN.md §3 (one line naming the field and value)
    assert ex.message_text == "PSRR target = 'thirty': not a number of dB — kept the last " \
                             "good result"
    assert "\n" not in ex.message_text
    assert {k: dict(s.data) for k, s in sp.marks.items()} == before
    assert sp.target_db == 30.0
    w(doc, "text:tail.capacitance").value = "5 pF"      # the session keeps working
    assert ex.design.tail.capacitance == pytest.approx(5e-12)


# ------------------------------------------------------------------ Noise view
def test_noise_spot_density_and_rms_are_the_json_noise_values():
    doc, ex = session(INSTRUMENTATION)
    nz = open_view(ex, "Noise")
    # oracle: the JSON noise object of the same file (DESIGN.md §7h)
    noise = freqpair.analyze(freqpair.load_design(INSTRUMENTATION)).to_json()["noise"]
    first = noise["spot"][0]
    assert w(doc, "noise_at").value == format_si(first["f_hz"], "Hz")     # the default
    assert nz.marks["spot"].data["y"][0] == pytest.approx(first["input_v_rthz"], rel=1e-9)
    assert nz.readout["spot"] == format_si(first["input_v_rthz"], "V/√Hz")
    assert nz.readout["input_rms"] == format_si(noise["input_rms_v"], "V")
    assert nz.readout["output_rms"] == format_si(noise["output_rms_v"], "V")
    lo, hi = noise["band_hz"]
    assert nz.readout["band"] == f"{format_si(lo, 'Hz')} … {format_si(hi, 'Hz')}"
    for text in (nz.readout["spot"], nz.readout["input_rms"], nz.readout["band"]):
        assert text in nz.readout_div.text
    # a frequency typed in the box: the JSON's second spot
    second = noise["spot"][1]
    w(doc, "noise_at").value = "1 kHz"
    assert nz.marks["spot"].data["x"][0] == 1e3
    assert nz.marks["spot"].data["y"][0] == pytest.approx(second["input_v_rthz"], rel=1e-9)
    got = dict(zip(nz.contributors.data["name"], nz.contributors.data["share_pct"]))
    for c in second["contributors"]:
        if c["share"] > 0:
            assert got[c["name"]] == pytest.approx(100 * c["share"], rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("path", [None, INSTRUMENTATION, CASCODE_LOOP])
def test_contributor_shares_sum_to_100_percent(path):
    doc, ex = session(path)
    nz = open_view(ex, "Noise")
    data = nz.contributors.data
    # oracle: DESIGN.md §7h — the shares are fractions of the output noise power (sum 1)
    assert sum(data["share_pct"]) == pytest.approx(100.0, rel=1e-9)
    shown = [float(s.removesuffix(" %")) for s in data["share"]]
    assert sum(shown) == pytest.approx(100.0, abs=0.005 * len(shown) + 1e-9)
    # each source's part of e_n: the parts add in power to the total density
    en = nz.marks["spot"].data["y"][0]
    assert math.sqrt(sum(np.square(data["density_v_rthz"]))) == pytest.approx(en, rel=1e-9)
    assert list(data["share_pct"]) == sorted(data["share_pct"], reverse=True)


def test_bad_noise_frequency_is_refused_and_the_table_stays():
    doc, ex = session()
    nz = open_view(ex, "Noise")
    before = dict(nz.contributors.data)
    for bad, why in (("ten Hz", "noise at = 'ten Hz'"), ("-5 Hz", "noise at = '-5 Hz'"),
                     ("0", "noise at = '0'")):
        w(doc, "noise_at").value = bad
        # oracle: the one-line error contract (DESIGN.md §3)
        assert ex.message_text.startswith(why) and "kept the last good result" in \
            ex.message_text
        assert dict(nz.contributors.data) == before


# ------------------------------------------------------------------ the lazy contract
def test_hidden_views_are_not_computed_and_an_open_one_follows_every_change():
    doc, ex = session()
    sp, nz = panel(ex, "Supply"), panel(ex, "Noise")
    for c in ("3 pF", "4 pF", "5 pF"):
        w(doc, "text:tail.capacitance").value = c
    # oracle: Explorer.add_panel's contract — a hidden panel is only marked stale
    assert sp.computed == 0 and nz.computed == 0
    assert len(sp.psrr.data["f_hz"]) == 0 and len(nz.contributors.data["name"]) == 0
    open_view(ex, "Supply")
    assert sp.computed == 1 and nz.computed == 0
    w(doc, "text:tail.capacitance").value = "7 pF"
    assert sp.computed == 2 and nz.computed == 0
    want = freqpair.analyze(freqpair.replace_value(base(), "tail.capacitance", 7e-12))
    assert sp.marks["corner_neg"].data["x"][0] == pytest.approx(
        want.supply.psrr_neg_corner_hz, rel=1e-12)
    open_view(ex, "Gains")
    w(doc, "text:tail.capacitance").value = "8 pF"
    assert sp.computed == 2                               # hidden again: not computed
    open_view(ex, "Noise")
    assert nz.computed == 1 and sp.computed == 2
    open_view(ex, "Supply")                               # stale since 8 pF: computed once
    assert sp.computed == 3
    open_view(ex, "Supply")
    assert sp.computed == 3


# ------------------------------------------------------------------ second-edition controls
ELEMENT_TOML = """
[[element]]
kind = "capacitor"
nodes = ["t", "vneg"]
value = "1.5 pF"
name = "tail wiring"

[[element]]
kind = "transconductance"
nodes = ["o1", "ground"]
value = "20 uS"
control = ["o2", "ground"]
"""


def _add(doc, ex, kind, a, b, value, name="", control=None):
    w(doc, "element_kind").value = kind
    w(doc, "element_node_a").value = a
    w(doc, "element_node_b").value = b
    w(doc, "element_value").value = value
    w(doc, "element_name").value = name
    if control:
        w(doc, "element_control_a").value, w(doc, "element_control_b").value = control
    return ex.structure.add()


def test_elements_added_in_the_app_equal_the_same_elements_written_in_the_toml():
    doc, ex = session()
    open_view(ex, "Supply")
    assert _add(doc, ex, "capacitor", "t", "vneg", "1.5 pF", "tail wiring")
    assert _add(doc, ex, "transconductance", "o1", "ground", "20 uS", control=("o2", "ground"))
    # oracle: freqpair.analyze on the design file with the two [[element]] tables (§7d)
    toml = freqpair.design_from_text(BUILTIN_EXAMPLE + ELEMENT_TOML)
    assert ex.design == toml
    want = freqpair.analyze(toml).to_json()
    assert ex.analysis.to_json() == want
    sp = panel(ex, "Supply")
    assert sp.readout["psrr_neg"][0] == format_metric("psrr_neg_db", want["psrr_neg_db"])
    # listed with a value box each; an edit there is an ordinary value edit
    assert w(doc, "text:element.0.value").value == "1.5 pF"
    w(doc, "text:element.0.value").value = "3 pF"
    assert ex.design.element[0].value == pytest.approx(3e-12)
    edited = freqpair.replace_value(toml, "element.tail wiring.value", "3 pF")
    assert ex.analysis.to_json() == freqpair.analyze(edited).to_json()
    # removing the first leaves the second
    ex.structure._remover(0)()
    assert [el.kind for el in ex.design.element] == ["transconductance"]
    assert not _shown(doc, "text:element.1.value")


def test_invalid_elements_are_refused_in_one_line_and_the_design_stays():
    doc, ex = session()
    before = ex.design
    # oracle: DESIGN.md §7d value rules and the one-line error contract
    assert not _add(doc, ex, "resistor", "o1", "ground", "0")
    assert ex.message_text.startswith("element.0.value = '0': must be greater than 0")
    assert not _add(doc, ex, "capacitor", "o1", "o1", "1 pF")
    assert ex.message_text.startswith("element.0.nodes = ['o1', 'o1']: the two nodes must "
                                      "differ")
    assert not _add(doc, ex, "capacitor", "o1", "ground", "")
    assert "element.0.value" in ex.message_text
    assert not _add(doc, ex, "capacitor", "o1", "ground", "lots")
    assert ex.message_text.startswith("element.0.value = 'lots'")
    assert all("\n" not in m for m in (ex.message_text,))
    assert ex.design == before


def test_degeneration_from_zero_can_be_set_and_opens_the_emitter_nodes():
    doc, ex = session()
    assert ex.design.pair.degeneration == 0
    assert "e1" not in w(doc, "element_node_a").options[-1]
    w(doc, "text:pair.degeneration").value = "500"
    # oracle: freqpair.analyze with pair.degeneration = 500 Ω written in (§7a)
    want = freqpair.replace_value(base(), "pair.degeneration", 500.0)
    assert ex.design == want
    assert ex.analysis.to_json() == freqpair.analyze(want).to_json()
    assert [v for v, _ in w(doc, "element_node_a").options][-2:] == ["e1", "e2"]
    w(doc, "text:pair.degeneration").value = "0"
    assert ex.design == base()


def test_cascode_on_and_off_round_trips_and_shares_the_headroom():
    doc, ex = session()
    corner = ex.corner.data["f_hz"][0]
    w(doc, "pair_cascode").value = "cascoded"
    casc = ex.design.pair.cascode
    assert casc is not None and casc.type == "npn"
    assert doc.select_one({"name": "text:pair.cascode.bias"}).value == format_si(casc.bias,
                                                                                  "V", digits=6)
    # oracle: DESIGN.md §7c bias — the default bias splits the V_CE between the pair
    # device (up to c) and the cascode (c to o) within the 10 mV rounding
    op = ex.analysis.operating_point
    assert op.v_out_common == pytest.approx(op.cascode.v_out_common, abs=0.021)
    # the same table written in the file analyses to the same answer
    data = design_to_dict(base())
    data["pair"]["cascode"] = design_to_dict(ex.design)["pair"]["cascode"]
    assert ex.analysis.to_json() == freqpair.analyze(parse_design(data)).to_json()
    w(doc, "pair_cascode").value = "none"
    assert ex.design == base()
    assert ex.corner.data["f_hz"][0] == corner
    assert not _shown(doc, "text:pair.cascode.bias")


def test_divider_switch_keeps_beta_and_its_four_values_edit():
    doc, ex = session()
    w(doc, "text:feedback.factor").value = "0.2"
    w(doc, "feedback_kind").value = "divider"
    fb = ex.design.feedback
    # oracle: DESIGN.md §7e — β_dc = R_g/(R_f + R_g) equals the factor it replaced
    assert ex.analysis.to_json()["beta_dc"] == pytest.approx(0.2, rel=1e-12)
    for key in ("series_resistance", "series_capacitance", "shunt_resistance",
                "shunt_capacitance"):
        assert doc.select_one({"name": f"text:feedback.{key}"}) is not None
    assert not _shown(doc, "text:feedback.factor")
    assert _shown(doc, "text:feedback.shunt_capacitance")       # the helper can say yes
    w(doc, "text:feedback.shunt_capacitance").value = "5 pF"
    w(doc, "text:feedback.series_capacitance").value = "0.5 pF"
    text = BUILTIN_EXAMPLE + f"""
[feedback]
type = "divider"
series_resistance = {fb.series_resistance!r}
series_capacitance = "0.5 pF"
shunt_resistance = {fb.shunt_resistance!r}
shunt_capacitance = "5 pF"
"""
    want = freqpair.design_from_text(text)
    assert ex.design == want
    assert ex.analysis.to_json() == freqpair.analyze(want).to_json()
    w(doc, "feedback_kind").value = "factor"
    assert ex.design.feedback.factor == pytest.approx(0.2, rel=1e-6)
    w(doc, "feedback_kind").value = "none"
    assert ex.design.feedback is None


def test_a_refused_loop_switch_puts_the_selector_back():
    doc, ex = session()
    w(doc, "text:feedback.factor").value = "1"
    w(doc, "feedback_kind").value = "divider"
    # oracle: DESIGN.md §7e — a divider's β is below 1, so β_f = 1 cannot become one
    assert ex.message_text.startswith("feedback.factor = 1: a divider gives β below 1")
    assert ex.design.feedback.type == "factor"
    assert w(doc, "feedback_kind").value == "factor"


def test_the_cascode_loop_example_opens_with_its_divider_and_cascode_rows():
    doc, ex = session(CASCODE_LOOP)
    assert w(doc, "feedback_kind").value == "divider"
    assert w(doc, "pair_cascode").value == "cascoded"
    assert w(doc, "text:feedback.series_resistance").value == "90 kΩ"
    assert w(doc, "text:pair.cascode.bias").value == "3.3 V"
    assert parse_si(w(doc, "text:feedback.shunt_capacitance").value, field="",
                    unit="farad") == pytest.approx(8e-12)


# ------------------------------------------------------------------ in the browser
def _psrr_crossing_hz(analysis, rail, target_db):
    """Lowest frequency where PSRR of ``rail`` falls to ``target_db``: a sign change on a
    dense log grid, then scipy's brentq on the exact responses (not the app's search)."""
    from scipy.optimize import brentq

    from freqpair.analysis.supply import single_ended_name
    se = single_ended_name(analysis.responses)

    def excess(f):
        r = analysis.responses.at(np.atleast_1d(f))
        return 20 * np.log10(np.abs(r.get(se)) / np.abs(r.get(f"a_{rail}"))) - target_db
    sweep = analysis.design.sweep
    grid = np.logspace(np.log10(sweep.start) - 3, np.log10(sweep.stop), 4000)
    values = excess(grid)
    hits = np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    if not len(hits):
        return None
    i = hits[0]
    return brentq(lambda f: excess(f)[0], grid[i], grid[i + 1], xtol=1e-12, rtol=1e-13)


@pytest.mark.browser
def test_supply_readout_in_the_page_follows_a_typed_tail_capacitance(tmp_path):
    import time

    from browser_util import (click_tab, console_errors, make_driver, start_app, stop_server,
                              type_into, visible_text, wait_for_bokeh, wait_until)
    t0 = time.monotonic()
    proc, port = start_app()
    driver = None
    try:
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        click_tab(driver, "views", "Supply")
        before = wait_until(lambda: visible_text(driver, "supply_readout"))
        click_tab(driver, "controls", "Tail")
        type_into(driver, "text:tail.capacitance", "20 pF")
        after = wait_until(lambda: (t := visible_text(driver, "supply_readout")) != before
                           and t, timeout=15)
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    elapsed = time.monotonic() - t0
    design = freqpair.replace_value(base(), "tail.capacitance", "20 pF")
    a = freqpair.analyze(design)
    j = a.to_json()
    lines = {line.split(" at DC")[0]: line for line in after.splitlines()}
    for sign, word, rail in (("pos", "PSRR+", "vpos"), ("neg", "PSRR−", "vneg")):
        line = lines[word]
        # oracle: analyze() on the same edit — DC PSRR and corner as format_metric writes them
        assert f"at DC {format_metric(f'psrr_{sign}_db', j[f'psrr_{sign}_db'])}" in line
        assert f"corner {format_si(j[f'psrr_{sign}_corner_hz'], 'Hz')}" in line
        # oracle: the 60 dB crossing root-found here with scipy's brentq (4 digits shown)
        cross = _psrr_crossing_hz(a, rail, 60.0)
        if cross is None or j[f"psrr_{sign}_db"] <= 60.0:
            assert line.endswith("60 dB target: already below at DC")
        else:
            shown = line.split("falls to 60 dB at ")[1]
            assert parse_si(shown, field="", unit="hertz") == pytest.approx(cross, rel=1e-3)
    assert before != after
    assert errors == []
    assert elapsed < 40


def _shown(doc, name: str) -> bool:
    """True when a model called ``name`` is in the page and it and every layout
    around it are visible (the explorer keeps a value's line, hidden, for later)."""
    todo = [(root, True) for root in doc.roots]
    while todo:
        model, seen = todo.pop()
        seen = seen and getattr(model, "visible", True)
        if getattr(model, "name", None) == name and seen:
            return True
        for child in getattr(model, "children", None) or ():
            todo.append((child, seen))
        for tab in getattr(model, "tabs", None) or ():
            todo.append((tab.child, seen))
    return False


def test_pinned_designs_are_drawn_on_the_supply_and_noise_plots_and_named():
    # oracle: freqpair.views.stage_data.supply_view and freqpair.analysis.noise.noise_curves
    # (the library) on the pinned design, and the explorer's own pin words
    from freqpair.analysis.noise import noise_curves
    from freqpair.app.limits import N_POINTS
    from freqpair.views.explore import explore_grid
    from freqpair.views.plots import pin_legend_items
    from freqpair.views.stage_data import supply_view
    doc, ex = session()
    pinned_design = ex.design
    ex.pin()
    ex.edit("tail.capacitance", "20 pF")
    f = explore_grid(pinned_design, N_POINTS)
    a = freqpair.analyze(pinned_design)
    want_psrr = supply_view(a, f)["curves"]
    want_en = noise_curves(a.responses, f).input_v_rthz
    for view, panel_type, fig_name in (("Supply", "SupplyPanel", "psrr_figure"),
                                       ("Noise", "NoisePanel", "noise_figure")):
        ex.show_view(view)
        panel = next(p for p in ex.panels if type(p).__name__ == panel_type)
        src = panel.pinned.sources[0].data
        if view == "Supply":
            np.testing.assert_array_equal(src["psrr_pos_db"], want_psrr["psrr_pos_db"])
            np.testing.assert_array_equal(src["psrr_neg_db"], want_psrr["psrr_neg_db"])
        else:
            np.testing.assert_array_equal(src["en_v_rthz"], want_en)
        fig = doc.select_one({"name": fig_name})
        items = pin_legend_items(fig, 0)
        assert items and all(i.visible for i in items)
        assert all(i.label.value == ex.pin_labels()[0] for i in items)
        assert not any(i.visible for i in pin_legend_items(fig, 1))     # no second pin
    ex.clear_pins()                     # the Noise view is open: its pin goes at once
    noise = next(p for p in ex.panels if type(p).__name__ == "NoisePanel")
    assert all(len(v) == 0 for v in noise.pinned.sources[0].data.values())
    assert not any(i.visible for i in pin_legend_items(doc.select_one({"name": "noise_figure"}),
                                                         0))
