"""The explorer app in-process: drive widgets, check the data sources against freqpair."""
from __future__ import annotations

import base64
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
import scipy.constants
import scipy.linalg
from bokeh.document import Document

import freqpair
import freqpair.studies.measured
from freqpair.app import app_dir
from freqpair.app.view import MAX_FILE_BYTES, N_POINTS, make_doc
from freqpair.views.explore import explore, explore_grid
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.analysis.poles import response_zpk

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def app():
    doc = Document()
    return doc, make_doc(doc)


def w(doc, name):
    model = doc.select_one({"name": name})
    assert model is not None, name
    return model


def base():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


def test_start_shows_the_builtin_example_with_500_points(app):
    doc, ex = app
    assert len(ex.curves.data["f_hz"]) == 500
    # oracle: freqpair.analyze on the same design (the app only copies its numbers)
    assert ex.corner.data["f_hz"][0] == freqpair.analyze(base()).cmrr_corner_hz


def test_raising_tail_capacitance_lowers_the_marked_corner_by_the_analyzed_ratio(app):
    doc, ex = app
    before = ex.corner.data["f_hz"][0]
    w(doc, "text:tail.capacitance").value = "20 pF"
    after = ex.corner.data["f_hz"][0]
    # oracle: freqpair.analyze on the two designs gives the expected corner ratio
    a0 = freqpair.analyze(base()).cmrr_corner_hz
    a1 = freqpair.analyze(freqpair.replace_value(base(), "tail.capacitance", 20e-12))
    assert after / before == pytest.approx(a1.cmrr_corner_hz / a0, rel=1e-12)
    assert after < before / 5     # textbook (Gray & Meyer §7, from memory): corner ∝ 1/C_tail


def test_throttled_slider_release_sets_the_value_and_updates(app):
    doc, ex = app
    slider = w(doc, "slider:tail.capacitance")
    slider.trigger("value_throttled", slider.value, -11.0)     # 10 pF on a log slider
    assert ex.design.tail.capacitance == pytest.approx(10e-12)
    assert w(doc, "text:tail.capacitance").value == "10 pF"
    want = freqpair.analyze(freqpair.replace_value(base(), "tail.capacitance", 10e-12))
    assert ex.corner.data["f_hz"][0] == pytest.approx(want.cmrr_corner_hz, rel=1e-12)


def test_bad_entry_shows_message_naming_value_and_keeps_data(app):
    doc, ex = app
    before = {k: np.array(v) for k, v in ex.curves.data.items()}
    w(doc, "text:load.resistance").value = "ten k"
    assert "load.resistance" in ex.message_text and "'ten k'" in ex.message_text
    assert "kept the last good result" in ex.message_text
    for k, v in before.items():
        np.testing.assert_array_equal(np.asarray(ex.curves.data[k]), v)   # unchanged data


def test_infeasible_bias_names_the_device_and_keeps_data(app):
    doc, ex = app
    corner = list(ex.corner.data["f_hz"])
    w(doc, "text:bias.tail_current").value = "100 mA"
    # oracle: DESIGN.md §2 — 50 mA × 10 kΩ saturates the pair
    assert "saturated" in ex.message_text and "pair" in ex.message_text
    assert list(ex.corner.data["f_hz"]) == corner
    assert ex.design.bias.tail_current == pytest.approx(1e-3)
    w(doc, "text:bias.tail_current").value = "2 mA"      # the session keeps working
    assert ex.design.bias.tail_current == pytest.approx(2e-3)


def _legend(fig):
    return {item.label.value: item for item in fig.legend[0].items}


def test_pins_accumulate_each_named_by_its_differing_value_and_clear_removes_all(app):
    doc, ex = app
    mag, phase, cmrr = ex._figures
    shown = []
    for c in ("2 pF", "5 pF", "20 pF"):
        w(doc, "text:tail.capacitance").value = c
        shown.append(np.array(ex.curves.data["cmrr_se_db"]))
        ex.pin()
    w(doc, "text:tail.capacitance").value = "1 pF"
    # each pin keeps the curves that were on screen when it was taken (common practice:
    # a snapshot does not follow later edits)
    for k, want in enumerate(shown):
        np.testing.assert_array_equal(np.asarray(ex.pin_sources[k].data["cmrr_se_db"]), want)
    assert ex.pin_labels() == ["pin 1: C_tail 2 pF", "pin 2: C_tail 5 pF", "pin 3: C_tail 20 pF"]
    for fig in (mag, cmrr):
        legend = _legend(fig)
        assert all(legend[name].visible for name in ex.pin_labels())
        assert not legend["pin 4"].visible and not legend["pin 5"].visible
    # each pin has its own colour and dash on every plot
    styles = {(r.glyph.line_color, str(r.glyph.line_dash)) for r in cmrr.renderers
              if (r.name or "").startswith("cmrr_se_pin")}
    assert len(styles) == 5
    ex.clear_pins()
    assert ex.pins == [] and all(len(s.data["cmrr_se_db"]) == 0 for s in ex.pin_sources)
    assert not any(item.visible for fig in (mag, cmrr) for item in fig.legend[0].items
                   if item.label.value.startswith("pin "))
    ex.pin()
    assert ex.pin_labels() == ["pin 1: as now"]       # numbering starts again


