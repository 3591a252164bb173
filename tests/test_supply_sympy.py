"""Supply rejection and input impedance against an independent nodal solution.

Oracle: tests/stage_oracle.py — the stage's nodal equations written from DESIGN.md
§2, §3a and §7 (rails as driven nodes with the tie-list of §7f, Z_in as defined
in §7g), solved exactly by sympy over the Gaussian rationals. freqpair's stamping
code is not used. Textbook limits name their book (from memory).
"""
import json
import math
import pathlib

import numpy as np
import pytest
import scipy.constants as sc

import freqpair
import oracle_designs as od
import stage_oracle as so
from conftest import EXAMPLES

ROOT = pathlib.Path(__file__).resolve().parent
DB_3 = 20 * math.log10(math.sqrt(2))          # "3.01 dB", as for the CMRR corner (§2)
FREQS_HZ = [1.0, 1e2, 1e4, 1e6, 1e8, 1e10]

SUPPLY_DESIGNS = {
    "npn_resistor_norton_tail": od.NPN_RES,                  # (a)
    "nmos_mirror_degenerated_tail": od.NMOS_MIRROR_DEGEN_TAIL,   # (b)
    "npn_two_stage_mirror_simple_mirror_tail": od.NPN_TWO_STAGE,  # (c)
    "npn_two_stage_resistor_load": od.NPN_RES_TWO_STAGE,
    "pnp_resistor_norton_tail": od.PNP_RES,
    "pmos_mirror_cascode_tail": od.PMOS_MIRROR_CASCODE_TAIL,
    "pnp_two_stage_degenerated_tail": od.PNP_MIRROR_TWO_STAGE,
}


def _design(text):
    return freqpair.design_from_text(text)


def _fp(a, f_hz):
    return a.responses.dc() if f_hz == 0 else a.responses.at(f_hz)


def _a_se(r):
    return complex((r.a_total if r.a_total is not None else r.adm_se)[0])


@pytest.mark.parametrize("name", list(SUPPLY_DESIGNS))
def test_rail_gains_psrr_and_input_impedance_match_the_nodal_oracle(name):
    # oracle: sympy nodal analysis written from DESIGN.md §7f/§7g (tests/stage_oracle.py)
    d = _design(SUPPLY_DESIGNS[name])
    a = freqpair.analyze(d)
    o = so.build(d)
    gm = o.bias["pair1"]["gm"]
    for f in [0.0] + FREQS_HZ:
        ref = so.gains(o, f)
        r = _fp(a, f)
        a_se = _a_se(r)
        msg = f"{name} at {f:g} Hz"
        assert a_se == pytest.approx(ref["a_se"], rel=1e-9), msg
        for key in ("a_vpos", "a_vneg"):
            got = complex(getattr(r, key)[0])
            assert got == pytest.approx(ref[key], rel=so.rail_rtol(ref["a_se"], ref[key])), \
                f"{msg}: {key}"
            # PSRR = |A_se/A_rail|
            psrr_ref = abs(ref["a_se"] / ref[key])
            assert abs(a_se / got) == pytest.approx(
                psrr_ref, rel=2 * so.rail_rtol(ref["a_se"], ref[key])), f"{msg}: PSRR {key}"
        so.assert_admittance(complex(r.zin_dm[0]), ref["zin_dm"], gm, msg + " dm")
        so.assert_admittance(complex(r.zin_cm[0]), ref["zin_cm"], gm, msg + " cm")


def _oracle_db(o, key, f_hz):
    g = so.gains(o, f_hz)
    return 20 * math.log10(abs(g["a_se"] / g[key])) if key != "zin_dm" \
        else 20 * math.log10(abs(g["zin_dm"]))


