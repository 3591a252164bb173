"""A feedback divider in the loop (DESIGN.md §7e) against python-control and hand formulas.

Oracles: python-control (``stability_margins`` on T(s) = sign·β(s)·A(s), with A the
exact zpk freqpair reports and β(s) written here from §7e), the divider's hand pole
and zero, the algebra of a compensated divider, and the stage's gain checked
against the independent nodal model (tests/stage_oracle.py).
"""
import math
import pathlib

import control
import numpy as np
import pytest

import freqpair
import stage_oracle as so
from freqpair.analysis.compensation import CompensationError, series_capacitance_for
from freqpair.analysis.loop import loop_analysis, loop_curves
from freqpair.analysis.poles import response_zpk
from freqpair.design.errors import DesignError

ROOT = pathlib.Path(__file__).resolve().parent.parent
TWO_STAGE = (ROOT / "examples" / "two_stage_miller_loop.toml").read_text() \
    .replace("[feedback]\nfactor = 0.5\n", "")
ADC_DRIVER = (ROOT / "examples" / "nmos_adc_driver_loop.toml").read_text() \
    .replace("[feedback]\nfactor = 0.25\n", "")
OTA = (ROOT / "examples" / "ota_tail_cap_loop.toml").read_text() \
    .replace("[feedback]\nfactor = 1\n", "")
assert "[feedback]" not in TWO_STAGE + ADC_DRIVER + OTA

DIVIDER = """
[feedback]
type = "divider"
series_resistance = {rf!r}
series_capacitance = {cf!r}
shunt_resistance = {rg!r}
shunt_capacitance = {cg!r}
"""

CASES = [
    # base, R_f, C_f, R_g, C_g
    ("two_stage_node_cap", TWO_STAGE, 9e3, 0.0, 9e3, 5e-12),
    ("two_stage_partly_compensated", TWO_STAGE, 9e3, 1e-12, 9e3, 5e-12),
    ("two_stage_gain_10", TWO_STAGE, 90e3, 0.0, 10e3, 20e-12),
    ("two_stage_lead", TWO_STAGE, 9e3, 3e-12, 9e3, 0.5e-12),
    ("adc_driver", ADC_DRIVER, 3e3, 0.0, 1e3, 2e-12),
    ("adc_driver_lead", ADC_DRIVER, 3e3, 0.3e-12, 1e3, 0.2e-12),
    ("mirror_load_follower", OTA, 100.0, 0.0, 1e6, 3e-12),        # A_dm,se in the loop
]


def _divider(base, rf, cf, rg, cg):
    return freqpair.design_from_text(base + DIVIDER.format(rf=rf, cf=cf, rg=rg, cg=cg))


def _beta_tf(rf, cf, rg, cg):
    """β(s) = Z_g/(Z_f + Z_g), Z = R ∥ 1/(sC) (§7e), as a python-control TransferFunction:
    R_g·(1 + s·R_f·C_f) / ((R_f + R_g) + s·R_f·R_g·(C_f + C_g))."""
    return control.tf([rg * rf * cf, rg], [rf * rg * (cf + cg), rf + rg])


def _beta_hand(f, rf, cf, rg, cg):
    """β from its hand pole and zero: β0·(1 + jf/f_z)/(1 + jf/f_p)."""
    beta0 = rg / (rf + rg)
    num = 1 + 2j * math.pi * f * rf * cf                    # zero 1/(2π·R_f·C_f)
    rpar = rf * rg / (rf + rg)
    den = 1 + 2j * math.pi * f * rpar * (cf + cg)           # pole 1/(2π·(R_f∥R_g)·(C_f + C_g))
    return beta0 * num / den


def _loop_tf(a, rf, cf, rg, cg):
    zpk = response_zpk(a)
    A = zpk.transfer_function()
    sign = 1.0 if np.real(zpk.evaluate(np.array([0.0]))[0]) > 0 else -1.0   # T(0) > 0
    return sign * _beta_tf(rf, cf, rg, cg) * A, sign


@pytest.mark.parametrize("name,base,rf,cf,rg,cg", CASES, ids=[c[0] for c in CASES])
def test_margins_match_python_control(name, base, rf, cf, rg, cg):
    # oracle: python-control stability_margins on T = sign·β(s)·A(s), β(s) from §7e by hand
    a = freqpair.analyze(_divider(base, rf, cf, rg, cg))
    r = loop_analysis(a)
    T, sign = _loop_tf(a, rf, cf, rg, cg)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(T)
    assert r.sign == sign
    assert r.phase_margin_deg == pytest.approx(pm, abs=1e-6)
    assert r.crossover_hz == pytest.approx(wgc / (2 * math.pi), rel=1e-7)
    if math.isfinite(gm):
        assert r.gain_margin_db == pytest.approx(20 * math.log10(gm), abs=1e-6)
        assert r.phase_crossover_hz == pytest.approx(wpc / (2 * math.pi), rel=1e-7)
    else:
        assert r.gain_margin_db is None
    j = a.to_json()
    assert j["phase_margin_deg"] == pytest.approx(pm, abs=1e-6)
    assert j["beta_dc"] == pytest.approx(rg / (rf + rg), rel=1e-15)
    assert j["dc_loop_gain_db"] == pytest.approx(
        20 * math.log10(abs(np.real(T(0)))), abs=1e-9)


