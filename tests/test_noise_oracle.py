"""Noise (DESIGN.md §7h) against physics constants, hand-written networks and textbooks.

Oracles:
- scipy.constants (CODATA k, q): Johnson–Nyquist 4kT/R and Schottky 2qI densities of
  every source, and single-element results (a load resistor alone at an output node
  gives 4kT·R; a collector's shot noise reaches the balanced output as 2qI_C·R_L²);
- sympy: one small stage with its noise currents written out as KCL here, |H_k|²·S_k
  summed; and tests/stage_oracle.py (the stage written from DESIGN.md alone) with
  each source injected alone through its own exact nodal solve;
- closed forms for the band integrals (one-pole output, flicker), the −10 dB/decade
  flicker slope, and textbook pair formulas (book named, from memory).
"""
import math
import pathlib

import numpy as np
import pytest
import scipy.constants as sc
import sympy as sp

import freqpair
import oracle_designs as od
import stage_oracle as so
from conftest import EXAMPLES
from freqpair.analysis.noise import noise_curves
from freqpair.circuit.noise_sources import resistor_noise
from freqpair.design.errors import FreqpairError
from test_stage7_sympy import FEATURE_DESIGNS, HAND

ROOT = pathlib.Path(__file__).resolve().parent.parent
K, Q = sc.k, sc.e

FLICKER_MIX = od.NPN_TWO_STAGE.replace('[pair]\ntype = "npn"\n',
                                       '[pair]\ntype = "npn"\nflicker_corner = "3 kHz"\n') \
    .replace('[load.device]\ntype = "pnp"\n', '[load.device]\ntype = "pnp"\nflicker_corner = 200\n') + """
[[element]]
kind = "resistor"
nodes = ["o2", "vneg"]
value = "5 M"
[[element]]
kind = "resistor"
nodes = ["t", "ground"]
value = "3 M"
name = "tail leak"
[[element]]
kind = "resistor"
nodes = ["vpos", "ground"]
value = "1 k"
"""
assert "flicker_corner = 200" in FLICKER_MIX

NOISE_DESIGNS = {
    "npn_resistor_norton_tail": od.NPN_RES,
    "nmos_mirror_degenerated_tail_flicker": od.NMOS_MIRROR_DEGEN_TAIL,
    "npn_two_stage_flicker_elements": FLICKER_MIX,
    "npn_two_stage_resistor_load": od.NPN_RES_TWO_STAGE,
    "pmos_mirror_cascode_tail": od.PMOS_MIRROR_CASCODE_TAIL,
    "pnp_two_stage_degenerated_tail": od.PNP_MIRROR_TWO_STAGE,
    **FEATURE_DESIGNS,
    **{p.stem: p.read_text() for p in EXAMPLES},
}


def _design(text):
    return freqpair.design_from_text(text)


# ---------------------------------------------------------------- densities
def test_resistor_density_is_johnson_nyquist():
    # oracle: scipy.constants (CODATA k): 4kT/R
    for r, t in ((1e3, 300.0), (47.5e3, 358.15), (3.3, 77.0)):
        src = resistor_noise("R", "a", "b", r, t)
        assert src.white_a2_hz == pytest.approx(4 * K * t / r, rel=1e-15)
        assert src.flicker_corner_hz == 0


@pytest.mark.parametrize("name", list(NOISE_DESIGNS))
def test_every_source_and_density_as_design_md_lists_them(name):
    # oracle: DESIGN.md §7h read here — which elements are noisy (physical resistors;
    # not r_pi, r_o, the second stage's R_out, an ideal tail, the transconductor; the
    # nulling resistor only with a Miller capacitor), and their densities from
    # scipy.constants: 4kT/R, 2q·I_C, 2q·I_C/β × (1 + f_c/f), 4kT·γ_n·g_m × (1 + f_c/f)
    d = _design(NOISE_DESIGNS[name])
    a = freqpair.analyze(d)
    ours = {s.name: (s.white_a2_hz, s.flicker_corner_hz) for s in a.responses.stage.noise_sources}
    ref = {n: (w, fc) for n, _, _, w, fc in so.build(d).net.noise}
    assert sorted(ours) == sorted(ref)
    for n, (w, fc) in ref.items():
        assert ours[n][0] == pytest.approx(w, rel=1e-12), n
        assert ours[n][1] == fc, n


