"""`freqpair report --measured FILE --kind K`: the section "Measurement against the model"."""
from __future__ import annotations

import csv
import json
import math
import pathlib
import re
import subprocess
import sys

import numpy as np
import pytest

import freqpair
import freqpair.studies.measured
from freqpair.studies.measured import read_measurement
from freqpair.views.report import report_html
from test_report_support import check_html

ROOT = pathlib.Path(__file__).resolve().parent.parent
DESIGN = ROOT / "examples" / "npn_resistor_rc_tail.toml"
MEASURED = ROOT / "examples" / "measured" / "bench_front_end_cmrr_synthetic.csv"


def _csv_rows():
    lines = [ln for ln in MEASURED.read_text().splitlines() if ln and not ln.startswith("#")]
    return [(float(r[0]), float(r[1])) for r in list(csv.reader(lines))[1:]]


def _direct_cmrr_db(design, f_hz):
    """Single-ended CMRR by numpy.linalg.solve of (G + j2πf·C) x = B at each frequency."""
    stage = freqpair.build_stage(design)
    G, C, B = stage.network.matrices()
    o2 = stage.network.selector({"o2": 1.0})
    out = []
    for f in f_hz:
        x = np.linalg.solve(G + 2j * np.pi * f * C, B[:, :2])      # in1, in2
        out.append(20 * math.log10(abs(o2 @ x @ np.array([0.5, -0.5]))
                                   / abs(o2 @ x @ np.array([1.0, 1.0]))))
    return np.array(out)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    out = tmp_path_factory.mktemp("rep") / "report.html"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(DESIGN),
                          "--measured", str(MEASURED), "--kind", "cmrr", "-o", str(out)],
                         capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    return out.read_text(encoding="utf-8")


def test_report_with_measurement_has_the_section_with_rms_and_max_residual(page):
    check_html(page)    # oracle: HTML5 syntax rules (common practice)
    assert 'id="measured"' in page and "Measurement against the model" in page
    rows = _csv_rows()
    f = np.array([r[0] for r in rows])
    residual = np.array([r[1] for r in rows]) - _direct_cmrr_db(freqpair.load_design(DESIGN), f)
    # oracle: the CSV read by the csv module and the model by a dense direct solve (numpy)
    assert f"{math.sqrt(np.mean(residual ** 2)):.2f} dB" in page
    assert f"{np.max(np.abs(residual)):.2f} dB" in page
    assert f"<td class=\"num\">{len(rows)}</td>" in page


def test_report_embeds_the_overlay_numbers_as_json(page):
    payload = re.search(r'<script type="application/json" id="freqpair-data">(.*?)</script>',
                        page, re.S).group(1)
    data = json.loads(payload.replace("<\\/", "</"))["measured"]
    rows = _csv_rows()
    # oracle: the CSV file itself (csv module): the measured points, unchanged
    assert data["frequency_hz"] == [r[0] for r in rows]
    assert data["measured_db"] == [r[1] for r in rows]
    np.testing.assert_allclose(np.array(data["residual_db"]),
                               np.array(data["measured_db"]) - np.array(data["model_db"]),
                               atol=1e-12)


def test_report_without_measurement_has_no_such_section():
    html = report_html(freqpair.analyze(freqpair.load_design(DESIGN)))
    assert "Measurement against the model" not in html


def test_report_section_matches_freqpair_measured_overlay():
    a = freqpair.analyze(freqpair.load_design(DESIGN))
    m = read_measurement(MEASURED, "cmrr")
    ov = freqpair.studies.measured.overlay(a, m)
    html = report_html(a, m)
    # oracle: freqpair.studies.measured.overlay (the module the section is built on), checked above
    # against a direct solve; its phase rms is shown too
    assert f"{ov.rms_residual_deg:.1f}°" in html
    assert "measured and model (magnitude)" in html and "measured and model (phase)" in html


@pytest.mark.parametrize("args, words", [
    (["--measured", "missing.csv", "--kind", "cmrr"], "missing.csv"),
    (["--measured", str(MEASURED), "--kind", "noise"], "kind = 'noise'"),
    (["--measured", str(MEASURED)], "--kind"),
    (["--kind", "cmrr"], "--measured"),
])
def test_bad_measurement_option_is_one_line_exit_2_and_no_file(tmp_path, args, words):
    out = tmp_path / "r.html"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(DESIGN), *args,
                          "-o", str(out)], capture_output=True, text=True, cwd=ROOT)
    # oracle: DESIGN.md §4 — bad input: non-zero exit, one line on stderr, nothing written
    assert run.returncode == 2 and run.stdout == ""
    assert len(run.stderr.strip().splitlines()) == 1 and words in run.stderr
    assert not out.exists()


def test_bad_measurement_rows_name_file_and_line(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("frequency [Hz],CMRR [dB]\n1000,80\n2000,eighty\n")
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(DESIGN),
                          "--measured", str(bad), "--kind", "cmrr", "-o",
                          str(tmp_path / "r.html")], capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1
    assert "bad.csv" in run.stderr and "line 3" in run.stderr and "'eighty'" in run.stderr


def test_kind_the_stage_lacks_is_refused_on_the_command_line(tmp_path):
    mirror = ROOT / "examples" / "nmos_mirror_load_cascode_tail.toml"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "report", str(mirror),
                          "--measured", str(MEASURED), "--kind", "cmrr_balanced",
                          "--magnitude-column", "CMRR [dB]", "-o",
                          str(tmp_path / "r.html")], capture_output=True, text=True, cwd=ROOT)
    # oracle: DESIGN.md §3a — a mirror-loaded stage has no balanced output
    assert run.returncode == 2 and "not defined for this stage" in run.stderr
    assert not (tmp_path / "r.html").exists()
