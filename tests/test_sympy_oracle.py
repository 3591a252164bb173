"""The exact responses against sympy solving the same two-sided network.

Oracle: sympy, exact rational arithmetic. The nodal (KCL) equations are written
here by hand from DESIGN.md §2 — freqpair's stamps are not used — and the
small-signal values are computed here from the §2 formulas with V_T from
scipy.constants (CODATA). At each test frequency the equations are solved
exactly (s = jω with ω the exact rational of the float used by freqpair), so
the only rounding is freqpair's own.
"""
import math

import numpy as np
import pytest
import scipy.constants as sc
import sympy as sp

import freqpair
from freqpair.analysis.result import analyze

REL = 1e-9
# A_cm-dm is |A_dm|/CMRR: float64 rounding of the node voltages (≈ 1e-16 of |A_dm|)
# shows in it magnified by the balanced CMRR. With the balanced CMRR below ≈ 110 dB
# (as in these designs) 1e-9 relative holds; at 123 dB it was measured at 1.6e-9.
FREQS_HZ = np.logspace(0, 10, 11)    # 11 frequencies, 1 Hz … 10 GHz (plus DC)

NPN_MISMATCH = """
name = "oracle: npn pair with load and gm mismatch"
[supply]
positive = 10
negative = -10
[bias]
tail_current = "2 mA"
input_common_mode = 0.5
temperature = 310
[pair]
type = "npn"
beta = 150
early_voltage = 60
vbe = 0.65
cje = "1.5 pF"
transit_time = "0.2 ns"
cjc0 = "0.8 pF"
phi_c = 0.7
m_c = 0.4
ccs = "0.3 pF"
[load]
type = "resistor"
resistance = "3.3 k"
capacitance = "1.2 pF"
[tail]
type = "norton"
resistance = "200 k"
capacitance = "2 pF"
[mismatch]
load = 0.04
gm = -0.02
"""

NPN_RS_RB = """
name = "oracle: npn pair with source and base resistance, f_T given"
[supply]
positive = 12
negative = -12
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 100
early_voltage = 50
base_resistance = 250
ft = "500 MHz"
cjc0 = "1 pF"
ccs = "0.5 pF"
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
"""

NMOS_MISMATCH = """
name = "oracle: nmos pair, Norton tail, gm mismatch"
[supply]
positive = 5
negative = 0
[bias]
tail_current = "400 uA"
input_common_mode = 2.5
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "40 um"
length = "1 um"
threshold = 0.6
lambda = 0.04
cox = "4 mF/m2"
overlap_cap = "0.25 nF/m"
cdb = "40 fF"
[load]
type = "resistor"
resistance = "8 k"
capacitance = "200 fF"
[tail]
type = "norton"
resistance = "150 k"
capacitance = "600 fF"
[source]
resistance = "500"
[mismatch]
gm = 0.03
"""


def q(x):
    """Exact rational of a float (no rounding)."""
    return sp.Rational(float(x))


def device_values(d):
    """Per-side small-signal values from DESIGN.md §2 formulas (not freqpair's devices)."""
    p, i_tail = d.pair, d.bias.tail_current
    if p.type == "npn":
        ic = p.beta / (p.beta + 1) * i_tail / 2
        gm = ic / (sc.k * d.bias.temperature / sc.e)
        vc = d.supply.positive - ic * d.load.resistance
        vcb = vc - d.bias.input_common_mode
        cmu = p.cjc0 / (1 + vcb / p.phi_c) ** p.m_c
        cpi = gm / (2 * math.pi * p.ft) - cmu if p.ft else p.cje + (p.transit_time or 0) * gm
        return dict(gm=gm, rpi=p.beta / gm, ro=p.early_voltage / ic, cpi=cpi, cmu=cmu,
                    cout=p.ccs, rb=p.base_resistance)
    i_d = i_tail / 2
    beta_mos = p.mobility_cox * p.width / p.length
    return dict(gm=math.sqrt(2 * beta_mos * i_d), rpi=None, ro=1 / (p.lambda_ * i_d),
                cpi=2 / 3 * p.width * p.length * p.cox + p.width * p.overlap_cap,
                cmu=p.width * p.overlap_cap, cout=p.cdb, rb=0.0)


