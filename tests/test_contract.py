"""Contract audit: DESIGN.md §2, §3, §3a and §4 clauses not pinned elsewhere, each
checked against a hand computation written out here from the design's keys.

The checklist these tests belong to is docs/contract_audit.md. Every value is
compared with the JSON object (``Analysis.to_json`` or the CLI's stdout), the
form the contract is checked in.
"""
import contextlib
import io
import json
import math

import pytest
import scipy.constants as sc

from conftest import EXAMPLES
from freqpair.analysis.result import analyze
from freqpair.design.files import load_design
from freqpair.design.schema import parse_design
from freqpair.design.errors import BiasError
from freqpair.circuit.stage import build_stage

VT = sc.k * 300.0 / sc.e        # CODATA (scipy.constants), DESIGN.md §2
I_TAIL = 1e-3


def bjt(kind, **kw):
    d = {"type": kind, "beta": 100, "early_voltage": 50, "vbe": 0.7, "cje": 1e-12,
         "transit_time": 0.2e-9, "cjc0": 0.8e-12, "phi_c": 0.75, "m_c": 0.33, "ccs": 0.3e-12}
    d.update(kw)
    return d


def mos(kind, **kw):
    d = {"type": kind, "mobility_cox": 200e-6, "width": 20e-6, "length": 1e-6,
         "threshold": 0.5, "lambda": 0.05, "cox": 4.6e-3, "overlap_cap": 0.3e-9, "cdb": 10e-15}
    d.update(kw)
    return d


def design(pair, load, tail, pos=5.0, neg=-5.0, cm=0.0, **sections):
    d = {"supply": {"positive": pos, "negative": neg},
         "bias": {"tail_current": I_TAIL, "input_common_mode": cm},
         "pair": pair, "load": load, "tail": tail}
    d.update(sections)
    return parse_design(d)


def contract(d) -> dict:
    return analyze(d).to_json()


def cmu_of(cjc0, vcb, phi=0.75, m=0.33):
    # depletion capacitance C_jc0/(1 + V_CB/φ_c)^m_c (DESIGN.md §2; Gray, Hurst, Lewis,
    # Meyer §1.2 — from memory)
    return cjc0 / (1.0 + vcb / phi) ** m


def vov_of(kp, w, l, i):
    # square law: V_ov = sqrt(2 I/(μC_ox W/L)) (DESIGN.md §2; Razavi §2.2 — from memory)
    return math.sqrt(2.0 * i / (kp * w / l))


RESISTOR = {"type": "resistor", "resistance": 3e3}
NORTON = {"type": "norton", "resistance": 1e6, "capacitance": 1e-12}


# ------------------------------------------------------------------ operating point
def test_bipolar_operating_point_json_is_the_hybrid_pi_of_the_keys():
    op = contract(design(bjt("npn"), RESISTOR, NORTON, cm=0.5))["operating_point"]
    # hand: DESIGN.md §2 — I_C = α·I_tail/2, α = β/(β+1); g_m = I_C/V_T; r_pi = β/g_m;
    # r_o = V_A/I_C; C_pi = C_je + τ_F·g_m; V_C = V_pos − I_C·R_L; V_E = V_B − V_BE
    ic = 100 / 101 * I_TAIL / 2
    gm = ic / VT
    v_c = 5.0 - ic * 3e3
    expect = {"ic": ic, "gm": gm, "rpi": 100 / gm, "ro": 50 / ic, "cpi": 1e-12 + 0.2e-9 * gm,
              "cmu": cmu_of(0.8e-12, v_c - 0.5), "vce": v_c - (0.5 - 0.7), "vcb": v_c - 0.5}
    assert set(op) == set(expect)
    for key, value in expect.items():
        assert op[key] == pytest.approx(value, rel=1e-12), key


