"""The explorer app in-process: drive widgets, check the data sources against freqpair."""
from __future__ import annotations

import base64
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from bokeh.document import Document

import freqpair
from freqpair.app import app_dir
from freqpair.app.view import MAX_FILE_BYTES, make_doc
from freqpair.design import BUILTIN_EXAMPLE

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


def test_pin_keeps_a_snapshot_and_clear_removes_it(app):
    doc, ex = app
    old = np.array(ex.curves.data["cmrr_se_db"])
    ex.pin()
    w(doc, "text:tail.capacitance").value = "20 pF"
    assert not np.array_equal(np.asarray(ex.curves.data["cmrr_se_db"]), old)
    np.testing.assert_array_equal(np.asarray(ex.pinned.data["cmrr_se_db"]), old)
    ex.clear_pins()
    assert len(ex.pinned.data["cmrr_se_db"]) == 0


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


def test_feedback_factor_adds_a_loop_row(app):
    doc, ex = app
    w(doc, "text:feedback.factor").value = "0.05"
    assert ex.design.feedback.factor == 0.05
    q = ex.metrics.data["quantity"]
    assert "phase margin" in q or ex.metrics.data["value"][-1] == "not available in this build"


def test_feedback_factor_gives_margins_when_the_loop_module_is_there(app):
    pytest.importorskip("freqpair.loop")
    doc, ex = app
    w(doc, "text:feedback.factor").value = "0.05"
    assert "phase margin" in ex.metrics.data["quantity"]


def test_hand_table_is_filled_when_the_hand_module_is_there(app):
    pytest.importorskip("freqpair.hand")
    doc, ex = app
    assert len(ex.hand.data["quantity"]) >= 1
    assert ex.hand.data["exact"][0] != "not available in this build"


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
