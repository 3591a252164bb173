"""Sympy oracle: the nmos example with pmos mirror load and cascode tail (internal node)."""
import math
from pathlib import Path

import pytest
import sympy as sp

from freqpair.analysis.result import analyze
from freqpair.design.files import load_design

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "nmos_mirror_load_cascode_tail.toml"


def _mos(kp, w, l, lam, cov, cdb, i):
    """Square-law values (DESIGN.md §2), C_ox = 4.6 mF/m² in all three devices."""
    return dict(gm=math.sqrt(2 * kp * w / l * i), ro=1 / (lam * i),
                cgs=2 / 3 * w * l * 4.6e-3 + w * cov, cgd=w * cov, cdb=cdb)


def _o2(s_value, v1, v2):
    p = _mos(200e-6, 40e-6, 1e-6, 0.05, 0.3e-9, 15e-15, 100e-6)
    m = _mos(80e-6, 40e-6, 1e-6, 0.06, 0.3e-9, 20e-15, 100e-6)
    q = _mos(200e-6, 80e-6, 2e-6, 0.03, 0.3e-9, 30e-15, 200e-6)
    F = lambda x: sp.Float(x, 30)                  # noqa: E731
    s = sp.I * F(s_value.imag)
    g1, g2, o1, o2, t, x = sp.symbols("g1 g2 o1 o2 t x")
    eqs = []
    for g, v, o in ((g1, v1, o1), (g2, v2, o2)):
        eqs.append((g - v) / F(2e3) + (g - t) * s * F(p["cgs"]) + (g - o) * s * F(p["cgd"]))
    i1 = F(p["gm"]) * (g1 - t) + (o1 - t) / F(p["ro"])     # drain → source
    i2 = F(p["gm"]) * (g2 - t) + (o2 - t) / F(p["ro"])
    # pmos mirror, sources at AC ground: diode device on o1, output device drain o2
    eqs.append((o1 - g1) * s * F(p["cgd"]) + i1 + o1 * s * F(p["cdb"])
               + F(m["gm"]) * o1 + o1 / F(m["ro"]) + o1 * s * (2 * F(m["cgs"]) + F(m["cdb"]))
               + (o1 - o2) * s * F(m["cgd"]))
    eqs.append((o2 - g2) * s * F(p["cgd"]) + i2 + o2 * s * F(p["cdb"])
               + F(m["gm"]) * o1 + o2 / F(m["ro"]) + o2 * s * F(m["cdb"])
               + (o2 - o1) * s * F(m["cgd"]) + o2 * s * F(0.5e-12))
    # cascode tail: upper device drain t, source x, gate AC ground; lower device drain x
    i_up = F(q["gm"]) * (0 - x) + (t - x) / F(q["ro"])
    eqs.append((t - g1) * s * F(p["cgs"]) + (t - g2) * s * F(p["cgs"]) - i1 - i2 + i_up
               + t * s * (F(q["cgd"]) + F(q["cdb"]) + F(0.4e-12)))
    eqs.append(-i_up + x / F(q["ro"]) + x * s * (F(q["cgs"]) + F(q["cgd"]) + F(q["cdb"])))
    A, b = sp.linear_eq_to_matrix(eqs, [g1, g2, o1, o2, t, x])
    return complex(sp.N(A.LUsolve(b)[3], 20))


@pytest.mark.parametrize("f_hz", [1e2, 1e5, 1e8])
def test_cascode_tail_example_matches_sympy_nodal_solution(f_hz):
    res = analyze(load_design(EXAMPLE))
    s_value = 2j * math.pi * f_hz
    # sympy on the same network (equations written independently of freqpair's stamps)
    assert complex(res.responses.gain("adm_se", f_hz)[0]) == pytest.approx(
        _o2(s_value, sp.Rational(1, 2), -sp.Rational(1, 2)), rel=1e-8)
    assert complex(res.responses.gain("acm_se", f_hz)[0]) == pytest.approx(
        _o2(s_value, 1, 1), rel=1e-8)
