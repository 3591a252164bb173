"""Sweeps and design targets: agreement with single analyses, re-analysed targets."""
import json
import subprocess
import sys
import pathlib

import numpy as np
import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.errors import FreqpairError
from freqpair.studies.sweep import SweepAxis, solve_target, sweep

ROOT = pathlib.Path(__file__).parent.parent


@pytest.fixture(scope="module")
def design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


def test_one_dimensional_sweep_agrees_point_by_point_with_single_analyses(design):
    # oracle: freqpair.analyze on the modified design (replace_value), point by point
    ax = SweepAxis.log("tail.capacitance", 1e-13, 1e-10, 3)
    res = sweep(design, [ax], curves=True, f_hz=[1e3, 1e5])
    for i, c in enumerate(ax.values):
        a = freqpair.analyze(freqpair.replace_value(design, "tail.capacitance", c))
        assert res.table["cmrr_corner_hz"][i] == a.cmrr_corner_hz
        assert res.table["f3db_hz"][i] == a.f3db_hz
        r = a.responses.at([1e3, 1e5])
        np.testing.assert_allclose(res.curves["cmrr_se_db"][i],
                                   20 * np.log10(np.abs(r.adm_se / r.acm_se)), rtol=1e-12)


def test_two_dimensional_sweep_keeps_errors_per_point(design):
    # oracle: the bias rule of DESIGN.md §2 (V_CE < 0.2 V is saturation) on a hand
    # calculation: 3 mA tail, 10 k loads, 12 V rail → V_C < 0 → saturated
    res = sweep(design, [SweepAxis("bias.tail_current", (1e-3, 3e-3)),
                         SweepAxis("tail.capacitance", (1e-12, 2e-12))])
    rows = res.to_rows()
    assert len(rows) == 4
    assert rows[0]["error"] is None and rows[0]["cmrr_se_db"] is not None
    assert "saturated" in rows[3]["error"] and rows[3]["cmrr_se_db"] is None
    a = freqpair.analyze(freqpair.replace_value(freqpair.replace_value(
        design, "bias.tail_current", 1e-3), "tail.capacitance", 2e-12))
    assert rows[1]["cmrr_se_db"] == a.cmrr_se_db


def test_linear_and_log_axes_space_values_as_named(design):
    # oracle: numpy.linspace / numpy.logspace definitions (common practice)
    assert SweepAxis.linear("k", 1, 3, 3).values == (1.0, 2.0, 3.0)
    np.testing.assert_allclose(SweepAxis.log("k", 1, 100, 3).values, (1, 10, 100))
    with pytest.raises(FreqpairError, match="log spacing"):
        SweepAxis.log("k", 0, 1, 3)


def test_unknown_key_or_metric_is_a_one_line_error(design):
    # common practice: bad input names the field
    with pytest.raises(FreqpairError, match="tail.capacitence"):
        sweep(design, [SweepAxis("tail.capacitence", (1e-12,))])
    with pytest.raises(FreqpairError, match="metric = 'cmrr'"):
        sweep(design, [SweepAxis("tail.capacitance", (1e-12,))], metrics=("cmrr",))


def test_target_largest_tail_capacitance_meets_cmrr_bound_on_reanalysis(design):
    # oracle: re-analysis with freqpair.analyze of the returned design; the bound holds at
    # the value and fails just beyond it (relative step 1e-6)
    t = solve_target(design, "tail.capacitance", "cmrr_se_db", 80.0, "min", (1e-13, 1e-10),
                     at_hz=1e5)
    assert t.met and t.feasible == "below"
    assert t.metric_value == pytest.approx(80.0, abs=1e-6) and t.metric_value >= 80.0
    beyond = freqpair.analyze(freqpair.replace_value(design, "tail.capacitance",
                                                     t.value * (1 + 1e-6)))
    r = beyond.responses.at([1e5])
    assert 20 * np.log10(abs(r.adm_se[0] / r.acm_se[0])) < 80.0


def test_target_smallest_tail_current_for_a_bandwidth(design):
    # oracle: re-analysis; f_3dB rises as the tail current falls here (10 k loads, Miller)
    t = solve_target(design, "bias.tail_current", "f3db_hz", 2e6, "min", (1e-4, 1e-3))
    a = freqpair.analyze(freqpair.replace_value(design, "bias.tail_current", t.value))
    assert t.met and a.f3db_hz >= 2e6
    assert a.f3db_hz == pytest.approx(2e6, rel=1e-6)


