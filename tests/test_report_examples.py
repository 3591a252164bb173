"""The example scenarios: every design file in examples/ has a script, a README
section and a screenshot, every walk-through runs, and the scenario-specific
numbers the scripts print agree with outside references."""
from __future__ import annotations

import importlib.util
import math
import pathlib
import subprocess
import sys

import control
import numpy as np
import pytest

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
#: every design file is a scenario: a new one without script/section/screenshot fails
DESIGNS = sorted(p.stem for p in EXAMPLES.glob("*.toml"))
README = (ROOT / "README.md").read_text(encoding="utf-8")


@pytest.fixture
def load_script(monkeypatch):
    """Import examples/<name>.py as a module; sys.path and sys.modules restored after."""
    monkeypatch.syspath_prepend(str(EXAMPLES))
    before = set(sys.modules)

    def load(name):
        spec = importlib.util.spec_from_file_location(f"_scenario_{name}", EXAMPLES / f"{name}.py")
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
        return module

    yield load
    for key in set(sys.modules) - before:
        del sys.modules[key]


def test_there_are_ten_design_files():
    # oracle: the examples briefs — eight invented scenarios, then two more for the
    # second edition (a degenerated front end with added elements, a divider loop)
    assert len(DESIGNS) >= 10
    assert {"npn_degenerated_instrumentation", "nmos_cascode_divider_loop"} <= set(DESIGNS)


@pytest.mark.parametrize("name", DESIGNS)
def test_every_design_file_has_a_script_a_readme_section_and_a_screenshot(name):
    # oracle: common practice — every shipped example is documented and runnable
    assert (EXAMPLES / f"{name}.py").exists(), f"examples/{name}.py missing"
    assert (ROOT / "docs" / "img" / f"report_{name}.png").exists()
    assert f"docs/img/report_{name}.png" in README
    assert f"python examples/{name}.py" in README
    assert any(line.startswith("### ") and f"`{name}`" in line
               for line in README.splitlines()), f"no README subsection for {name}"


@pytest.mark.parametrize("name", DESIGNS)
def test_walkthrough_hands_an_exact_model_to_python_control(name, tmp_path, load_script):
    # oracle: python-control evaluating the handed-off TransferFunction must agree
    # with freqpair's own exact response (two code paths, same network)
    out = load_script("walkthrough").run(EXAMPLES / f"{name}.toml", tmp_path)
    assert out["tf_error"] < 1e-6
    assert out["bode"].stat().st_size > 100_000 and out["report"].stat().st_size > 100_000
    assert np.isfinite(out["json"]["adm_db"])