def test_mos_operating_point_json_is_the_square_law_of_the_keys():
    op = contract(design(mos("nmos"), RESISTOR, NORTON, cm=1.0))["operating_point"]
    # hand: DESIGN.md §2 — I_D = I_tail/2; g_m = sqrt(2 μC_ox W/L I_D); r_o = 1/(λ I_D);
    # V_GS = V_th + V_ov; C_gs = (2/3) W L C_ox + W C_ov; C_gd = W C_ov
    i_d = I_TAIL / 2
    vgs = 0.5 + vov_of(200e-6, 20e-6, 1e-6, i_d)
    expect = {"id": i_d, "gm": math.sqrt(2 * 200e-6 * 20 * i_d), "ro": 1 / (0.05 * i_d),
              "cgs": 2 / 3 * 20e-6 * 1e-6 * 4.6e-3 + 20e-6 * 0.3e-9, "cgd": 20e-6 * 0.3e-9,
              "vds": (5.0 - i_d * 3e3) - (1.0 - vgs), "vgs": vgs}
    assert set(op) == set(expect)
    for key, value in expect.items():
        assert op[key] == pytest.approx(value, rel=1e-12), key


def test_pnp_pair_reports_magnitudes_of_its_voltages():
    # hand: DESIGN.md §3a — pnp keys and reported voltages are magnitudes; the mirror
    # image of the npn stage: V_E = V_B + V_EB, V_C = V_neg + I_C·R_L
    op = contract(design(bjt("pnp", vbe=0.65), RESISTOR, NORTON, cm=-0.5))["operating_point"]
    ic = 100 / 101 * I_TAIL / 2
    v_c = -5.0 + ic * 3e3
    assert op["vce"] == pytest.approx((-0.5 + 0.65) - v_c, rel=1e-12)
    assert op["vcb"] == pytest.approx(-0.5 - v_c, rel=1e-12)
    assert op["cmu"] == pytest.approx(cmu_of(0.8e-12, -0.5 - v_c), rel=1e-12)
    assert op["ic"] > 0 and op["gm"] > 0


def test_bipolar_mirror_load_puts_the_collector_one_mirror_veb_below_the_rail():
    load = {"type": "mirror", "device": bjt("pnp", vbe=0.62, cjc0=0.5e-12)}
    op = contract(design(bjt("npn"), load, NORTON, cm=0.5))["operating_point"]
    # hand: DESIGN.md §2/§3a — V_C = V_pos − V_EB(mirror) (0.62 V here, not the pair's
    # 0.7 V); V_CB = V_C − V_B; C_mu of the pair at that V_CB
    v_c = 5.0 - 0.62
    assert op["vcb"] == pytest.approx(v_c - 0.5, rel=1e-12)
    assert op["vce"] == pytest.approx(v_c - (0.5 - 0.7), rel=1e-12)
    assert op["cmu"] == pytest.approx(cmu_of(0.8e-12, v_c - 0.5), rel=1e-12)


def test_mos_mirror_load_puts_the_drain_one_mirror_vsg_below_the_rail():
    dev = mos("pmos", mobility_cox=80e-6, width=40e-6, threshold=0.55)
    op = contract(design(mos("nmos"), {"type": "mirror", "device": dev}, NORTON,
                         pos=3.3, neg=0.0, cm=1.8))["operating_point"]
    # hand: DESIGN.md §3a — the mirror devices carry the pair's I_D; V_D = V_pos − V_SG,
    # V_SG = |V_th| + V_ov(I_D) of the pmos; V_S = V_G − V_GS(pair)
    i_d = I_TAIL / 2
    v_d = 3.3 - (0.55 + vov_of(80e-6, 40e-6, 1e-6, i_d))
    v_s = 1.8 - (0.5 + vov_of(200e-6, 20e-6, 1e-6, i_d))
    assert op["vds"] == pytest.approx(v_d - v_s, rel=1e-12)