def test_sixth_pin_drops_the_oldest_with_a_note(app):
    doc, ex = app
    for k in range(6):
        w(doc, "text:load.capacitance").value = f"{k + 1} pF"
        ex.pin()
    assert [p.number for p in ex.pins] == [2, 3, 4, 5, 6]
    assert "pin 1 dropped" in ex.message_text
    # pin 6 reuses pin 1's slot, so the other pins keep their colours
    assert ex.pins[-1].slot == 0
    np.testing.assert_array_equal(np.asarray(ex.pin_sources[0].data["f_hz"]),
                                  np.asarray(ex.curves.data["f_hz"]))


def test_adding_a_second_stage_shows_a_total_and_removing_it_restores(app):
    doc, ex = app
    before = {k: np.array(v) for k, v in ex.curves.data.items()}
    ex.show_view("Numbers")           # the table is filled while it is shown
    rows_before = dict(zip(ex.metrics.data["quantity"], ex.metrics.data["value"]))
    toggle = w(doc, "second_stage_toggle")
    assert toggle.label == "Add second stage" and "second_stage.gm" not in ex.texts
    ex.toggle_second_stage()
    d = ex.design
    assert d.second_stage is not None and d.second_stage.gm == pytest.approx(4e-3)
    assert d.second_stage.miller_capacitance == pytest.approx(3e-12)
    for key in ("gm", "output_resistance", "input_capacitance", "load_capacitance",
                "miller_capacitance", "nulling_resistance"):
        assert f"second_stage.{key}" in ex.texts and doc.select_one(
            {"name": f"text:second_stage.{key}"}) is not None
    assert w(doc, "second_stage_toggle").label == "Remove second stage"
    an = freqpair.analyze(d)
    # oracle: freqpair.analyze on the same two-stage design (DESIGN.md §3a: A_total)
    assert _row(ex, "overall gain A_total at DC") == f"{an.a_total_db:.2f} dB"
    assert ex.data["primary"] == "a_total"
    assert "overall gain A_total (second stage out)" in _legend(ex._figures[0])
    # textbook (Gray & Meyer §9.4, from memory): A_total(0) = A_1·g_m2·R_out2 with A_1
    # the first stage's DC gain at o2 (loaded by C only, so unchanged at DC)
    a1 = 10 ** (an.adm_db_first / 20)
    assert 10 ** (an.a_total_db / 20) == pytest.approx(a1 * 4e-3 * 150e3, rel=1e-9)
    w(doc, "text:second_stage.miller_capacitance").value = "6 pF"    # its controls work
    assert ex.design.second_stage.miller_capacitance == pytest.approx(6e-12)
    ex.toggle_second_stage()
    assert ex.design.second_stage is None and "second_stage.gm" not in ex.texts
    assert w(doc, "second_stage_toggle").label == "Add second stage"
    assert dict(zip(ex.metrics.data["quantity"], ex.metrics.data["value"])) == rows_before
    for k, v in before.items():
        np.testing.assert_array_equal(np.asarray(ex.curves.data[k]), v)
    assert "differential gain A_dm" in _legend(ex._figures[0])


def test_empty_feedback_box_removes_the_loop_and_offers_the_box_again(app):
    doc, ex = app
    w(doc, "text:feedback.factor").value = "0.05"
    ex.show_view("Numbers")
    assert ex.design.feedback is not None and "phase margin" in ex.metrics.data["quantity"]
    w(doc, "text:feedback.factor").value = ""
    # DESIGN.md §3: [feedback] is optional; without it there are no margins
    assert ex.design.feedback is None
    assert _row(ex, "loop margins") == "set a feedback factor to see them"
    assert w(doc, "text:feedback.factor").value == ""


