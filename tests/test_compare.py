"""Comparison of several designs: every design's metrics, differences marked."""
from __future__ import annotations

import json
import pathlib
import subprocess
import sys

import pytest

import freqpair
from freqpair.views.compare import RELATIVE_TOLERANCE, compare_html, compare_table
from freqpair.analysis.summary import format_metric
from test_report_support import check_html

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))


@pytest.fixture(scope="module")
def analyses():
    return [freqpair.analyze(freqpair.load_design(p)) for p in EXAMPLES]


def test_compare_lists_every_designs_metrics(analyses):
    # oracle: the JSON contract (DESIGN.md §4) of each design, formatted as the report does
    html = compare_html(analyses)
    check_html(html)
    for a in analyses:
        data = a.to_json()
        for key in ("adm_db", "f3db_hz", "ugf_hz", "cmrr_se_db", "cmrr_corner_hz"):
            assert f">{format_metric(key, data[key])}</td>" in html, key
    ct = compare_table(analyses)
    for i, a in enumerate(analyses):
        data = a.to_json()
        assert ct.values[ct.keys.index("f3db_hz")][i] == data["f3db_hz"]
        assert ct.values[ct.keys.index("tail.resistance")][i] == data["tail"]["resistance"]


def test_identical_designs_show_no_differences(builtin_design):
    # oracle: common practice — a design compared with itself differs nowhere
    a = freqpair.analyze(builtin_design)
    ct = compare_table([a, freqpair.analyze(builtin_design)])
    assert not any(any(row) for row in ct.differs)
    assert 'class="num differs"' not in compare_html([a, a])


def test_tail_capacitance_moves_the_cmrr_corner_not_the_dc_gain(builtin_design):
    # oracle: DESIGN.md §2 — DC values solve the network at s = 0, where a
    # capacitor is open, so C_tail cannot change A_dm(0) or the DC CMRR; the
    # CMRR corner falls as C_tail shorts R_tail sooner (textbook, Gray & Meyer
    # §4.2 common-mode rejection vs frequency, from memory)
    a = freqpair.analyze(builtin_design)
    b = freqpair.analyze(freqpair.replace_value(builtin_design, "tail.capacitance", "20 pF"))
    ct = compare_table([a, b], ["2 pF", "20 pF"])
    differs = {k: row[1] for k, row in zip(ct.keys, ct.differs)}
    assert differs["cmrr_corner_hz"] and differs["tail.capacitance"]
    assert not differs["adm_db"] and not differs["cmrr_se_db"]
    html = compare_html([a, b], ["2 pF", "20 pF"])
    corner_b = format_metric("cmrr_corner_hz", b.to_json()["cmrr_corner_hz"])
    assert f'<td class="num differs">{corner_b}</td>' in html


def test_differences_use_the_stated_relative_tolerance(builtin_design):
    # oracle: common practice — relative difference against design 1
    a = freqpair.analyze(builtin_design)
    ct = compare_table([a])
    assert RELATIVE_TOLERANCE == 1e-3 and ct.differs[0] == [False]


def test_compare_cli_writes_one_page_for_all_designs(tmp_path):
    # oracle: the JSON contract of each design from `analyze --json`
    out = tmp_path / "c.html"
    args = [sys.executable, "-m", "freqpair.cli", "compare", *map(str, EXAMPLES), "-o", str(out)]
    run = subprocess.run(args, capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    html = out.read_text(encoding="utf-8")
    embedded = json.loads(html.split('id="freqpair-data">', 1)[1].split("</script>")[0]
                          .replace("<\\/", "</"))
    assert [d["name"] for d in embedded["designs"]] == \
        [freqpair.load_design(p).name for p in EXAMPLES]


def test_compare_cli_rejects_wrong_label_count(tmp_path):
    # oracle: house rule — bad input is one line naming the option and value
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "compare", str(EXAMPLES[0]),
                          str(EXAMPLES[1]), "-o", str(tmp_path / "c.html"), "--labels", "x"],
                         capture_output=True, text=True, cwd=ROOT)
    assert run.returncode != 0 and "--labels" in run.stderr
    assert len(run.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "c.html").exists()
