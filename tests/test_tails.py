"""Transistor tails: output resistance, tail-node capacitance, bias, headroom."""
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from freqpair.analysis.result import analyze
from freqpair.design.schema import parse_design
from freqpair.design.errors import BiasError
from freqpair.circuit.stage import build_stage

ROOT = Path(__file__).resolve().parent.parent
I_TAIL = 1e-3


def npn(**kw):
    d = {"type": "npn", "beta": 100, "early_voltage": 50}
    d.update(kw)
    return d


def nmos(**kw):
    d = {"type": "nmos", "mobility_cox": 200e-6, "width": 50e-6, "length": 1e-6,
         "threshold": 0.5, "lambda": 0.05}
    d.update(kw)
    return d


def make(tail, pair, positive=5.0, negative=-5.0, cm=0.0):
    return parse_design({"supply": {"positive": positive, "negative": negative},
                         "bias": {"tail_current": I_TAIL, "input_common_mode": cm},
                         "pair": pair, "load": {"type": "resistor", "resistance": 2e3},
                         "tail": tail})


def vt():
    import scipy.constants as sc    # CODATA
    return sc.k * 300 / sc.e


# ------------------------------------------------------------- output resistance
def test_simple_mirror_tail_resistance_is_ro_of_tail_device():
    res = analyze(make({"type": "mirror", "device": npn(early_voltage=70)}, npn()))
    # Gray, Hurst, Lewis, Meyer §4.2.2 (simple current mirror): R_out = r_o = V_A/I_C
    # — from memory
    assert res.tail.resistance == pytest.approx(70 / I_TAIL, rel=1e-12)


def test_degenerated_bipolar_tail_resistance_matches_exact_formula():
    r_e = 2e3
    res = analyze(make({"type": "degenerated", "degeneration": r_e, "device": npn()}, npn()))
    gm = I_TAIL / vt()
    r_pi = 100 / gm
    ro = 50 / I_TAIL
    r_e_eff = r_e * r_pi / (r_e + r_pi)
    # Gray, Hurst, Lewis, Meyer §4.2.3 (emitter degeneration), exact with r_b = 0:
    # R_out = R_E' + r_o (1 + g_m R_E'),  R_E' = R_E ∥ r_pi — from memory
    assert res.tail.resistance == pytest.approx(r_e_eff + ro * (1 + gm * r_e_eff), rel=1e-9)


def test_degenerated_mos_tail_resistance_matches_exact_formula():
    r_s = 1e3
    res = analyze(make({"type": "degenerated", "degeneration": r_s, "device": nmos()}, nmos()))
    gm = math.sqrt(2 * 200e-6 * 50 * I_TAIL)
    ro = 1 / (0.05 * I_TAIL)
    # Razavi, Design of Analog CMOS ICs §3.3.3 (degenerated CS), body effect off:
    # R_out = R_S + r_o (1 + g_m R_S) — from memory
    assert res.tail.resistance == pytest.approx(r_s + ro * (1 + gm * r_s), rel=1e-9)


def test_mos_cascode_tail_resistance_is_gm_ro_squared_order():
    res = analyze(make({"type": "cascode", "device": nmos()}, nmos(), negative=-2.5))
    gm = math.sqrt(2 * 200e-6 * 50 * I_TAIL)
    ro = 1 / (0.05 * I_TAIL)
    # Razavi §3.5 (cascode output resistance, exact without body effect):
    # R_out = r_o1 + r_o2 + g_m r_o1 r_o2 — from memory
    assert res.tail.resistance == pytest.approx(2 * ro + gm * ro ** 2, rel=1e-9)
    # order estimate g_m·r_o² (same section), good to 2/(g_m r_o)
    assert res.tail.resistance == pytest.approx(gm * ro ** 2, rel=2.5 / (gm * ro))