def test_value_controls_are_one_line_each(app):
    doc, ex = app
    # common practice for a 768 px high screen: label, entry and slider side by side
    line = w(doc, "row:pair.beta")
    names = [getattr(c, "name", None) for c in line.children]
    assert names[1:] == ["text:pair.beta", "slider:pair.beta"]
    assert w(doc, "text:pair.beta").title in (None, "")


def test_saved_design_reads_back_as_the_design_on_screen(app):
    doc, ex = app
    w(doc, "text:tail.capacitance").value = "4.7 pF"
    ex.save_design()
    text = ex.downloads.data["text"][0]
    # oracle: the standard library TOML reader and freqpair's own design parser
    assert tomllib.loads(text)["tail"]["capacitance"] == pytest.approx(4.7e-12)
    assert freqpair.design_from_text(text) == ex.design


def test_csv_download_holds_the_curves_on_screen(app):
    doc, ex = app
    ex.save_csv()
    assert ex.downloads.data["filename"] == ["curves.csv"]
    lines = ex.downloads.data["text"][0].strip().split("\n")
    assert len(lines) == 501 and lines[0].startswith("f_hz,")     # common practice: header
    assert float(lines[1].split(",")[0]) == ex.curves.data["f_hz"][0]


def test_loading_a_file_replaces_the_design(app):
    doc, ex = app
    path = ROOT / "examples" / "npn_resistor_rc_tail.toml"
    assert ex.load_file(base64.b64encode(path.read_bytes()).decode(), path.name)
    want = freqpair.analyze(freqpair.load_design(path))
    # oracle: freqpair.analyze on the file itself
    assert ex.corner.data["f_hz"][0] == want.cmrr_corner_hz
    assert w(doc, "text:tail.resistance").value == "470 kΩ"


def test_oversized_or_bad_file_is_refused_with_a_message(app):
    doc, ex = app
    corner = list(ex.corner.data["f_hz"])
    big = base64.b64encode(b"#" * (MAX_FILE_BYTES + 10)).decode()
    assert not ex.load_file(big, "huge.toml")
    assert "huge.toml" in ex.message_text and "256 kB" in ex.message_text
    assert not ex.load_file(base64.b64encode(b"[pair\nbeta=").decode(), "broken.toml")
    assert "broken.toml" in ex.message_text and "TOML" in ex.message_text
    assert list(ex.corner.data["f_hz"]) == corner


def test_switching_pair_kind_rebuilds_the_controls(app):
    doc, ex = app
    w(doc, "kind:pair").value = "nmos"
    assert ex.design.pair.type == "nmos"
    assert "pair.width" in ex.texts and "pair.beta" not in ex.texts
    assert doc.select_one({"name": "text:pair.width"}) is not None


def test_cmrr_target_moves_the_marked_crossing(app):
    doc, ex = app
    w(doc, "cmrr_target").value = "80"
    f = ex.target.data["f_hz"][0]
    assert ex.target.data["cmrr_db"] == [80.0]
    r = freqpair.analyze(ex.design).responses.at([f])
    # oracle: the exact response at the marked frequency sits on the target
    assert 20 * np.log10(abs(r.adm_se[0]) / abs(r.acm_se[0])) == pytest.approx(80.0, abs=1e-6)
    w(doc, "cmrr_target").value = "lots"
    assert "CMRR target" in ex.message_text and "'lots'" in ex.message_text


def _row(ex, quantity):
    ex.show_view("Numbers")           # the table is filled while it is shown
    rows = dict(zip(ex.metrics.data["quantity"], ex.metrics.data["value"]))
    assert quantity in rows, sorted(rows)
    return rows[quantity]


def _loop_margins_by_python_control(design):
    """Phase and gain margin of T = β_f·A·sign from python-control on the exact zpk."""
    import control
    an = freqpair.analyze(design)
    z, p, k = response_zpk(an).zpk()
    beta = design.feedback.factor
    tf = control.zpk(z, p, k * beta)
    sign = 1.0 if np.real(tf(0)) > 0 else -1.0
    gm, pm, _, _, wpc, _ = control.stability_margins(sign * tf)
    return pm, 20 * np.log10(gm), wpc / (2 * np.pi)