def test_mirror_devices_take_cmu_at_zero_vcb_and_cpi_from_ft():
    dev = bjt("pnp", ft=5e6, transit_time=None, cjc0=0.4e-12, cje=2e-12)
    del dev["transit_time"]
    stage = build_stage(design(bjt("npn"), {"type": "mirror", "device": dev}, NORTON))
    lss = stage.load_small_signal
    # hand: DESIGN.md §3a — mirror devices at the pair's I_C, C_mu at V_CB = 0 (= C_jc0);
    # §2 — C_pi = g_m/(2π f_T) − C_mu, C_je not added
    ic = 100 / 101 * I_TAIL / 2
    assert lss.current == pytest.approx(ic, rel=1e-14)
    assert lss.gm == pytest.approx(ic / VT, rel=1e-12)
    assert lss.c_fb == pytest.approx(0.4e-12, rel=1e-14)
    assert lss.c_in == pytest.approx(ic / VT / (2 * math.pi * 5e6) - 0.4e-12, rel=1e-12)


def test_mirror_load_capacitance_sits_at_o2_only():
    bare = dict(cox=0.0, overlap_cap=0.0, cdb=0.0)
    load = {"type": "mirror", "capacitance": 1e-12, "device": mos("pmos", **bare, **{"lambda": 0.08})}
    out = contract(design(mos("nmos", **bare), load, {"type": "ideal"}, cm=1.0))
    # hand nodal analysis (KCL at t, o1, o2 with the sources zeroed, ideal tail):
    # G_out = g_o4 + g_o2·(g_m3 + g_m4 + g_o3)/(g_o2 + 2 g_m3 + 2 g_o3); the only capacitor
    # is C_L at o2 (DESIGN.md §3a), so one pole at G_out/C_L and f_3dB = G_out/(2π C_L)
    i_d = I_TAIL / 2
    gm3 = math.sqrt(2 * 200e-6 * 20 * i_d)
    go2, go3 = 0.05 * i_d, 0.08 * i_d
    g_out = go3 + go2 * (2 * gm3 + go3) / (go2 + 2 * gm3 + 2 * go3)
    assert len(out["poles_hz"]) == 1          # a second C_L at o1 would add a pole
    assert out["f3db_hz"] == pytest.approx(g_out / (2 * math.pi * 1e-12), rel=1e-9)


# ------------------------------------------------------------------ tail Norton view
def test_ideal_and_norton_tails_report_themselves():
    # DESIGN.md §4: ideal → nulls; a Norton tail is its own R ∥ C
    assert contract(design(bjt("npn"), RESISTOR, {"type": "ideal"}))["tail"] == {
        "resistance": None, "capacitance": None}
    assert contract(design(bjt("npn"), RESISTOR, NORTON))["tail"] == {
        "resistance": 1e6, "capacitance": 1e-12}


def test_mos_simple_mirror_tail_is_ro_with_cgd_cdb_and_extra():
    tail = {"type": "mirror", "device": mos("nmos", **{"lambda": 0.04}), "extra_capacitance": 0.2e-12}
    t = contract(design(mos("nmos"), RESISTOR, tail, cm=1.0))["tail"]
    # hand: r_o = 1/(λ I_tail) of the output device (Gray et al. §4.2.2, from memory);
    # C = C_gd + C_db + extra (DESIGN.md §3a: the tail's own devices' caps at the node)
    assert t["resistance"] == pytest.approx(1 / (0.04 * I_TAIL), rel=1e-12)
    assert t["capacitance"] == pytest.approx(20e-6 * 0.3e-9 + 10e-15 + 0.2e-12, rel=1e-12)


def test_degenerated_bipolar_tail_capacitance_takes_cmu_at_its_own_vcb():
    r_e = 1.5e3
    tail = {"type": "degenerated", "degeneration": r_e, "extra_capacitance": 0.1e-12,
            "device": bjt("npn", cjc0=1.2e-12, ccs=0.4e-12)}
    t = contract(design(bjt("npn"), RESISTOR, tail, cm=0.3))["tail"]
    # hand: tail node V_E = V_cm − V_BE, 5.0 V above the −5 V rail at cm = 0.3; emitter
    # I_tail·R_E above the rail, base one V_BE higher: V_CB = h − I·R_E − V_BE.
    # C = C_mu(V_CB) + C_cs + extra (DESIGN.md §3a)
    h = (0.3 - 0.7) - (-5.0)
    vcb = h - I_TAIL * r_e - 0.7
    assert t["capacitance"] == pytest.approx(cmu_of(1.2e-12, vcb) + 0.4e-12 + 0.1e-12, rel=1e-12)