def test_unreachable_target_says_cannot_reach_within_range(design):
    # common practice: an infeasible request is one clear line
    with pytest.raises(FreqpairError, match=r"cannot reach f3db_hz ≥ 2e\+10 .* within"):
        solve_target(design, "bias.tail_current", "f3db_hz", 2e10, "min", (1e-4, 1e-3))


def test_cli_sweep_writes_csv_and_json(tmp_path):
    # common practice: CSV header + one line per point; JSON parses
    cmd = [sys.executable, "-m", "freqpair.cli", "sweep", "examples/npn_resistor_rc_tail.toml",
           "--vary", "tail.capacitance=1p:100p:3:log", "--metrics", "cmrr_corner_hz"]
    out = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    lines = out.stdout.strip().splitlines()
    assert lines[0] == "tail.capacitance,cmrr_corner_hz,error" and len(lines) == 4
    out = subprocess.run(cmd + ["--out", str(tmp_path / "s.json")], capture_output=True,
                         text=True, cwd=ROOT)
    assert json.loads((tmp_path / "s.json").read_text())["rows"][2]["tail.capacitance"] == \
        pytest.approx(1e-10)
    bad = subprocess.run(cmd[:5] + ["--vary", "tail.capacitance=1p:2p"], capture_output=True,
                         text=True, cwd=ROOT)
    assert bad.returncode == 2 and bad.stdout == "" and len(bad.stderr.splitlines()) == 1


def test_cli_target_reports_the_reanalysed_value():
    # oracle: re-analysis inside the command; exit status 0 when met (common practice)
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "target",
                          "examples/npn_resistor_rc_tail.toml", "--vary",
                          "tail.capacitance=0.1p:100p", "--metric", "cmrr_se_db", "--at", "100k",
                          "--min", "80", "--json"], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    obj = json.loads(out.stdout)
    assert obj["met"] and obj["metric_value"] >= 80


def test_phase_margin_is_a_sweep_metric_equal_to_the_loop_analysis():
    # oracle: a single loop analysis of the same design (itself checked against
    # python-control stability_margins in test_loop.py); sweeps agree point by point
    from freqpair.analysis.loop import loop_analysis
    d = freqpair.load_design(ROOT / "examples" / "two_stage_miller_loop.toml")
    values = [4e-12, 16e-12]
    res = sweep(d, [SweepAxis("second_stage.miller_capacitance", values)],
                metrics=("phase_margin_deg", "overshoot_pct"))
    rows = res.to_rows()
    assert len(rows) == 2
    for row, cc in zip(rows, values):
        a = freqpair.analyze(freqpair.replace_value(d, "second_stage.miller_capacitance", cc))
        lr = loop_analysis(a)
        assert row["phase_margin_deg"] == pytest.approx(lr.phase_margin_deg, rel=1e-12)
        assert row["overshoot_pct"] == pytest.approx(lr.overshoot_pct, rel=1e-12)
    # more Miller capacitance buys phase margin (textbook two-stage compensation)
    assert rows[1]["phase_margin_deg"] > rows[0]["phase_margin_deg"]


def test_loop_metric_without_feedback_is_a_one_line_error():
    d = freqpair.design_from_text(BUILTIN_EXAMPLE)
    with pytest.raises(FreqpairError, match=r"phase_margin_deg.*\[feedback\]"):
        sweep(d, [SweepAxis("tail.capacitance", [1e-12])], metrics=("phase_margin_deg",))


def test_target_message_names_the_option_of_the_face_in_use():
    # oracle: common practice — a message tells the user what to type where they are:
    # "--want largest" on the command line, want='largest' in Python
    from freqpair.studies.targets import TargetError, solve_target
    args = ["examples/npn_resistor_rc_tail.toml", "--vary", "tail.capacitance=0.1p:1p",
            "--metric", "cmrr_se_db", "--min", "0"]
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "target", *args],
                         capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 2 and run.stdout == ""
    assert "--want largest or --want smallest" in run.stderr and "want='" not in run.stderr
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    with pytest.raises(TargetError, match="want='largest'"):
        solve_target(d, "tail.capacitance", "cmrr_se_db", 0.0, "min", (0.1e-12, 1e-12))


# ---------------------------------------------------------------- streaming rows

