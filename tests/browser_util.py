"""Shared helper for real-browser tests: headless Chromium through selenium.

``make_driver(tmpdir)`` returns a headless Chrome driver with a fresh profile
under ``tmpdir``, or calls ``pytest.skip`` saying why (no Chromium, no driver,
no selenium). ``free_port()`` picks a free loopback port; ``start_app(design)``
starts ``freqpair app`` from this checkout and waits until it listens;
``stop_server(proc)`` ends a server subprocess; ``wait_for_bokeh`` waits until the page's Bokeh
document exists.
"""
from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--window-size=1366,768")


def make_driver(tmpdir):
    """Headless Chromium driver with a fresh ``--user-data-dir`` under ``tmpdir``."""
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        pytest.skip("selenium is not installed")
    binary = CHROMIUM if Path(CHROMIUM).exists() else shutil.which("chromium")
    driver_path = CHROMEDRIVER if Path(CHROMEDRIVER).exists() else shutil.which("chromedriver")
    if not binary or not driver_path:
        pytest.skip("Chromium/chromedriver not installed (Debian packages chromium, "
                    "chromium-driver; .ci/run installs them where apt is available)")
    opts = webdriver.ChromeOptions()
    opts.binary_location = binary
    for flag in FLAGS:
        opts.add_argument(flag)
    profile = Path(tmpdir) / "chromium-profile"
    profile.mkdir(parents=True, exist_ok=True)
    opts.add_argument(f"--user-data-dir={profile}")
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(driver_path), options=opts)


def free_port() -> int:
    """A currently free TCP port on 127.0.0.1."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_app(design=None, *args: str) -> tuple[subprocess.Popen, int]:
    """Start ``freqpair app [DESIGN] --port P --no-browser [ARGS]`` from this checkout.

    Returns the process (its first output line as ``proc.first_line``) and the
    port, once the server says it listens there; otherwise stops it and fails
    with its error output.
    """
    port = free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    cmd = [sys.executable, "-m", "freqpair.cli", "app"] + ([str(design)] if design else [])
    proc = subprocess.Popen(cmd + ["--port", str(port), "--no-browser", *args], cwd=ROOT,
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    line = proc.stdout.readline()        # printed once the server listens
    if f"127.0.0.1:{port}" not in line:
        err = proc.stderr.read() if proc.poll() is not None else ""
        stop_server(proc)
        raise AssertionError(f"freqpair app did not start: {line!r} {err}")
    proc.first_line = line
    return proc, port


def stop_server(proc: subprocess.Popen, timeout: float = 10.0) -> None:
    """Terminate a server subprocess (kill it after ``timeout`` s) and close its pipes."""
    proc.terminate()
    try:
        proc.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()
    for pipe in (proc.stdout, proc.stderr):
        if pipe is not None:
            pipe.close()


def wait_until(predicate, timeout: float = 30.0, interval: float = 0.1):
    """Poll ``predicate()`` until it returns a truthy value; return it or raise."""
    end = time.monotonic() + timeout
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() > end:
            raise TimeoutError("condition not met in time")
        time.sleep(interval)


def wait_for_bokeh(driver, timeout: float = 30.0):
    """Wait until ``Bokeh.documents[0]`` exists and has roots."""
    return wait_until(lambda: driver.execute_script(
        "return !!(window.Bokeh && Bokeh.documents && Bokeh.documents.length "
        "&& Bokeh.documents[0].roots().length);"), timeout)


def console_errors(driver) -> list[str]:
    """Severe messages from the browser console."""
    return [e["message"] for e in driver.get_log("browser") if e.get("level") == "SEVERE"]


# ------------------------------------------------------------------ what a person sees
# Bokeh 3 draws every widget in its view's shadow root; these read the rendered
# DOM (not the models) and act through real clicks and keystrokes. Widgets are
# found by model name through their live view: the page's document keeps models
# the server has dropped (e.g. the controls of a rebuilt tab), which have no view.

_LIVE = """
function live(name) {
  for (const m of Bokeh.documents[0].all_models) {
    if (m.name === name) {
      const v = Bokeh.index.find_one(m);
      if (v && v.el.isConnected) { return v; }
    }
  }
  return null;
}
"""

_TAB_JS = _LIVE + """
const view = live(arguments[0]);
return [...view.shadow_el.querySelectorAll('.bk-tab')].find(e => e.textContent === arguments[1])
       || null;
"""

_TEXT_JS = _LIVE + """
const view = live(arguments[0]);
if (view === null) { return ""; }      // not drawn (yet): a view built when first opened
return [...view.shadow_el.children].filter(e => e.tagName !== 'STYLE' && e.tagName !== 'LINK')
       .map(e => e.innerText).join('');
