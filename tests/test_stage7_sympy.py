"""More of the real stage (DESIGN.md §7a–§7d) against hand-written nodal equations.

Oracles:
- sympy, exact: one small stage written out here as KCL equations (degenerated
  nmos pair with body effect, C_sb and C_db on the body rail, an added capacitor
  and transconductance), solved symbolically in s;
- tests/stage_oracle.py: the nodal model written from DESIGN.md alone, solved exactly
  by sympy, on designs with each feature (degeneration, cascoded pair, body effect,
  added elements) and their combinations;
- textbook limits (book named, from memory) and hand numbers from the bias rules
  of §7a and §7c.
"""
import math

import numpy as np
import pytest
import scipy.constants as sc
import sympy as sp

import freqpair
import oracle_designs as od
import stage_oracle as so
from freqpair.design.errors import FreqpairError

FREQS_HZ = [0.0, 10.0, 1e3, 1e5, 1e7, 1e9, 1e10]

NPN_DEGEN_MIRROR_TAIL = """
name = "stage7: degenerated npn pair, pnp mirror load, npn mirror tail"
[supply]
positive = 5
negative = -5
[bias]
tail_current = "200 uA"
input_common_mode = -1
[pair]
type = "npn"
beta = 150
early_voltage = 60
base_resistance = 100
degeneration = "2 k"
cje = "0.5 pF"
transit_time = "0.4 ns"
cjc0 = "0.4 pF"
ccs = "0.3 pF"
[load]
type = "mirror"
capacitance = "0.5 pF"
[load.device]
type = "pnp"
beta = 50
early_voltage = 40
ft = "20 MHz"
cjc0 = "0.5 pF"
ccs = "0.6 pF"
[tail]
type = "mirror"
extra_capacitance = "0.4 pF"
[tail.device]
type = "npn"
beta = 120
early_voltage = 70
cje = "0.5 pF"
cjc0 = "0.6 pF"
ccs = "0.5 pF"
[source]
resistance = "1 k"
[mismatch]
load = 0.03
gm = -0.02
"""

NPN_CASCODE = """
name = "stage7: npn cascoded pair, resistor loads"
[supply]
positive = 10
negative = -10
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 100
early_voltage = 50
cje = "1 pF"
transit_time = "0.3 ns"
cjc0 = "0.8 pF"
ccs = "0.4 pF"
[pair.cascode]
bias = 2.5
beta = 80
early_voltage = 40
vbe = 0.75
cje = "0.7 pF"
ft = "800 MHz"
cjc0 = "0.5 pF"
ccs = "0.3 pF"
[load]
type = "resistor"
resistance = "8 k"
capacitance = "0.4 pF"
[tail]
type = "norton"
resistance = "200 k"
capacitance = "2 pF"
[source]
resistance = "300"
[mismatch]
load = 0.05
gm = 0.02
"""

NMOS_BODY = """
name = "stage7: nmos pair with body effect, C_sb and C_db, Norton tail"
[supply]
positive = 3
negative = -2
[bias]
tail_current = "300 uA"
input_common_mode = 0.5
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "30 um"
length = "0.6 um"
threshold = 0.5
lambda = 0.08
cox = "5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.6
surface_potential = 0.8
csb = "50 fF"
[load]
type = "resistor"
resistance = "6 k"
capacitance = "0.2 pF"
[tail]
type = "norton"
resistance = "80 k"
capacitance = "0.5 pF"
[source]
resistance = "500"
[mismatch]
load = 0.02
gm = -0.03
"""

FEATURE_DESIGNS = {
    "npn_degeneration_mirror_load_mirror_tail": NPN_DEGEN_MIRROR_TAIL,
    "npn_cascoded_pair": NPN_CASCODE,
    "nmos_body_effect": NMOS_BODY,
    "npn_degeneration_cascode_elements": od.NPN_DEGEN_CASCODE,
    "nmos_body_degeneration_cascode_elements": od.NMOS_BODY_CASCODE,
    "pnp_cascoded_degenerated_pair_mirror_load_cascode_tail": od.PNP_CASC,
    "pmos_cascoded_degenerated_pair_second_stage": od.PMOS_CASC,
}


