"""Normalized sensitivities d ln|s| / d ln x of poles and zeros to every element."""
import numpy as np
import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.keys import replace_value
from freqpair.circuit.network import with_element_scaled
from freqpair.analysis.poles import _augmented, _refine, response_zpk
from freqpair.analysis.pole_table import pole_zero_table
from freqpair.analysis.sensitivity import pole_sensitivities

from conftest import ROOT

H = 1e-4   # step in ln x: truncation ~(S·H)², root rounding ~1e-11/H


def _fd(a, roots_of, root, k, h):
    """Central finite difference of ln|root| in ln x for element k, step h in ln x."""
    net = a.stage.network
    vals = []
    for factor in (np.exp(h), np.exp(-h)):
        r = roots_of(with_element_scaled(net, k, factor))
        vals.append(np.log(abs(r[np.argmin(np.abs(r - root))])))
    return (vals[0] - vals[1]) / (2 * h)


def _check(a, kind, name, roots_of):
    sens = pole_sensitivities(a, name, kind)
    assert sens and all(s is not None for s in sens)
    for rs in sens:
        for k, e in enumerate(rs.elements):
            h = H / max(1.0, abs(e.d_ln_mag))     # keep the truncation error ~ (S·h)² small
            fd = _fd(a, roots_of, rs.root_rad_s, k, h)
            # oracle: central finite differences of the exact root (abs: root rounding / h)
            assert e.d_ln_mag == pytest.approx(fd, rel=1e-4, abs=1e-6), (rs.root_rad_s, e.label)


def test_pole_sensitivities_match_central_finite_differences():
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    L = a.responses.solver.L

    def poles(net):
        sol = net.solver(L)
        return _refine(sol.G, sol.C, sol.poles())
    _check(a, "pole", "adm", poles)


def test_zero_sensitivities_match_central_finite_differences():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "npn_mismatched_pair.toml"))
    resp = a.responses
    l, kind = resp.output_row("acm_se")
    b = resp.excitation(kind)
    L = resp.solver.L

    def zeros(net):
        sol = net.solver(L)
        return _refine(*_augmented(sol.G, sol.C, b, l), sol.zeros(b, l))
    _check(a, "zero", "acm_se", zeros)


def test_shares_of_each_kind_sum_to_one():
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    for rs in pole_sensitivities(a, "adm"):
        caps = sum(e.share for e in rs.elements if e.kind == "C")
        conds = sum(e.share for e in rs.elements if e.kind != "C")
        # oracle: Euler homogeneity (all C ×k scales every root by 1/k; all G, g_m ×k by k)
        assert caps == pytest.approx(1.0, abs=1e-9)
        assert conds == pytest.approx(1.0, abs=1e-9)


def test_tail_capacitance_and_resistance_set_the_common_mode_zero():
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    for key, value in (("pair.cjc0", 0), ("pair.beta", 10000), ("pair.early_voltage", 10000),
                       ("tail.capacitance", "100 pF")):
        d = replace_value(d, key, value)
    a = freqpair.analyze(d)
    zpk = response_zpk(a, "acm_se")
    f_tail = 1 / (2 * np.pi * d.tail.resistance * d.tail.capacitance)
    rows = [r for r in pole_zero_table(a, "acm_se", top=2) if r.kind == "zero"]
    row = min(rows, key=lambda r: abs(np.log(r.f_hz / f_tail)))
    shares = dict(row.contributors)
    # oracle: textbook (Gray, Hurst, Lewis, Meyer §3.5, from memory): the common-mode
    # gain has a zero at 1/(R_tail·C_tail), set by those two alone
    assert zpk.zeros_rad_s.size
    assert shares["Ctail"] == pytest.approx(1.0, abs=0.02)
    assert shares["Rtail"] == pytest.approx(1.0, abs=0.02)
