"""Numerical extremes: 1 mHz … 1 THz, 1 aF … 1 µF, tails to 1 TΩ, poles over 12 decades.

The reference is mpmath at 50 digits. For the npn pair with resistor loads and
a Norton tail the nodal equations are written out by hand below (independent
of freqpair's stamping); for other topologies mpmath solves freqpair's own
G + sC (checks the numerics of the solve, not the stamping).
"""
import math

import mpmath
import numpy as np
import pytest
import scipy.constants as sc

from freqpair.design.schema import parse_design
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.stage import build_stage

mpmath.mp.dps = 50
F_HZ = np.logspace(-3, 12, 16)          # 1 mHz … 1 THz


def design(cap, r_tail, c_tail, rs=600.0, delta_load=0.01, delta_gm=-0.005, i_tail=1e-3,
           tau=0.25e-9, c_load=None):
    return {"supply": {"positive": 15, "negative": -15},
            "bias": {"tail_current": i_tail, "temperature": 300},
            "pair": {"type": "npn", "beta": 150, "early_voltage": 100, "vbe": 0.7,
                     "cje": cap, "transit_time": tau, "cjc0": cap, "phi_c": 0.75,
                     "m_c": 0.33, "ccs": cap},
            "load": {"type": "resistor", "resistance": 4.7e3,
                     "capacitance": cap if c_load is None else c_load},
            "tail": {"type": "norton", "resistance": r_tail, "capacitance": c_tail},
            "source": {"resistance": rs},
            "mismatch": {"load": delta_load, "gm": delta_gm}}


def hand_nodal(d, f_hz):
    """A_dm, A_cm-dm, A_dm,se, A_cm,se at one frequency, from KCL written by hand.

    Hybrid-pi per DESIGN.md §2 (g_m = I_C/V_T with CODATA k, q; r_pi = β/g_m;
    r_o = V_A/I_C; C_pi = C_je + τ_F·g_m; C_mu = C_jc0/(1 + V_CB/φ)^m), inputs as
    Norton sources through R_s, unknowns v_b1, v_b2, v_o1, v_o2, v_t.
    """
    mp = mpmath.mpf
    p, ld, tl = d["pair"], d["load"], d["tail"]
    beta = mp(p["beta"])
    ic = beta / (beta + 1) * mp(d["bias"]["tail_current"]) / 2
    vt = mp(sc.k) * mp(d["bias"]["temperature"]) / mp(sc.e)
    gm = ic / vt
    rpi, ro = beta / gm, mp(p["early_voltage"]) / ic
    cpi = mp(p["cje"]) + mp(p["transit_time"]) * gm
    vcb = mp(d["supply"]["positive"]) - ic * mp(ld["resistance"])
    cmu = mp(p["cjc0"]) / (1 + vcb / mp(p["phi_c"])) ** mp(p["m_c"])
    s = 2j * mpmath.pi * mp(f_hz)
    gs = 1 / mp(d["source"]["resistance"])
    ypi, ymu = 1 / rpi + s * cpi, s * cmu
    yo = 1 / ro
    yt = 1 / mp(tl["resistance"]) + s * mp(tl["capacitance"])
    dl, dg = mp(d["mismatch"]["load"]), mp(d["mismatch"]["gm"])
    rl = [mp(ld["resistance"]) * (1 + dl / 2), mp(ld["resistance"]) * (1 - dl / 2)]
    g = [gm * (1 + dg / 2), gm * (1 - dg / 2)]
    yl = [1 / rl[k] + s * (mp(ld["capacitance"]) + mp(p["ccs"])) for k in range(2)]
    # unknown order: b1 b2 o1 o2 t
    A = mpmath.matrix(5, 5)
    for k in range(2):
        b, o, t = k, 2 + k, 4
        A[b, b] += gs + ypi + ymu
        A[b, t] -= ypi
        A[b, o] -= ymu
        A[o, o] += yl[k] + ymu + yo
        A[o, b] += g[k] - ymu
        A[o, t] -= yo + g[k]
        A[t, t] += ypi + yo + g[k]
        A[t, b] -= ypi + g[k]
        A[t, o] -= yo
    A[4, 4] += yt

    def solve(v1, v2):
        rhs = mpmath.matrix([gs * v1, gs * v2, 0, 0, 0])
        x = mpmath.lu_solve(A, rhs)
        return x[2], x[3]

    o1d, o2d = solve(mp(1) / 2, -mp(1) / 2)
    o1c, o2c = solve(mp(1), mp(1))
    return {"adm": complex(o1d - o2d), "acm_dm": complex(o1c - o2c), "adm_se": complex(o2d),
            "acm_se": complex(o2c), "acm_cm": complex((o1c + o2c) / 2)}