def _fp(a, f):
    return a.responses.dc() if f == 0 else a.responses.at(f)


@pytest.mark.parametrize("name", list(FEATURE_DESIGNS))
def test_gains_match_the_nodal_oracle(name):
    # oracle: sympy nodal analysis written from DESIGN.md §2/§3a/§7 (tests/stage_oracle.py)
    d = freqpair.design_from_text(FEATURE_DESIGNS[name])
    a = freqpair.analyze(d)
    o = so.build(d)
    for f in FREQS_HZ:
        ref = so.gains(o, f)
        r = _fp(a, f)
        keys = ["adm_se", "acm_se"] + (["adm", "acm_dm"] if r.adm is not None else [])
        for k in keys:
            assert complex(getattr(r, k)[0]) == pytest.approx(ref[k], rel=1e-9), \
                f"{name} {k} at {f:g} Hz"
        # the rails (§7f: cascode bases on ground, bodies and C_sb/C_db on the body
        # rail, C_cs on vneg) and the input impedance (§7g: R_E seen through β + 1)
        for k in ("a_vpos", "a_vneg"):
            assert complex(getattr(r, k)[0]) == pytest.approx(
                ref[k], rel=so.rail_rtol(ref["a_se"], ref[k])), f"{name} {k} at {f:g} Hz"
        gm = o.bias["pair1"]["gm"]
        so.assert_admittance(complex(r.zin_dm[0]), ref["zin_dm"], gm, f"{name} {f:g} Hz dm")
        so.assert_admittance(complex(r.zin_cm[0]), ref["zin_cm"], gm, f"{name} {f:g} Hz cm")


# ---------------------------------------------------------------- one stage by hand
HAND = """
name = "stage7: by hand"
[supply]
positive = 3
negative = -2
[bias]
tail_current = "300 uA"
input_common_mode = 0.5
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "30 um"
length = "0.6 um"
threshold = 0.5
lambda = 0.08
cox = "5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.6
surface_potential = 0.8
csb = "50 fF"
degeneration = "700"
[load]
type = "resistor"
resistance = "6 k"
capacitance = "0.2 pF"
[tail]
type = "norton"
resistance = "80 k"
capacitance = "0.5 pF"
[mismatch]
load = 0.02
gm = -0.03
[[element]]
kind = "capacitor"
nodes = ["e1", "o2"]
value = "40 fF"
[[element]]
kind = "transconductance"
nodes = ["t", "o1"]
value = "50 uS"
control = ["o2", "e2"]
"""


def _hand_solution():
    """v_o1, v_o2 as rational functions of s for the DM and CM drives (sympy)."""
    R = lambda x: sp.Rational(float(x))      # noqa: E731  exact rational of the float
    i_d = 150e-6
    kp = 200e-6 * 30 / 0.6
    gm = math.sqrt(2 * kp * i_d)
    v_s = 0.5 - (0.5 + math.sqrt(2 * i_d / kp))          # source e_k (V_GS below the gate)
    v_sb = v_s - (-2.0)                                    # to the body rail vneg (§7b)
    gmb = gm * 0.6 / (2 * math.sqrt(0.8 + v_sb))
    ro = 1 / (0.08 * i_d)
    cgs = 2 / 3 * 30e-6 * 0.6e-6 * 5e-3 + 30e-6 * 0.3e-9
    cgd = 30e-6 * 0.3e-9
    s, v1, v2 = sp.symbols("s v1 v2")
    e1, e2, t, o1, o2 = sp.symbols("e1 e2 t o1 o2")
    eqs = {e1: 0, e2: 0, t: 0, o1: 0, o2: 0}            # KCL: currents leaving each node
    for g, e, o, f in ((v1, e1, o1, 1 + R(-0.03) / 2), (v2, e2, o2, 1 - R(-0.03) / 2)):
        i_ds = f * (R(gm) * (g - e) + R(gmb) * (0 - e)) + (o - e) / R(ro)   # drain → source
        rl = R(6e3) * (1 + (1 if o == o1 else -1) * R(0.02) / 2)
        eqs[o] += i_ds + o / rl + s * R(0.2e-12) * o + s * R(cgd) * (o - g) + s * R(30e-15) * o
        eqs[e] += -i_ds + (e - t) / R(700) + s * R(cgs) * (e - g) + s * R(50e-15) * e
        eqs[t] += (t - e) / R(700)
    eqs[t] += t / R(80e3) + s * R(0.5e-12) * t
    eqs[e1] += s * R(40e-15) * (e1 - o2)                  # added capacitor e1–o2
    eqs[o2] += s * R(40e-15) * (o2 - e1)
    i_x = R(50e-6) * (o2 - e2)                             # leaves t, enters o1 (§7d)
    eqs[t] += i_x
    eqs[o1] -= i_x
    sol = sp.solve(list(eqs.values()), [e1, e2, t, o1, o2], dict=True)[0]
    return s, v1, v2, sp.simplify(sol[o1]), sp.simplify(sol[o2])