def test_scenario_script_runs_from_the_command_line(tmp_path):
    # oracle: common practice — the documented command works as written
    name = "ota_tail_cap_loop"
    run = subprocess.run([sys.executable, str(EXAMPLES / f"{name}.py"), str(tmp_path)],
                         capture_output=True, text=True, cwd=ROOT,
                         env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert run.returncode == 0, run.stderr
    assert (tmp_path / f"{name}_report.html").exists()
    assert "python-control hand-off" in run.stdout and "phase margin" in run.stdout


def test_cascode_tail_resistance_and_cmrr_gain_follow_the_textbook(load_script):
    import freqpair
    rows = load_script("nmos_mirror_load_cascode_tail").scenario()
    design = freqpair.load_design(EXAMPLES / "nmos_mirror_load_cascode_tail.toml")
    dev, i_tail = design.tail.device, design.bias.tail_current
    gm = math.sqrt(2 * dev.mobility_cox * dev.width / dev.length * i_tail)
    ro = 1 / (dev.lambda_ * i_tail)
    cascode, simple = rows["cascode, 0.4 pF routing"], rows["simple mirror, 0.4 pF routing"]
    # oracle: textbook cascode output resistance r_o1 + r_o2 + g_m2·r_o1·r_o2 (no body
    # effect) and simple source r_o (Gray, Hurst, Lewis & Meyer, ch. 4, from memory)
    assert cascode["tail_resistance_ohm"] == pytest.approx(2 * ro + gm * ro * ro, rel=1e-3)
    assert simple["tail_resistance_ohm"] == pytest.approx(ro, rel=1e-6)
    # oracle: textbook — low-frequency CMRR grows in proportion to R_tail (1 + 2·g_m·R_tail
    # with g_m·R_tail ≫ 1), so the cascode buys 20·log10 of the resistance ratio
    gain_db = cascode["cmrr_se_db"] - simple["cmrr_se_db"]
    assert gain_db == pytest.approx(20 * math.log10(cascode["tail_resistance_ohm"]
                                                    / simple["tail_resistance_ohm"]), abs=0.5)
    # oracle: textbook tail zero 1/(2π·R_tail·C_tail) with the tail's own capacitance
    # (the pair's C_gs is bootstrapped for common mode) once the routing dominates it
    assert cascode["cmrr_corner_hz"] == pytest.approx(
        1 / (2 * math.pi * cascode["tail_resistance_ohm"] * cascode["tail_capacitance_f"]),
        rel=0.1)


def test_mirror_load_zero_sits_near_twice_the_mirror_pole(load_script):
    rows = load_script("npn_mirror_load_simple_mirror_tail").scenario(ft_values_hz=(5e6, 100e6))
    for row in rows.values():
        # oracle: textbook mirror-load doublet, zero at ≈ 2× the mirror pole (Gray,
        # Hurst, Lewis & Meyer, ch. 7, from memory); C_mu and r_o move it, hence the band
        assert 1.5 < row["mirror_zero_hz"] / row["mirror_pole_hz"] < 2.5
        # oracle: the same textbook's estimate g_m/(2π·ΣC) within 20 %
        assert row["mirror_pole_hand_hz"] == pytest.approx(row["mirror_pole_hz"], rel=0.2)


def _control_loop_and_gain(result):
    """python-control transfer functions of the loop gain T and of the amplifier A (s in rad/s / w0)."""
    from freqpair.analysis.loop import loop_model
    model = loop_model(result)
    w0 = 2 * math.pi * 1e6
    z, p = model.zeros_rad_s / w0, model.poles_rad_s / w0
    k = float(np.real(model.a0) * np.prod(-p).real / np.prod(-z).real)
    num, den = np.poly(z).real, np.poly(p).real     # conjugate roots: real up to rounding
    a = control.tf(k * num, den)
    return control.tf(model.sign * model.beta * k * num, den), a, model, w0


def test_solved_miller_capacitor_gives_60_degrees_and_the_step_python_control_gives(
        load_script):
    import freqpair
    rows = load_script("two_stage_miller_loop").scenario()
    solved = rows["compensated"]
    t_loop, a, model, w0 = _control_loop_and_gain(freqpair.analyze(rows["solved"].design))
    _, pm, *_ = control.stability_margins(t_loop)
    # oracle: python-control stability_margins on the same loop transfer function
    assert pm == pytest.approx(60.0, abs=0.1)
    assert solved["phase_margin_deg"] == pytest.approx(pm, abs=0.1)
    # oracle: python-control step response of A/(1 + T) on the same (even) time grid
    from freqpair.analysis.loop import step_response
    t_s = np.linspace(0.0, 3 * solved["settling_time_s"], 1501)
    _, y_fp = step_response(freqpair.analyze(rows["solved"].design), t_s)
    closed = control.feedback(a, model.sign * model.beta)
    _, y = control.step_response(closed, T=t_s * w0)
    final = model.a0.real / (1 + model.sign * model.beta * model.a0.real)
    assert np.max(np.abs(y_fp - y)) < 1e-6 * abs(final)
    overshoot = 100 * (np.max(np.abs(y)) - abs(final)) / abs(final)
    assert solved["overshoot_pct"] == pytest.approx(overshoot, abs=0.05)
    # oracle: textbook — more phase margin, less overshoot (second-order loop)
    assert solved["overshoot_pct"] < rows["as_given"]["overshoot_pct"]


def test_tail_capacitance_sweep_phase_margins_match_python_control(load_script):
    import freqpair
    values = (0.0, 8e-12, 32e-12)
    rows = load_script("ota_tail_cap_loop").scenario(values_f=values)
    design = freqpair.load_design(EXAMPLES / "ota_tail_cap_loop.toml")
    for v, pm_fp in zip(values, rows["phase_margin_deg"]):
        result = freqpair.analyze(freqpair.replace_value(design, "tail.capacitance", v))
        _, pm, *_ = control.stability_margins(_control_loop_and_gain(result)[0])
        # oracle: python-control stability_margins on the same loop transfer function
        assert pm_fp == pytest.approx(pm, abs=0.1)
    # oracle: textbook tail zero 1/(2π·R_tail·C_tail) once C_tail dominates the node
    # (C_mu feed-through and r_pi move it by a few %)
    r_tail = design.tail.resistance
    assert rows["cmrr_corner_hz"][-1] == pytest.approx(1 / (2 * math.pi * r_tail * 32e-12),
                                                       rel=0.06)
