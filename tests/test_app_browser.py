"""End-to-end: the real `freqpair app` server in headless Chromium."""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.measured import read_measurement

from browser_util import (console_errors, free_port, make_driver, stop_server,
                          wait_for_bokeh, wait_until)

ROOT = Path(__file__).resolve().parent.parent
ARTIFACTS = ROOT / "test-artifacts"

CORNER_JS = ("const s = Bokeh.documents[0].get_model_by_name('corner_source');"
             "return s.data.f_hz.length ? Number(s.data.f_hz[0]) : null;")


@pytest.fixture
def server():
    port = free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app", "--no-browser",
                             "--port", str(port)], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = proc.stdout.readline()        # printed once the server listens
        assert f"127.0.0.1:{port}" in line, proc.stderr.read() if proc.poll() else line
        yield port, proc
    finally:
        stop_server(proc)


@pytest.mark.browser
def test_typing_a_tail_capacitance_in_the_page_moves_the_plotted_cmrr_corner(server, tmp_path):
    port, proc = server
    driver = make_driver(tmp_path)
    try:
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        before = wait_until(lambda: driver.execute_script(CORNER_JS))
        driver.execute_script("Bokeh.documents[0].get_model_by_name('text:tail.capacitance')"
                              ".value = '20 pF';")
        after = wait_until(lambda: (v := driver.execute_script(CORNER_JS)) != before and v)
        time.sleep(0.5)   # let the page redraw before the screenshot
        ARTIFACTS.mkdir(exist_ok=True)
        driver.save_screenshot(str(ARTIFACTS / "explorer.png"))
        errors = console_errors(driver)
    finally:
        driver.quit()
    # oracle: freqpair.analyze on the same edit (the page must show what the library says)
    base = freqpair.design_from_text(BUILTIN_EXAMPLE)
    want = freqpair.analyze(freqpair.replace_value(base, "tail.capacitance", "20 pF"))
    assert after == pytest.approx(want.cmrr_corner_hz, rel=1e-9)
    assert before == pytest.approx(freqpair.analyze(base).cmrr_corner_hz, rel=1e-9)
    assert errors == []


@pytest.mark.browser
def test_app_server_stops_cleanly_on_sigterm(server):
    port, proc = server
    proc.terminate()
    assert proc.wait(timeout=10) == 0       # common practice: clean exit status
    assert "stopped" in proc.stderr.read()


MEASURED = ROOT / "examples" / "measured" / "bench_front_end_cmrr_synthetic.csv"


@pytest.mark.browser
def test_measurement_uploaded_in_the_page_shows_markers_and_residual(tmp_path):
    import base64
    port = free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app",
                             str(ROOT / "examples" / "npn_resistor_rc_tail.toml"), "--no-browser",
                             "--port", str(port)], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    driver = None
    try:
        assert f"127.0.0.1:{port}" in proc.stdout.readline()
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        b64 = base64.b64encode(MEASURED.read_bytes()).decode()
        driver.execute_script(
            "const m = Bokeh.documents[0].get_model_by_name('measured_file');"
            "m.setv({filename: arguments[1], value: arguments[0]});", b64, MEASURED.name)
        n = wait_until(lambda: driver.execute_script(
            "return Bokeh.documents[0].get_model_by_name('measured_source').data.f_hz.length;"))
        driver.execute_script(   # show the CMRR tab, where the markers are
            "Bokeh.documents[0].get_model_by_name('views').active = 1;")
        time.sleep(1.0)
        ARTIFACTS.mkdir(exist_ok=True)
        driver.save_screenshot(str(ARTIFACTS / "explorer_measured.png"))
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    # oracle: the CSV file's data rows (freqpair.studies.measured reads them; counted by the reader)
    assert n == len(read_measurement(MEASURED, "cmrr"))
    assert errors == []


SIDEBAR_BOTTOM_JS = """
const doc = Bokeh.documents[0];
const m = doc.get_model_by_name('controls');
const v = Bokeh.index.find_one(m);
return v ? [v.el.getBoundingClientRect().bottom, window.innerHeight] : null;
"""


@pytest.mark.browser
def test_pins_and_second_stage_in_the_page_and_every_value_tab_fits_1366x768(server, tmp_path):
    port, proc = server
    driver = make_driver(tmp_path)
    m = "Bokeh.documents[0].get_model_by_name"
    click = ("const {ButtonClick} = Bokeh.require('core/bokeh_events');"
             f"{m}(arguments[0]).trigger_event(new ButtonClick());")
    bottoms = {}
    try:
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        wait_until(lambda: driver.execute_script(CORNER_JS))
        driver.execute_script(click, "pin")
        n_pinned = wait_until(lambda: driver.execute_script(
            f"return {m}('pin_source:0').data.f_hz.length;"))
        driver.execute_script(click, "second_stage_toggle")
        wait_until(lambda: driver.execute_script(
            f"return !!{m}('text:second_stage.gm');"))
        for tab in range(6):      # every tab of values (Files is the 7th)
            driver.execute_script(f"{m}('controls').active = arguments[0];", tab)
            time.sleep(0.4)
            bottoms[tab] = driver.execute_script(SIDEBAR_BOTTOM_JS)
        driver.execute_script(f"{m}('controls').active = 1;")
        time.sleep(0.5)
        ARTIFACTS.mkdir(exist_ok=True)
        driver.save_screenshot(str(ARTIFACTS / "explorer_pins_pair_tab.png"))
        errors = console_errors(driver)
    finally:
        driver.quit()
    # oracle: the curves hold 500 points (freqpair.app.view.N_POINTS); a pin copies them all
    assert n_pinned == 500
    # common practice: the controls are usable without scrolling on a 1366×768 screen
    # (the window's inner height, browser bars excluded, is what must hold them)
    for tab, (bottom, height) in bottoms.items():
        assert bottom <= height, f"tab {tab}: bottom {bottom:.0f} px > {height} px"
    assert errors == []
