"""Screenshots of the explorer at 1366×768: the Loop view into docs/img/explorer_loop.png,
the pole paths into docs/img/explorer_pole_paths.png.

    PYTHONPATH=. python examples/make_explorer_screenshot.py

Starts ``freqpair app`` on the two-stage Miller example, pins the design as it
is (Miller capacitance 8 pF), types 30 pF, opens the Loop view and saves the
page; then opens Poles & zeros (the paths of the Miller capacitance) and saves it. Needs /usr/bin/chromium and /usr/bin/chromedriver (and selenium).
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
WIDTH, HEIGHT = 1366, 768

_M = "Bokeh.documents[0].get_model_by_name"
_CLICK = ("const {ButtonClick} = Bokeh.require('core/bokeh_events');"
          f"{_M}(arguments[0]).trigger_event(new ButtonClick());")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait(driver, script, *args, timeout=30.0):
    end = time.monotonic() + timeout
    while True:
        value = driver.execute_script(script, *args)
        if value:
            return value
        if time.monotonic() > end:
            raise TimeoutError(script)
        time.sleep(0.1)


def main(out: pathlib.Path = ROOT / "docs" / "img") -> int:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    server = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app",
                               str(HERE / "two_stage_miller_loop.toml"), "--no-browser",
                               "--port", str(port)], cwd=ROOT, env=env,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    profile = tempfile.mkdtemp(prefix="fp-shot-")
    driver = None
    try:
        assert f"127.0.0.1:{port}" in server.stdout.readline()
        opts = webdriver.ChromeOptions()
        opts.binary_location = "/usr/bin/chromium"
        for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                     "--no-first-run", "--disable-background-networking",
                     "--disable-component-update", "--disable-sync", "--hide-scrollbars",
                     f"--user-data-dir={profile}", f"--window-size={WIDTH},{HEIGHT}"):
            opts.add_argument(flag)
        driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)
        driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                               {"width": WIDTH, "height": HEIGHT, "deviceScaleFactor": 1,
                                "mobile": False})
        driver.get(f"http://127.0.0.1:{port}/")
        _wait(driver, "return !!(window.Bokeh && Bokeh.documents && Bokeh.documents.length"
                      " && Bokeh.documents[0].roots().length);")
        driver.execute_script(_CLICK, "pin")
        _wait(driver, f"return {_M}('pin_source:0').data.f_hz.length;")
        driver.execute_script(f"{_M}('controls').active = 4;")          # the Loop tab
        driver.execute_script(f"{_M}('text:second_stage.miller_capacitance').value = '30 pF';")
        driver.execute_script(
            f"const v = {_M}('views'); v.active = v.tabs.findIndex(t => t.title === 'Loop');")
        _wait(driver, f"return {_M}('loop_pin:0').data.f_hz.length "
                      f"&& {_M}('loop_curves').data.f_hz.length;")
        time.sleep(1.5)     # let the canvases paint
        out.mkdir(parents=True, exist_ok=True)
        driver.save_screenshot(str(out / "explorer_loop.png"))
        print((out / "explorer_loop.png").relative_to(ROOT))
        driver.execute_script(f"{_M}('views').active = 2;")           # Poles & zeros
        _wait(driver, f"return {_M}('path_points').data.x.length;")
        time.sleep(1.5)
        driver.save_screenshot(str(out / "explorer_pole_paths.png"))
        print((out / "explorer_pole_paths.png").relative_to(ROOT))
    finally:
        if driver is not None:
            driver.quit()
        server.terminate()
        server.wait(timeout=10)
        shutil.rmtree(profile, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