def sympy_gains(d, s):
    """(A_dm, A_dm_se, A_cm_se, A_cm_dm) at complex frequency s (sympy number)."""
    v = device_values(d)
    dl, dg = d.mismatch.load, d.mismatch.gm
    rs, rb = d.source.resistance, v["rb"]
    # unknowns: b1, b2 (after R_s), x1, x2 (inner base/gate after r_b), o1, o2, t
    b1, b2, x1, x2, o1, o2, t = sp.symbols("b1 b2 x1 x2 o1 o2 t")
    vin1, vin2 = sp.symbols("vin1 vin2")
    y_pi = (1 / q(v["rpi"]) if v["rpi"] else 0) + s * q(v["cpi"])
    y_mu = s * q(v["cmu"])
    g_o = 1 / q(v["ro"])
    y_tail = 1 / q(d.tail.resistance) + s * q(d.tail.capacitance)
    eqs = []
    dev_current_into_tail = 0
    for b, x, o, vin, side in ((b1, x1, o1, vin1, 1), (b2, x2, o2, vin2, 2)):
        half = sp.Rational(1, 2) * (1 if side == 1 else -1)
        gm = q(v["gm"]) * (1 + half * q(dg))
        rl = q(d.load.resistance) * (1 + half * q(dl))
        # KCL, currents leaving each node
        into_device = (x - t) * y_pi + (x - o) * y_mu    # leaving the inner base/gate
        if not rs:
            eqs.append(b - vin)                          # ideal source sets node b
        elif rb:
            eqs.append((b - vin) / q(rs) + (b - x) / q(rb))
        else:                                            # b and x are one node
            eqs.append((b - vin) / q(rs) + into_device)
        eqs.append((x - b) / q(rb) + into_device if rb else x - b)
        eqs.append(o / rl + o * s * (q(d.load.capacitance) + q(v["cout"]))
                   + (o - t) * g_o + (o - x) * y_mu + gm * (x - t))
        dev_current_into_tail += (x - t) * y_pi + (o - t) * g_o + gm * (x - t)
    eqs.append(t * y_tail - dev_current_into_tail)
    out = {}
    for kind, (u1, u2) in (("dm", (sp.Rational(1, 2), -sp.Rational(1, 2))),
                           ("cm", (1, 1))):
        sol = sp.solve([e.subs({vin1: u1, vin2: u2}) for e in eqs],
                       [b1, b2, x1, x2, o1, o2, t], dict=True, rational=True)[0]
        out[kind] = (complex(sp.N(sol[o1], 30)), complex(sp.N(sol[o2], 30)))
    (d1, d2), (c1, c2) = out["dm"], out["cm"]
    return np.array([d1 - d2, d2, c2, c1 - c2])


def freqpair_gains(result, f_hz):
    r = result.responses.at(f_hz) if f_hz is not None else result.responses.dc()
    return np.array([r.adm, r.adm_se, r.acm_se, r.acm_dm])


@pytest.mark.parametrize("text", [NPN_MISMATCH, NPN_RS_RB, NMOS_MISMATCH],
                         ids=["npn_mismatch", "npn_rs_rb_ft", "nmos_mismatch"])
def test_gains_match_sympy_solution_of_the_same_network(text):
    # oracle: sympy — exact solution of hand-written KCL equations (DESIGN.md §2)
    d = freqpair.design_from_text(text)
    result = analyze(d)
    ours = freqpair_gains(result, FREQS_HZ)          # (4, n_f)
    ours_dc = freqpair_gains(result, None)[:, 0]
    omegas = 2 * np.pi * FREQS_HZ                    # the floats freqpair used
    for k, w in enumerate(omegas):
        ref = sympy_gains(d, sp.I * q(w))
        np.testing.assert_allclose(ours[:, k], ref, rtol=REL, atol=0,
                                   err_msg=f"f = {FREQS_HZ[k]:g} Hz")
    np.testing.assert_allclose(ours_dc, sympy_gains(d, sp.Integer(0)), rtol=REL, atol=0)


@pytest.mark.parametrize("text", [NPN_MISMATCH, NPN_RS_RB, NMOS_MISMATCH],
                         ids=["npn_mismatch", "npn_rs_rb_ft", "nmos_mismatch"])
def test_operating_point_matches_the_design_md_formulas(text):
    # oracle: DESIGN.md §2 formulas evaluated here, V_T from scipy.constants (CODATA)
    d = freqpair.design_from_text(text)
    op = analyze(d).operating_point.small_signal
    v = device_values(d)
    assert op.gm == pytest.approx(v["gm"], rel=1e-13)
    assert op.ro == pytest.approx(v["ro"], rel=1e-13)
    assert op.c_in == pytest.approx(v["cpi"], rel=1e-13)
    assert op.c_fb == pytest.approx(v["cmu"], rel=1e-13)
    if v["rpi"] is not None:
        assert op.r_in == pytest.approx(v["rpi"], rel=1e-13)