def test_nulling_resistor_is_noisy_only_with_a_miller_capacitor():
    # oracle: DESIGN.md §7h (the nulling resistor only where a Miller capacitor exists)
    with_cc = freqpair.analyze(_design(od.NPN_TWO_STAGE))
    names = [s.name for s in with_cc.responses.stage.noise_sources]
    assert "Rz" in names
    no_cc = _design(od.NPN_TWO_STAGE.replace('miller_capacitance = "6 pF"', "miller_capacitance = 0"))
    names = [s.name for s in freqpair.analyze(no_cc).responses.stage.noise_sources]
    assert "Rz" not in names


# ---------------------------------------------------------------- single elements
MOS_CLEAN = """
name = "noise: nmos pair, lambda = 0, ideal tail, one pole per output"
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
noise_gamma = {gamma}
flicker_corner = {fc}
[load]
type = "resistor"
resistance = "20 k"
capacitance = "{cl}"
[tail]
type = "ideal"
[noise]
spot_frequencies = [{spots}]
band = [{band}]
"""


def _mos_clean(gamma=2 / 3, fc=0.0, cl="1 pF", spots="1e3", band="10, 1e5"):
    return _design(MOS_CLEAN.format(gamma=gamma, fc=fc, cl=cl, spots=spots, band=band))


def test_a_load_resistor_alone_at_its_node_gives_4ktr():
    # oracle: Johnson–Nyquist — with λ = 0, no capacitance and an ideal tail the output
    # node o1 sees only R_L, so R_L1's part of S_out (at v_od) is 4kT/R_L·R_L² = 4kT·R_L
    a = freqpair.analyze(_mos_clean(cl="0"))
    nc = noise_curves(a.responses, [1.0, 1e3, 1e9])
    k = nc.names.index("RL1")
    np.testing.assert_allclose(nc.contributions_v2_hz[:, k], 4 * K * 300 * 20e3, rtol=1e-12)


NPN_CLEAN = """
name = "noise: npn pair, r_o infinite in effect, ideal tail"
[supply]
positive = 15
negative = -15
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 100
early_voltage = 1e12
[load]
type = "resistor"
resistance = "10 k"
[tail]
type = "ideal"
"""


def test_collector_shot_noise_reaches_the_balanced_output_as_2qic_rl_squared():
    # oracle: Schottky 2qI (scipy.constants q) and a hand node analysis: with an ideal
    # tail and the bases grounded, a current i from collector 1 to the tail node
    # leaves v_od = −R_L·i exactly (the tail node splits it equally); the base shot
    # current, injected between a grounded base and t, cancels in v_od
    a = freqpair.analyze(_design(NPN_CLEAN))
    nc = noise_curves(a.responses, [1e3])
    c = dict(zip(nc.names, nc.contributions_v2_hz[0]))
    ic = 100 / 101 * 0.5e-3
    assert c["Q1 collector shot"] == pytest.approx(2 * Q * ic * 10e3 ** 2, rel=1e-9)
    assert c["Q1 base shot"] <= 1e-20 * c["Q1 collector shot"]


# ---------------------------------------------------------------- one stage by hand (sympy)
BY_HAND = """
name = "noise: npn stage by hand"
[supply]
positive = 12
negative = -12
[bias]
tail_current = "1 mA"
temperature = 320
[pair]
type = "npn"
beta = 100
early_voltage = 50
base_resistance = 250
cje = "1 pF"
transit_time = "0.2 ns"
cjc0 = "0.8 pF"
flicker_corner = "5 kHz"
[load]
type = "resistor"
resistance = "10 k"
capacitance = "0.5 pF"
[tail]
type = "norton"
resistance = "100 k"
capacitance = "4 pF"
[source]
resistance = "2 k"
[mismatch]
load = 0.05
gm = -0.02
"""


