"""The standalone HTML report: well-formed, offline, same numbers as the JSON,
atomic writes, and a real-browser render with no console errors."""
from __future__ import annotations

import json
import pathlib
import subprocess
import sys
import time

import pytest

import freqpair
from freqpair.design import files as design_mod
from freqpair.analysis.summary import format_metric, metric_rows
from freqpair.views.report import report_html, write_report
from test_report_support import artifacts_dir, check_html, chromium_driver, close_driver

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))

_CACHE: dict = {}


def _report(path):
    """(analysis, html) for a design file, computed once per test session."""
    key = str(path)
    if key not in _CACHE:
        a = freqpair.analyze(freqpair.load_design(path))
        _CACHE[key] = (a, report_html(a))
    return _CACHE[key]


def _flat_json(data):
    out = {}
    for k, v in data.items():
        if k in ("name", "operating_point", "poles_hz", "zeros_hz", "hand", "noise"):
            continue   # shown in their own sections of the report
        if isinstance(v, dict):
            out.update({f"{k}.{k2}": v2 for k2, v2 in v.items()})
        else:
            out[k] = v
    return out


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_report_is_well_formed_html(path):
    # oracle: HTML5 syntax rules (common practice) — balanced, properly nested
    # elements, void elements unclosed, unique ids, <!DOCTYPE html>
    _, html = _report(path)
    parsed = check_html(html)
    tags = [t for t, _ in parsed.tags]
    assert tags.count("html") == 1 and tags.count("body") == 1 and tags.count("svg") >= 1


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_report_fetches_no_script_or_stylesheet_from_network(path):
    # oracle: common practice — an offline page has no src/href to remote scripts/styles
    _, html = _report(path)
    parsed = check_html(html)
    remote = [u for u in parsed.resource_urls if "://" in u or u.startswith("//")]
    assert remote == []
    scripts = [a for t, a in parsed.tags if t == "script"]
    assert scripts and all("src" not in a for a in scripts)
    assert "Bokeh" in html  # the plotting library itself is inlined


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_report_shows_every_json_metric_as_formatted(path):
    # oracle: the JSON contract (DESIGN.md §4) from the CLI in a separate process
    a, html = _report(path)
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(path), "--json"],
                         capture_output=True, text=True, check=True, cwd=ROOT)
    data = json.loads(out.stdout)
    flat = _flat_json(data)
    assert flat, "no metrics in the JSON"
    for key, value in flat.items():
        text = format_metric(key, value, a.stage.balanced)
        cell = f'<td class="num">{text}</td>'
        assert cell in html, f"{key}: {text!r} not in report"
    embedded = html.split('id="freqpair-data">', 1)[1].split("</script>", 1)[0]
    assert json.loads(embedded.replace("<\\/", "</")) == data


def test_metric_format_is_two_decimal_db_and_engineering_hz():
    # oracle: common practice — dB to 0.01 dB, frequencies with SI prefixes
    assert format_metric("adm_db", 43.381) == "43.38 dB"
    assert format_metric("f3db_hz", 2035105.7) == "2.035 MHz"
    assert format_metric("cmrr_db", None).startswith("∞")
    assert format_metric("tail.capacitance", 3.3e-12) == "3.3 pF"
    # a mirror-loaded stage has no balanced output: not applicable, never "infinite"
    assert format_metric("cmrr_db", None, balanced=False) == "— (single-ended output)"
    assert format_metric("closed_loop_stable", True) == "yes"


def test_metric_rows_cover_the_json_keys(builtin_design):
    # oracle: the JSON contract (DESIGN.md §4) — every scalar metric gets a row
    a = freqpair.analyze(builtin_design)
    keys = {r.key for r in metric_rows(a)}
    assert keys == set(_flat_json(a.to_json()))


def test_report_of_ideal_tail_says_cmrr_is_infinite():
    # oracle: DESIGN.md §2 — a matched MOS pair with an ideal tail has zero
    # common-mode gain at DC, so its CMRR is reported as infinite, never −300 dB
    _, html = _report(ROOT / "examples" / "nmos_resistor_ideal_tail.toml")
    assert "<td class=\"num\">∞</td>" in html
    assert "-300" not in html.split("<script", 1)[0]


