"""Shared helper for real-browser tests: headless Chromium through selenium.

``make_driver(tmpdir)`` returns a headless Chrome driver with a fresh profile
under ``tmpdir``, or calls ``pytest.skip`` saying why (no Chromium, no driver,
no selenium). ``free_port()`` picks a free loopback port; ``stop_server(proc)``
ends a server subprocess; ``wait_for_bokeh`` waits until the page's Bokeh
document exists.
"""
from __future__ import annotations

import shutil
import socket
import subprocess
import time
from pathlib import Path

import pytest

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
