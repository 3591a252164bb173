"""Screenshots of the explorer's Supply and Noise views at 1366×768 (headless Chromium).

    python examples/make_explorer_screenshots.py [DESIGN.toml]

Starts ``freqpair app`` on a free loopback port with the design (default the
bridge-sensor front end, ``npn_degenerated_instrumentation.toml``), opens
each view as a person would (a click on its tab; the sidebar shows the added
elements for the Supply view and the Pair tab for the Noise view) and saves
``docs/img/explorer_supply.png`` and ``docs/img/explorer_noise.png``.
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
DEFAULT = HERE / "npn_degenerated_instrumentation.toml"

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


def main(args) -> int:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    design = pathlib.Path(args[0]) if args else DEFAULT
    out = ROOT / "docs" / "img"
    out.mkdir(parents=True, exist_ok=True)
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
        driver.get(f"http://127.0.0.1:{port}/")
        _wait(lambda: driver.execute_script(
            "return !!(window.Bokeh && Bokeh.documents && Bokeh.documents.length "
            "&& Bokeh.documents[0].roots().length);"))
        for view, side, ready, name in (("Supply", "More", "supply_readout", "supply"),
                                        ("Noise", "Pair", "noise_readout", "noise")):
            _wait(lambda: driver.execute_script(_TAB_JS, "views", view)).click()
            _wait(lambda: driver.execute_script(_TAB_JS, "controls", side)).click()
            _wait(lambda: driver.execute_script(_TEXT_JS, ready).strip())
            time.sleep(1.5)   # let the canvases paint
            png = out / f"explorer_{name}.png"
            driver.save_screenshot(str(png))
            print(png.relative_to(ROOT))
    finally:
        if driver is not None:
            driver.quit()
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        shutil.rmtree(profile, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