def test_one_stage_written_out_by_hand():
    # oracle: sympy — KCL written out here (degeneration nodes e1/e2, g_mb at V_SB of the
    # source e_k, C_sb and C_db to vneg, added capacitor and transconductance), solved
    # symbolically in s, evaluated exactly at s = jω
    s, v1, v2, vo1, vo2 = _hand_solution()
    a = freqpair.analyze(freqpair.design_from_text(HAND))
    for f in FREQS_HZ:
        sv = sp.I * sp.Rational(2 * math.pi * f)
        dm = {s: sv, v1: sp.Rational(1, 2), v2: -sp.Rational(1, 2)}
        cm = {s: sv, v1: 1, v2: 1}
        ref = {"adm": complex(sp.N((vo1 - vo2).subs(dm), 30)),
               "adm_se": complex(sp.N(vo2.subs(dm), 30)),
               "acm_se": complex(sp.N(vo2.subs(cm), 30)),
               "acm_dm": complex(sp.N((vo1 - vo2).subs(cm), 30))}
        r = _fp(a, f)
        for k, v in ref.items():
            assert complex(getattr(r, k)[0]) == pytest.approx(v, rel=1e-9), f"{k} at {f:g} Hz"
    # and the generic oracle says the same (it is checked here against the hand KCL)
    o = so.build(freqpair.design_from_text(HAND))
    g = so.gains(o, 1e6)
    assert complex(a.responses.at(1e6).adm[0]) == pytest.approx(g["adm"], rel=1e-9)


# ---------------------------------------------------------------- textbook limits
NMOS_IDEAL = """
name = "stage7: nmos pair, lambda = 0, ideal tail"
[supply]
positive = 10
negative = -5
[bias]
tail_current = "200 uA"
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "20 um"
length = "1 um"
threshold = 0.5
lambda = 0
degeneration = {r_e}
[load]
type = "resistor"
resistance = "20 k"
[tail]
type = "ideal"
"""

NPN_LARGE = """
name = "stage7: npn pair, large beta and V_A"
[supply]
positive = 15
negative = -15
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 20000
early_voltage = 1e6
degeneration = {r_e}
[load]
type = "resistor"
resistance = "10 k"
[tail]
type = "norton"
resistance = "1 G"
"""


@pytest.mark.parametrize("r_e", [100.0, 500.0, 2e3])
def test_degenerated_gain_is_gm_rl_over_one_plus_gm_re(r_e):
    # oracle: textbook (Razavi, "Design of Analog CMOS Integrated Circuits", ch. 4;
    # Gray & Meyer ch. 3, from memory): A_dm = g_m·R_L/(1 + g_m·R_E) — exact for a
    # MOS pair with λ = 0, no body effect and an ideal tail; for a bipolar pair in
    # the limit of large β and r_o (here within 0.1 %)
    a = freqpair.analyze(freqpair.design_from_text(NMOS_IDEAL.format(r_e=r_e)))
    gm = math.sqrt(2 * 200e-6 * 20 * 100e-6)
    assert abs(a.responses.dc().adm[0]) == pytest.approx(gm * 20e3 / (1 + gm * r_e), rel=1e-12)
    b = freqpair.analyze(freqpair.design_from_text(NPN_LARGE.format(r_e=r_e)))
    gm_b = 20000 / 20001 * 0.5e-3 / (sc.k * 300 / sc.e)
    assert abs(b.responses.dc().adm[0]) == pytest.approx(gm_b * 10e3 / (1 + gm_b * r_e),
                                                         rel=1e-3)


