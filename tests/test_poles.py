"""Exact poles and zeros, the rebuilt rational response, python-control hand-off."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest
import sympy as sp

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.keys import replace_value
from freqpair.design.errors import FreqpairError
from freqpair.analysis.pole_table import pole_zero_table
from freqpair.analysis.poles import response_zpk

from conftest import EXAMPLES, ROOT

GAINS = ["adm", "adm_se", "acm_se", "acm_dm"]
F_CHECK = np.logspace(-3, 11, 281)          # 1 mHz … 100 GHz


def _all_designs():
    designs = [freqpair.load_design(p) for p in EXAMPLES]
    designs.append(freqpair.design_from_text(BUILTIN_EXAMPLE))
    return designs


def _rebuild_error(a, zpk, name):
    """Largest relative gap between the zpk and the direct solve, counting only the part
    above the zero-gain level 1e-12·|A_dm(0)| (DESIGN.md §2: below it a gain is zero to
    rounding; the direct solve's own rounding sits there)."""
    direct = a.responses.gain(name, F_CHECK)
    floor = 1e-12 * abs(complex(a.dc.get(a.primary)[0]))
    rebuilt = zpk.evaluate(F_CHECK)
    gap = np.maximum(np.abs(rebuilt - direct) - floor, 0.0)
    return float(np.max(gap / np.maximum(np.abs(direct), floor)))


def test_rebuilt_response_is_right_where_the_gain_is_tiny():
    import mpmath
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml"))
    zpk = response_zpk(a, "acm_se")
    sol = a.responses.solver
    l, kind = a.responses.output_row("acm_se")
    b = a.responses.excitation(kind)
    mpmath.mp.dps = 40
    for f in (1e-3, 1.0, 1e3):
        A = (mpmath.matrix(sol.G.tolist())
             + mpmath.mpc(0, 2 * mpmath.pi * f) * mpmath.matrix(sol.C.tolist()))
        x = mpmath.lu_solve(A, mpmath.matrix(b.tolist()))
        exact = complex(mpmath.fsum(l[i] * x[i] for i in range(len(l))))
        # oracle: mpmath, 40-digit solve of the same G + sC (the double solve is rounding here)
        assert abs(zpk.evaluate([f])[0] - exact) <= 1e-9 * abs(exact)


# ------------------------------------------------------------ sympy oracle

def _sympy_adm_poles(a):
    """Poles of A_dm from nodal equations written here in sympy (not freqpair's stamps):
    per side the series R_s + r_b into the internal base x_k, r_pi ∥ C_pi base–tail,
    C_mu base–output, r_o and g_m·v_be output–tail, R_L ∥ (C_L + C_cs) output–ground;
    R_tail ∥ C_tail tail–ground. Values are exact rationals of the design's values."""
    d = a.design
    ss = a.operating_point.small_signal
    R = sp.Rational
    s = sp.symbols("s")
    x1, x2, o1, o2, t = sp.symbols("x1 x2 o1 o2 t")
    vin = {1: R(1, 2), 2: R(-1, 2)}
    x = {1: x1, 2: x2}
    o = {1: o1, 2: o2}
    dl, dg = d.mismatch.load, d.mismatch.gm
    side = {1: 1, 2: -1}
    gpi = R(1) / R(ss.r_in)
    gs = R(1) / (R(d.source.resistance) + R(ss.rb))
    go = R(1) / R(ss.ro)
    cpi, cmu, ccs = R(ss.c_in), R(ss.c_fb), R(ss.c_out)
    eqs = []
    t_sum = t * (1 / R(d.tail.resistance) + s * R(d.tail.capacitance))
    for k in (1, 2):
        gm = R(ss.gm) * (1 + side[k] * R(dg) / 2)
        rl = R(d.load.resistance) * (1 + side[k] * R(dl) / 2)
        vbe = x[k] - t
        eqs.append((x[k] - vin[k]) * gs + vbe * (gpi + s * cpi) + (x[k] - o[k]) * s * cmu)
        eqs.append(o[k] * (1 / rl + s * (R(d.load.capacitance) + ccs))
                   + (o[k] - x[k]) * s * cmu + (o[k] - t) * go + gm * vbe)
        t_sum += -vbe * (gpi + s * cpi) + (t - o[k]) * go - gm * vbe
    eqs.append(t_sum)
    sol = sp.solve(eqs, [x1, x2, o1, o2, t], dict=True)[0]
    h = sp.cancel(sp.together(sol[o1] - sol[o2]))
    num, den = sp.fraction(h)
    roots = sp.Poly(den, s).nroots(n=30, maxsteps=200)
    return np.array([complex(r) for r in roots]), sp.Poly(num, s).degree(), sp.Poly(den, s).degree()


@pytest.mark.parametrize("stem", ["npn_resistor_rc_tail", "npn_mismatched_pair"])
def test_adm_poles_match_roots_of_sympy_denominator(stem):
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / f"{stem}.toml"))
    expected, n_num, n_den = _sympy_adm_poles(a)
    zpk = response_zpk(a, "adm")
    got = zpk.poles_rad_s
    # oracle: sympy, roots of the reduced (common factors cancelled) denominator
    assert got.size == expected.size == n_den
    assert zpk.zeros_rad_s.size == n_num
    for p in expected:
        assert np.min(np.abs(got - p)) <= 1e-6 * abs(p)