@pytest.mark.parametrize("name", list(SUPPLY_DESIGNS))
def test_json_psrr_input_impedance_and_corners_match_the_oracle(name):
    # oracle: DC values and root-found corners (scipy brentq) on the sympy nodal solution
    d = _design(SUPPLY_DESIGNS[name])
    a = freqpair.analyze(d)
    j = a.to_json()
    o = so.build(d)
    dc = so.gains(o, 0.0)
    grid = np.logspace(-2, 12, 14 * 60 + 1)
    on_grid = a.responses.at(grid)
    a_se_grid = on_grid.a_total if on_grid.a_total is not None else on_grid.adm_se
    for key, rail in (("psrr_pos", "a_vpos"), ("psrr_neg", "a_vneg")):
        ref_db = 20 * math.log10(abs(dc["a_se"] / dc[rail]))
        assert j[f"{key}_db"] == pytest.approx(ref_db, abs=1e-7), key
        level = ref_db - DB_3
        curve = 20 * np.log10(np.abs(a_se_grid / getattr(on_grid, rail)))
        corner = so.lowest_crossing(grid, curve, lambda f: _oracle_db(o, rail, f), level)
        if corner is None:
            assert j[f"{key}_corner_hz"] is None, key
        else:
            assert j[f"{key}_corner_hz"] == pytest.approx(corner, rel=1e-7), key
    if o.bias["pair1"]["kind"] == "mos":                      # a gate: infinite at DC
        assert j["zin_dm_ohm"] is None and j["zin_cm_ohm"] is None
        assert j["zin_dm_corner_hz"] is None
    else:
        assert j["zin_dm_ohm"] == pytest.approx(abs(dc["zin_dm"]), rel=1e-9)
        assert j["zin_cm_ohm"] == pytest.approx(abs(dc["zin_cm"]), rel=1e-9)
        level = 20 * math.log10(abs(dc["zin_dm"])) - DB_3
        curve = 20 * np.log10(np.abs(on_grid.zin_dm))
        corner = so.lowest_crossing(grid, curve, lambda f: _oracle_db(o, "zin_dm", f), level)
        assert j["zin_dm_corner_hz"] == pytest.approx(corner, rel=1e-7)


# ---------------------------------------------------------------- textbook limits
TEXTBOOK_NPN = """
name = "textbook: npn pair, large beta, V_A and tail resistance"
[supply]
positive = 15
negative = -15
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 400
early_voltage = 2000
base_resistance = 200
degeneration = {r_e}
[load]
type = "resistor"
resistance = "10 k"
[tail]
type = "norton"
resistance = "20 M"
"""


def _npn_small_signal(beta=400.0, i_tail=1e-3, temperature=300.0):
    ic = beta / (beta + 1) * i_tail / 2
    gm = ic / (sc.k * temperature / sc.e)       # CODATA
    return gm, beta / gm


def test_resistor_load_output_follows_the_positive_rail():
    # oracle: textbook (Gray, Hurst, Lewis & Meyer, "Analysis and Design of Analog
    # Integrated Circuits", ch. 6 on supply rejection, from memory): with resistor
    # loads the single-ended output is referenced to V+, so A_vpos → 1 and
    # PSRR+ → |A_dm,se|; the tail resistor on V− gives A_vneg → R_L/(2·R_tail).
    a = freqpair.analyze(_design(TEXTBOOK_NPN.format(r_e=0)))
    r = a.responses.dc()
    assert complex(r.a_vpos[0]) == pytest.approx(1.0, rel=1e-3)
    assert 10 ** (a.to_json()["psrr_pos_db"] / 20) == pytest.approx(abs(r.adm_se[0]), rel=1e-3)
    assert complex(r.a_vneg[0]) == pytest.approx(10e3 / (2 * 20e6), rel=0.01)


@pytest.mark.parametrize("r_e", [0.0, 1e3])
def test_bipolar_differential_input_impedance_is_twice_rb_plus_rpi(r_e):
    # oracle: textbook (Sedra & Smith, "Microelectronic Circuits", differential pair:
    # R_id = 2·r_π, with emitter resistors R_id = 2·(β+1)·(r_e + R_E); r_b adds in
    # series; from memory): Z_in,dm(0) ≈ 2·(r_b + r_π + (β+1)·R_E)
    a = freqpair.analyze(_design(TEXTBOOK_NPN.format(r_e=r_e)))
    gm, rpi = _npn_small_signal()
    expected = 2 * (200 + rpi + 401 * r_e)
    assert a.to_json()["zin_dm_ohm"] == pytest.approx(expected, rel=0.005)
    assert abs(a.responses.dc().zin_dm[0]) == pytest.approx(expected, rel=0.005)