def test_feedback_factor_typed_in_the_app_shows_margins_python_control_agrees_with(app):
    doc, ex = app
    w(doc, "text:feedback.factor").value = "0.05"
    assert ex.design.feedback.factor == 0.05
    pm, _, fc = _loop_margins_by_python_control(ex.design)
    # oracle: python-control stability_margins on the same loop gain (zpk from the pencil)
    assert float(_row(ex, "phase margin").rstrip("°")) == pytest.approx(pm, abs=0.06)
    assert freqpair.parse_si(_row(ex, "loop crossover"), field="crossover", unit="hertz") == pytest.approx(fc, rel=1e-3)


def test_two_stage_feedback_design_shows_phase_and_gain_margin():
    doc = Document()
    ex = make_doc(doc, str(ROOT / "examples" / "two_stage_miller_loop.toml"))
    assert ex.design.second_stage is not None and ex.design.feedback is not None
    pm, gm_db, _ = _loop_margins_by_python_control(ex.design)
    # oracle: python-control stability_margins on T = β_f·A_total (same zpk)
    assert float(_row(ex, "phase margin").rstrip("°")) == pytest.approx(pm, abs=0.06)
    assert float(_row(ex, "gain margin").removesuffix(" dB")) == pytest.approx(gm_db, abs=0.06)
    assert _row(ex, "closed loop stable") == "yes"
    assert "not available" not in " ".join(ex.metrics.data["value"])


def test_hand_table_shows_the_textbook_gain_beside_the_exact_one(app):
    doc, ex = app
    ex.show_view("Hand estimates")    # the table is filled while it is shown
    q = ex.hand.data["quantity"]
    i = next(k for k, name in enumerate(q) if name.startswith("DC differential gain"))
    d = ex.design
    vt = scipy.constants.k * d.bias.temperature / scipy.constants.e
    ic = d.bias.tail_current / 2 * d.pair.beta / (d.pair.beta + 1)
    gm, rpi = ic / vt, d.pair.beta * vt / ic
    r_out = 1 / (1 / d.load.resistance + ic / d.pair.early_voltage)
    hand = gm * r_out * rpi / (rpi + d.source.resistance + d.pair.base_resistance)
    # oracle: textbook A_dm = g_m·(R_L∥r_o)·r_π/(r_π+R_s+r_b) (Gray & Meyer §3.5, from
    # memory), V_T = kT/q from CODATA (scipy.constants) at 300 K
    shown = float(ex.hand.data["approx"][i].removesuffix(" V/V"))
    assert abs(shown) == pytest.approx(hand, rel=1e-3)   # 4 digits shown
    assert len(q) >= 5 and "not available" not in " ".join(ex.hand.data["exact"])


def test_pole_zero_map_of_a_matched_pair_is_the_half_circuit_without_cancelled_pairs():
    doc = Document()
    ex = make_doc(doc, str(ROOT / "examples" / "npn_resistor_rc_tail.toml"))
    d, ss = ex.design, freqpair.analyze(ex.design).operating_point.small_signal
    # oracle: hand-written KCL of the differential half circuit (Gray & Meyer §7.2, from
    # memory): nodes b' and o; the tail sits at AC ground for a balanced drive, so every
    # tail and common-mode root cancels out of A_dm. Poles: scipy.linalg.eigvals(G, −C).
    g_in = 1 / (d.source.resistance + d.pair.base_resistance) + 1 / ss.r_in
    G = np.array([[g_in, 0.0], [ss.gm, 1 / d.load.resistance + 1 / ss.ro]])
    C = np.array([[ss.c_in + ss.c_fb, -ss.c_fb],
                  [-ss.c_fb, ss.c_fb + d.load.capacitance + d.pair.ccs]])
    want_poles = np.sort(np.abs(scipy.linalg.eigvals(G, -C))) / (2 * np.pi)
    ex.show_view("Poles & zeros")     # the map is computed while it is shown
    kinds = list(ex.pz.data["kind"])
    mags = np.asarray(ex.pz.data["mag_hz"])
    got_poles = np.sort(mags[[k == "pole" for k in kinds]])
    assert kinds.count("pole") == 2 and kinds.count("zero") == 1
    np.testing.assert_allclose(got_poles, want_poles, rtol=1e-9)
    zero = kinds.index("zero")
    # oracle: the feed-forward zero of C_μ sits at +g_m/C_μ (right half-plane), same source
    assert ex.pz.data["re_hz"][zero] == pytest.approx(ss.gm / ss.c_fb / (2 * np.pi), rel=1e-9)
    assert ex.pz.data["half_plane"][zero] == "right"