def test_matched_pair_reports_common_mode_modes_as_cancelled_pairs():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml"))
    zpk = response_zpk(a, "adm")
    natural = a.responses.solver.poles()
    # oracle: common practice (a symmetric network splits into DM and CM half circuits;
    # the CM modes are invisible in v_od): every mode is either kept or a cancelled pair
    assert len(zpk.cancelled_rad_s) > 0
    assert zpk.poles_rad_s.size + len(zpk.cancelled_rad_s) == natural.size
    for pole, zero in zpk.cancelled_rad_s:
        assert abs(pole - zero) <= 1e-9 * abs(pole)
        assert np.min(np.abs(natural - pole)) <= 1e-9 * abs(pole)


def test_mismatched_pair_keeps_its_doublets_and_flags_them():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_mismatched_pair.toml"))
    zpk = response_zpk(a, "adm")
    rows = pole_zero_table(a, "adm")
    # oracle: common practice (mismatch couples the CM modes into v_od: near, not exact,
    # pole-zero pairs remain and must stay in the response)
    assert zpk.cancelled_rad_s == ()
    assert any(r.note and r.note.startswith("doublet") for r in rows)


@pytest.mark.parametrize("index", range(len(EXAMPLES) + 1))
def test_rebuilt_response_matches_direct_solve_from_1_mhz_to_100_ghz(index):
    a = freqpair.analyze(_all_designs()[index])
    for name in GAINS:
        if a.dc.get(name) is None:
            continue
        zpk = response_zpk(a, name)
        # oracle: the network's own direct solve (independent QZ path) at each frequency
        assert _rebuild_error(a, zpk, name) <= 1e-6, name


def test_python_control_transfer_function_matches_direct_solve():
    import control
    for design in _all_designs():
        a = freqpair.analyze(design)
        zpk = response_zpk(a)
        tf = zpk.transfer_function()
        assert isinstance(tf, control.TransferFunction)
        w = 2 * np.pi * F_CHECK
        resp = control.frequency_response(tf, w)
        h = np.asarray(resp.complex).ravel()
        direct = a.responses.gain(a.primary, F_CHECK)
        # oracle: python-control's own evaluation of the same transfer function
        assert np.max(np.abs(h - direct) / np.abs(direct)) <= 1e-6
        np.testing.assert_allclose(np.sort_complex(control.poles(tf)),
                                   np.sort_complex(zpk.poles_rad_s), rtol=1e-6)