def test_input_impedance_rises_with_beta_plus_one_times_re():
    # oracle: textbook (Sedra & Smith, differential pair with emitter resistors:
    # R_id = 2·(β+1)·(r_e + R_E), from memory): each ohm of R_E adds 2·(β+1) ohms
    z = {}
    for r_e in (0.0, 1e3, 3e3):
        j = freqpair.analyze(freqpair.design_from_text(NPN_LARGE.format(r_e=r_e)
                                                       .replace("20000", "150"))).to_json()
        z[r_e] = j["zin_dm_ohm"]
    assert (z[1e3] - z[0.0]) / 1e3 == pytest.approx(2 * 151, rel=1e-3)
    assert (z[3e3] - z[1e3]) / 2e3 == pytest.approx(2 * 151, rel=1e-3)


CASCODE_RO = """
name = "stage7: nmos cascoded pair for the output resistance"
[supply]
positive = 30
negative = -5
[bias]
tail_current = "20 uA"
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "10 um"
length = "1 um"
threshold = 0.5
lambda = 0.1
[pair.cascode]
bias = 3
mobility_cox = "200 uA/V2"
width = "10 um"
length = "1 um"
threshold = 0.5
lambda = 0.1
body_effect = {gamma}
[load]
type = "resistor"
resistance = "1 M"
[tail]
type = "norton"
resistance = "10 M"
"""

INJECT = """
[[element]]
kind = "transconductance"
nodes = ["ground", "o2"]
value = "1 uS"
control = ["in1", "in2"]
[[element]]
kind = "transconductance"
nodes = ["ground", "o1"]
value = "1 uS"
control = ["in2", "in1"]
"""


@pytest.mark.parametrize("gamma", [0.0, 0.5])
def test_cascode_output_resistance_is_about_gm_ro_squared(gamma):
    # oracle: textbook (Razavi ch. 3, cascode stage: R_out = [1 + (g_m2 + g_mb2)·r_o2]·r_o1
    # + r_o2 ≈ g_m·r_o², from memory). The output resistance seen at o2 is measured on
    # freqpair's own network: ±1 µS·v_id injected into o2/o1 by added transconductances
    # (a balanced test current, so t stays at AC ground), the difference of the two
    # analyses is 1 µA·(R_L ∥ R_out) at o2.
    text = CASCODE_RO.format(gamma=gamma)
    plain = freqpair.analyze(freqpair.design_from_text(text)).responses.dc()
    probed = freqpair.analyze(freqpair.design_from_text(text + INJECT)).responses.dc()
    z_o2 = complex(probed.adm_se[0] - plain.adm_se[0]) / 1e-6
    r_out = 1 / (1 / z_o2.real - 1 / 1e6)
    i_d = 10e-6
    gm = math.sqrt(2 * 200e-6 * 10 * i_d)
    ro = 1 / (0.1 * i_d)
    v_c = 3 - (0.5 + math.sqrt(2 * i_d / 2e-3))            # cascode source, §7c
    gmb = gm * gamma / (2 * math.sqrt(0.7 + v_c - (-5)))   # V_SB to vneg, 2φ_F default 0.7
    assert r_out == pytest.approx((1 + (gm + gmb) * ro) * ro + ro, rel=1e-7)
    assert r_out == pytest.approx((gm + gmb) * ro ** 2, rel=0.02)


