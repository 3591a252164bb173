"""Pole paths (DESIGN.md §7i): the library, the pairing, the command line.

Oracles: numpy.roots of the characteristic polynomial of the textbook two-stage
network, written by hand from its two node equations; the textbook behaviour of
Miller compensation (Gray, Hurst, Lewis, Meyer, §9.4, from memory): as C_c grows
the dominant pole falls ∝ 1/C_c and the second pole rises toward g_m2/(C_1 + C_2).
"""
import json
import math

import numpy as np
import pytest

import freqpair
from freqpair.studies.locus import LocusError, locus, pair_paths
from helpers import run_cli
from loop_designs import clean_two_stage

C_LOAD, C_IN, C_OUT = 0.2e-12, 0.05e-12, 10e-12
R1, R2, GM2 = 100e3, 200e3, 5e-3
C1 = C_LOAD + C_IN


def hand_poles_hz(c_c):
    """Roots of det of the two-node network (o2 and out), s/2π [Hz]:
    s²·[(C1+Cc)(C2+Cc) − Cc²] + s·[G1(C2+Cc) + G2(C1+Cc) + g_m2·Cc] + G1·G2."""
    g1, g2 = 1 / R1, 1 / R2
    a = (C1 + c_c) * (C_OUT + c_c) - c_c ** 2
    b = g1 * (C_OUT + c_c) + g2 * (C1 + c_c) + GM2 * c_c
    return np.sort_complex(np.roots([a, b, g1 * g2]) / (2 * math.pi))


VALUES = np.logspace(-13, -10, 7)


@pytest.fixture(scope="module")
def miller_locus():
    return locus(clean_two_stage(), "second_stage.miller_capacitance", VALUES)


def test_pole_paths_match_the_hand_written_network_at_every_step(miller_locus):
    # oracle: numpy.roots of the hand-derived characteristic polynomial (1e-9)
    assert miller_locus.gain == "a_total"
    for k, c_c in enumerate(VALUES):
        got = miller_locus.poles_hz[k]
        got = np.sort_complex(got[np.isfinite(got)])
        np.testing.assert_allclose(got, hand_poles_hz(c_c), rtol=1e-9)


def test_the_zero_is_the_right_half_plane_miller_zero(miller_locus):
    # oracle: hand network — the output current g_m2·v1 − s·C_c·v1 vanishes at s = g_m2/C_c
    for k, c_c in enumerate(VALUES):
        z = miller_locus.zeros_hz[k]
        z = z[np.isfinite(z)]
        assert z.size == 1
        assert z[0].real == pytest.approx(GM2 / c_c / (2 * math.pi), rel=1e-9)


def test_miller_compensation_splits_the_poles_as_the_textbook_says():
    # oracle: Gray, Hurst, Lewis, Meyer §9.4 (from memory): p1 ≈ 1/(2π·g_m2·R1·R2·C_c)
    # once C_c dominates, and p2 → g_m2/(2π·(C1 + C2)) as C_c → ∞
    cc = np.logspace(-12, -9, 13)
    res = locus(clean_two_stage(), "second_stage.miller_capacitance", cc)
    p = np.abs(res.poles_hz)
    slow, fast = p.min(axis=1), p.max(axis=1)
    for k in range(6, 13):                       # C_c ≥ 32 pF: well into the Miller regime
        assert slow[k] * cc[k] == pytest.approx(1 / (2 * math.pi * GM2 * R1 * R2), rel=0.02)
    assert np.all(np.diff(fast) > 0)             # the second pole rises with C_c ...
    assert fast[-1] == pytest.approx(GM2 / (2 * math.pi * (C1 + C_OUT)), rel=0.02)  # ... to g_m2/C


def test_each_path_is_one_pole_followed_in_order(miller_locus):
    # oracle: common practice — a path's roots move smoothly; the slow path stays slow
    p = np.abs(miller_locus.poles_hz)
    order = np.argsort(p[0])
    assert np.all(np.diff(np.log(p[:, order[0]])) < 0)      # dominant pole: falls
    assert np.all(np.diff(np.log(p[:, order[-1]])) > 0)     # split pole: rises