"""

_GRID_JS = _LIVE + """
const view = live(arguments[0]);
const cells = [];
function walk(root) {            // the grid's cells live in shadow roots
  for (const el of root.querySelectorAll('*')) {
    if (el.classList.contains('slick-cell')) { cells.push(el); }
    if (el.shadowRoot) { walk(el.shadowRoot); }
  }
}
walk(view.shadow_el);
const rows = {};
for (const cell of cells) {
  const row = cell.closest('.slick-row');
  const top = parseFloat(row.style.top);
  const col = Number([...cell.classList].find(c => /^l\\d+$/.test(c)).slice(1));
  (rows[top] = rows[top] || [])[col] = cell.textContent;
}
const vp = view.shadow_el.querySelector('.slick-viewport');
return {rows: rows, scroll: vp.scrollTop, height: vp.clientHeight, total: vp.scrollHeight};
"""

_SCROLL_JS = _LIVE + """
const view = live(arguments[0]);
view.shadow_el.querySelector('.slick-viewport').scrollTop = arguments[1];
"""


def click_tab(driver, tabs_name: str, title: str) -> None:
    """Click the header ``title`` of the Tabs model named ``tabs_name`` (a real click)."""
    header = wait_until(lambda: driver.execute_script(_TAB_JS, tabs_name, title), timeout=10)
    header.click()


def click_button(driver, name: str) -> None:
    """Click the Button named ``name`` (a real click on its ``<button>``)."""
    element = wait_until(lambda: driver.execute_script(
        _LIVE + "const v = live(arguments[0]);"
        "return v ? v.shadow_el.querySelector('button') : null;", name), timeout=10)
    element.click()


def type_into(driver, input_name: str, text: str) -> None:
    """Type ``text`` into the TextInput named ``input_name`` with keystrokes, then Enter
    (the old text is deleted with Backspace, as a person would)."""
    from selenium.webdriver.common.keys import Keys
    element = wait_until(lambda: driver.execute_script(
        _LIVE + "const v = live(arguments[0]); return v ? v.input_el : null;", input_name),
        timeout=10)
    old = element.get_attribute("value") or ""
    element.send_keys(Keys.END + Keys.BACKSPACE * len(old) + text + Keys.ENTER)


def visible_text(driver, name: str) -> str:
    """The rendered text (``innerText``) of the widget named ``name`` (e.g. a Div);
    ``""`` while the page has not drawn it (yet)."""
    return driver.execute_script(_TEXT_JS, name)


def table_text(driver, name: str, settle: float = 0.15) -> list[list[str]]:
    """Every row of the DataTable named ``name`` as its cells' visible text.

    The grid only renders the rows in its viewport, so this scrolls the table
    from top to bottom (as a person reading it would) and collects the
    ``.slick-cell`` texts by row position; it scrolls back to the top at the end.
    """
    rows, scroll = {}, 0.0
    while True:
        driver.execute_script(_SCROLL_JS, name, scroll)
        time.sleep(settle)
        grid = driver.execute_script(_GRID_JS, name)
        rows.update({float(k): v for k, v in grid["rows"].items()})
        if grid["scroll"] + grid["height"] >= grid["total"] - 1:
            break
        scroll = grid["scroll"] + max(grid["height"] - 30, 25)
    driver.execute_script(_SCROLL_JS, name, 0)
    return [rows[k] for k in sorted(rows)]


_LEGEND_JS = _LIVE + """
const fig = live(arguments[0]).model;
const legend = fig.center.find(m => m.type === 'Legend');
const view = Bokeh.index.find_one(legend);
if (!view.shadow_el.querySelector('.bk-grid')) { return null; }   // drawn on the canvas
return [...view.shadow_el.querySelectorAll('.bk-item')]
  .filter(el => el.getClientRects().length > 0)
  .map(el => {
    const canvas = el.querySelector('canvas');
    const px = canvas.getContext('2d').getImageData(0, 0, canvas.width, canvas.height).data;
    let inked = 0;
    for (let i = 3; i < px.length; i += 4) { if (px[i] > 0) { inked += 1; } }
    return [el.querySelector('.bk-label').textContent, inked];
  });
"""


def legend_entries(driver, figure_name: str):
    """The legend entries a person sees on the figure named ``figure_name``: (label,
    number of painted pixels of its swatch) per shown item, or None when this Bokeh
    draws legends on the canvas (no DOM entries to read)."""
    entries = driver.execute_script(_LEGEND_JS, figure_name)
    return None if entries is None else [tuple(e) for e in entries]