def test_degenerated_mos_tail_capacitance_is_cgd_cdb_and_extra():
    tail = {"type": "degenerated", "degeneration": 500.0, "extra_capacitance": 0.3e-12,
            "device": mos("nmos", width=60e-6)}
    t = contract(design(mos("nmos"), RESISTOR, tail, cm=1.0))["tail"]
    # hand: W·C_ov + C_db + extra (DESIGN.md §3a, square-law caps §2)
    assert t["capacitance"] == pytest.approx(60e-6 * 0.3e-9 + 10e-15 + 0.3e-12, rel=1e-12)


def test_bipolar_cascode_tail_matches_the_cascode_formula_by_hand():
    tail = {"type": "cascode", "extra_capacitance": 0.1e-12,
            "device": bjt("npn", beta=80, early_voltage=40)}
    t = contract(design(bjt("npn"), RESISTOR, tail))["tail"]
    # hand: R = r_o2·(1 + g_m2·(r_o1 ∥ r_π2)) + r_o1 ∥ r_π2 (exact for r_b = 0; Gray et al.
    # §4.2.4, from memory), both devices at I_tail (DESIGN.md §3a)
    gm = I_TAIL / VT
    ro, rpi = 40 / I_TAIL, 80 / gm
    rx = ro * rpi / (ro + rpi)
    assert t["resistance"] == pytest.approx(ro * (1 + gm * rx) + rx, rel=1e-9)
    # C: the upper device's C_mu at its V_CB and its C_cs, plus extra; the internal node
    # one V_BE above the rail, the cascode base at 2·V_BE (DEVELOPERS.md convention)
    h = (0.0 - 0.7) - (-5.0)
    assert t["capacitance"] == pytest.approx(
        cmu_of(0.8e-12, h - 2 * 0.7) + 0.3e-12 + 0.1e-12, rel=1e-12)


# ------------------------------------------------------------------ headroom
def _starved(d):
    with pytest.raises(BiasError, match="starved"):
        build_stage(d)


@pytest.mark.parametrize("kind", ["mirror", "degenerated", "cascode"])
def test_mos_tail_headroom_boundaries(kind):
    r_deg = 800.0
    dev = mos("nmos", width=40e-6)
    tail = {"type": kind, "device": dev}
    if kind == "degenerated":
        tail["degeneration"] = r_deg
    vov = vov_of(200e-6, 40e-6, 1e-6, I_TAIL)           # tail device at I_tail
    # hand: DESIGN.md §3a — simple mirror V_ov; degenerated + I_tail·R; cascode V_th + 2·V_ov
    need = {"mirror": vov, "degenerated": vov + I_TAIL * r_deg, "cascode": 0.5 + 2 * vov}[kind]
    v_s = 2.0 - (0.5 + vov_of(200e-6, 20e-6, 1e-6, I_TAIL / 2))
    build_stage(design(mos("nmos"), RESISTOR, tail, neg=v_s - need - 1e-3, cm=2.0))
    _starved(design(mos("nmos"), RESISTOR, tail, neg=v_s - need + 1e-3, cm=2.0))


def test_bipolar_simple_mirror_tail_needs_0_3_v():
    tail = {"type": "mirror", "device": bjt("npn")}
    # hand: DESIGN.md §3a — 0.3 V between the tail node (V_cm − V_BE) and the rail
    build_stage(design(bjt("npn"), RESISTOR, tail, neg=-0.7 - 0.3 - 1e-3))
    _starved(design(bjt("npn"), RESISTOR, tail, neg=-0.7 - 0.3 + 1e-3))