MIRROR_PAIRS = [
    ("nmos↔pmos", od.NMOS_MIRROR_DEGEN_TAIL, od.PMOS_MIRROR_DEGEN_TAIL, True),
    ("npn↔pnp, C_cs = 0", od.NPN_RES.replace('ccs = "0.4 pF"', "ccs = 0"),
     od.PNP_RES.replace('ccs = "0.4 pF"', "ccs = 0"), True),
    ("npn↔pnp, C_cs on the substrate", od.NPN_RES, od.PNP_RES, False),
]


@pytest.mark.parametrize("label,text_n,text_p,exact", MIRROR_PAIRS,
                         ids=[m[0] for m in MIRROR_PAIRS])
def test_mirror_image_swaps_psrr_pos_and_neg(label, text_n, text_p, exact):
    # oracle: the mirror image written by hand (rails and input common mode negated,
    # npn↔pnp, nmos↔pmos; DESIGN.md §3a) is the same small-signal network with vpos
    # and vneg exchanged — except the bipolar substrate (C_cs), which stays on vneg
    # for both polarities (§7f); the MOS body rails swap with the device type.
    n, p = freqpair.analyze(_design(text_n)), freqpair.analyze(_design(text_p))
    jn, jp = n.to_json(), p.to_json()
    assert jp["adm_db"] == pytest.approx(jn["adm_db"], abs=1e-9)
    assert jp["psrr_pos_db"] == pytest.approx(jn["psrr_neg_db"], abs=1e-7)
    assert jp["psrr_neg_db"] == pytest.approx(jn["psrr_pos_db"], abs=1e-7)
    f = np.array([1e3, 1e6, 3e7, 1e8, 1e9])
    rn, rp = n.responses.at(f), p.responses.at(f)
    np.testing.assert_allclose(rp.adm_se, rn.adm_se, rtol=1e-9)
    if exact:
        np.testing.assert_allclose(rp.a_vpos, rn.a_vneg, rtol=1e-9)
        np.testing.assert_allclose(rp.a_vneg, rn.a_vpos, rtol=1e-9)
        for k in ("corner_hz",):
            assert jp[f"psrr_pos_{k}"] == pytest.approx(jn[f"psrr_neg_{k}"], rel=1e-7)
            assert jp[f"psrr_neg_{k}"] == pytest.approx(jn[f"psrr_pos_{k}"], rel=1e-7)
    else:
        # the capacitors change nothing at DC, but above ~1/(2π·R·C_cs) the swap breaks
        dc_n, dc_p = n.responses.dc(), p.responses.dc()
        assert complex(dc_p.a_vpos[0]) == pytest.approx(complex(dc_n.a_vneg[0]), rel=1e-9)
        assert abs(rp.a_vpos[-1] / rn.a_vneg[-1] - 1) > 0.01
        # and each polarity agrees with the nodal oracle, C_cs on vneg in both
        for text, res in ((text_n, rn), (text_p, rp)):
            o = so.build(_design(text))
            ref = so.gains(o, 1e9)
            assert complex(res.a_vpos[-1]) == pytest.approx(ref["a_vpos"], rel=1e-9)
            assert complex(res.a_vneg[-1]) == pytest.approx(ref["a_vneg"], rel=1e-9)


def test_rail_gain_zero_to_rounding_gives_null_psrr():
    # oracle: the nodal solution (a matched nmos pair with an ideal tail has no DC path
    # to vneg: only C_db reaches the body rail) and DESIGN.md §7f's null rule
    path = next(p for p in EXAMPLES if p.stem == "nmos_resistor_ideal_tail")
    d = freqpair.load_design(path)
    ref = so.gains(so.build(d), 0.0)
    assert abs(ref["a_vneg"]) == 0.0
    j = freqpair.analyze(d).to_json()
    assert j["psrr_neg_db"] is None and j["psrr_neg_corner_hz"] is None
    assert j["psrr_pos_db"] == pytest.approx(20 * math.log10(abs(ref["a_se"] / ref["a_vpos"])),
                                             abs=1e-9)
    # with C_db the vneg gain is not zero above DC
    assert abs(so.gains(so.build(d), 1e8)["a_vneg"]) > 0


# ---------------------------------------------------------------- unchanged §2 outputs
BEFORE = json.loads((ROOT / "data" / "examples_before_rails.json").read_text())


