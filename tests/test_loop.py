"""Loop gain, margins, closed loop and step response (freqpair.analysis.loop)."""
import json
import math
import subprocess
import sys

import control
import numpy as np
import pytest

import freqpair
from freqpair.design.keys import replace_value
from freqpair.analysis.loop import (
    LOOP_JSON_KEYS,
    loop_analysis,
    loop_curves,
    loop_model,
    step_response,
)

from loop_designs import clean_two_stage
from conftest import ROOT

EXAMPLE = ROOT / "examples" / "two_stage_miller_loop.toml"


def _control_loop(model, w0):
    """python-control zpk of T(s) from the network's poles/zeros, in s/w0 units
    (margins do not depend on the frequency scale; it keeps the polynomials tame)."""
    z = model.zeros_rad_s / w0
    p = model.poles_rad_s / w0
    k = model.sign * model.beta * model.a0 * np.prod(-p).real / np.prod(-z).real
    return control.zpk(z, p, k)


def _control_closed_loop(model, w0):
    z = model.zeros_rad_s / w0
    p = model.poles_rad_s / w0
    a = control.zpk(z, p, model.a0 * np.prod(-p).real / np.prod(-z).real)
    return control.feedback(a, model.sign * model.beta)


@pytest.mark.parametrize("miller", [1e-12, 4e-12, 12e-12, 40e-12])
def test_margins_match_python_control_on_the_same_transfer_function(miller):
    a = freqpair.analyze(replace_value(freqpair.load_design(EXAMPLE),
                                       "second_stage.miller_capacitance", miller))
    r = loop_analysis(a)
    w0 = 2 * math.pi * r.crossover_hz
    gm, pm, _, wpg, wpc, _ = control.stability_margins(_control_loop(loop_model(a), w0))
    # oracle: python-control stability_margins (ratio, rad/s, wrapped phase)
    assert r.phase_margin_deg == pytest.approx(pm, abs=0.1)
    assert r.crossover_hz == pytest.approx(wpc * w0 / (2 * math.pi), rel=1e-6)
    if math.isinf(gm):
        assert r.gain_margin_db is None
    else:
        assert r.gain_margin_db == pytest.approx(20 * math.log10(gm), abs=0.1)
        assert r.phase_crossover_hz == pytest.approx(wpg * w0 / (2 * math.pi), rel=1e-6)


def test_two_pole_loop_has_infinite_gain_margin_reported_as_null():
    a = freqpair.analyze(clean_two_stage())
    r = loop_analysis(a)
    gm, pm, *_ = control.stability_margins(_control_loop(loop_model(a), 1e6))
    # oracle: python-control reports inf gain margin for a two-pole loop
    assert math.isinf(gm)
    assert r.gain_margin_db is None and r.phase_crossover_hz is None
    assert a.to_json()["gain_margin_db"] is None
    assert r.phase_margin_deg == pytest.approx(pm, abs=0.1)


def _zeta(analysis):
    _, p, _ = loop_model(analysis).closed_loop_zpk()
    assert p.size == 2
    wn = abs(p[0])
    return -p[0].real / wn, wn


def test_overshoot_and_peaking_follow_second_order_relations():
    a = freqpair.analyze(clean_two_stage())
    r = loop_analysis(a)
    zeta, wn = _zeta(a)
    assert 0.3 < zeta < 0.7
    # oracle: second-order step overshoot exp(−πζ/√(1−ζ²)) (control textbook, from memory)
    assert r.overshoot_pct == pytest.approx(100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2)),
                                            rel=1e-6)
    # oracle: resonant peak 1/(2ζ√(1−ζ²)) for ζ < 1/√2 (control textbook, from memory)
    assert r.peaking_db == pytest.approx(-20 * math.log10(2 * zeta * math.sqrt(1 - zeta**2)),
                                         abs=1e-6)


def test_phase_margin_follows_damping_ratio_of_nearly_second_order_loop():
    a = freqpair.analyze(clean_two_stage())
    r = loop_analysis(a)
    zeta, _ = _zeta(a)
    # oracle: PM = atan(2ζ/√(√(1+4ζ⁴) − 2ζ²)) for T = ωn²/(s(s+2ζωn)) (control textbook,
    # from memory); our loop has a finite DC gain (T0 ≈ 89), hence 1° tolerance
    pm = math.degrees(math.atan(2 * zeta / math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)))
    assert r.phase_margin_deg == pytest.approx(pm, abs=1.0)


def test_step_response_matches_python_control_step_on_the_closed_loop():
    a = freqpair.analyze(freqpair.load_design(EXAMPLE))
    r = loop_analysis(a)
    model = loop_model(a)
    w0 = 2 * math.pi * r.crossover_hz
    t = np.linspace(0, 2 * r.settling_time_s, 2001)
    _, y = step_response(a, t)
    _, y_ref = control.step_response(_control_closed_loop(model, w0), T=t * w0)
    # oracle: python-control step_response on the same closed-loop zpk
    assert np.max(np.abs(y - y_ref)) < 1e-6 * abs(r.closed_loop_dc_gain)
    # oracle: closed loop DC gain A0/(1 + β|A0|) (common practice)
    a0 = model.a0
    assert r.closed_loop_dc_gain == pytest.approx(a0 / (1 + model.beta * abs(a0)), rel=1e-9)