def _by_hand_parts(f_hz):
    """Each source's part of S_out at v_od, from KCL written out here (sympy, exact)."""
    R = lambda x: sp.Rational(float(x))              # noqa: E731
    T = 320.0
    vt = K * T / Q
    ic = 100 / 101 * 0.5e-3
    gm = ic / vt
    vcb = (12 - ic * 10e3) - 0.0
    cmu = 0.8e-12 / (1 + vcb / 0.75) ** 0.33
    cpi = 1e-12 + 0.2e-9 * gm
    s = sp.I * R(2 * math.pi * f_hz)
    b1, b2, x1, x2, o1, o2, t = sp.symbols("b1 b2 x1 x2 o1 o2 t")
    names = ["Rs1", "Rs2", "Q1.rb", "Q2.rb", "Q1 collector shot", "Q2 collector shot",
             "Q1 base shot", "Q2 base shot", "RL1", "RL2", "Rtail"]
    i = dict(zip(names, sp.symbols("i0:11")))        # noise currents (one per source)
    eq = {n: 0 for n in (b1, b2, x1, x2, o1, o2, t)}  # currents leaving each node
    for k, b, x, o in ((1, b1, x1, o1), (2, b2, x2, o2)):
        h = sp.Rational(1, 2) if k == 1 else -sp.Rational(1, 2)
        eq[b] += b / R(2e3) + (b - x) / R(250)       # R_s to the (AC-grounded) source
        eq[b] += i[f"Rs{k}"]                          # noise current from b to the source
        eq[b] += i[f"Q{k}.rb"]                        # r_b noise: from b to x
        eq[x] -= i[f"Q{k}.rb"]
        eq[x] += (x - b) / R(250) + (x - t) * (R(gm / 100) + s * R(cpi)) + (x - o) * s * R(cmu)
        i_c = R(gm) * (1 + h * R(-0.02)) * (x - t) + (o - t) / R(50 / ic)   # collector → emitter
        eq[o] += o / (R(10e3) * (1 + h * R(0.05))) + s * R(0.5e-12) * o + (o - x) * s * R(cmu)
        eq[o] += i_c + i[f"Q{k} collector shot"] + i[f"RL{k}"]
        eq[t] -= i_c + (x - t) * (R(gm / 100) + s * R(cpi)) + i[f"Q{k} collector shot"]
        eq[x] += i[f"Q{k} base shot"]                 # base shot: internal base → emitter
        eq[t] -= i[f"Q{k} base shot"]
    eq[t] += t / R(100e3) + s * R(4e-12) * t + i["Rtail"]
    sol = sp.solve(list(eq.values()), list(eq), dict=True)[0]
    vod = sp.expand(sol[o1] - sol[o2])
    dens = {"Rs1": 4 * K * T / 2e3, "Rs2": 4 * K * T / 2e3, "Q1.rb": 4 * K * T / 250,
            "Q2.rb": 4 * K * T / 250, "Q1 collector shot": 2 * Q * ic,
            "Q2 collector shot": 2 * Q * ic,
            "Q1 base shot": 2 * Q * ic / 100 * (1 + 5e3 / f_hz),
            "Q2 base shot": 2 * Q * ic / 100 * (1 + 5e3 / f_hz),
            "RL1": 4 * K * T / (10e3 * 1.025), "RL2": 4 * K * T / (10e3 * 0.975),
            "Rtail": 4 * K * T / 100e3}
    return {n: abs(complex(sp.N(vod.coeff(i[n]), 30))) ** 2 * dens[n] for n in names}