def test_pair_saturation_boundaries():
    # hand: DESIGN.md §2 — bipolar saturated if V_CE < 0.2 V (V_E = −0.7 V, so V_C must
    # stay above −0.5 V); MOS out of saturation if V_DS < V_ov
    ic = 100 / 101 * I_TAIL / 2
    r_edge = (5.0 - (-0.5)) / ic
    build_stage(design(bjt("npn"), {"type": "resistor", "resistance": r_edge * 0.999}, NORTON))
    with pytest.raises(BiasError, match="saturated"):
        build_stage(design(bjt("npn"), {"type": "resistor", "resistance": r_edge * 1.001}, NORTON))
    i_d = I_TAIL / 2
    vov = vov_of(200e-6, 20e-6, 1e-6, i_d)
    v_s = 0.0 - (0.5 + vov)
    r_edge = (5.0 - (v_s + vov)) / i_d
    build_stage(design(mos("nmos"), {"type": "resistor", "resistance": r_edge * 0.999}, NORTON))
    with pytest.raises(BiasError, match="out of saturation"):
        build_stage(design(mos("nmos"), {"type": "resistor", "resistance": r_edge * 1.001}, NORTON))


# ------------------------------------------------------------------ metrics' definitions
@pytest.mark.parametrize("start", [1.0, 1e5, 1e6])
def test_cmrr_corner_does_not_depend_on_where_the_sweep_starts(start):
    pair = bjt("npn", beta=1e4, early_voltage=1e4, cje=0.0, transit_time=0.0, cjc0=0.0, ccs=0.0)
    d = design(pair, {"type": "resistor", "resistance": 1e3, "capacitance": 1e-12},
               {"type": "norton", "resistance": 1e7, "capacitance": 10e-12},
               sweep={"start": start, "stop": 1e10})
    # hand: the tail's R·C zero of A_cm,se sets the corner, f = 1/(2π R_tail C_tail)
    # (Gray et al. §3.5.6, from memory) — 1.59 kHz, below the 100 kHz and 1 MHz sweep
    # starts; DESIGN.md §2: found on the exact response, not the plotting grid
    assert contract(d)["cmrr_corner_hz"] == pytest.approx(1 / (2 * math.pi * 1e7 * 10e-12),
                                                          rel=2e-3)


def test_cmrr_that_never_falls_has_a_null_corner_and_no_f3db():
    bare = mos("nmos", cox=0.0, overlap_cap=0.0, cdb=0.0)
    out = contract(design(bare, RESISTOR, {"type": "norton", "resistance": 1e5}))
    # common practice: a network without capacitors has frequency-independent gains;
    # DESIGN.md §4: corner null if the CMRR never falls 3 dB
    assert out["cmrr_se_db"] is not None
    assert out["cmrr_corner_hz"] is None and out["f3db_hz"] is None


def test_unity_gain_frequency_is_null_when_dc_gain_is_at_most_one():
    out = contract(design(mos("nmos"), {"type": "resistor", "resistance": 100.0}, NORTON))
    # hand: |A_dm| ≈ g_m·R_L = 2 mS × 100 Ω = 0.2 < 1 (Gray et al. §3.5, from memory);
    # DESIGN.md §4: ugf_hz null if |A_dm(0)| ≤ 1
    assert out["adm_db"] == pytest.approx(20 * math.log10(2e-3 * 100 * 40e3 / (40e3 + 100)),
                                          abs=0.05)
    assert out["ugf_hz"] is None


# ------------------------------------------------------------------ second stage and loop
def _two_stage(feedback=None):
    load = {"type": "mirror", "device": mos("pmos", **{"lambda": 0.08})}
    extra = {"second_stage": {"gm": 4e-3, "output_resistance": 150e3, "input_capacitance": 0.5e-12,
                              "load_capacitance": 10e-12, "miller_capacitance": 3e-12,
                              "nulling_resistance": 200.0}}
    if feedback is not None:
        extra["feedback"] = {"factor": feedback}
    return design(mos("nmos"), load, {"type": "norton", "resistance": 1e6}, cm=1.0, **extra)


