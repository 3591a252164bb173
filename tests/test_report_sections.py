"""The report's second-edition sections: Stability, Supply rejection, Input impedance,
Noise and Pole paths.

Oracles: the JSON contract (the marks and tables show the numbers of
``analyze --json`` to the printed precision: DESIGN.md §4, §7); the loop itself
is checked against python-control in tests/test_loop.py.
"""
import json

import pytest

import freqpair
from conftest import ROOT
from freqpair.analysis.summary import format_metric
from freqpair.views.report import report_html
from freqpair.views.stage_data import loop_view, noise_view, supply_view
from helpers import run_cli

LOOP = ROOT / "examples" / "two_stage_miller_loop.toml"


@pytest.fixture(scope="module")
def loop_analysis():
    return freqpair.analyze(freqpair.load_design(LOOP))


@pytest.fixture(scope="module")
def loop_json():
    return json.loads(run_cli("analyze", LOOP, "--json").stdout)


def test_loop_marks_carry_the_json_numbers(loop_analysis, loop_json):
    # oracle: the JSON of the same design from the command line (another process)
    view = loop_view(loop_analysis, [1e3, 1e6, 1e8])
    m = view["marks"]
    assert m["phase_margin"]["text"] == ["phase margin "
                                         + format_metric("phase_margin_deg",
                                                         loop_json["phase_margin_deg"])]
    assert m["crossover"]["x"][0] == pytest.approx(loop_json["crossover_hz"], rel=1e-12)
    assert m["crossover"]["text"] == ["crossover " + format_metric("crossover_hz",
                                                                   loop_json["crossover_hz"])]
    assert m["gain_margin"]["y"][0] == pytest.approx(-loop_json["gain_margin_db"], rel=1e-12)
    assert m["overshoot"]["text"] == ["overshoot " + format_metric("overshoot_pct",
                                                                   loop_json["overshoot_pct"])]
    assert m["settling"]["x"][0] == pytest.approx(loop_json["settling_time_s"], rel=1e-12)
    assert m["peaking"]["text"] == ["peaking " + format_metric("peaking_db",
                                                               loop_json["peaking_db"])]


def test_the_step_plot_peaks_at_the_overshoot_of_the_json(loop_analysis, loop_json):
    # oracle: the JSON overshoot_pct; the plotted step's own maximum, read off its samples
    view = loop_view(loop_analysis, [1e3])
    y = view["step"]["y"]
    final = view["result"].closed_loop_dc_gain
    peak = max(y / final)
    assert 100 * (peak - 1) == pytest.approx(loop_json["overshoot_pct"], abs=0.05)
    assert view["marks"]["overshoot"]["y"][0] / final == pytest.approx(
        1 + loop_json["overshoot_pct"] / 100, rel=1e-12)


def test_report_has_the_stability_section_with_its_numbers(loop_analysis, loop_json):
    html = report_html(loop_analysis)
    assert 'id="stability"' in html
    for key in ("phase_margin_deg", "gain_margin_db", "crossover_hz", "overshoot_pct",
                "settling_time_s"):
        assert f'<td class="num">{format_metric(key, loop_json[key])}</td>' in html, key
    pm = format_metric("phase_margin_deg", loop_json["phase_margin_deg"]).replace("°", "")
    assert f"phase margin {pm}" in html                      # the mark on the plot


def test_report_without_feedback_says_how_to_get_a_loop():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml"))
    html = report_html(a)
    assert 'id="stability"' in html and "Set a feedback factor or a divider" in html


def test_supply_input_and_noise_sections_show_the_json_values(loop_analysis, loop_json):
    html = report_html(loop_analysis)
    for ident in ("supply", "zin", "noise"):
        assert f'id="{ident}"' in html
    for key in ("psrr_pos_db", "psrr_neg_db", "psrr_pos_corner_hz", "zin_dm_ohm",
                "zin_dm_corner_hz"):
        assert f'<td class="num">{format_metric(key, loop_json[key])}</td>' in html, key
    sup = supply_view(loop_analysis, [1e3])
    assert sup["marks"]["corner_pos"]["x"][0] == pytest.approx(loop_json["psrr_pos_corner_hz"])
    nv = noise_view(loop_analysis, [1e3, 1e4])
    spot = loop_json["noise"]["spot"][0]
    assert nv["contributors"]["name"][0] == spot["contributors"][0]["name"]
    assert float(nv["contributors"]["share"][0].rstrip(" %")) == pytest.approx(
        100 * spot["contributors"][0]["share"], abs=0.005)


def test_report_locus_option_adds_the_pole_paths(tmp_path):
    out = tmp_path / "r.html"
    run = run_cli("report", LOOP, "-o", out, "--locus",
                  "second_stage.miller_capacitance=1p:100p:9:log")
    assert run.returncode == 0, run.stderr
    html = out.read_text()
    assert 'id="locus"' in html and "Pole paths" in html
    bad = run_cli("report", LOOP, "-o", tmp_path / "x.html", "--locus", "nope=1:2")
    assert bad.returncode == 2 and not (tmp_path / "x.html").exists()


def test_compare_shows_stability_supply_and_noise_when_a_design_has_a_loop(tmp_path):
    # oracle: the brief — the stability views appear in compare too (designs with [feedback])
    out = tmp_path / "c.html"
    run = run_cli("compare", LOOP, ROOT / "examples" / "npn_resistor_rc_tail.toml", "-o", out)
    assert run.returncode == 0, run.stderr
    html = out.read_text()
    for ident in ("stability", "supply", "noise"):
        assert f'id="{ident}"' in html
    a = freqpair.analyze(freqpair.load_design(LOOP))
    pm = format_metric("phase_margin_deg", a.loop().phase_margin_deg)
    assert f"<td class=\"num\">{pm}</td>" in html or pm in html
    out2 = tmp_path / "d.html"
    run = run_cli("compare", ROOT / "examples" / "npn_resistor_rc_tail.toml",
                  ROOT / "examples" / "npn_mismatched_pair.toml", "-o", out2)
    assert 'id="stability"' not in out2.read_text()