@pytest.mark.parametrize("f_hz", [10.0, 3e3, 1e6, 3e8])
def test_one_stage_with_its_noise_currents_written_by_hand(f_hz):
    # oracle: sympy — KCL with every noise current as an unknown source, H_k = ∂v_od/∂i_k,
    # S_out = Σ |H_k|²·S_k (DESIGN.md §7h densities, CODATA k and q)
    ref = _by_hand_parts(f_hz)
    nc = noise_curves(freqpair.analyze(_design(BY_HAND)).responses, [f_hz])
    got = dict(zip(nc.names, nc.contributions_v2_hz[0]))
    total = sum(ref.values())
    assert nc.output_v2_hz[0] == pytest.approx(total, rel=1e-9)
    assert sorted(got) == sorted(ref)
    for n, v in ref.items():
        assert got[n] == pytest.approx(v, rel=1e-9, abs=1e-12 * total), n


# ---------------------------------------------------------------- every design: adjoint = injection
@pytest.mark.parametrize("name", list(NOISE_DESIGNS))
def test_adjoint_parts_equal_each_source_injected_alone(name):
    # oracle: tests/stage_oracle.py — each source injected alone into the stage written
    # from DESIGN.md, solved exactly (sympy); |H_k|²·S_k per source, their sum, and e_n²
    d = _design(NOISE_DESIGNS[name])
    a = freqpair.analyze(d)
    o = so.build(d)
    f = np.array([3.0, 2e3, 5e5, 2e8])
    nc = noise_curves(a.responses, f)
    for i, fi in enumerate(f):
        ref = so.noise(o, fi)
        got = dict(zip(nc.names, nc.contributions_v2_hz[i]))
        assert nc.output_v2_hz[i] == pytest.approx(ref["total"], rel=1e-10), f"{name} {fi:g}"
        for n, v in ref["parts"].items():
            assert got[n] == pytest.approx(v, rel=1e-10, abs=1e-10 * ref["total"]), \
                f"{name} {n} at {fi:g} Hz"
        assert nc.input_v2_hz[i] == pytest.approx(ref["total"] / abs(ref["gain"]) ** 2,
                                                  rel=1e-9)


# ---------------------------------------------------------------- textbook
def test_mos_pair_input_noise_is_the_textbook_formula():
    # oracle: textbook (Razavi, "Design of Analog CMOS Integrated Circuits", ch. 7,
    # differential pair: v_n,in² = 2·4kT·(γ/g_m + 1/(g_m²·R_D)), from memory) — exact
    # for λ = 0, no capacitance and an ideal tail; the loads' part input-referred is
    # 2·4kT·R_L/(g_m·R_L)²
    for gamma in (2 / 3, 1.3):
        a = freqpair.analyze(_mos_clean(gamma=gamma, cl="0"))
        nc = noise_curves(a.responses, [1e3])
        gm = math.sqrt(2 * 200e-6 * 20 * 100e-6)
        kt4 = 4 * K * 300
        assert nc.input_v2_hz[0] == pytest.approx(2 * kt4 * (gamma / gm + 1 / (gm ** 2 * 20e3)),
                                                  rel=1e-12)
        c = dict(zip(nc.names, nc.contributions_v2_hz[0]))
        a0 = abs(nc.gain[0])
        assert (c["RL1"] + c["RL2"]) / a0 ** 2 == pytest.approx(
            2 * kt4 * 20e3 / (gm * 20e3) ** 2, rel=1e-12)


NPN_TEXTBOOK = """
name = "noise: npn pair in the textbook regime"
[supply]
positive = 15
negative = -15
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 300
early_voltage = 1e4
base_resistance = 100
[load]
type = "resistor"
resistance = "20 k"
[tail]
type = "ideal"
[source]
resistance = "{rs}"
"""


