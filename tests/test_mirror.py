"""Current-mirror active load: gain, mirror pole/zero, CMRR, mismatch, contract."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest
import scipy.constants as sc

from freqpair.analysis.result import analyze
from freqpair.design.schema import parse_design
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.stage import build_stage

ROOT = __import__("pathlib").Path(__file__).resolve().parent.parent

I_TAIL = 200e-6
I_D = I_TAIL / 2


def mos(kind, **kw):
    d = {"type": kind, "mobility_cox": 200e-6, "width": 20e-6, "length": 1e-6,
         "threshold": 0.5, "lambda": 0.02}
    d.update(kw)
    return d


def bjt(kind, **kw):
    d = {"type": kind, "beta": 2000, "early_voltage": 50}
    d.update(kw)
    return d


def make(tail, pair=None, load=None, **extra):
    data = {"supply": {"positive": 5, "negative": -5},
            "bias": {"tail_current": I_TAIL, "input_common_mode": 0},
            "pair": pair or mos("nmos"),
            "load": load or {"type": "mirror", "device": mos("pmos", mobility_cox=80e-6)},
            "tail": tail}
    data.update(extra)
    return parse_design(data)


def sq_gm(kp, w, l, i):
    # square law (DESIGN.md §2; Sedra & Smith ch. 5 — from memory)
    return math.sqrt(2 * kp * w / l * i)


def test_mos_mirror_load_gain_is_gm_times_ro2_parallel_ro4():
    res = analyze(make({"type": "ideal"}))
    gm1 = sq_gm(200e-6, 20, 1, I_D)
    ro2 = ro4 = 1 / (0.02 * I_D)
    textbook = gm1 * (ro2 * ro4 / (ro2 + ro4))
    # Razavi, Design of Analog CMOS ICs, §5.3 (pair with current-mirror load):
    # A_v = g_m1 (r_o2 ∥ r_o4) — from memory; terms of order 1/(g_m r_o) neglected
    assert 10 ** (res.adm_db / 20) == pytest.approx(textbook, rel=0.01)


def test_bipolar_mirror_load_gain_is_gm_times_ro2_parallel_ro4():
    res = analyze(make({"type": "ideal"}, pair=bjt("npn", early_voltage=80),
                       load={"type": "mirror", "device": bjt("pnp", early_voltage=40)}))
    ic = 2000 / 2001 * I_D
    gm = ic / (sc.k * 300 / sc.e)            # CODATA V_T (scipy.constants)
    ro2, ro4 = 80 / ic, 40 / ic
    # Gray, Hurst, Lewis, Meyer, §4.3.5 (active-load pair): A_dm = g_m (r_o2 ∥ r_o4),
    # large β — from memory; the mirror's 2/β and 1/(g_m r_o) terms neglected
    assert 10 ** (res.adm_db / 20) == pytest.approx(gm * ro2 * ro4 / (ro2 + ro4), rel=0.01)


def _pole_zero(design):
    stage = build_stage(design)
    resp = StageResponses(stage)
    row, kind = resp.output_row("adm_se")
    poles = np.sort(np.abs(resp.solver.poles()))
    zeros = np.sort(np.abs(resp.solver.zeros(resp.excitation(kind), row)))
    return poles, zeros


def test_mirror_pole_is_gm3_over_mirror_node_capacitance_and_zero_twice_it():
    # only the mirror devices' C_gs present; output pole dominant (C_L at o2)
    cox = 4.6e-3
    design = make({"type": "ideal"},
                  load={"type": "mirror", "capacitance": 2e-12,
                        "device": mos("pmos", mobility_cox=80e-6, cox=cox)})
    poles, zeros = _pole_zero(design)
    gm3 = sq_gm(80e-6, 20, 1, I_D)
    c_m = 2 * (2 / 3) * 20e-6 * 1e-6 * cox        # C_gs3 + C_gs4 at the mirror node
    # Razavi, Design of Analog CMOS ICs, §6.4 (pair with active load, high frequency):
    # mirror pole ω_p = g_m3/C_E and a zero at 2·g_m3/C_E — from memory; holds while
    # the output pole is far below the mirror pole
    assert poles[-1] == pytest.approx(gm3 / c_m, rel=0.02)
    assert zeros[0] == pytest.approx(2 * gm3 / c_m, rel=0.02)
    # the output pole 1/((r_o2 ∥ r_o4)·C_L), same textbook section
    assert poles[0] == pytest.approx(1 / (0.5 / (0.02 * I_D) * 2e-12), rel=0.02)


def test_mirror_pole_appears_in_single_ended_gain_at_3db_of_doublet():
    # the doublet: |A(jω)| between the pole p and zero 2p falls towards ½ of the
    # pole-free value; at ω = 2p the factor is |1+j|/|1+2j| = √2/√5 (Razavi §6.4,
    # from memory — one pole at p, one zero at 2p)
    cox = 4.6e-3
    base = make({"type": "ideal"},
                load={"type": "mirror", "capacitance": 0.5e-12, "device": mos("pmos", mobility_cox=80e-6)})
    slow = make({"type": "ideal"},
                load={"type": "mirror", "capacitance": 0.5e-12,
                      "device": mos("pmos", mobility_cox=80e-6, cox=cox)})
    gm3 = sq_gm(80e-6, 20, 1, I_D)
    p = gm3 / (2 * (2 / 3) * 20e-6 * 1e-6 * cox)
    f = 2 * p / (2 * math.pi)
    a0 = analyze(base).responses.gain("adm_se", f)[0]
    a1 = analyze(slow).responses.gain("adm_se", f)[0]
    assert abs(a1 / a0) == pytest.approx(math.sqrt(2 / 5), rel=0.02)


def test_single_ended_cmrr_of_mirror_loaded_pair_matches_textbook():
    r_tail = 1e6
    res = analyze(make({"type": "norton", "resistance": r_tail}))
    gm1 = sq_gm(200e-6, 20, 1, I_D)
    gm3 = sq_gm(80e-6, 20, 1, I_D)
    ro = 1 / (0.02 * I_D)
    # Razavi, Design of Analog CMOS ICs, §5.3: CMRR = (1 + 2 g_m1 R_SS) g_m3 (r_o1 ∥ r_o3)
    # for the active-load pair — from memory
    textbook = (1 + 2 * gm1 * r_tail) * gm3 * (ro / 2)
    assert 10 ** (res.cmrr_se_db / 20) == pytest.approx(textbook, rel=0.02)


def test_mirror_load_has_no_balanced_cmrr_in_json():
    res = analyze(make({"type": "norton", "resistance": 1e6}))
    out = res.to_json()
    # DESIGN.md §3a: a mirror-loaded stage has one output; balanced CMRR key is null
    assert out["cmrr_db"] is None
    assert out["adm_db"] == pytest.approx(res.adm_db)


def test_load_mismatch_splits_the_mirror_gm():
    delta = 0.04
    stage = build_stage(make({"type": "ideal"}, mismatch={"load": delta}))
    gms = {label: v for kind, label, _, v in stage.network.elements if kind == "VCCS"}
    gm3 = sq_gm(80e-6, 20, 1, I_D)
    # DESIGN.md §3a convention: diode device ×(1+δ/2), output device ×(1−δ/2)
    assert gms["M3.gm"] == pytest.approx(gm3 * (1 + delta / 2), rel=1e-12)
    assert gms["M4.gm"] == pytest.approx(gm3 * (1 - delta / 2), rel=1e-12)


def test_mirror_mismatch_raises_common_mode_gain():
    # a mismatched mirror turns the pair's common-mode current i = v_ic·g_m1/(1+2 g_m1 R)
    # into output current δ·i flowing in r_o2∥r_o4, on top of the matched term i/g_m3:
    # |A_cm| ≈ g_m1/(1+2 g_m1 R)·(1/g_m3 + δ·(r_o2∥r_o4)) (Gray, Hurst, Lewis, Meyer,
    # §4.3.5, systematic/random offset of the active-load pair — from memory)
    r_tail = 1e6
    delta = 0.02
    matched = analyze(make({"type": "norton", "resistance": r_tail}))
    skewed = analyze(make({"type": "norton", "resistance": r_tail}, mismatch={"load": delta}))
    gm1 = sq_gm(200e-6, 20, 1, I_D)
    gm3 = sq_gm(80e-6, 20, 1, I_D)
    ro = 1 / (0.02 * I_D)
    estimate = gm1 / (1 + 2 * gm1 * r_tail) * (1 / gm3 + delta * ro / 2)
    assert 10 ** (skewed.acm_se_db / 20) == pytest.approx(estimate, rel=0.05)
    assert skewed.acm_se_db > matched.acm_se_db + 10


def test_mirror_device_with_tiny_vbe_is_reported_saturated():
    from freqpair.design.errors import BiasError
    with pytest.raises(BiasError, match=r"load.device \(pnp mirror\): saturated: V_CE = V_BE = 0.1 V"):
        build_stage(make({"type": "ideal"}, pair=bjt("npn"),
                         load={"type": "mirror", "device": bjt("pnp", vbe=0.1)}))


@pytest.mark.parametrize("name", ["nmos_mirror_load_cascode_tail", "npn_mirror_load_simple_mirror_tail"])
def test_mirror_examples_run_through_the_cli_as_one_json_object(name):
    proc = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze",
                           str(ROOT / "examples" / f"{name}.toml"), "--json"],
                          capture_output=True, text=True, cwd=ROOT, timeout=60)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    # DESIGN.md §4 contract: tail Norton object present and finite for a transistor tail
    assert out["tail"]["resistance"] > 0 and out["tail"]["capacitance"] > 0
    assert out["cmrr_db"] is None and out["cmrr_corner_hz"] > 0
