"""Sympy oracle: the full mirror-loaded bipolar example, nodal equations written here."""
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc
import sympy as sp

from freqpair.analysis.result import analyze
from freqpair.design.files import load_design

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "npn_mirror_load_simple_mirror_tail.toml"


def _values():
    """Device values of the example from its keys (DESIGN.md §2/§3a formulas)."""
    vt = sc.k * 300 / sc.e                       # CODATA
    ic = 150 / 151 * 40e-6 / 2                   # α·I_tail/2
    v_c = 5 - 0.65                               # mirror diode drop below the rail
    v_t = 0 - 0.65                               # tail node
    gm = ic / vt
    pair = dict(gm=gm, rpi=150 / gm, ro=60 / ic, cpi=0.5e-12 + 0.4e-9 * gm,
                cmu=0.3e-12 / (1 + (v_c - 0) / 0.75) ** 0.33, ccs=0.8e-12, rser=1e3 + 300)
    gm3 = ic / vt
    cmu3 = 0.4e-12                               # V_CB = 0 (DESIGN.md §3a)
    mirror = dict(gm=gm3, rpi=50 / gm3, ro=40 / ic, cpi=gm3 / (2 * math.pi * 5e6) - cmu3,
                  cmu=cmu3, ccs=1e-12)
    v_cb_tail = v_t - (-5 + 0.65)
    tail = dict(ro=70 / 40e-6, c=0.3e-12 / (1 + v_cb_tail / 0.75) ** 0.33 + 0.8e-12 + 0.5e-12)
    return pair, mirror, tail


def _sympy_gains(s_value, v1, v2):
    p, m, t = _values()
    F = lambda x: sp.Float(x, 30)                  # noqa: E731
    s = sp.Float(0, 30) if s_value == 0 else sp.Float(0, 30) + sp.I * F(s_value.imag)
    x1, x2, o1, o2, vt_ = sp.symbols("x1 x2 o1 o2 t")
    ypi = 1 / F(p["rpi"]) + s * F(p["cpi"])
    eqs = []
    for x, v, o in ((x1, v1, o1), (x2, v2, o2)):
        eqs.append((x - v) / F(p["rser"]) + (x - vt_) * ypi + (x - o) * s * F(p["cmu"]))
    # pair collector currents into the collector: g_m·v_be + (v_c − v_e)/r_o
    ic1 = F(p["gm"]) * (x1 - vt_) + (o1 - vt_) / F(p["ro"])
    ic2 = F(p["gm"]) * (x2 - vt_) + (o2 - vt_) / F(p["ro"])
    # mirror: diode device (o1) and output device (base o1, collector o2), emitters at AC ground
    y_m_in = 2 * (1 / F(m["rpi"]) + s * F(m["cpi"]))
    eqs.append((o1 - x1) * s * F(p["cmu"]) + ic1 + o1 * s * F(p["ccs"])
               + F(m["gm"]) * o1 + o1 / F(m["ro"]) + o1 * s * F(m["ccs"]) + o1 * y_m_in
               + (o1 - o2) * s * F(m["cmu"]))
    eqs.append((o2 - x2) * s * F(p["cmu"]) + ic2 + o2 * s * F(p["ccs"])
               + F(m["gm"]) * o1 + o2 / F(m["ro"]) + o2 * s * F(m["ccs"])
               + (o2 - o1) * s * F(m["cmu"]) + o2 * s * F(2e-12))
    # tail node: pair emitter currents leave through r_o and C of the tail device
    eqs.append((vt_ - x1) * ypi + (vt_ - x2) * ypi - ic1 - ic2
               + vt_ / F(t["ro"]) + vt_ * s * F(t["c"]))
    A, b = sp.linear_eq_to_matrix(eqs, [x1, x2, o1, o2, vt_])
    sol = A.LUsolve(b)
    return complex(sp.N(sol[3], 20))


@pytest.mark.parametrize("f_hz", [0.0, 1e3, 3e5, 2e7])
def test_mirror_loaded_example_matches_sympy_nodal_solution(f_hz):
    res = analyze(load_design(EXAMPLE))
    s_value = 2j * math.pi * f_hz
    adm = _sympy_gains(s_value, sp.Rational(1, 2), -sp.Rational(1, 2))
    acm = _sympy_gains(s_value, 1, 1)
    if f_hz == 0:
        got_dm, got_cm = complex(res.dc.adm_se[0]), complex(res.dc.acm_se[0])
    else:
        got_dm = complex(res.responses.gain("adm_se", f_hz)[0])
        got_cm = complex(res.responses.gain("acm_se", f_hz)[0])
    # sympy on the same network (equations written independently of freqpair's stamps)
    assert got_dm == pytest.approx(adm, rel=1e-8)
    assert got_cm == pytest.approx(acm, rel=1e-8)
    if f_hz == 0:
        assert res.cmrr_se_db == pytest.approx(20 * np.log10(abs(adm) / abs(acm)), abs=1e-7)