@pytest.mark.parametrize("rs", [0.0, 1e3])
def test_bipolar_pair_input_noise_is_the_textbook_formula(rs):
    # oracle: textbook (Gray, Hurst, Lewis & Meyer, ch. 11, noise of the differential
    # pair, from memory): e_n² ≈ 2·4kT·(R_s + r_b + 1/(2g_m)) + 2·2q·I_B·R_s² (base
    # current noise through R_s) + 2·4kT/(g_m²·R_L) (loads), for β·R_L ≫ R_s and
    # r_pi ≫ R_s + r_b; within 2 % here
    a = freqpair.analyze(_design(NPN_TEXTBOOK.format(rs=rs)))
    nc = noise_curves(a.responses, [1e3])
    ic = 300 / 301 * 0.5e-3
    gm = ic / (K * 300 / Q)
    kt4 = 4 * K * 300
    hand = 2 * kt4 * (rs + 100 + 1 / (2 * gm)) + 2 * 2 * Q * ic / 300 * rs ** 2 \
        + 2 * kt4 / (gm ** 2 * 20e3)
    assert nc.input_v2_hz[0] == pytest.approx(hand, rel=0.02)


# ---------------------------------------------------------------- integration
def test_band_rms_of_a_one_pole_output_against_the_closed_form():
    # oracle: closed form — every source here is white and meets one pole
    # f_p = 1/(2π·R_L·C_L) at each output: S_out = S0/(1 + (f/f_p)²), so
    # ∫ S_out df = S0·f_p·(atan(f2/f_p) − atan(f1/f_p)); the gain has the same pole, so
    # e_n² = S0/A0² is flat and ∫ e_n² df = S0/A0²·(f2 − f1)
    f1, f2 = 30.0, 2e8
    d = _mos_clean(cl="1 pF", band=f"{f1}, {f2}")
    a = freqpair.analyze(d)
    j = a.to_json()["noise"]
    fp = 1 / (2 * math.pi * 20e3 * 1e-12)
    nc = noise_curves(a.responses, [1e-3])
    s0, a0 = nc.output_v2_hz[0], abs(nc.gain[0])
    out_rms = math.sqrt(s0 * fp * (math.atan(f2 / fp) - math.atan(f1 / fp)))
    in_rms = math.sqrt(s0 / a0 ** 2 * (f2 - f1))
    assert j["band_hz"] == [f1, f2]
    assert j["output_rms_v"] == pytest.approx(out_rms, rel=5e-3)
    assert j["input_rms_v"] == pytest.approx(in_rms, rel=5e-3)
    # the one-pole shape itself, to rounding
    f = np.array([1e3, fp, 10 * fp])
    np.testing.assert_allclose(noise_curves(a.responses, f).output_v2_hz,
                               s0 / (1 + (f / fp) ** 2), rtol=1e-12)


def test_band_rms_with_flicker_against_the_closed_form():
    # oracle: closed form — channel noise a·(1 + f_c/f) and white load noise b, both
    # flat at the input: ∫ e_n² df = (a + b)·(f2 − f1) + a·f_c·ln(f2/f1)
    f1, f2, fc, gamma = 0.1, 1e4, 2e5, 2 / 3
    a = freqpair.analyze(_mos_clean(gamma=gamma, fc=fc, cl="0", band=f"{f1}, {f2}"))
    gm = math.sqrt(2 * 200e-6 * 20 * 100e-6)
    kt4 = 4 * K * 300
    ch, ld = 2 * kt4 * gamma / gm, 2 * kt4 / (gm ** 2 * 20e3)
    ms = (ch + ld) * (f2 - f1) + ch * fc * math.log(f2 / f1)
    assert a.to_json()["noise"]["input_rms_v"] == pytest.approx(math.sqrt(ms), rel=5e-3)


GYRATOR = """
[[element]]
kind = "transconductance"
nodes = ["o1", "ground"]
control = ["o2", "ground"]
value = {g!r}
[[element]]
kind = "transconductance"
nodes = ["o2", "ground"]
control = ["o1", "ground"]
value = {mg!r}
"""