def test_bipolar_cascode_tail_resistance_is_about_beta_ro():
    res = analyze(make({"type": "cascode", "device": npn(beta=100, early_voltage=100)}, npn()))
    gm = I_TAIL / vt()
    r_pi, ro = 100 / gm, 100 / I_TAIL
    r_eff = ro * r_pi / (ro + r_pi)
    # exact: the degenerated formula with R_E' = r_o1 ∥ r_pi2 (Gray et al. §4.2.4,
    # bipolar cascode — from memory); order estimate g_m·r_o·(r_o∥r_pi) ≈ β·r_o
    assert res.tail.resistance == pytest.approx(r_eff + ro * (1 + gm * r_eff), rel=1e-9)
    assert res.tail.resistance == pytest.approx(100 * ro, rel=0.1)


# ------------------------------------------------------------- capacitance, bias
def test_simple_mirror_tail_capacitance_is_cmu_at_its_vcb_plus_ccs_plus_extra():
    dev = npn(cjc0=1e-12, phi_c=0.75, m_c=0.33, ccs=0.7e-12, vbe=0.7)
    res = analyze(make({"type": "mirror", "device": dev, "extra_capacitance": 0.5e-12}, npn()))
    v_cb = (0 - 0.7) - (-5 + 0.7)        # tail node − tail base (rail + V_BE)
    # depletion capacitance C_jc0/(1+V_CB/φ)^m (DESIGN.md §2; Gray et al. §1.2, from memory)
    cmu = 1e-12 / (1 + v_cb / 0.75) ** 0.33
    assert res.tail.capacitance == pytest.approx(cmu + 0.7e-12 + 0.5e-12, rel=1e-12)


def test_cascode_tail_capacitance_excludes_internal_node():
    dev = nmos(overlap_cap=0.3e-9, cox=4.6e-3, cdb=20e-15)
    res = analyze(make({"type": "cascode", "device": dev, "extra_capacitance": 0.1e-12},
                       nmos(), negative=-2.5))
    # DEVELOPERS.md convention: C = capacitances with one terminal at the tail node:
    # the upper device's C_gd = W·C_ov and C_db, plus extra (square-law caps, DESIGN.md §2)
    assert res.tail.capacitance == pytest.approx(50e-6 * 0.3e-9 + 20e-15 + 0.1e-12, rel=1e-12)
    # pair's own contribution: 2·C_gs of the pair (here cox = 0 → 0)
    assert res.tail.pair_capacitance == 0.0


def test_simple_mirror_tail_equals_its_norton_view_in_the_full_network():
    dev = npn(cjc0=1e-12, ccs=0.7e-12)
    pair = npn(cje=1e-12, cjc0=0.5e-12, transit_time=0.2e-9)
    mirror = analyze(make({"type": "mirror", "device": dev, "extra_capacitance": 1e-12}, pair))
    t = mirror.tail
    norton = analyze(make({"type": "norton", "resistance": t.resistance,
                           "capacitance": t.capacitance}, pair))
    # Norton's theorem (common practice): a base-grounded simple mirror is exactly
    # r_o ∥ (C_mu + C_cs) at its collector, so the two networks must agree
    f = np.logspace(2, 9, 15)
    for name in ("adm", "acm_se", "acm_cm"):
        np.testing.assert_allclose(mirror.responses.gain(name, f),
                                   norton.responses.gain(name, f), rtol=1e-9)


def test_cascode_tail_enters_the_network_as_devices():
    stage = build_stage(make({"type": "cascode", "device": npn()}, npn()))
    # DESIGN.md §3a: the cascode device included, with its internal node
    assert "tail.x" in stage.network.node_names
    labels = {label for _, label, _, _ in stage.network.elements}
    assert {"tail.q1.ro", "tail.q2.ro", "tail.q2.gm"} <= labels
    devices = stage.tail_detail["devices"]
    # DEVELOPERS.md: internal node at one V_BE above the rail → lower V_CE = V_BE
    assert devices[0].v_output_common == pytest.approx(0.7)
    assert devices[1].v_output_common == pytest.approx((0 - 0.7) - (-5 + 0.7))