def _compare(old, new, rtol, path=""):
    if isinstance(old, dict):
        for k, v in old.items():
            assert k in new, f"{path}{k} missing"
            _compare(v, new[k], rtol, f"{path}{k}.")
    elif old is None or isinstance(old, bool):
        assert new == old, f"{path}: {new!r} != {old!r}"
    elif path.rstrip(".").endswith("_db"):
        # dB of a gain: relative rtol in the gain is 8.69·rtol dB
        assert new == pytest.approx(old, abs=20 / math.log(10) * rtol + 1e-12), path
    else:
        assert new == pytest.approx(old, rel=rtol), path


def _cases():
    for p in EXAMPLES:
        if p.stem in BEFORE["examples"]:       # the examples that existed before the rails
            yield p.stem, (lambda p=p: freqpair.load_design(p)), BEFORE["examples"][p.stem]
    for name, old in BEFORE["designs"].items():
        yield name, (lambda name=name: _design(getattr(od, name))), old


@pytest.mark.parametrize("name,make,old", list(_cases()), ids=[c[0] for c in _cases()])
def test_section2_outputs_are_unchanged_by_the_rails(name, make, old):
    # oracle: the numbers freqpair printed before the rails existed (commit 1678e31,
    # tests/data/examples_before_rails.json). Rounding allowed: 1e-9 relative, or
    # 1e-15 × the single-ended CMRR ratio where a value rests on A_cm,se (measured:
    # the CMRR corner of the 139 dB cascode-tail example moved 2.8e-9).
    new = freqpair.analyze(make()).to_json()
    cmrr = old.get("cmrr_se_db")
    rtol = max(1e-9, 1e-15 * 10 ** (cmrr / 20)) if cmrr is not None else 1e-9
    _compare(old, new, rtol)


# ---------------------------------------------------------------- Z_in with elements at the inputs
AT_IN1 = '\n[[element]]\nkind = "resistor"\nnodes = ["in1", "ground"]\nvalue = "3 k"\n' \
         '[[element]]\nkind = "resistor"\nnodes = ["in2", "ground"]\nvalue = "3 k"\n'
AT_B = '\n[[element]]\nkind = "resistor"\nnodes = ["b1", "ground"]\nvalue = "3 k"\n' \
       '[[element]]\nkind = "capacitor"\nnodes = ["in2", "b2"]\nvalue = "1 pF"\n' \
       '[[element]]\nkind = "transconductance"\nnodes = ["in2", "ground"]\nvalue = 1e-3\n' \
       'control = ["o1", "o2"]\n'
MOS_GATES = od.PMOS_MIRROR_CASCODE_TAIL


@pytest.mark.parametrize("rs", [0.0, 1e3])
@pytest.mark.parametrize("extra", [AT_IN1, AT_B], ids=["at_in", "at_b"])
def test_input_impedance_with_elements_at_the_input_nodes(rs, extra):
    # oracle: the nodal model with i_k the current through R_s into b_k (§7g) — an element
    # across the ideal source (in_k to ground) is not seen when R_s > 0, and is the
    # whole input when R_s = 0 (in_k is then b_k): Z_dm = 2·3 kΩ, Z_cm = 3 kΩ/2 at DC
    text = MOS_GATES.replace('resistance = "1 k"\n[mismatch]', f"resistance = {rs!r}\n[mismatch]")
    assert f"resistance = {rs!r}" in text
    d = _design(text + extra)
    a = freqpair.analyze(d)
    o = so.build(d)
    gm = o.bias["pair1"]["gm"]
    for f in (0.0, 1e3, 1e7):
        ref = so.gains(o, f)
        r = _fp(a, f)
        so.assert_admittance(complex(r.zin_dm[0]), ref["zin_dm"], gm, f"dm {f:g} Hz")
        so.assert_admittance(complex(r.zin_cm[0]), ref["zin_cm"], gm, f"cm {f:g} Hz")
        assert _a_se(r) == pytest.approx(ref["a_se"], rel=1e-9)
    j = a.to_json()
    if extra is AT_IN1:
        if rs == 0:
            assert j["zin_dm_ohm"] == pytest.approx(6e3, rel=1e-12)
            assert j["zin_cm_ohm"] == pytest.approx(1.5e3, rel=1e-12)
        else:
            assert j["zin_dm_ohm"] is None and j["zin_cm_ohm"] is None