def test_poles_spanning_ten_decades_still_rebuild():
    d = freqpair.load_design(ROOT / "examples" / "npn_mismatched_pair.toml")
    d = replace_value(d, "load.capacitance", "10 mF")    # a millihertz output pole
    d = replace_value(d, "tail.capacitance", "10 uF")
    a = freqpair.analyze(d)
    mags = np.abs(a.responses.solver.poles())
    assert mags.max() / mags.min() >= 1e10
    for name in ("adm", "acm_se"):
        zpk = response_zpk(a, name)
        # oracle: the direct solve of the network
        assert _rebuild_error(a, zpk, name) <= 1e-6, name


def test_zero_at_origin_is_labelled_and_zero_gain_is_exactly_zero():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml"))
    cm = response_zpk(a, "acm_se")
    # oracle: textbook (Razavi, Design of Analog CMOS ICs, §4.2, from memory): a matched
    # MOS pair with an ideal tail has no common-mode gain at DC
    assert np.any(cm.zeros_rad_s == 0)
    rows = pole_zero_table(a, "acm_se")
    assert any(r.kind == "zero" and r.f_hz == 0 and "origin" in r.note for r in rows)
    cd = response_zpk(a, "acm_dm")
    assert cd.identically_zero and cd.gain == 0 and cd.poles_rad_s.size == 0
    assert np.all(cd.evaluate(F_CHECK) == 0)


def test_zeros_at_infinity_count_the_high_frequency_rolloff():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml"))
    _, n_num, n_den = _sympy_adm_poles(a)
    zpk = response_zpk(a, "adm")
    # oracle: sympy (degree of denominator minus numerator of the reduced A_dm)
    assert zpk.zeros_at_infinity == n_den - n_num


def test_complex_pairs_have_q_and_rows_are_finite():
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    rows = pole_zero_table(a)
    pair = [r for r in rows if r.is_pair]
    assert pair
    for r in pair:
        # oracle: textbook definition Q = |s|/(2·|Re s|) for a second-order section
        assert r.q == pytest.approx(r.f_hz / (2 * abs(r.re_hz)), rel=1e-12)
    for r in rows:
        assert all(math.isfinite(v) for v in (r.f_hz, r.re_hz, r.im_hz))
        assert all(math.isfinite(s) for _, s in r.contributors)


def test_unknown_or_missing_response_is_a_one_line_error():
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    with pytest.raises(FreqpairError, match="bogus") as exc:
        response_zpk(a, "bogus")
    assert "\n" not in str(exc.value)
    with pytest.raises(FreqpairError, match="a_total"):
        response_zpk(a, "a_total")        # no second stage: not defined


def test_cli_json_gains_poles_zeros_and_hand_keys():
    path = ROOT / "examples" / "npn_mismatched_pair.toml"
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(path), "--json"],
                         capture_output=True, text=True, cwd=ROOT, check=True)
    data = json.loads(out.stdout)
    a = freqpair.analyze(freqpair.load_design(path))
    zpk = response_zpk(a)
    for key in ("adm_db", "f3db_hz", "ugf_hz", "acm_se_db", "cmrr_se_db", "cmrr_db",
                "cmrr_corner_hz", "tail", "operating_point"):
        assert key in data
    # oracle: common practice (s/2π in Hz, signs kept, one entry per root)
    got = np.array([p["re"] + 1j * p["im"] for p in data["poles_hz"]])
    np.testing.assert_allclose(np.sort_complex(got), np.sort_complex(zpk.poles_rad_s / 2 / np.pi),
                               rtol=1e-12)
    assert len(data["zeros_hz"]) == zpk.zeros_rad_s.size
    assert all(v["re"] < 0 for v in data["poles_hz"])
    for row in data["hand"].values():
        assert set(row) == {"exact", "approx", "error_pct"}
        assert all(v is None or math.isfinite(v) for v in row.values())


def test_cli_text_shows_poles_zeros_and_hand_table():
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", "--example"],
                         capture_output=True, text=True, cwd=ROOT, check=True).stdout
    # oracle: common practice (the report names what it shows)
    assert "Poles and zeros" in out and "set by:" in out
    assert "Hand analysis beside the exact answer" in out and "Miller" in out
    assert " nan" not in out.lower() and "inf " not in out.lower()