def test_degenerated_tail_has_emitter_node_and_resistor():
    stage = build_stage(make({"type": "degenerated", "degeneration": 1e3, "device": npn()}, npn()))
    assert "tail.e" in stage.network.node_names
    values = {label: v for _, label, _, v in stage.network.elements}
    assert values["tail.Rdeg"] == pytest.approx(1e-3)      # stored as a conductance


def test_transistor_tail_cmrr_matches_norton_textbook_ratio():
    # the textbook ratio A_dm / A_cm-cm = 1 + 2 g_m R_tail (Gray et al. §3.5.5, from memory)
    # holds for the derived R_tail when β and r_o of the pair are large
    pair = npn(beta=1e5, early_voltage=1e5)
    res = analyze(make({"type": "degenerated", "degeneration": 1e3, "device": npn()}, pair))
    gm = 0.5 * I_TAIL * (1e5 / (1e5 + 1)) / vt()
    expect = 20 * math.log10(1 + 2 * gm * res.tail.resistance)
    assert res.cmrr_textbook_db == pytest.approx(expect, abs=0.05)


# ------------------------------------------------------------- headroom
def test_cascode_headroom_boundary_bipolar():
    # DESIGN.md §3a: bipolar cascode needs V_BE + 0.3 V between tail node and rail;
    # tail node at V_cm − V_BE
    ok = make({"type": "cascode", "device": npn()}, npn(), negative=-1.71)
    assert build_stage(ok).tail.resistance > 0
    bad = make({"type": "cascode", "device": npn()}, npn(), negative=-1.69)
    with pytest.raises(BiasError, match=r"^tail.device \(npn cascode\): starved: V_E − rail = "
                                        r"0.99 V < 1 V needed"):
        build_stage(bad)


def test_degenerated_headroom_includes_the_resistor_drop():
    # DESIGN.md §3a: 0.3 V + I_tail·R (= 2 V here) below the tail node at −0.7 V
    bad = make({"type": "degenerated", "degeneration": 2e3, "device": npn()}, npn(),
               negative=-2.9)
    with pytest.raises(BiasError, match=r"tail.device \(npn degenerated\): starved: .* < 2.3 V"):
        build_stage(bad)


def test_starved_cascode_exits_with_one_line_naming_the_device(tmp_path):
    text = (ROOT / "examples" / "nmos_mirror_load_cascode_tail.toml").read_text()
    path = tmp_path / "low.toml"
    path.write_text(text.replace("input_common_mode = 1.8", "input_common_mode = 1.5"))
    proc = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(path), "--json"],
                          capture_output=True, text=True, cwd=ROOT, timeout=60)
    # DESIGN.md §4: bad design → non-zero exit, one line on stderr, nothing on stdout
    assert proc.returncode != 0 and proc.stdout == ""
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "tail.device (nmos cascode)" in lines[0]


def test_cascode_example_json_tail_matches_exact_cascode_formula():
    proc = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze",
                           str(ROOT / "examples" / "nmos_mirror_load_cascode_tail.toml"), "--json"],
                          capture_output=True, text=True, cwd=ROOT, timeout=60)
    tail = json.loads(proc.stdout)["tail"]
    gm = math.sqrt(2 * 200e-6 * 40 * 200e-6)     # W/L = 80/2 at I_tail = 200 µA
    ro = 1 / (0.03 * 200e-6)
    # Razavi §3.5 (from memory): R_out = 2 r_o + g_m r_o²; C = C_gd + C_db + extra
    assert tail["resistance"] == pytest.approx(2 * ro + gm * ro ** 2, rel=1e-9)
    assert tail["capacitance"] == pytest.approx(80e-6 * 0.3e-9 + 30e-15 + 0.4e-12, rel=1e-12)