def test_streamed_sweep_csv_equals_the_table_csv_byte_for_byte(design):
    # oracle: SweepResult.to_csv of the gathered run (the non-streaming path), with failing
    # points (a 3 mA tail saturates the built-in example) and undefined metrics
    from freqpair.studies.sweep import SweepResult, iter_sweep_rows
    axes = [SweepAxis("bias.tail_current", (0.5e-3, 1e-3, 3e-3)),
            SweepAxis.log("tail.capacitance", 1e-13, 1e-10, 4)]
    table = sweep(design, axes, at_hz=1e5).to_csv()
    for chunk in (1, 5, 16):
        rows = iter_sweep_rows(design, axes, at_hz=1e5, chunk=chunk)
        assert "".join(SweepResult.csv_stream(rows)) == table
    assert "saturated" in table


def test_streamed_target_grid_csv_equals_the_table_csv_byte_for_byte(design):
    # oracle: TargetGridResult.to_csv of solve_target_grid (the non-streaming path)
    from freqpair.studies.target_grid import TargetGridResult, iter_target_rows, solve_target_grid
    axes = [SweepAxis("bias.tail_current", (1e-3, 2e-3, 3e-3))]
    args = (design, axes, "tail.capacitance", "cmrr_se_db", 80.0, "min", (1e-13, 1e-10), 1e5)
    table = solve_target_grid(*args).to_csv()
    assert "".join(TargetGridResult.csv_stream(iter_target_rows(*args, chunk=1))) == table


def test_grid_points_of_a_range_are_the_product_order(design):
    # oracle: itertools.product of the axes' index ranges (the last axis fastest)
    import itertools
    from freqpair.studies.design_grid import grid_points
    axes = [SweepAxis("a", (1, 2, 3)), SweepAxis("b", (1, 2, 3, 4, 5))]
    every = list(itertools.product(range(3), range(5)))
    assert grid_points(axes, 0, 15) == every
    assert grid_points(axes, 4, 11) == every[4:11]


def test_cli_sweep_csv_streamed_to_a_file_equals_the_library_table(tmp_path, design):
    # oracle: SweepResult.to_csv of the library's sweep with the same axes and metrics
    out = tmp_path / "s.csv"
    cmd = [sys.executable, "-m", "freqpair.cli", "sweep", "examples/npn_resistor_rc_tail.toml",
           "--vary", "bias.tail_current=1m,2m,6m", "--vary", "tail.capacitance=1p:100p:3:log",
           "--metrics", "cmrr_se_db,cmrr_corner_hz", "--at", "100k"]
    r = subprocess.run(cmd + ["--out", str(out)], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0 and r.stdout == "", r.stderr
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    lib = sweep(d, [SweepAxis("bias.tail_current", (1e-3, 2e-3, 6e-3)),
                    SweepAxis.log("tail.capacitance", 1e-12, 1e-10, 3)],
                metrics=("cmrr_se_db", "cmrr_corner_hz"), at_hz=1e5).to_csv()
    assert out.read_text() == lib
    r = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    assert r.stdout == lib
    assert [p.name for p in tmp_path.iterdir()] == ["s.csv"]       # no temporary left


def test_an_interrupted_streamed_write_leaves_the_old_file_whole(tmp_path):
    # oracle: common practice (atomic rename: readers see the old file or the new one)
    from freqpair.cli.sweep import write_pieces
    target = tmp_path / "grid.csv"
    target.write_text("old content\n", encoding="utf-8")

    def pieces():
        yield "a,b\n"
        yield "1,2\n"
        raise RuntimeError("worker lost")
    with pytest.raises(RuntimeError):
        write_pieces(pieces(), str(target))
    assert target.read_text(encoding="utf-8") == "old content\n"
    assert [p.name for p in tmp_path.iterdir()] == ["grid.csv"]
    write_pieces(iter(["a,b\n", "1,2\n"]), str(target))
    assert target.read_text(encoding="utf-8") == "a,b\n1,2\n"


def test_a_streamed_sweep_holds_only_the_chunks_in_flight(design, monkeypatch):
    # oracle: counting the chunks started against the rows handed on (local executor: one
    # chunk at a time), so memory does not depend on the grid's size
    from freqpair.studies import design_grid
    from freqpair.studies.sweep import iter_sweep_rows
    started = []
    real = design_grid.grid_points
    monkeypatch.setattr(design_grid, "grid_points",
                        lambda axes, a, b: started.append((a, b)) or real(axes, a, b))
    ax = SweepAxis.log("tail.capacitance", 1e-13, 1e-10, 12)
    rows = iter_sweep_rows(design, [ax], metrics=("cmrr_se_db",), chunk=3)
    for k, row in enumerate(rows):
        assert len(started) <= k // 3 + 1
    assert len(started) == 4
