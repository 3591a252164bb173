"""The second gain stage after the pair: pole splitting, RHP zero, nulling resistor."""
import math

import numpy as np
import pytest
import sympy as sp

import freqpair
from freqpair.analysis.loop import loop_model

from loop_designs import clean_two_stage

GM1 = math.sqrt(2 * 200e-6 * 20 * 100e-6)    # square law, I_D = 100 µA, W/L = 20
R1, R2, GM2 = 100e3, 200e3, 5e-3
C_LOAD, C_IN, C2 = 0.2e-12, 0.05e-12, 10e-12
C1 = C_LOAD + C_IN


def _pz(**kw):
    m = loop_model(freqpair.analyze(clean_two_stage(**kw)))
    return np.sort_complex(m.poles_rad_s), np.sort_complex(m.zeros_rad_s)


def _sympy_two_stage(cc, rz):
    """v_out / i_in of the two-stage network by nodal analysis in sympy
    (node 1 = o2 with R1 ∥ C1, Miller branch Rz + Cc to the output)."""
    s = sp.symbols("s")
    v1, vo, vx = sp.symbols("v1 vo vx")
    g1, g2 = sp.Rational(1) / sp.nsimplify(R1), sp.Rational(1) / sp.nsimplify(R2)
    c1, c2, ccs = sp.nsimplify(C1), sp.nsimplify(C2), sp.nsimplify(cc)
    gm2 = sp.nsimplify(GM2)
    eqs = [sp.Eq((g1 + s * c1) * v1 + (v1 - vx) / sp.nsimplify(rz), 1),
           sp.Eq((vx - v1) / sp.nsimplify(rz) + s * ccs * (vx - vo), 0),
           sp.Eq((g2 + s * c2) * vo + gm2 * v1 + s * ccs * (vo - vx), 0)]
    sol = sp.solve(eqs, [v1, vo, vx], dict=True)[0]
    num, den = sp.fraction(sp.together(sol[vo]))
    w0, u = sp.Integer(10**7), sp.symbols("u")     # s = w0·u keeps the coefficients tame
    roots = lambda e: np.sort_complex(np.array(                         # noqa: E731
        [complex(r) * 1e7 for r in sp.Poly(sp.expand(e.subs(s, w0 * u)), u).nroots(
            n=30, maxsteps=500)], dtype=complex))
    return roots(num) if sp.degree(num, s) > 0 else np.array([]), roots(den)


@pytest.mark.parametrize("cc, rz", [(0.5e-12, 50.0), (3e-12, 1e3)])
def test_two_stage_poles_and_zeros_match_sympy_on_the_same_network(cc, rz):
    poles, zeros = _pz(c_c=cc, r_z=rz)
    z_ref, p_ref = _sympy_two_stage(cc, rz)       # oracle: sympy nodal analysis
    assert poles.size == p_ref.size
    assert np.allclose(poles, p_ref, rtol=1e-7)
    finite = z_ref[np.abs(z_ref) < 1e15]
    assert np.allclose(np.sort_complex(zeros[np.abs(zeros) < 1e15]), finite, rtol=1e-7)


@pytest.mark.parametrize("cc", [1e-12, 4e-12])
def test_miller_capacitor_splits_poles_as_textbook_predicts(cc):
    poles, zeros = _pz(c_c=cc)
    p1, p2 = sorted(-poles.real)
    # oracle: two-stage op-amp compensation, p1 ≈ 1/(g_m2 R1 R2 C_c),
    # p2 ≈ g_m2 C_c/(C1 C2 + C_c (C1 + C2)) (Gray & Meyer, Analysis and Design of
    # Analog Integrated Circuits, §9.4, from memory) — approximations, 5 %
    assert p1 == pytest.approx(1 / (GM2 * R1 * R2 * cc), rel=0.05)
    assert p2 == pytest.approx(GM2 * cc / (C1 * C2 + cc * (C1 + C2)), rel=0.05)
    # without C_c the poles sit at 1/(R1 C1) and 1/(R2 C2): splitting moves them apart
    q1, q2 = sorted(-_pz(c_c=0)[0].real)
    assert p1 < q1 and p2 > q2
    # oracle: the right-half-plane zero at +g_m2/C_c (same textbook section, exact here)
    assert zeros.size == 1
    assert zeros[0].real == pytest.approx(GM2 / cc, rel=1e-9)
    assert abs(zeros[0].imag) < 1e-9 * GM2 / cc


def test_nulling_resistor_of_one_over_gm2_removes_the_zero():
    cc = 2e-12
    _, zeros = _pz(c_c=cc, r_z=1 / GM2)
    # oracle: zero at 1/(C_c (1/g_m2 − R_z)) → infinity for R_z = 1/g_m2 (textbook, from memory)
    assert np.all(np.abs(zeros) > 1e4 * GM2 / cc)


def test_larger_nulling_resistor_moves_the_zero_to_the_left_half_plane():
    cc, rz = 2e-12, 2 / GM2
    _, zeros = _pz(c_c=cc, r_z=rz)
    # oracle: z = 1/(C_c (1/g_m2 − R_z)) = −g_m2/C_c for R_z = 2/g_m2 (textbook, from memory)
    assert zeros.size == 1
    assert zeros[0].real == pytest.approx(1 / (cc * (1 / GM2 - rz)), rel=1e-9)


def test_first_stage_and_overall_dc_gains_in_json():
    out = freqpair.analyze(clean_two_stage(c_c=2e-12)).to_json()
    # oracle: single-ended gain of a resistor-loaded pair, ideal tail, r_o = ∞:
    # g_m R_L / 2 with square-law g_m (Gray & Meyer §3.5, from memory); second stage
    # −g_m2 R2 (common-source stage, same book §3.3)
    a1 = GM1 * R1 / 2
    assert out["adm_db"] == pytest.approx(20 * math.log10(a1), abs=1e-9)
    assert out["a_total_db"] == pytest.approx(20 * math.log10(a1 * GM2 * R2), abs=1e-9)


def test_second_stage_inverts():
    a = freqpair.analyze(clean_two_stage(c_c=2e-12))
    # oracle: DESIGN.md §3a — an inverting transconductor after the non-inverting o2
    assert complex(a.dc.a_total[0]).real < 0 < complex(a.dc.adm_se[0]).real
