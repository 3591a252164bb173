"""``freqpair app --procs N``: several server processes behind one port.

Checks what a team relies on: sessions on the shared port are served by more
than one process, each answers with the library's numbers, and one SIGTERM
(or Ctrl-C) to the command stops every process it started (none left behind).
"""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from freqpair.design.files import BUILTIN_EXAMPLE, design_from_text
from freqpair.views.explore import explore, explore_grid

from browser_util import start_app

ROOT = Path(__file__).resolve().parent.parent


def _children(pid: int) -> list[int]:
    path = Path(f"/proc/{pid}/task/{pid}/children")
    return [int(x) for x in path.read_text().split()] if path.exists() else []


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except FileNotFoundError:
        return False
    return state != "Z"


@pytest.fixture
def two_procs():
    if not Path("/proc/self/stat").exists() or not hasattr(os, "fork"):
        pytest.skip("needs fork and /proc")
    proc, port = start_app(None, "--procs", "2")
    try:
        line = proc.first_line
        assert "freqpair explorer at" in line and "2 server processes" in line, line
        yield proc, port
    finally:
        if proc.poll() is None:
            for child in _children(proc.pid):
                os.kill(child, signal.SIGKILL)
            proc.kill()
            proc.wait()
        proc.stdout.close()
        proc.stderr.close()


def test_sessions_are_served_by_several_processes_and_sigterm_stops_them_all(two_procs):
    from bokeh.client import pull_session
    proc, port = two_procs
    servers = _children(proc.pid)
    assert len(servers) == 2                                  # the supervisor's two
    want = explore(design_from_text(BUILTIN_EXAMPLE),
                   explore_grid(design_from_text(BUILTIN_EXAMPLE), 500))["curves"]
    # oracle: freqpair.views.explore.explore (the library) on the built-in example
    sessions = [pull_session(url=f"http://127.0.0.1:{port}/") for _ in range(6)]
    try:
        for s in sessions:
            got = s.document.select_one({"name": "curves_source"}).data
            np.testing.assert_array_equal(np.asarray(got["cmrr_db"]), want["cmrr_db"])
    finally:
        for s in sessions:
            s.close()
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=30) == 0
    time.sleep(0.2)
    assert not any(_alive(pid) for pid in servers), "a server process outlived the command"
    assert "freqpair explorer stopped" in proc.stderr.read()


def test_procs_out_of_range_is_one_line(tmp_path):
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "app", "--procs", "0",
                          "--no-browser"], capture_output=True, text=True, timeout=60, cwd=ROOT,
                         env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert run.returncode == 2 and run.stderr.strip() == \
        "freqpair: error: --procs = 0: must be between 1 and 64"


@pytest.mark.browser
def test_pages_in_chromium_on_two_processes_each_show_their_own_typed_design(two_procs,
                                                                              tmp_path):
    # oracle: freqpair.analyze (the library) on the design each page was given, written
    # as the status line writes it (format_metric)
    from browser_util import make_driver, type_into, visible_text, wait_for_bokeh, wait_until

    import freqpair
    from freqpair.analysis.summary import format_metric
    proc, port = two_procs
    base = design_from_text(BUILTIN_EXAMPLE)
    for i, text in enumerate(("5 pF", "8 pF", "13 pF")):
        driver = make_driver(tmp_path / f"profile{i}")
        try:
            driver.get(f"http://127.0.0.1:{port}/")
            wait_for_bokeh(driver)
            wait_until(lambda: visible_text(driver, "message"))
            driver.execute_script(
                "const m = Bokeh.documents[0].get_model_by_name('controls');"
                "m.active = m.tabs.findIndex(t => t.title === 'Tail');")
            time.sleep(0.3)
            type_into(driver, "text:tail.capacitance", text)
            a = freqpair.analyze(freqpair.replace_value(base, "tail.capacitance", text))
            want = f"CMRR corner {format_metric('cmrr_corner_hz', a.cmrr_corner_hz)}"
            assert wait_until(lambda: want in visible_text(driver, "message"), timeout=20)
        finally:
            driver.quit()