def _interrupting_write(monkeypatch):
    real = design_mod.os.fsync

    def boom(fd):
        raise KeyboardInterrupt("interrupted mid-write")
    monkeypatch.setattr(design_mod.os, "fsync", boom)
    return real


def test_interrupted_report_keeps_the_old_file(tmp_path, monkeypatch, builtin_design):
    # oracle: common practice (write to a temporary file, then rename)
    a = freqpair.analyze(builtin_design)
    target = tmp_path / "report.html"
    target.write_text("old report")
    _interrupting_write(monkeypatch)
    with pytest.raises(KeyboardInterrupt):
        write_report(a, target)
    assert target.read_text() == "old report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]


def test_interrupted_report_leaves_no_file(tmp_path, monkeypatch, builtin_design):
    # oracle: common practice (write to a temporary file, then rename)
    a = freqpair.analyze(builtin_design)
    _interrupting_write(monkeypatch)
    with pytest.raises(KeyboardInterrupt):
        write_report(a, tmp_path / "report.html")
    assert list(tmp_path.iterdir()) == []


def test_report_file_gets_ordinary_permissions(tmp_path, builtin_design):
    # oracle: POSIX — a new file is 0666 less the umask (common practice: readable by others)
    import os
    umask = os.umask(0o022)
    os.umask(umask)
    target = tmp_path / "r.html"
    write_report(freqpair.analyze(builtin_design), target)
    assert target.stat().st_mode & 0o777 == 0o666 & ~umask


def test_report_cli_writes_the_file(tmp_path):
    # oracle: the JSON contract — the written file carries the CLI's own JSON numbers
    src = ROOT / "examples" / "npn_resistor_rc_tail.toml"
    out = tmp_path / "r.html"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(src), "-o",
                          str(out)], capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    assert run.stdout == ""
    check_html(out.read_text(encoding="utf-8"))


def test_report_cli_bad_design_is_one_line_and_no_file(tmp_path):
    # oracle: DESIGN.md §4 — a bad design exits non-zero with one line on stderr
    bad = tmp_path / "bad.toml"
    bad.write_text(design_mod.BUILTIN_EXAMPLE.replace("beta = 200", "beta = -5"))
    out = tmp_path / "r.html"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(bad), "-o",
                          str(out)], capture_output=True, text=True, cwd=ROOT)
    assert run.returncode != 0
    assert len(run.stderr.strip().splitlines()) == 1 and "pair.beta" in run.stderr
    assert not out.exists()


def test_analysis_prints_as_the_summary(builtin_design):
    # oracle: the summary face (summary.format_summary) — str() is that text
    from freqpair.analysis.summary import CAUTION, format_summary
    a = freqpair.analyze(builtin_design)
    assert str(a) == format_summary(a) and CAUTION in str(a)


def test_analysis_html_repr_is_a_small_valid_table(builtin_design):
    # oracle: HTML syntax (common practice); numbers as in the JSON
    a = freqpair.analyze(builtin_design)
    frag = a._repr_html_()
    from test_report_support import StrictHTML
    p = StrictHTML()
    p.feed(frag)
    p.close()
    assert not p.errors and not p.stack
    assert format_metric("f3db_hz", a.to_json()["f3db_hz"]) in frag
    assert len(frag) < 5000


