"""Render each scenario's report in headless Chromium and save a PNG under docs/img/.

    python examples/make_screenshots.py [SCENARIO ...]

Needs /usr/bin/chromium and /usr/bin/chromedriver (and selenium).
"""
from __future__ import annotations

import pathlib
import shutil
import sys
import tempfile
import time

HERE = pathlib.Path(__file__).resolve().parent
#: every design file in examples/ that has a scenario script beside it
SCENARIOS = sorted(p.stem for p in HERE.glob("*.toml") if p.with_suffix(".py").exists())


def screenshot(html_path: pathlib.Path, png_path: pathlib.Path, width=1200, height=1700):
    """Load ``html_path`` in headless Chromium, wait for the plots, save ``png_path``."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    profile = tempfile.mkdtemp(prefix="fp-shot-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = "/usr/bin/chromium"
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--hide-scrollbars",
                 f"--user-data-dir={profile}", f"--window-size={width},{height}"):
        opts.add_argument(flag)
    driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)
    try:
        driver.get(html_path.as_uri())
        deadline = time.time() + 30
        while time.time() < deadline and not driver.execute_script(
                "return !!(window.Bokeh && Bokeh.documents && Bokeh.documents.length)"):
            time.sleep(0.2)
        time.sleep(1.0)   # let the canvases paint
        driver.save_screenshot(str(png_path))
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


def main(names=None) -> int:
    import freqpair
    from freqpair.views.report import write_report
    out = HERE.parent / "docs" / "img"
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        for name in names or SCENARIOS:
            result = freqpair.analyze(freqpair.load_design(HERE / f"{name}.toml"))
            page = pathlib.Path(tmp) / f"{name}.html"
            write_report(result, page)
            screenshot(page, out / f"report_{name}.png")
            print(f"docs/img/report_{name}.png")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