@pytest.mark.parametrize("g,r_l", [(0.01, "20 k"), (0.3, "20 k"), (1.0, "200 k"), (10.0, "200 k")])
def test_band_rms_through_a_narrow_resonance(g, r_l):
    # oracle: scipy.integrate.quad on freqpair's own exact densities (checked against the
    # nodal oracle above), with breakpoints at the resonance. Two added transconductances
    # make a gyrator between o1 and o2: with the 1 pF loads a resonance at g/(2π·1 pF) of
    # Q ≈ g·R_L/2 = 100 … 10⁶ in the output noise. DESIGN.md §7h: within 0.5 %.
    from scipy.integrate import quad
    text = (MOS_CLEAN.format(gamma=2 / 3, fc=0, cl="1 pF", spots="1e3", band="1e3, 1e13")
            .replace('resistance = "20 k"', f'resistance = "{r_l}"')
            .replace("positive = 10", "positive = 40") + GYRATOR.format(g=g, mg=-g))
    a = freqpair.analyze(_design(text))
    j = a.to_json()["noise"]
    f0 = g / (2 * math.pi * 1e-12)
    pts = [math.log(f0) + x for x in (-1e-2, -1e-3, -1e-4, -1e-5, 0.0, 1e-5, 1e-4, 1e-3, 1e-2)]
    for key, attr in (("output_rms_v", "output_v2_hz"), ("input_rms_v", "input_v2_hz")):
        dens = lambda u: getattr(noise_curves(a.responses, [math.exp(u)]), attr)[0] \
            * math.exp(u)                                                  # noqa: E731
        ms, _ = quad(dens, math.log(1e3), math.log(1e13), points=pts, limit=4000,
                     epsabs=0, epsrel=1e-9)
        assert j[key] == pytest.approx(math.sqrt(ms), rel=5e-3), key


def test_flicker_slope_is_minus_10_db_per_decade_well_below_the_corner():
    # oracle: S ∝ 1/f below f_c — e_n² falls 10 dB per decade (the white part is
    # 1e-4 of the flicker part two decades below f_c … here 4 decades below)
    a = freqpair.analyze(_mos_clean(fc=1e7, cl="0"))
    f = np.array([1e2, 1e3])
    en2 = noise_curves(a.responses, f).input_v2_hz
    assert 10 * math.log10(en2[0] / en2[1]) == pytest.approx(10.0, abs=0.01)
    # and flat far above it
    en2 = noise_curves(a.responses, np.array([1e11, 1e12])).input_v2_hz
    assert 10 * math.log10(en2[0] / en2[1]) == pytest.approx(0.0, abs=0.01)


# ---------------------------------------------------------------- spots, shares, NF
@pytest.mark.parametrize("name", ["npn_resistor_norton_tail", "nmos_mirror_degenerated_tail_flicker",
                                  "npn_two_stage_flicker_elements", "npn_mirror_load_simple_mirror_tail",
                                  "nmos_resistor_ideal_tail"])
def test_spots_shares_and_noise_figure_against_the_oracle(name):
    # oracle: tests/stage_oracle.py (each source injected alone); NF = 10·log10(S_out/S_out,Rs)
    # with S_out,Rs the two source resistors' part (null when R_s = 0); shares sum to 1,
    # largest first; spots outside the sweep are computed (§7h)
    spots = [0.05, 1e3, 7.7e4, 4e11]
    text = NOISE_DESIGNS[name] + f"\n[noise]\nspot_frequencies = {spots!r}\n"
    d = _design(text)
    a = freqpair.analyze(d)
    j = a.to_json()["noise"]
    o = so.build(d)
    assert [s["f_hz"] for s in j["spot"]] == spots
    for spot in j["spot"]:
        ref = so.noise(o, spot["f_hz"])
        assert spot["output_v_rthz"] == pytest.approx(math.sqrt(ref["total"]), rel=1e-9)
        assert spot["input_v_rthz"] == pytest.approx(
            math.sqrt(ref["total"]) / abs(ref["gain"]), rel=1e-9)
        rs_part = ref["parts"].get("Rs1", 0.0) + ref["parts"].get("Rs2", 0.0)
        if d.source.resistance == 0:
            assert spot["nf_db"] is None
        else:
            assert spot["nf_db"] == pytest.approx(10 * math.log10(ref["total"] / rs_part),
                                                  abs=1e-8)
        shares = [c["share"] for c in spot["contributors"]]
        assert sum(shares) == pytest.approx(1.0, abs=1e-12)
        assert shares == sorted(shares, reverse=True)
        names = [c["name"] for c in spot["contributors"]]
        assert len(set(names)) == len(names)
        for c in spot["contributors"]:
            assert c["share"] == pytest.approx(ref["parts"][c["name"]] / ref["total"],
                                               rel=1e-8, abs=1e-12)
        # sources left out have no path to the output (share 0)
        for n in set(ref["parts"]) - set(names):
            assert ref["parts"][n] <= 1e-15 * ref["total"], n


