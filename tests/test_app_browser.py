"""End-to-end: the real `freqpair app` server in headless Chromium."""
from __future__ import annotations

import time
from pathlib import Path

import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.measured import read_measurement

from browser_util import (console_errors, make_driver, start_app, stop_server,
                          wait_for_bokeh, wait_until)

ROOT = Path(__file__).resolve().parent.parent
ARTIFACTS = ROOT / "test-artifacts"

CORNER_JS = ("const s = Bokeh.documents[0].get_model_by_name('corner_source');"
             "return s.data.f_hz.length ? Number(s.data.f_hz[0]) : null;")


@pytest.fixture
def server():
    proc, port = start_app()             # fails unless the server says it listens
    try:
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
    proc, port = start_app(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    driver = None
    try:
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


# ------------------------------------------------------------------ what the page shows
TWO_STAGE = ROOT / "examples" / "two_stage_miller_loop.toml"

#: A person's edits, in order: (main view open while typing, sidebar tab, design key,
#: text typed). Each table's view is open for some edits and hidden for others (then
#: opened); emptying β_f removes the loop rows, a refused value must leave the last
#: good result on screen.
EDITS = (
    ("Numbers", "Loop", "second_stage.miller_capacitance", "30 pF"),
    ("Hand estimates", "Loop", "second_stage.load_capacitance", "5 pF"),
    ("Gains", "Tail", "tail.capacitance", "10 pF"),
    ("Poles & zeros", "Supply & bias", "bias.tail_current", "300 µA"),
    ("Numbers", "Loop", "feedback.factor", ""),
    ("CMRR", "Loop", "feedback.factor", "0.2"),
    ("Numbers", "Loop", "second_stage.miller_capacitance", "ten pF"),
    ("Hand estimates", "Pair", "pair.beta", "90"),
    ("Gains", "Loop", "second_stage.nulling_resistance", "1 k"),
)
TABLES = {"Numbers": "metrics_table", "Hand estimates": "hand_table"}


BOTTOM_JS = ("const d = Bokeh.documents[0].get_model_by_name(arguments[0]);"
             "const v = Bokeh.index.find_one(d);"
             "return [v.el.getBoundingClientRect().bottom, window.innerHeight];")
SOURCE_ROWS_JS = ("const d = Bokeh.documents[0].get_model_by_name('metrics_source').data;"
                  "return d.quantity.map((q, i) => [q, d.value[i]]);")


def _edited(design, key, text):
    """The design after typing ``text`` into the box of ``key``, or None if refused."""
    from freqpair.design.schema import design_to_dict, parse_design
    try:
        if key == "feedback.factor" and not text:     # DESIGN.md §3: [feedback] is optional
            data = design_to_dict(design)
            data.pop("feedback")
            return parse_design(data)
        return freqpair.replace_value(design, key, text)
    except freqpair.FreqpairError:
        return None


def _target_crossing_hz(analysis, target_db):
    """Lowest frequency where the single-ended CMRR falls to ``target_db``: a sign change
    on a dense log grid, then scipy's brentq on the exact responses."""
    import numpy as np
    from scipy.optimize import brentq
    sweep = analysis.design.sweep

    def excess(f):
        r = analysis.responses.at(np.atleast_1d(f))
        return 20 * np.log10(np.abs(r.adm_se) / np.abs(r.acm_se)) - target_db
    grid = np.logspace(np.log10(sweep.start) - 3, np.log10(sweep.stop), 4000)
    values = excess(grid)
    hits = np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    if not len(hits):
        return None
    i = hits[0]
    return brentq(lambda f: excess(f)[0], grid[i], grid[i + 1], xtol=1e-12, rtol=1e-13)


def _expected(design):
    """What the page must show for ``design``, from the library in this process."""
    from threadpoolctl import threadpool_limits
    from freqpair.analysis.hand import hand_table
    from freqpair.analysis.summary import format_metric, operating_point_rows
    from freqpair.app.view import N_POINTS
    from freqpair.views.explore import explore, explore_grid
    with threadpool_limits(limits=1, user_api="blas"):     # as the app server runs
        analysis = freqpair.analyze(design)
        data = analysis.to_json()
        page = explore(design, explore_grid(design, N_POINTS), target_db=60.0)
        hand = hand_table(analysis)
        cross = _target_crossing_hz(analysis, 60.0)
    # the metric rows of the JSON contract, as format_metric writes them
    keyed = {"−3 dB frequency f_3dB": "f3db_hz", "unity-gain frequency": "ugf_hz",
             "CMRR single-ended at DC": "cmrr_se_db", "CMRR corner (−3 dB)": "cmrr_corner_hz",
             "common-mode gain A_cm,se at DC": "acm_se_db",
             "tail resistance (Norton)": "tail.resistance",
             "tail capacitance (Norton)": "tail.capacitance"}
    if design.second_stage is not None:
        keyed.update({"first-stage gain at o2": "adm_db",
                      "overall gain A_total at DC": "a_total_db"})
    if design.feedback is not None:
        keyed.update({"phase margin": "phase_margin_deg", "gain margin": "gain_margin_db",
                      "loop crossover": "crossover_hz", "loop gain at DC": "dc_loop_gain_db",
                      "closed-loop −3 dB frequency": "closed_loop_f3db_hz",
                      "closed-loop peaking": "peaking_db"})
    flat = dict(data, **{f"tail.{k}": v for k, v in data["tail"].items()})
    metrics = {label: format_metric(key, flat[key]) for label, key in keyed.items()}
    op = [value for _, value in operating_point_rows(analysis)]

    def fmt(v, unit):
        if unit == "dB":
            return "—" if v is None else f"{v:.2f} dB"
        return freqpair.format_si(v, unit)
    hand_rows = [[r.label, fmt(r.exact, r.unit), fmt(r.approx, r.unit),
                  "—" if r.error_pct is None else f"{r.error_pct:+.1f} %",
                  r.method + (f" ({r.note})" if r.note else "")] for r in hand]
    status = (f"f_3dB {format_metric('f3db_hz', data['f3db_hz'])} · "
              f"CMRR corner {format_metric('cmrr_corner_hz', data['cmrr_corner_hz'])} · "
              "CMRR falls to 60 dB at ")
    loop_status = ""
    if design.feedback is not None:
        loop_status = (" · phase margin "
                       f"{format_metric('phase_margin_deg', data['phase_margin_deg'])}")
        if data["crossover_hz"] is not None:
            loop_status += f" at {format_metric('crossover_hz', data['crossover_hz'])}"
    return {"page_metrics": [list(r) for r in zip(page["metrics"]["quantity"],
                                                  page["metrics"]["value"])],
            "metrics": metrics, "op": op, "hand": hand_rows, "status": status,
            "loop_status": loop_status,
            "cross": cross, "corner": data["cmrr_corner_hz"]}


@pytest.mark.browser
def test_tables_and_status_line_show_the_design_typed_in_the_page(tmp_path):
    from browser_util import click_tab, table_text, type_into, visible_text
    proc, port = start_app(TWO_STAGE)
    driver = None
    design = freqpair.load_design(TWO_STAGE)
    seen, bottoms = [], {}
    try:
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        wait_until(lambda: visible_text(driver, "message"))
        for step, (view, side, key, text) in enumerate(EDITS):
            click_tab(driver, "views", view)
            click_tab(driver, "controls", side)
            type_into(driver, f"text:{key}", text)
            new = _edited(design, key, text)
            design = new or design
            want = _expected(design)
            # the server's answer has arrived when the page's data source holds it
            # (or, for a refused value, when the message says so); a table is
            # computed while it is shown, so with the Numbers view hidden the
            # status line tells the answer has come
            if new is None:
                wait_until(lambda: "kept the last good result" in visible_text(driver, "message"))
            elif view == "Numbers":
                wait_until(lambda: driver.execute_script(SOURCE_ROWS_JS) == want["page_metrics"])
            else:
                wait_until(lambda: visible_text(driver, "message").startswith(want["status"])
                           and visible_text(driver, "message").endswith(want["loop_status"]))
            status = visible_text(driver, "message")
            shown = {}
            # the table on screen first, then the other one (opened as a person would)
            for tab in sorted(TABLES, key=lambda t: t != view):
                if tab != view:
                    click_tab(driver, "views", tab)
                want_rows = want["page_metrics"] if tab == "Numbers" else want["hand"]
                try:      # give the page a moment to draw what its source holds
                    wait_until(lambda: table_text(driver, TABLES[tab]) == want_rows, timeout=3)
                except TimeoutError:
                    pass
                shown[tab] = table_text(driver, TABLES[tab])
                bottoms[tab] = driver.execute_script(BOTTOM_JS, TABLES[tab])
            metrics, hand = shown["Numbers"], shown["Hand estimates"]
            corner = driver.execute_script(CORNER_JS)
            seen.append((step, key, text, status, metrics, hand, corner, want))
            if step == 3:     # the hand table is open now
                ARTIFACTS.mkdir(exist_ok=True)
                driver.save_screenshot(str(ARTIFACTS / "explorer_hand_after_edits.png"))
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    for step, key, text, status, metrics, hand, corner, want in seen:
        where = f"after edit {step} ({key} = {text!r})"
        if not text.startswith("ten"):
            # oracle: freqpair.analyze on the same design (f_3dB and CMRR corner as
            # format_metric writes them)
            assert status.startswith(want["status"]), where
            # oracle: the CMRR-target crossing root-found here (scipy brentq on the
            # analysis' exact responses); the page shows 4 significant digits
            shown, _, loop = status.removeprefix(want["status"]).partition(" · ")
            # oracle: analyze(design).to_json() phase margin and crossover (format_metric)
            assert (f" · {loop}" if loop else "") == want["loop_status"], where
            assert freqpair.parse_si(shown.removesuffix("Hz"), field="status") == pytest.approx(
                want["cross"], rel=1e-3), where
        else:
            assert "kept the last good result" in status, where
        # oracle: freqpair.views.explore.explore on the same design — every row the
        # metrics table must show, in order
        assert metrics == want["page_metrics"], where
        values = dict((q, v) for q, v in metrics)
        # oracle: freqpair.analyze on the same design, formatted by format_metric
        for label, text_ in want["metrics"].items():
            assert values[label] == text_, f"{where}: {label}"
        # oracle: freqpair.analyze on the same design (operating_point_rows, as the report)
        assert [v for q, v in metrics if q.startswith("operating point")] == want["op"], where
        # oracle: freqpair.analyze on the same design — its hand_table rows, formatted as
        # the app formats them (format_si with the row's unit, error to 0.1 %)
        assert hand == want["hand"], where
        # oracle: freqpair.analyze on the same design (the corner marker on the CMRR plot)
        assert corner == pytest.approx(want["corner"], rel=1e-9), where
    # common practice: each table's view is readable on a 1366×768 screen without
    # scrolling the page (the grid scrolls inside)
    for tab, (bottom, height) in bottoms.items():
        assert bottom <= height, f"{tab}: bottom {bottom:.0f} px > {height} px"
    assert errors == []


AXIS_TICKS_JS = """
const fig = Bokeh.documents[0].get_model_by_name('pole_zero_figure');
const ticks = arguments[0];
return [...fig.below, ...fig.left].map(axis => axis.formatter.doFormat(ticks, {loc: 0}));
"""


@pytest.mark.browser
def test_pole_zero_axes_write_frequencies_in_engineering_notation(server, tmp_path):
    port, proc = server
    ticks = [1.0, 12.5, 100.0, 999.96, 1e3, 2.5e4, 1.5e8, -5e7, -1.5e8, 0.0, 4.7e9]
    driver = make_driver(tmp_path)
    try:
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        labels = driver.execute_script(AXIS_TICKS_JS, ticks)
    finally:
        driver.quit()
    # oracle: freqpair.format_si, which writes every frequency freqpair prints
    want = [freqpair.format_si(t, "Hz") for t in ticks]
    assert labels == [want, want]      # |Re s|/2π axis and Im s/2π axis


@pytest.mark.browser
def test_legends_show_the_pins_and_gains_of_the_design_typed_in_the_page(tmp_path):
    from browser_util import click_button, click_tab, legend_entries, type_into
    from freqpair.app.view import _PRIMARY_LABEL
    from freqpair.views.explore import design_difference
    proc, port = start_app(TWO_STAGE)
    driver = None
    pinned = design = freqpair.load_design(TWO_STAGE)
    seen = []
    try:
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        if legend_entries(driver, "gains_figure") is None:
            pytest.skip("this Bokeh draws legends on the canvas (no entries to read)")
        click_tab(driver, "controls", "Files")
        click_button(driver, "pin")
        click_tab(driver, "controls", "Loop")
        for text in ("30 pF", "12 pF", "4.7 pF"):     # each edit renames the pin
            type_into(driver, "text:second_stage.miller_capacitance", text)
            design = freqpair.replace_value(design, "second_stage.miller_capacitance", text)
            label = f"pin 1: {design_difference(pinned, design)}"
            entries = wait_until(lambda: (e := legend_entries(driver, "gains_figure"))
                                 and e[-1][0] == label and e)
            time.sleep(0.5)       # a paint that would come, has come
            seen.append((text, design, label, legend_entries(driver, "gains_figure")))
        click_tab(driver, "controls", "Files")
        click_button(driver, "clear_pins")
        wait_until(lambda: len(legend_entries(driver, "gains_figure")) == 2)
        time.sleep(0.5)
        cleared = legend_entries(driver, "gains_figure")
        ARTIFACTS.mkdir(exist_ok=True)
        driver.save_screenshot(str(ARTIFACTS / "explorer_legend_after_pins.png"))
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    for text, design_, label, entries in seen:
        # oracle: freqpair.analyze on the same design names the plotted gain (A_total
        # with a second stage, DESIGN.md §3a); a mirror load has no A_cm-dm to show;
        # the pin is named by what its design has that the one on screen has not
        # (design_difference), here the Miller capacitance before the edit: 8 pF
        assert [name for name, _ in entries] == [
            _PRIMARY_LABEL[freqpair.analyze(design_).primary],
            "common-mode gain A_cm,se (o2)", label], text
        assert label.endswith(freqpair.format_si(pinned.second_stage.miller_capacitance, "F"))
        # common practice: every legend entry a person sees has its line swatch painted
        assert all(inked > 0 for _, inked in entries), (text, entries)
    assert [name for name, _ in cleared] == [
        _PRIMARY_LABEL["a_total"], "common-mode gain A_cm,se (o2)"]
    assert all(inked > 0 for _, inked in cleared), cleared
    assert errors == []


#: The Loop view's marks in reading order: (words before the number, JSON key).
LOOP_MARKS = (("crossover", "crossover_hz"), ("phase margin", "phase_margin_deg"),
              ("gain margin", "gain_margin_db"), ("−3 dB", "closed_loop_f3db_hz"),
              ("peaking", "peaking_db"), ("overshoot", "overshoot_pct"),
              ("1 % settling", "settling_time_s"))


@pytest.mark.browser
def test_loop_view_in_the_page_shows_the_margins_of_the_design_typed(tmp_path):
    from browser_util import click_tab, type_into, visible_text
    from freqpair.analysis.summary import format_metric
    proc, port = start_app(TWO_STAGE)
    driver = None
    design = freqpair.replace_value(freqpair.load_design(TWO_STAGE),
                                    "second_stage.miller_capacitance", "30 pF")
    j = freqpair.analyze(design).to_json()
    want = [f"{words} {format_metric(key, j[key])}" for words, key in LOOP_MARKS]
    try:
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        wait_until(lambda: visible_text(driver, "message"))
        click_tab(driver, "views", "Loop")
        before = wait_until(lambda: visible_text(driver, "loop_readout"), timeout=10)
        click_tab(driver, "controls", "Loop")
        type_into(driver, "text:second_stage.miller_capacitance", "30 pF")
        readout = wait_until(lambda: (t := visible_text(driver, "loop_readout")) != before
                             and t, timeout=10)
        status = wait_until(lambda: (t := visible_text(driver, "message")) and "phase margin"
                            in t and want[1].removeprefix("phase margin ") in t and t,
                            timeout=5)
        time.sleep(0.5)
        ARTIFACTS.mkdir(exist_ok=True)
        driver.save_screenshot(str(ARTIFACTS / "explorer_loop.png"))
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    # oracle: analyze() of the same design, to_json() — DESIGN.md §4's loop keys as
    # format_metric writes them (the texts the plots' marks carry, shown as text)
    assert readout.split(" · ") == want
    # oracle: the same JSON's phase_margin_deg and crossover_hz in the status line
    assert status.endswith("· phase margin "
                           f"{format_metric('phase_margin_deg', j['phase_margin_deg'])}"
                           f" at {format_metric('crossover_hz', j['crossover_hz'])}")
    assert errors == []


PAIR_LINES_JS = """
const m = Bokeh.documents[0].get_model_by_name('controls');
const v = Bokeh.index.find_one(m);
if (!v) { return null; }
const panel = m.tabs[m.active].child;
const pv = Bokeh.index.find_one(panel);
const names = panel.children.filter(c => c.visible).map(c => c.name);
return [pv.el.scrollHeight, pv.el.clientHeight, names];
"""


@pytest.mark.browser
def test_a_mos_pair_with_many_keys_scrolls_inside_its_tab_and_the_page_fits(tmp_path):
    # common practice: the page is usable without scrolling on a 1366×768 screen; a tab
    # with more lines than fit scrolls inside, every line reachable
    from freqpair.views.explore import editable_values
    design_path = ROOT / "examples" / "nmos_resistor_ideal_tail.toml"
    proc, port = start_app(design_path)
    driver = None
    m = "Bokeh.documents[0].get_model_by_name"
    try:
        driver = make_driver(tmp_path)
        driver.get(f"http://127.0.0.1:{port}/")
        wait_for_bokeh(driver)
        bottoms = {}
        for tab in range(6):
            driver.execute_script(f"{m}('controls').active = arguments[0];", tab)
            time.sleep(0.4)
            bottoms[tab] = driver.execute_script(SIDEBAR_BOTTOM_JS)
        driver.execute_script(f"{m}('controls').active = 1;")        # the Pair tab
        time.sleep(0.4)
        scroll_h, client_h, names = driver.execute_script(PAIR_LINES_JS)
        errors = console_errors(driver)
    finally:
        if driver is not None:
            driver.quit()
        stop_server(proc)
    for tab, (bottom, height) in bottoms.items():
        assert bottom <= height, f"tab {tab}: bottom {bottom:.0f} px > {height} px"
    # oracle: the design's own pair keys (freqpair.views.explore.editable_values)
    keys = [ev.key for ev in editable_values(freqpair.load_design(design_path))
            if ev.key.startswith("pair.")]
    assert [n for n in names if n.startswith("row:pair.")] == [f"row:{k}" for k in keys]
    assert scroll_h > client_h          # more lines than fit: the tab scrolls inside
    assert errors == []