@pytest.mark.parametrize("name,base,rf,cf,rg,cg", CASES[:3], ids=[c[0] for c in CASES[:3]])
def test_the_amplifier_in_the_loop_is_the_nodal_oracle_s(name, base, rf, cf, rg, cg):
    # oracle: the exact zpk of A that the margins use equals the independent nodal
    # solution (tests/stage_oracle.py, sympy) at the loop's frequencies
    d = _divider(base, rf, cf, rg, cg)
    a = freqpair.analyze(d)
    zpk = response_zpk(a)
    o = so.build(d)
    for f in (0.0, 1e3, loop_analysis(a).crossover_hz, 1e9):
        assert complex(zpk.evaluate(np.array([f]))[0]) == pytest.approx(
            so.gains(o, f)["primary"], rel=1e-8)


@pytest.mark.parametrize("name,base,rf,cf,rg,cg", CASES, ids=[c[0] for c in CASES])
def test_beta_loop_gain_and_closed_loop_curves(name, base, rf, cf, rg, cg):
    # oracle: β from the hand pole 1/(2π·(R_f∥R_g)·(C_f + C_g)) and zero 1/(2π·R_f·C_f);
    # T = sign·β·A with A freqpair's own response; closed loop A/(1 + T) (§2); the phase
    # continuous from 0° (np.unwrap on python-control's T over a dense grid)
    a = freqpair.analyze(_divider(base, rf, cf, rg, cg))
    f = np.logspace(0, 10, 1001)
    c = loop_curves(a, f)
    beta = np.array([_beta_hand(x, rf, cf, rg, cg) for x in f])
    np.testing.assert_allclose(c.beta, beta, rtol=1e-12)
    r = a.responses.at(f)
    A = r.a_total if r.a_total is not None else (r.adm if r.adm is not None else r.adm_se)
    sign = loop_analysis(a).sign
    np.testing.assert_allclose(c.loop_gain, sign * beta * A, rtol=1e-12)
    np.testing.assert_allclose(c.closed_loop, A / (1 + sign * beta * A), rtol=1e-9)
    T, _ = _loop_tf(a, rf, cf, rg, cg)
    t = np.asarray(T(2j * np.pi * f))
    phase = np.degrees(np.unwrap(np.angle(t)))
    phase -= 360 * np.round(phase[0] / 360)
    np.testing.assert_allclose(c.loop_phase_deg, phase, atol=1e-6)


@pytest.mark.parametrize("base", [TWO_STAGE, ADC_DRIVER], ids=["two_stage", "adc_driver"])
def test_compensated_divider_is_flat_and_equals_a_factor(base):
    # oracle: algebra of §7e — with R_f·C_f = R_g·C_g, Z_g/(Z_f + Z_g) = R_g/(R_f + R_g)
    # at every frequency, so the loop is the factor loop of §2 with β_f = R_g/(R_f + R_g)
    rf, rg, cg = 9e3, 3e3, 6e-12
    a = freqpair.analyze(_divider(base, rf, rg * cg / rf, rg, cg))
    f = np.logspace(0, 11, 23)
    np.testing.assert_allclose(loop_curves(a, f).beta, rg / (rf + rg), rtol=1e-12)
    fac = freqpair.analyze(freqpair.design_from_text(
        base + f"[feedback]\nfactor = {rg / (rf + rg)!r}\n"))
    r_div, r_fac = loop_analysis(a), loop_analysis(fac)
    assert r_div.phase_margin_deg == pytest.approx(r_fac.phase_margin_deg, abs=1e-7)
    assert r_div.crossover_hz == pytest.approx(r_fac.crossover_hz, rel=1e-9)
    assert a.to_json()["beta_dc"] == fac.to_json()["beta_dc"] == pytest.approx(0.25)
    np.testing.assert_allclose(loop_curves(a, f).closed_loop, loop_curves(fac, f).closed_loop,
                               rtol=1e-9)