@pytest.mark.browser
def test_report_renders_plots_in_chromium_without_console_errors(tmp_path):
    # oracle: the browser itself — Bokeh's document registry and the console log
    a, html = _report(ROOT / "examples" / "npn_mismatched_pair.toml")
    page = tmp_path / "report.html"
    page.write_text(html, encoding="utf-8")
    driver, profile = chromium_driver()
    if driver is None:
        pytest.skip("headless Chromium (/usr/bin/chromium, chromedriver) is not installed")
    try:
        driver.get(page.as_uri())
        deadline = time.time() + 30
        views = 0
        while time.time() < deadline:
            views = driver.execute_script(
                "const B = window.Bokeh; if (!B || !B.documents || !B.documents.length) "
                "return 0; let n = 0; for (const v of B.index.values ? B.index.values() : "
                "Object.values(B.index)) { n += 1 } return n;")
            if views >= 2:
                break
            time.sleep(0.2)
        assert views >= 2, "Bokeh did not render the plots"
        kinds = driver.execute_script(
            "const out = []; for (const d of Bokeh.documents) for (const m of d.roots()) "
            "out.push(m.type); return out;")
        assert len(kinds) >= 2
        shot = artifacts_dir() / "report_npn_mismatched_pair.png"
        driver.save_screenshot(str(shot))
        assert shot.stat().st_size > 10_000
        errors = [e for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
        assert errors == []
    finally:
        close_driver(driver, profile)


@pytest.mark.parametrize("bad", ["<!DOCTYPE html><html><body><div><p></div></p></body></html>",
                                 "<!DOCTYPE html><html><body><div></body></html>",
                                 "<html><body></body></html>"])
def test_strict_html_check_rejects_broken_pages(bad):
    # oracle: HTML5 syntax rules (common practice) — the checker used above can fail
    with pytest.raises(AssertionError):
        check_html(bad)


def test_report_shows_hand_rows_when_the_hand_module_exists(builtin_design):
    # oracle: freqpair.analysis.hand's own table — the report shows each of its labels
    from freqpair.analysis import hand
    a = freqpair.analyze(builtin_design)
    html = report_html(a)
    from html import escape
    for row in hand.hand_table(a):
        assert escape(row.label) in html


def test_report_shows_loop_margins_as_the_json_gives_them(builtin_design):
    # oracle: the JSON contract (DESIGN.md §4) loop keys with [feedback]
    
    d = freqpair.replace_value(builtin_design, "feedback.factor", 0.05)
    a = freqpair.analyze(d)
    data = a.to_json()
    html = report_html(a)
    for key in ("phase_margin_deg", "gain_margin_db", "crossover_hz"):
        if key in data:
            assert format_metric(key, data[key]) in html


def test_plot_helpers_return_restylable_bokeh_figures(builtin_design):
    # oracle: Bokeh's own model API — a returned figure accepts new styling
    from bokeh.plotting import figure
    from freqpair.views.report_plots import bode_figures, cmrr_figure, overlay_figure
    a = freqpair.analyze(builtin_design)
    mag, phase = bode_figures(a)
    cm = cmrr_figure(a)
    ov = overlay_figure([a, a], "cmrr_se")
    for fig in (mag, phase, cm, ov):
        assert isinstance(fig, figure)
    mag.title.text = "mine"
    mag.line([1, 10], [0, 1], line_color="black")
    assert mag.title.text == "mine" and phase.x_range is mag.x_range


def test_report_and_explorer_draw_a_gain_with_the_same_builder_and_colour(builtin_design):
    # oracle: common practice — one figure builder, one colour per gain across faces;
    # the curve drawn is the analysis' own A_dm in dB (20·log10|A_dm|)
    import numpy as np
    from bokeh.document import Document
    from freqpair.app.view import make_doc
    from freqpair.views.report_plots import bode_figures, cmrr_figure
    a = freqpair.analyze(builtin_design)
    mag, _ = bode_figures(a)
    ex = make_doc(Document(), design=builtin_design)
    report_line = mag.select(name="adm")[0]
    app_lines = [r for r in ex.doc.roots[0].references()
                 if getattr(r, "name", None) == "adm" and hasattr(r, "glyph")]
    assert app_lines and report_line.glyph.line_color == app_lines[0].glyph.line_color
    f = np.asarray(report_line.data_source.data["f_hz"])
    y = np.asarray(report_line.data_source.data["adm_db"])
    np.testing.assert_allclose(y, 20 * np.log10(np.abs(a.responses.at(f).adm)), atol=1e-9)
    cm = cmrr_figure(a)
    assert cm.select(name="corner")[0].data_source.data["f_hz"] == [a.cmrr_corner_hz]