def test_cascode_tail_norton_resistance_matches_the_textbook_cascode():
    doc = Document()
    ex = make_doc(doc, str(ROOT / "examples" / "nmos_mirror_load_cascode_tail.toml"))
    dev, i = ex.design.tail.device, ex.design.bias.tail_current
    gm = math.sqrt(2 * dev.mobility_cox * dev.width / dev.length * i)
    ro = 1 / (dev.lambda_ * i)
    # oracle: cascode output resistance r_o1 + r_o2 + g_m2·r_o1·r_o2, no body effect
    # (Razavi, Design of Analog CMOS ICs §3.5, from memory)
    want = 2 * ro + gm * ro * ro
    assert freqpair.parse_si(_row(ex, "tail resistance (Norton)"), field="R", unit="ohm") == pytest.approx(
        want, rel=1e-3)
    assert freqpair.parse_si(_row(ex, "tail capacitance (Norton)"), field="C", unit="farad") > 0.4e-12


@pytest.mark.parametrize("kind", ["mirror", "degenerated", "cascode"])
def test_switching_tail_kind_in_the_app_gives_a_transistor_tail_of_the_pair_polarity(app, kind):
    doc, ex = app
    w(doc, "kind:tail").value = kind
    assert ex.design.tail.type == kind, ex.message_text
    # oracle: DESIGN.md §3a — tail devices have the pair's polarity
    assert ex.design.tail.device.type == ex.design.pair.type == "npn"
    assert "tail.device.beta" in ex.texts
    r_tail = freqpair.parse_si(_row(ex, "tail resistance (Norton)"), field="R", unit="ohm")
    ro = ex.design.tail.device.early_voltage / ex.design.bias.tail_current
    if kind == "mirror":
        # oracle: simple current-source output resistance r_o = V_A/I_C (Gray & Meyer §4.2)
        assert r_tail == pytest.approx(ro, rel=1e-3)
    else:
        # oracle: common practice — degeneration and cascoding raise R_out well above r_o
        assert r_tail > 20 * ro
    w(doc, "text:tail.extra_capacitance").value = "3 pF"     # the new controls work
    assert ex.design.tail.extra_capacitance == pytest.approx(3e-12)


def test_switching_the_pair_to_nmos_keeps_a_transistor_tail_and_swaps_its_device(app):
    doc, ex = app
    w(doc, "kind:tail").value = "mirror"
    w(doc, "kind:pair").value = "nmos"
    assert ex.design.pair.type == "nmos", ex.message_text
    # oracle: DESIGN.md §3a — an nmos pair's tail devices are nmos
    assert ex.design.tail.type == "mirror" and ex.design.tail.device.type == "nmos"
    assert "tail.device.width" in ex.texts and "tail.device.beta" not in ex.texts


def test_explorer_app_ships_inside_the_package():
    main = app_dir() / "main.py"
    assert main.is_file()
    # the directory app is under the installed package, so a wheel install finds it
    assert app_dir().parent == Path(freqpair.__file__).parent / "app"
    data = tomllib.loads((ROOT / "pyproject.toml").read_text())
    assert "app/explorer/*.py" in data["tool"]["setuptools"]["package-data"]["freqpair"]


def test_directory_app_builds_a_document():
    from bokeh.application import Application
    from bokeh.application.handlers import DirectoryHandler
    handler = DirectoryHandler(filename=str(app_dir()), argv=[])
    doc = Document()
    Application(handler).initialize_document(doc)
    assert not handler.failed, handler.error
    assert doc.select_one({"name": "curves_source"}) is not None