def test_vanishing_degeneration_gives_the_undegenerated_numbers():
    # oracle: continuity — as R_E → 0 every output tends to the R_E = 0 stage's (whose §2
    # outputs equal the release before §7, tests/test_supply_sympy.py), the change
    # shrinking in proportion to R_E (first order in g_m·R_E ≈ 2e-2/Ω·R_E here)
    base = od.NPN_RES_TWO_STAGE
    j0 = freqpair.analyze(freqpair.design_from_text(base)).to_json()
    changes = {}
    for r_e in (1e-1, 1e-2, 1e-3):
        tiny = base.replace('type = "npn"\n', f'type = "npn"\ndegeneration = {r_e}\n', 1)
        j1 = freqpair.analyze(freqpair.design_from_text(tiny)).to_json()
        rel = {}
        for k in ("adm_db", "a_total_db", "acm_se_db", "cmrr_se_db", "cmrr_db", "psrr_pos_db",
                  "psrr_neg_db"):
            rel[k] = abs(j1[k] - j0[k]) / (20 / math.log(10))      # dB → relative
        for k in ("f3db_hz", "ugf_hz", "cmrr_corner_hz", "zin_dm_ohm", "zin_cm_ohm"):
            rel[k] = abs(j1[k] / j0[k] - 1)
        rel["output_rms_v"] = abs(j1["noise"]["output_rms_v"] / j0["noise"]["output_rms_v"] - 1)
        changes[r_e] = rel
        for k, v in rel.items():
            assert v < 0.1 * r_e, (r_e, k, v)            # 0.1 ≈ 5·g_m per ohm
    assert changes[1e-3]["adm_db"] < 0.02 * changes[1e-1]["adm_db"]


# ---------------------------------------------------------------- bias and headroom (§7a, §7c)
def _op(text, **changes):
    d = freqpair.design_from_text(text)
    for k, v in changes.items():
        d = freqpair.replace_value(d, k.replace("__", "."), v)
    a = freqpair.analyze(d)
    op = a.to_json()["operating_point"]           # the contract's keys (DESIGN.md §4)
    op["gmb"] = a.operating_point.small_signal.gmb   # g_mb: the library's own value
    return op


def test_operating_point_of_a_degenerated_cascoded_npn_pair():
    # oracle: hand numbers from §2/§7a/§7c — V_E = V_B − V_BE, the cascode's emitter (node
    # c) at bias − V_BE,casc, V_CE and V_CB the pair device's own up to c (R_E not in them)
    op = _op(od.NPN_DEGEN_CASCODE)
    v_e = 0.2 - 0.7
    v_c = 4.0 - 0.72
    assert op["vce"] == pytest.approx(v_c - v_e, rel=1e-12)
    assert op["vcb"] == pytest.approx(v_c - 0.2, rel=1e-12)
    assert op["ic"] == pytest.approx(90 / 91 * 0.5e-3, rel=1e-12)
    # C_mu at the pair's own V_CB (cjc0 0.8 pF, φ 0.75, m 0.33)
    assert op["cmu"] == pytest.approx(0.8e-12 / (1 + (v_c - 0.2) / 0.75) ** 0.33, rel=1e-12)


def test_operating_point_of_a_degenerated_cascoded_nmos_pair_with_body_effect():
    # oracle: hand numbers — V_S = V_G − V_GS at the source e_k; V_SB to vneg there
    # (not at t, which sits I_D·R_E lower); g_mb = g_m·γ/(2·√(2φ_F + V_SB)) (§7b);
    # V_DS the pair device's own up to node c = bias − V_GS,casc (§7c)
    op = _op(od.NMOS_BODY_CASCODE)
    i_d = 200e-6
    gm = math.sqrt(2 * 200e-6 * 40 * i_d)
    v_s = 1.5 - (0.6 + math.sqrt(2 * i_d / (200e-6 * 40)))
    v_c = 3.2 - (0.6 + math.sqrt(2 * i_d / (200e-6 * 80)))
    assert op["vds"] == pytest.approx(v_c - v_s, rel=1e-12)
    assert op["gmb"] == pytest.approx(gm * 0.5 / (2 * math.sqrt(0.8 + v_s + 1)), rel=1e-12)


