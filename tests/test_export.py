"""CSV export (`analyze --csv`): the columns read back to the library's values."""
from __future__ import annotations

import csv
import math
import pathlib
import subprocess
import sys

import numpy as np
import pytest

import freqpair
from freqpair.views.export import curves_table
from freqpair.circuit.frequency import FrequencyGrid

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))


def _read(path):
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    head, body = rows[0], rows[1:]
    # an empty cell is a zero gain (−inf dB) or the infinite CMRR it divides
    cols = {h: np.array([float(r[i]) if r[i] != "" else
                         (math.inf if h.startswith("cmrr") else math.nan if h.endswith("_deg")
                          else -math.inf) for r in body])
            for i, h in enumerate(head)}
    return head, cols


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_csv_columns_round_trip_to_the_library(path, tmp_path):
    # oracle: an independent code path — a dense solve of (G + sC) x = b at
    # every frequency (numpy.linalg.solve, FrequencySolver.response_direct),
    # not the QZ-reduced solver that produced the file
    out = tmp_path / "c.csv"
    run = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(path), "--csv",
                          str(out)], capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    head, cols = _read(out)
    a = freqpair.analyze(freqpair.load_design(path))
    f = FrequencyGrid.from_design(a.design).f_hz
    np.testing.assert_array_equal(cols["frequency_hz"], f)   # repr() round-trips exactly
    H = a.responses.solver.response_direct(2j * np.pi * f)    # (n_f, p, m)
    o1 = H[:, 0, 0] * 0.5 - H[:, 0, 1] * 0.5
    o2 = H[:, 1, 0] * 0.5 - H[:, 1, 1] * 0.5
    o2_cm = H[:, 1, 0] + H[:, 1, 1]
    expect = {"adm_se": o2, "acm_se": o2_cm}
    if a.stage.balanced:
        expect["adm"] = o1 - o2
        expect["acm_dm"] = (H[:, 0, 0] + H[:, 0, 1]) - o2_cm
    # DESIGN.md §2: a gain below 1e-12·|A_dm(0)| is exactly zero (empty cell)
    dc = a.responses.solver.dc()
    ref = abs(dc[0, 0] * 0.5 - dc[0, 1] * 0.5 - dc[1, 0] * 0.5 + dc[1, 1] * 0.5) \
        if a.stage.balanced else abs(dc[1, 0] * 0.5 - dc[1, 1] * 0.5)
    for name, v in expect.items():
        zero = np.abs(v) <= 1e-12 * ref
        empty = np.isneginf(cols[f"{name}_db"])
        assert np.array_equal(empty, zero), name
        # 1e-6 dB and 1e-6°, or the rounding floor of DESIGN.md §2 (1e-12 of |A_dm(0)|,
        # here 1e-13): a common-mode gain 150 dB below the differential one is
        # resolved to that floor, not to 1e-6 of itself
        floor = 1e-13 * ref
        got_mag = 10 ** (cols[f"{name}_db"][~zero] / 20)
        mag_tol = np.maximum(np.abs(v[~zero]) * (10 ** (1e-6 / 20) - 1), floor)
        assert np.all(np.abs(got_mag - np.abs(v[~zero])) <= mag_tol), name
        if not zero.any():
            phase = np.degrees(np.unwrap(np.angle(v)))
            ph_tol = np.maximum(1e-6, np.degrees(floor / np.abs(v)))
            assert np.all(np.abs(cols[f"{name}_deg"] - phase) <= ph_tol), name
    live = ~(np.abs(o2_cm) <= 1e-12 * ref)
    cmrr = 20 * np.log10(np.abs(o2[live])) - 20 * np.log10(np.abs(o2_cm[live]))
    cm_tol = np.maximum(1e-6, 20 * np.log10(1 + 1e-13 * ref / np.abs(o2_cm[live])))
    assert np.all(np.abs(cols["cmrr_se_db"][live] - cmrr) <= cm_tol + 1e-6)


def test_csv_holds_frequency_every_response_and_cmrr(tmp_path):
    # oracle: README (`--csv FILE`) — frequency, dB and degrees of every gain, CMRR
    src = ROOT / "examples" / "npn_resistor_rc_tail.toml"
    out = tmp_path / "c.csv"
    subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(src), "--csv", str(out)],
                   check=True, capture_output=True, cwd=ROOT)
    head, _ = _read(out)
    assert head[0] == "frequency_hz"
    for name in ("adm", "adm_se", "acm_se", "acm_dm", "acm_cm"):
        assert f"{name}_db" in head and f"{name}_deg" in head
    assert "cmrr_se_db" in head and "cmrr_db" in head


def test_csv_phase_is_unwrapped(tmp_path):
    # oracle: common practice — an unwrapped phase has no ±360° jumps between points
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_mismatched_pair.toml"))
    cols = curves_table(a)
    for k, v in cols.items():
        if k.endswith("_deg"):
            assert np.all(np.abs(np.diff(v)) < 180), k


def test_csv_values_equal_the_library_table(tmp_path, builtin_design):
    # oracle: Python's float repr round trip (exact) against curves_table
    from freqpair.views.export import write_curves_csv
    a = freqpair.analyze(builtin_design)
    out = tmp_path / "c.csv"
    write_curves_csv(a, out)
    _, cols = _read(out)
    for k, v in curves_table(a).items():
        np.testing.assert_array_equal(cols[k], v)