def test_settling_time_matches_python_control_step_info():
    a = freqpair.analyze(clean_two_stage())
    r = loop_analysis(a)
    model = loop_model(a)
    w0 = 1e7
    info = control.step_info(_control_closed_loop(model, w0), SettlingTimeThreshold=0.01,
                             T=np.linspace(0, 3 * r.settling_time_s * w0, 30001))
    # oracle: python-control step_info (grid-based; 1 % band)
    assert r.settling_time_s == pytest.approx(info["SettlingTime"] / w0, rel=2e-3)
    assert r.overshoot_pct == pytest.approx(info["Overshoot"], rel=1e-3)


def test_loop_phase_is_continuous_from_zero_at_dc():
    a = freqpair.analyze(freqpair.load_design(EXAMPLE))
    f = np.logspace(0, 10, 801)
    c = loop_curves(a, f)
    resp = control.frequency_response(_control_loop(loop_model(a), 1.0), 2 * np.pi * f)
    # oracle: python-control's phase on the same zpk, unwrapped from DC (numpy.unwrap)
    ref = np.degrees(np.unwrap(np.angle(resp.complex)))
    assert abs(c.loop_phase_deg[0]) < 1.0
    assert np.allclose(c.loop_phase_deg, ref, atol=1e-6)
    # oracle: A/(1+T) computed from the same curves (definition)
    a_open = c.loop_gain / (model_sign := loop_model(a).sign) / a.design.feedback.factor
    assert np.allclose(c.closed_loop, a_open / (1 + c.loop_gain), rtol=1e-8)
    assert model_sign in (-1, 1)


def test_unstable_loop_is_flagged_and_has_no_step_figures():
    a = freqpair.analyze(replace_value(freqpair.load_design(EXAMPLE),
                                       "second_stage.miller_capacitance", 0.3e-12))
    r = loop_analysis(a)
    _, p, _ = loop_model(a).closed_loop_zpk()
    # oracle: a closed-loop pole in the right half plane ⇔ negative phase margin for a
    # loop that is stable in open loop (Nyquist criterion, control textbook)
    assert np.any(p.real > 0)
    assert r.phase_margin_deg < 0 and not r.closed_loop_stable
    assert r.overshoot_pct is None and r.settling_time_s is None


def test_json_loop_keys_only_with_feedback(builtin_design):
    # oracle: DESIGN.md §4 key list (common practice: the contract)
    assert not set(LOOP_JSON_KEYS) & set(freqpair.analyze(builtin_design).to_json())
    with_fb = replace_value(builtin_design, "feedback.factor", 0.1)
    out = freqpair.analyze(with_fb).to_json()
    assert set(LOOP_JSON_KEYS) <= set(out)
    assert loop_analysis(freqpair.analyze(builtin_design)) is None


def test_cli_analyze_shows_loop_in_text_and_json():
    run = lambda *extra: subprocess.run(                              # noqa: E731
        [sys.executable, "-m", "freqpair.cli", "analyze", str(EXAMPLE), *extra],
        capture_output=True, text=True, cwd=ROOT, timeout=60)
    text = run()
    assert text.returncode == 0, text.stderr
    assert "phase margin" in text.stdout and "settling" in text.stdout
    js = run("--json")
    assert js.returncode == 0, js.stderr
    data = json.loads(js.stdout)
    for key in ("phase_margin_deg", "gain_margin_db", "crossover_hz", "closed_loop_f3db_hz",
                "peaking_db", "overshoot_pct", "settling_time_s"):
        assert key in data
    # oracle: same numbers as the library (one computation, two faces; common practice)
    r = loop_analysis(freqpair.analyze(freqpair.load_design(EXAMPLE)))
    assert data["phase_margin_deg"] == pytest.approx(r.phase_margin_deg, rel=1e-12)


@pytest.mark.parametrize("example, key, at_least_deg", [
    ("two_stage_miller_loop.toml", "second_stage.load_capacitance", 20.0),
    ("ota_tail_cap_loop.toml", "tail.capacitance", 3.0),
])
def test_example_capacitances_cost_phase_margin(example, key, at_least_deg):
    design = freqpair.load_design(ROOT / "examples" / example)
    with_c = loop_analysis(freqpair.analyze(design)).phase_margin_deg
    without = loop_analysis(freqpair.analyze(replace_value(design, key, 0))).phase_margin_deg
    # oracle: an added capacitance adds a pole (or lowers one) in the loop and
    # so lowers the phase margin (control textbook, common practice)
    assert without - with_c > at_least_deg