def test_second_stage_adm_is_first_stage_gain_and_a_total_adds_gm2_rout():
    out = contract(_two_stage())
    # hand: mirror-loaded pair A_dm,se ≈ g_m·(r_o2 ∥ r_o4) (Gray et al. §4.3.5, from memory)
    i_d = I_TAIL / 2
    gm = math.sqrt(2 * 200e-6 * 20 * i_d)
    ro2, ro4 = 1 / (0.05 * i_d), 1 / (0.08 * i_d)
    assert out["adm_db"] == pytest.approx(20 * math.log10(gm * ro2 * ro4 / (ro2 + ro4)), abs=0.1)
    # DESIGN.md §3a: at DC the Miller branch and C_in are open, so the second stage does
    # not load o2 and A_total(0) = A_dm,se(0)·(−g_m2·R_out) exactly
    assert out["a_total_db"] == pytest.approx(out["adm_db"] + 20 * math.log10(4e-3 * 150e3),
                                              abs=1e-9)
    # f3db/ugf refer to A_total: its dominant (Miller) pole is far below the first stage's
    assert out["f3db_hz"] < 1e4


def test_loop_gain_of_an_inverting_two_stage_amplifier_is_positive_at_dc():
    out = contract(_two_stage(feedback=0.5))
    # DESIGN.md §2: T = β_f·A·sign with T(0) > 0; A = A_total with a second stage (§3a)
    assert out["dc_loop_gain_db"] == pytest.approx(out["a_total_db"] + 20 * math.log10(0.5),
                                                   abs=1e-9)
    assert out["phase_margin_deg"] is not None and 0 < out["phase_margin_deg"] < 180


def test_loop_with_dc_loop_gain_below_one_has_null_phase_margin():
    d = design(mos("nmos"), RESISTOR, NORTON, feedback={"factor": 0.01})
    out = contract(d)
    # common practice: |T| never reaches 1 → no gain crossover → phase margin infinite → null
    assert out["dc_loop_gain_db"] < 0
    assert out["phase_margin_deg"] is None and out["crossover_hz"] is None


# ------------------------------------------------------------------ JSON for every example
SECTION_4 = {"operating_point", "adm_db", "f3db_hz", "ugf_hz", "acm_se_db", "cmrr_se_db",
             "cmrr_db", "cmrr_corner_hz", "tail"}
OP_KEYS = {True: {"ic", "gm", "rpi", "ro", "cpi", "cmu", "vce", "vcb"},
           False: {"id", "gm", "ro", "cgs", "cgd", "vds", "vgs"}}
LOOP_KEYS = {"phase_margin_deg", "gain_margin_db", "crossover_hz"}


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_every_example_prints_exactly_one_json_object_with_the_keys_of_its_kind(path):
    from freqpair.cli.main import main
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["analyze", str(path), "--json"])
    text = out.getvalue()
    # DESIGN.md §4: exactly one JSON object on stdout, nothing else; SI; null not NaN
    assert code == 0 and err.getvalue() == ""
    obj, end = json.JSONDecoder().raw_decode(text)
    assert text[end:] == "\n" and isinstance(obj, dict)
    d = load_design(path)
    assert SECTION_4 <= set(obj)
    assert set(obj["operating_point"]) == OP_KEYS[d.pair.is_bipolar]
    assert set(obj["tail"]) == {"resistance", "capacitance"}
    assert ("a_total_db" in obj) == (d.second_stage is not None)
    assert LOOP_KEYS <= set(obj) if d.feedback is not None else not (LOOP_KEYS & set(obj))
    if d.load.type == "mirror":
        assert obj["cmrr_db"] is None           # §3a: one output, no balanced CMRR
    if d.tail.type == "ideal":
        assert obj["tail"] == {"resistance": None, "capacitance": None}