def test_operating_point_of_mirrored_cascoded_pairs():
    # oracle: hand numbers, mirror image of §7c (§3a): the cascode node at bias + V_EB
    # (bias + V_SG), magnitudes reported; V_SB of the pmos pair to vpos at its source
    op = _op(od.PNP_CASC)
    v_e, v_c = 1.0 + 0.7, -2.0 + 0.7
    assert op["vce"] == pytest.approx(v_e - v_c, rel=1e-12)
    assert op["vcb"] == pytest.approx(1.0 - v_c, rel=1e-12)
    op = _op(od.PMOS_CASC)
    i_d = 150e-6
    v_s = 0.5 + 0.6 + math.sqrt(2 * i_d / (80e-6 * 50))
    v_c = -1.0 + 0.6 + math.sqrt(2 * i_d / (80e-6 * 100))
    gm = math.sqrt(2 * 80e-6 * 50 * i_d)
    assert op["vds"] == pytest.approx(v_s - v_c, rel=1e-12)
    assert op["gmb"] == pytest.approx(gm * 0.4 / (2 * math.sqrt(0.7 + 3.0 - v_s)), rel=1e-12)


@pytest.mark.parametrize("r_e,ok", [(380.0, True), (420.0, False)])
def test_tail_headroom_is_measured_from_the_tail_node(r_e, ok):
    # oracle: hand numbers (§2, §7a): V_E = −0.7 V, V− = −1.2 V; the tail node sits
    # I_E·R_E = 0.5 mA·R_E below V_E, so 0.3 V of compliance needs R_E < 400 Ω
    text = NPN_LARGE.format(r_e=r_e).replace("negative = -15", "negative = -1.2")
    d = freqpair.design_from_text(text)
    if ok:
        freqpair.analyze(d)
    else:
        with pytest.raises(FreqpairError) as e:
            freqpair.analyze(d)
        msg = str(e.value)
        assert "\n" not in msg and "tail" in msg
        assert "0.29" in msg                     # V_t − V− = 1.2 − 0.7 − 0.21


@pytest.mark.parametrize("bias,who", [(0.2, "pair"), (0.3, None), (6.5, None),
                                      (6.7, "pair.cascode")])
def test_cascode_headroom_errors_name_the_device(bias, who):
    # oracle: hand numbers (§2, §7c) for NPN_CASCODE: V_E = 0 − 0.7 V, node c at
    # bias − 0.75 V, V_o = 10 V − I_C·8 kΩ = 6.04 V. The pair needs V_CE up to c
    # ≥ 0.2 V (bias ≥ 0.25 V), the cascode V_o − V_c ≥ 0.2 V (bias ≤ 6.59 V); each
    # violation is one line naming the device
    d = freqpair.design_from_text(NPN_CASCODE.replace("bias = 2.5", f"bias = {bias}"))
    ic = 100 / 101 * 0.5e-3
    v_o = 10 - ic * 8e3
    v_c = bias - 0.75
    if who is None:
        op = freqpair.analyze(d).to_json()["operating_point"]
        assert op["vce"] == pytest.approx(v_c + 0.7, rel=1e-12)
        assert op["vcb"] == pytest.approx(v_c - 0.0, abs=1e-12)
        assert v_c + 0.7 >= 0.2 and v_o - v_c >= 0.2
        return
    with pytest.raises(FreqpairError) as e:
        freqpair.analyze(d)
    msg = str(e.value)
    assert "\n" not in msg
    assert msg.startswith(who + " "), msg
    if who == "pair":
        assert v_c + 0.7 < 0.2
    else:
        assert v_o - v_c < 0.2


def test_unknown_element_node_lists_the_stage_nodes():
    # oracle: DESIGN.md §7d — any other name is a one-line error listing the node names
    # (e1/e2 only with degeneration, c1/c2 only with a cascode, out only with a 2nd stage)
    bad = NPN_CASCODE + '[[element]]\nkind = "capacitor"\nnodes = ["e1", "ground"]\nvalue = 1e-15\n'
    with pytest.raises(FreqpairError) as e:
        freqpair.design_from_text(bad)
    msg = str(e.value)
    assert "\n" not in msg and "'e1'" in msg
    for n in ("in1", "in2", "b1", "b2", "o1", "o2", "t", "ground", "vpos", "vneg", "c1", "c2"):
        assert n in msg
    assert "out" not in msg.split("nodes are")[-1]