def test_two_real_poles_that_turn_into_a_complex_pair_stay_two_paths():
    # oracle: the pairing rule of DESIGN.md §7i on a made-up root motion: two real roots
    # meet at −10 and split into −10 ± j·y; nearest-distance pairing keeps each path
    # on its own side (the upper path takes +j, the lower −j)
    steps = [np.array([-10 - d, -10 + d]) for d in (2, 1, 0.5, 0.25)]
    steps += [np.array([-10 + 1j * y, -10 - 1j * y]) for y in (0.5, 0.75, 1.0)]
    paths = pair_paths(steps)
    assert paths.shape == (7, 2)
    for j in range(2):
        jumps = np.abs(np.diff(paths[:, j]))
        assert np.all(jumps <= 1.0 + 1e-12), jumps       # a swap would jump ≥ 1.25
    ends = np.sort_complex(paths[-1])
    assert set(np.round(ends, 9)) == {-10 - 1j, -10 + 1j}
    assert np.sign(paths[4, 0].imag) == np.sign(paths[6, 0].imag)   # a path keeps its side


def test_roots_appearing_or_vanishing_start_and_end_paths():
    # oracle: DESIGN.md §7i — a step without a root leaves that path empty
    paths = pair_paths([np.array([-1.0, -100.0]), np.array([-1.1]), np.array([-1.2, -50.0])])
    assert paths.shape[1] == 3
    assert np.isnan(paths[1, 1]) and np.isnan(paths[0, 2])


def test_json_has_one_list_per_value_with_re_and_im_in_hz():
    # oracle: the JSON contract of DESIGN.md §7i
    run = run_cli("locus", "examples/two_stage_miller_loop.toml", "--vary",
                  "second_stage.miller_capacitance=1p:100p:5:log", "--json")
    assert run.returncode == 0, run.stderr
    obj = json.loads(run.stdout)
    assert set(obj) >= {"key", "gain", "values", "poles_hz", "zeros_hz"}
    assert obj["key"] == "second_stage.miller_capacitance" and obj["gain"] == "a_total"
    assert len(obj["values"]) == 5 and obj["values"][0] == pytest.approx(1e-12)
    assert len(obj["poles_hz"]) == 5 and len(obj["zeros_hz"]) == 5
    root = obj["poles_hz"][0][0]
    assert set(root) == {"re", "im"} and root["re"] < 0
    # the same poles as the library's exact analysis of that value
    d = freqpair.replace_value(freqpair.load_design("examples/two_stage_miller_loop.toml"),
                               "second_stage.miller_capacitance", obj["values"][2])
    from freqpair.analysis.poles import response_zpk
    exact = np.sort(np.abs(response_zpk(freqpair.analyze(d)).poles_rad_s) / (2 * math.pi))
    got = np.sort([math.hypot(r["re"], r["im"]) for r in obj["poles_hz"][2] if r])
    np.testing.assert_allclose(got, exact[:got.size], rtol=1e-6)


def test_table_is_the_default_and_bad_input_is_one_line():
    # oracle: the brief — a table by default; a clear one-line error naming option and value
    run = run_cli("locus", "examples/two_stage_miller_loop.toml", "--vary",
                  "second_stage.miller_capacitance=1p:10p:3", "--gain", "a_total")
    assert run.returncode == 0 and "path 1" in run.stdout and "10 pF" in run.stdout
    for bad in ("second_stage.miller_capacitance=1p:10p", "nothing.here=1:2:3",
                "second_stage.miller_capacitance=1p:10p:x"):
        run = run_cli("locus", "examples/two_stage_miller_loop.toml", "--vary", bad)
        assert run.returncode == 2 and run.stdout == ""
        assert len(run.stderr.strip().splitlines()) == 1 and "Traceback" not in run.stderr


def test_library_refuses_no_values():
    with pytest.raises(LocusError, match="tail.capacitance"):
        locus(freqpair.load_design("examples/npn_resistor_rc_tail.toml"),
              "tail.capacitance", [])


def test_locus_is_public():
    assert freqpair.locus is locus