EXTREMES = [
    # (label, capacitance of every junction/load, R_tail, C_tail)
    ("1 aF everywhere, 1 TΩ tail", 1e-18, 1e12, 1e-18),
    ("1 µF everywhere, 1 TΩ tail", 1e-6, 1e12, 1e-6),
    ("poles over 12 decades: 1 aF junctions, 1 µF load", 1e-18, 1e9, 1e-18),
    ("1 pF junctions, 1 TΩ ∥ 1 aF tail", 1e-12, 1e12, 1e-18),
]


def _close(got, want, ref):
    """1e-6 relative, or 1e-12 of the larger of |A_dm|, |A_cm-cm| at that frequency: a
    balanced difference (A_cm-dm) is resolved to 1e-12 of the signal each output
    carries, the same floor as DESIGN.md §2's zero-gain rule."""
    floor = 1e-12 * max(abs(ref["adm"]), abs(ref["acm_cm"]))
    return abs(got - want) <= max(1e-6 * abs(want), floor)


def _extreme(label):
    cap, r_tail, c_tail = {e[0]: e[1:] for e in EXTREMES}[label]
    if label.startswith("poles over 12 decades"):
        return design(cap, r_tail, c_tail, tau=0.0, c_load=1e-6)
    return design(cap, r_tail, c_tail)


@pytest.mark.parametrize("label", [e[0] for e in EXTREMES])
def test_extreme_designs_match_a_hand_written_50_digit_nodal_solve(label):
    # oracle: mpmath (50 digits) on KCL written by hand above (independent stamping)
    d = _extreme(label)
    resp = StageResponses(build_stage(parse_design(d)))
    got = resp.at(F_HZ)
    for i, f in enumerate(F_HZ):
        ref = hand_nodal(d, f)
        for name, want in ref.items():
            assert _close(got.get(name)[i], want, ref), (name, f, got.get(name)[i], want)
    dc = resp.dc()
    ref0 = hand_nodal(d, 0.0)
    for name, want in ref0.items():
        assert _close(dc.get(name)[0], want, ref0), name


def test_the_extreme_cases_really_spread_poles_over_twelve_decades():
    # oracle: common practice (the test above must cover what it claims)
    d = _extreme("poles over 12 decades: 1 aF junctions, 1 µF load")
    poles = np.abs(StageResponses(build_stage(parse_design(d))).solver.poles())
    assert poles.max() / poles.min() > 1e12


def mp_solve_own_matrices(solver, f_hz, b, l):
    """l·(G + sC)⁻¹·b at 50 digits from freqpair's own G, C."""
    G, C = solver.G, solver.C
    n = G.shape[0]
    s = 2j * mpmath.pi * mpmath.mpf(f_hz)
    A = mpmath.matrix(n, n)
    for i in range(n):
        for j in range(n):
            A[i, j] = mpmath.mpf(G[i, j]) + s * mpmath.mpf(C[i, j])
    x = mpmath.lu_solve(A, mpmath.matrix([mpmath.mpf(v) for v in b]))
    return complex(sum(mpmath.mpf(l[i]) * x[i] for i in range(n)))


def _variant(kind):
    d = design(1e-15, 1e12, 1e-18, i_tail=1e-6)
    dev = {"type": "npn", "beta": 120, "early_voltage": 1000, "cjc0": 1e-18, "ccs": 1e-6}
    if kind == "mirror load, cascode tail":
        d["load"] = {"type": "mirror", "capacitance": 1e-6,
                     "device": {"type": "pnp", "beta": 80, "early_voltage": 45,
                                "cjc0": 1e-18, "cje": 1e-6}}
        d["tail"] = {"type": "cascode", "device": dev, "extra_capacitance": 1e-18}
    elif kind == "second stage, 12 decades of capacitance":
        d["second_stage"] = {"gm": 4e-3, "output_resistance": 1.5e5, "input_capacitance": 1e-18,
                             "load_capacitance": 1e-6, "miller_capacitance": 3e-12,
                             "nulling_resistance": 1e3}
    return d


@pytest.mark.parametrize("kind", ["mirror load, cascode tail",
                                  "second stage, 12 decades of capacitance"])
def test_the_solve_matches_50_digit_arithmetic_on_the_same_matrices(kind):
    # oracle: mpmath (50 digits) solving freqpair's own G + sC (numerics of the solve)
    resp = StageResponses(build_stage(parse_design(_variant(kind))))
    name = resp.primary
    l, exc = resp.output_row(name)
    b = resp.excitation(exc)
    got = resp.gain(name, F_HZ)
    for i, f in enumerate(F_HZ[::3]):
        want = mp_solve_own_matrices(resp.solver, f, b, l)
        assert abs(got[3 * i] - want) <= 1e-6 * abs(want), f