def test_cli_app_with_a_bad_design_exits_with_one_line(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(BUILTIN_EXAMPLE.replace("beta = 200", "beta = -5"))
    proc = subprocess.run([sys.executable, "-m", "freqpair.cli", "app", str(bad), "--no-browser",
                           "--port", "1"], capture_output=True, text=True, timeout=60,
                          cwd=ROOT, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr.strip().count("\n") == 0 and "pair.beta = -5" in proc.stderr


# ------------------------------------------------------------------ measurement overlay
MEASURED = ROOT / "examples" / "measured" / "bench_front_end_cmrr_synthetic.csv"


def _b64(path_or_bytes):
    data = path_or_bytes if isinstance(path_or_bytes, bytes) else path_or_bytes.read_bytes()
    return base64.b64encode(data).decode()


@pytest.fixture
def bench():
    doc = Document()
    return doc, make_doc(doc, str(ROOT / "examples" / "npn_resistor_rc_tail.toml"))


def test_loaded_cmrr_measurement_is_drawn_over_the_cmrr_plot_with_its_residual(bench):
    doc, ex = bench
    w(doc, "measured_kind").value = "cmrr"
    assert ex.measured.load(_b64(MEASURED), MEASURED.name), ex.message_text
    src = w(doc, "measured_source")
    meas = freqpair.studies.measured.read_measurement(MEASURED, "cmrr")
    # oracle: the CSV file read back by the csv module (common practice): first/last rows
    import csv
    rows = [r for r in csv.reader(l for l in MEASURED.read_text().splitlines()
                                  if not l.startswith("#"))][1:]
    assert len(src.data["f_hz"]) == len(rows) == len(meas)
    assert src.data["f_hz"][0] == float(rows[0][0]) and src.data["f_hz"][-1] == float(rows[-1][0])
    np.testing.assert_array_equal(src.data["measured_db"], [float(r[1]) for r in rows])
    ov = freqpair.studies.measured.overlay(freqpair.analyze(ex.design), meas)
    np.testing.assert_allclose(src.data["residual_db"], ov.measured_db - ov.model_db,
                               rtol=0, atol=1e-12)
    # oracle: numpy.linalg.solve of G + j2πf·C: the model column is the single-ended CMRR
    stage = freqpair.build_stage(ex.design)
    G, C, B = stage.network.matrices()
    o2 = stage.network.selector({"o2": 1.0})
    for i in (0, len(rows) // 2, len(rows) - 1):
        x = np.linalg.solve(G + 2j * np.pi * src.data["f_hz"][i] * C, B[:, :2])   # in1, in2
        cmrr = abs(o2 @ x @ np.array([0.5, -0.5])) / abs(o2 @ x @ np.array([1.0, 1.0]))
        assert src.data["model_db"][i] == pytest.approx(20 * np.log10(cmrr), abs=1e-9)
    rms = math.sqrt(np.mean(np.square(ov.measured_db - ov.model_db)))
    assert _row(ex, "measured − model, rms") == f"{rms:.2f} dB"   # numpy rms, 2 decimals
    assert w(doc, "measured_cmrr").visible and not w(doc, "measured_gains").visible
    assert w(doc, "residual_cmrr").visible and not w(doc, "residual_gains").visible
    # the residual's secondary axis holds every residual point (common practice: no clipping)
    fig = next(m for m in doc.roots[0].references()
               if "residual_cmrr" in getattr(m, "extra_y_ranges", {}))
    rng = fig.extra_y_ranges["residual_cmrr"]
    assert rng.start <= min(src.data["residual_db"]) and rng.end >= max(src.data["residual_db"])


def test_measurement_overlay_follows_a_design_edit(bench):
    doc, ex = bench
    ex.measured.load(_b64(MEASURED), MEASURED.name)
    before = np.array(w(doc, "measured_source").data["model_db"])
    w(doc, "text:tail.capacitance").value = "5.6 pF"
    w(doc, "text:tail.resistance").value = "330 k"
    src = w(doc, "measured_source")
    assert not np.array_equal(before, src.data["model_db"])
    # oracle: the CSV's own header says it was made from tail 330 kΩ ∥ 5.6 pF with 0.2 dB
    # noise, so the residual rms at that design is about the noise level
    rms = math.sqrt(np.mean(np.square(src.data["residual_db"])))
    assert rms < 0.4


def test_gain_kind_is_drawn_on_the_gain_plot_and_clear_removes_it(bench):
    doc, ex = bench
    w(doc, "measured_kind").value = "acm_se"
    assert ex.measured.load(_b64(MEASURED), "cm.csv"), ex.message_text
    assert w(doc, "measured_gains").visible and not w(doc, "measured_cmrr").visible
    w(doc, "measured_kind").value = "cmrr"       # re-read the same file as another kind
    assert w(doc, "measured_cmrr").visible
    ex.measured.clear()
    assert len(w(doc, "measured_source").data["f_hz"]) == 0
    assert not w(doc, "measured_cmrr").visible and not w(doc, "residual_cmrr").visible
    ex.show_view("Numbers")
    assert not any(q.startswith("measured") for q in ex.metrics.data["quantity"])


@pytest.mark.parametrize("content, name, words", [
    (b"frequency [Hz],CMRR [dB]\n1000,80\n500,79\n", "backwards.csv", "increasing"),
    (b"frequency [Hz],CMRR [dB]\n1000,eighty\n", "words.csv", "'eighty'"),
    (b"\xff\xfe\x00bad", "binary.csv", "UTF-8"),
    (b"#" * (MAX_FILE_BYTES + 10), "huge.csv", "256 kB"),
])
def test_bad_measurement_file_gives_one_line_and_keeps_the_last_good_view(bench, content, name,
                                                                          words):
    doc, ex = bench
    assert ex.measured.load(_b64(MEASURED), MEASURED.name)
    before = list(w(doc, "measured_source").data["f_hz"])
    assert not ex.measured.load(_b64(content), name)
    # common practice: one line naming the file and what is wrong
    assert name in ex.message_text and words in ex.message_text
    assert "\n" not in ex.message_text and "kept the last good result" in ex.message_text
    assert list(w(doc, "measured_source").data["f_hz"]) == before


def test_kind_the_stage_does_not_have_is_refused_and_the_selector_goes_back():
    doc = Document()
    ex = make_doc(doc, str(ROOT / "examples" / "nmos_mirror_load_cascode_tail.toml"))
    ex.measured.load(_b64(MEASURED), MEASURED.name)
    w(doc, "measured_kind").value = "cmrr_balanced"
    # oracle: DESIGN.md §3a — a mirror-loaded stage has no balanced output
    assert "not defined for this stage" in ex.message_text
    assert w(doc, "measured_kind").value == "cmrr"
    assert w(doc, "measured_cmrr").visible


def test_pins_that_differ_from_the_screen_in_the_same_way_are_told_apart(app):
    doc, ex = app
    for c in ("2 pF", "5 pF"):
        w(doc, "text:tail.capacitance").value = c
        ex.pin()
    w(doc, "kind:tail").value = "mirror"
    # DESIGN.md §3a: a mirror tail has no `capacitance` key, so both pins differ from the
    # screen by the tail kind; each is then named by its own C_tail too
    assert ex.pin_labels() == ["pin 1: tail norton, C_tail 2 pF", "pin 2: tail norton, C_tail 5 pF"]


def _legend_item(fig, renderer_name):
    """(label, shown) of the legend item holding the renderer ``renderer_name``."""
    items = [i for i in fig.legend[0].items if any(r.name == renderer_name for r in i.renderers)]
    assert len(items) == 1, renderer_name
    return items[0].label.value, items[0].visible


def _hover_names(fig, tool_name):
    from bokeh.models import HoverTool
    (tool,) = fig.select(dict(type=HoverTool, name=tool_name))
    return [name for name, _ in tool.tooltips][1:]       # after "frequency"


def test_legends_and_hovers_name_only_the_curves_of_the_design_on_screen():
    doc = Document()
    ex = make_doc(doc, str(ROOT / "examples" / "two_stage_miller_loop.toml"))
    mag, phase, cmrr = ex._figures
    # oracle: DESIGN.md §3a — a mirror load has one output: no A_cm-dm, no balanced CMRR;
    # with a second stage the plotted gain is A_total
    assert ex.design.load.type == "mirror" and ex.design.second_stage is not None
    assert _legend_item(mag, "adm") == ("overall gain A_total (second stage out)", True)
    assert _legend_item(mag, "acm_dm")[1] is False and _legend_item(cmrr, "cmrr")[1] is False
    assert _hover_names(mag, "gain_hover") == ["overall gain A_total (second stage out)",
                                               "common-mode gain A_cm,se (o2)"]
    assert _hover_names(cmrr, "cmrr_hover") == ["CMRR single-ended"]
    # a resistor load (two outputs, DESIGN.md §2, mismatched so A_cm-dm ≠ 0): the
    # balanced CMRR is drawn, named and hovered; switching back hides it again
    w(doc, "kind:load").value = "resistor"
    w(doc, "text:mismatch.load").value = "0.02"
    assert ex.design.load.type == "resistor", ex.message_text
    assert np.isfinite(ex.curves.data["cmrr_db"]).all()
    assert "cmrr" in [r.name for r in cmrr.renderers]
    assert _legend_item(cmrr, "cmrr") == ("CMRR balanced", True)
    assert _legend_item(mag, "acm_dm")[1] is True
    assert _hover_names(cmrr, "cmrr_hover") == ["CMRR single-ended", "CMRR balanced"]
    assert "common-mode to differential A_cm-dm" in _hover_names(phase, "gain_hover")
    w(doc, "kind:load").value = "mirror"
    assert _legend_item(cmrr, "cmrr")[1] is False and _legend_item(mag, "acm_dm")[1] is False
    # without the second stage the plotted gain is A_dm,se at o2 (DESIGN.md §3a)
    ex.toggle_second_stage()
    assert ex.design.second_stage is None, ex.message_text
    assert _legend_item(mag, "adm") == ("differential gain A_dm,se (o2)", True)
    assert _hover_names(mag, "gain_hover")[0] == "differential gain A_dm,se (o2)"


def test_a_refused_kind_or_slider_value_puts_the_control_back_on_the_design_shown(app):
    doc, ex = app
    w(doc, "text:supply.negative").value = "-1.2"       # room for a resistor tail only
    shown = ex.design
    w(doc, "kind:tail").value = "cascode"
    # oracle: DESIGN.md §3a — a cascode tail needs V_BE + 0.3 V = 1 V, the rail leaves 0.5 V
    assert "starved" in ex.message_text and ex.design is shown
    assert w(doc, "kind:tail").value == shown.tail.type == "norton"
    slider = w(doc, "slider:bias.tail_current")
    before = slider.value
    slider.value = slider.end                             # dragged to the top, released
    slider.trigger("value_throttled", before, slider.end)
    # oracle: DESIGN.md §2 — the largest tail current saturates the pair (V_CE < 0.2 V)
    assert "saturated" in ex.message_text and ex.design is shown
    assert slider.value == pytest.approx(before)


def test_a_panel_is_computed_only_while_its_view_is_open():
    # the explorer's contract for lazily computed views (freqpair.app.view.Explorer.add_panel)
    from bokeh.document import Document
    from bokeh.models import Div

    from freqpair.app import panels
    from freqpair.app.view import make_doc

    shown = []

    class Counting:
        title = "Counting"

        def __init__(self):
            self.div = Div(name="counting_div")

        def layout(self):
            return self.div

        def show(self, explorer):
            shown.append(explorer.design.tail.capacitance)
            self.div.text = f"{explorer.analysis.f3db_hz:.6g}"

    original = panels.make_panels
    panels.make_panels = lambda: [Counting()]
    try:
        doc = Document()
        ex = make_doc(doc)
    finally:
        panels.make_panels = original
    views = doc.select_one({"name": "views"})
    k = [t.title for t in views.tabs].index("Counting")
    assert shown == []                              # hidden: not computed at start
    ex.edit("tail.capacitance", "3 pF")
    assert shown == []                              # hidden: an edit costs nothing
    views.active = k
    assert shown == [pytest.approx(3e-12)]          # opened: computed once
    ex.edit("tail.capacitance", "4 pF")
    assert shown[-1] == pytest.approx(4e-12)        # open: follows every edit
    assert doc.select_one({"name": "counting_div"}).text == f"{ex.analysis.f3db_hz:.6g}"
    views.active = 0
    ex.edit("tail.capacitance", "5 pF")
    assert len(shown) == 2                          # hidden again: not computed


def test_tables_and_pole_zero_map_are_filled_while_shown_and_always_of_the_design_on_screen(app):
    # oracle: freqpair.views.explore.explore (the library) on the design the session holds
    doc, ex = app
    assert ex.metrics.data["quantity"] == [] and ex.hand.data["quantity"] == []   # hidden
    ex.edit("tail.capacitance", "7 pF")
    assert ex.metrics.data["quantity"] == []         # hidden: an edit computes no table
    for view, part, src in (("Numbers", "metrics", ex.metrics), ("Hand estimates", "hand", ex.hand),
                            ("Poles & zeros", "poles_zeros", ex.pz)):
        ex.show_view(view)
        want = explore(ex.design, explore_grid(ex.design, N_POINTS))[part]
        for k, v in want.items():
            np.testing.assert_array_equal(np.asarray(src.data[k]), np.asarray(v), err_msg=k)
        ex.edit("tail.capacitance", "9 pF")          # open: follows the edit at once
        want = explore(ex.design, explore_grid(ex.design, N_POINTS))[part]
        for k, v in want.items():
            np.testing.assert_array_equal(np.asarray(src.data[k]), np.asarray(v), err_msg=k)
        ex.edit("tail.capacitance", "7 pF")
    ex.show_view("Gains")
    ex.edit("tail.capacitance", "3 pF")              # hidden tables go stale ...
    ex.show_view("Numbers")                          # ... and are recomputed when opened
    want = explore(ex.design, explore_grid(ex.design, N_POINTS))["metrics"]
    assert list(ex.metrics.data["value"]) == want["value"]