def test_beta_dc_key():
    # oracle: DESIGN.md §7e — R_g/(R_f + R_g) for a divider, β_f for a factor, null without
    j = freqpair.analyze(_divider(TWO_STAGE, 12e3, 1e-12, 4e3, 2e-12)).to_json()
    assert j["beta_dc"] == pytest.approx(0.25, rel=1e-15)
    assert freqpair.analyze(freqpair.design_from_text(
        TWO_STAGE + "[feedback]\nfactor = 0.125\n")).to_json()["beta_dc"] == 0.125
    assert freqpair.analyze(freqpair.design_from_text(TWO_STAGE)).to_json()["beta_dc"] is None


def test_factor_and_divider_keys_do_not_mix():
    # oracle: DESIGN.md §7e — `factor` under a divider (or divider keys under a factor)
    # is an unknown-key error, one line naming the key
    with pytest.raises(DesignError, match=r"^feedback\.factor.*unknown key$"):
        freqpair.design_from_text(TWO_STAGE + DIVIDER.format(rf=9e3, cf=0.0, rg=9e3, cg=0.0)
                                  + "factor = 0.5\n")
    with pytest.raises(DesignError, match=r"^feedback\.series_resistance.*unknown key$"):
        freqpair.design_from_text(TWO_STAGE + "[feedback]\nfactor = 0.5\n"
                                  "series_resistance = 9e3\n")


def test_summary_says_the_divider_is_unloaded():
    # oracle: DESIGN.md §7e — β is the divider alone, not loaded by the stage, and the
    # output says so
    text = str(freqpair.analyze(_divider(TWO_STAGE, 9e3, 1e-12, 9e3, 5e-12)))
    line = next(x for x in text.splitlines() if x.startswith("Feedback loop"))
    assert "divider" in line and "not loaded by the stage" in line
    assert "9 kΩ" in line and "5 pF" in line


@pytest.mark.parametrize("target", [10.0, 20.0, 30.0, 33.0])
def test_series_capacitance_reaches_the_target(target):
    # oracle: python-control margins of the re-analysed design; "smallest": 0.1 % less
    # capacitance misses the target (the margin rises with C_f towards the flat divider)
    d = _divider(TWO_STAGE, 9e3, 0.0, 9e3, 5e-12)
    res = series_capacitance_for(d, target)
    assert res.key == "feedback.series_capacitance"
    assert res.phase_margin_deg >= target
    a = freqpair.analyze(res.design)
    assert loop_analysis(a).phase_margin_deg >= target
    T, _ = _loop_tf(a, 9e3, res.value, 9e3, 5e-12)
    assert control.stability_margins(T)[1] == pytest.approx(res.phase_margin_deg, abs=1e-6)
    assert res.phase_margin_deg == pytest.approx(target, abs=1e-5)
    less = freqpair.replace_value(d, "feedback.series_capacitance", res.value * 0.999)
    assert loop_analysis(freqpair.analyze(less)).phase_margin_deg < target


def test_series_capacitance_says_when_it_cannot():
    # oracle: the largest margin a series capacitor reaches on this loop is below 40°
    # (python-control on a scan of C_f), so 40° must be refused in one line
    d = _divider(TWO_STAGE, 9e3, 0.0, 9e3, 5e-12)
    best = max(control.stability_margins(
        _loop_tf(freqpair.analyze(freqpair.replace_value(d, "feedback.series_capacitance", c)),
                 9e3, c, 9e3, 5e-12)[0])[1] for c in np.logspace(-13, -9, 17))
    assert best < 40
    with pytest.raises(CompensationError) as e:
        series_capacitance_for(d, 40.0)
    assert "\n" not in str(e.value) and "cannot" in str(e.value)
    with pytest.raises(DesignError, match="divider"):
        series_capacitance_for(freqpair.design_from_text(TWO_STAGE + "[feedback]\nfactor = 0.5\n"),
                               45.0)


@pytest.mark.parametrize("solve,target", [("nulling", 36.0), ("nulling", 45.0),
                                          ("feedback", 30.0), ("miller", 60.0)])
def test_every_compensation_solve_meets_its_target(solve, target):
    # oracle: python-control margins of the returned design — the solves share one
    # root finder, whose answer must sit on the side of the root that meets the target
    from freqpair.analysis.compensation import (feedback_factor_limit, nulling_resistor_for,
                                                smallest_miller_cap)
    fn = {"nulling": nulling_resistor_for, "feedback": feedback_factor_limit,
          "miller": smallest_miller_cap}[solve]
    res = fn(freqpair.load_design(ROOT / "examples" / "two_stage_miller_loop.toml"), target)
    a = freqpair.analyze(res.design)
    zpk = response_zpk(a)
    T = -res.design.feedback.factor * zpk.transfer_function()       # A_total(0) < 0 here
    assert np.real(T(0)) > 0
    pm = control.stability_margins(T)[1]
    assert pm == pytest.approx(res.phase_margin_deg, abs=1e-6)
    assert res.phase_margin_deg >= target
    assert loop_analysis(a).phase_margin_deg >= target
