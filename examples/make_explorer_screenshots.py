"""Screenshots of the explorer at 1366×768 (headless Chromium) into docs/img/.

    python examples/make_explorer_screenshots.py

Two sessions of ``freqpair app`` on a free loopback port each:

* the bridge-sensor front end (``npn_degenerated_instrumentation.toml``): the
  Supply and Noise views, each opened as a person would (a click on its tab;
  the sidebar shows the added elements, then the Pair tab) →
  ``explorer_supply.png``, ``explorer_noise.png``;
* the two-stage Miller example: the design pinned as it is (Miller
  capacitance 8 pF), 30 pF typed, the Loop view opened →
  ``explorer_loop.png``; then Poles & zeros with the paths of the Miller
  capacitance → ``explorer_pole_paths.png``.

Needs /usr/bin/chromium, /usr/bin/chromedriver and selenium.
"""
from __future__ import annotations

import os
import pathlib
import shutil
import socket
import subprocess
import sys
import tempfile
import time

HERE = pathlib.Path(__file__).resolve().parent
ROOT = HERE.parent
BRIDGE = HERE / "npn_degenerated_instrumentation.toml"
MILLER = HERE / "two_stage_miller_loop.toml"
OUT = ROOT / "docs" / "img"

_M = "Bokeh.documents[0].get_model_by_name"
_CLICK = ("const {ButtonClick} = Bokeh.require('core/bokeh_events');"
          f"{_M}(arguments[0]).trigger_event(new ButtonClick());")

_TAB_JS = """
for (const m of Bokeh.documents[0].all_models) {
  if (m.name !== arguments[0]) { continue; }
  const v = Bokeh.index.find_one(m);
  if (!v || !v.el.isConnected) { continue; }
  return [...v.shadow_el.querySelectorAll('.bk-tab')]
         .find(e => e.textContent === arguments[1]) || null;
}
return null;
"""

_TEXT_JS = """
const m = Bokeh.documents[0].get_model_by_name(arguments[0]);
const v = m && Bokeh.index.find_one(m);
return v ? v.el.innerText || v.shadow_el.textContent : '';
"""


def _wait(predicate, timeout=30.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        value = predicate()
        if value:
            return value
        time.sleep(0.1)
    raise TimeoutError("the page did not get there in time")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _shoot(driver, name: str) -> None:
    time.sleep(1.5)   # let the canvases paint
    png = OUT / f"explorer_{name}.png"
    driver.save_screenshot(str(png))
    print(png.relative_to(ROOT))


def _supply_and_noise(driver) -> None:
    for view, side, ready, name in (("Supply", "More", "supply_readout", "supply"),
                                    ("Noise", "Pair", "noise_readout", "noise")):
        _wait(lambda: driver.execute_script(_TAB_JS, "views", view)).click()
        _wait(lambda: driver.execute_script(_TAB_JS, "controls", side)).click()
        _wait(lambda: driver.execute_script(_TEXT_JS, ready).strip())
        _shoot(driver, name)


def _loop_and_paths(driver) -> None:
    driver.execute_script(_CLICK, "pin")
    _wait(lambda: driver.execute_script(f"return {_M}('pin_source:0').data.f_hz.length;"))
    _wait(lambda: driver.execute_script(_TAB_JS, "controls", "Loop")).click()
    driver.execute_script(f"{_M}('text:second_stage.miller_capacitance').value = '30 pF';")
    _wait(lambda: driver.execute_script(_TAB_JS, "views", "Loop")).click()
    _wait(lambda: driver.execute_script(
        f"const a = {_M}('loop_pin:0'), b = {_M}('loop_curves');"
        "return a && b && a.data.f_hz.length && b.data.f_hz.length;"))
    _shoot(driver, "loop")
    _wait(lambda: driver.execute_script(_TAB_JS, "views", "Poles & zeros")).click()
    _wait(lambda: driver.execute_script(
        f"const p = {_M}('path_points'); return p && p.data.x.length;"))
    _shoot(driver, "pole_paths")


def _session(design: pathlib.Path, shots) -> None:
    """Serve ``design``, open it in headless Chromium at 1366×768 and run ``shots``."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app", str(design),
                             "--no-browser", "--port", str(port)], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    profile = tempfile.mkdtemp(prefix="fp-shot-")
    driver = None
    try:
        if f"127.0.0.1:{port}" not in proc.stdout.readline():
            raise RuntimeError("the app server did not start")
        opts = webdriver.ChromeOptions()
        opts.binary_location = "/usr/bin/chromium"
        for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                     "--no-first-run", "--disable-background-networking",
                     "--disable-component-update", "--disable-sync", "--hide-scrollbars",
                     f"--user-data-dir={profile}", "--window-size=1366,768"):
            opts.add_argument(flag)
        driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)
        driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                               {"width": 1366, "height": 768, "deviceScaleFactor": 1,
                                "mobile": False})
        driver.get(f"http://127.0.0.1:{port}/")
        _wait(lambda: driver.execute_script(
            "return !!(window.Bokeh && Bokeh.documents && Bokeh.documents.length "
            "&& Bokeh.documents[0].roots().length);"))
        shots(driver)
    finally:
        if driver is not None:
            driver.quit()
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        shutil.rmtree(profile, ignore_errors=True)


def main() -> int:
    OUT.mkdir(parents=True, exist_ok=True)
    _session(BRIDGE, _supply_and_noise)
    _session(MILLER, _loop_and_paths)
    return 0


if __name__ == "__main__":
    sys.exit(main())