@pytest.mark.parametrize("name", ["npn_two_stage_flicker_elements", "pmos_mirror_cascode_tail",
                                  "npn_degeneration_cascode_elements"])
def test_shares_sum_to_one_at_every_frequency(name):
    # oracle: definition (share = part/total, §7h) on a wide grid
    a = freqpair.analyze(_design(NOISE_DESIGNS[name]))
    nc = noise_curves(a.responses, np.logspace(-2, 11, 131))
    np.testing.assert_allclose(nc.shares().sum(axis=1), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(nc.contributions_v2_hz.sum(axis=1), nc.output_v2_hz, rtol=1e-14)


def test_noise_figure_of_a_noiseless_amplifier_is_0_db_and_rises_with_its_noise():
    # oracle: the definition of NF: only R_s noisy → S_out = S_out,Rs → 0 dB; the
    # hand NF of the MOS pair, 10·log10(1 + e_n,amp²/(2·4kT·R_s)), with e_n,amp² the
    # textbook (Razavi ch. 7) 2·4kT·(γ/g_m + 1/(g_m²·R_L)) — exact here (λ = 0, no C)
    d = _mos_clean(cl="0")
    d = freqpair.replace_value(d, "source.resistance", 5e3)
    j = freqpair.analyze(d).to_json()["noise"]["spot"][0]
    gm = math.sqrt(2 * 200e-6 * 20 * 100e-6)
    kt4 = 4 * K * 300
    amp = 2 * kt4 * (2 / 3 / gm + 1 / (gm ** 2 * 20e3))
    assert j["nf_db"] == pytest.approx(10 * math.log10(1 + amp / (2 * kt4 * 5e3)), abs=1e-10)
    # an almost noiseless amplifier (γ_n → 0, only the loads' 62.5 Ω input-referred)
    quiet = freqpair.replace_value(d, "pair.noise_gamma", 1e-12)
    quiet_nf = freqpair.analyze(quiet).to_json()["noise"]["spot"][0]["nf_db"]
    amp = 2 * kt4 * (1e-12 / gm + 1 / (gm ** 2 * 20e3))
    assert quiet_nf == pytest.approx(10 * math.log10(1 + amp / (2 * kt4 * 5e3)), abs=1e-10)
    assert 0 < quiet_nf < 0.06 < j["nf_db"]


def test_noise_band_and_spot_errors_are_one_line_naming_the_key():
    # oracle: DESIGN.md §7h — a reversed or empty band names noise.band; spots > 0
    for bad, key in (("band = [1e5, 10]", "noise.band"), ("band = [10, 10]", "noise.band"),
                     ("spot_frequencies = [0]", "noise.spot_frequencies"),
                     ("spot_frequencies = []", "noise.spot_frequencies")):
        with pytest.raises(FreqpairError) as e:
            _design(NPN_CLEAN + f"\n[noise]\n{bad}\n")
        msg = str(e.value)
        assert "\n" not in msg and msg.startswith(key), msg
