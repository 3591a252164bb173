"""Smoke run of the example scenarios (common practice: every example runs)."""
from __future__ import annotations

import pathlib
import subprocess
import sys

import numpy as np
import pytest

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
SCENARIOS = sorted(p.stem for p in EXAMPLES.glob("*.py")
                   if (EXAMPLES / f"{p.stem}.toml").exists())


def test_there_are_at_least_four_scenarios_with_a_screenshot():
    # oracle: the examples brief — four scenarios, each with a script and a screenshot
    assert len(SCENARIOS) >= 4
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for name in SCENARIOS:
        if (ROOT / "docs" / "img" / f"report_{name}.png").exists():
            assert f"docs/img/report_{name}.png" in readme


@pytest.mark.parametrize("name", SCENARIOS)
def test_walkthrough_hands_an_exact_model_to_python_control(name, tmp_path):
    # oracle: python-control evaluating the handed-off TransferFunction must agree
    # with freqpair's own exact response (two code paths, same network)
    sys.path.insert(0, str(EXAMPLES))
    try:
        import walkthrough
        out = walkthrough.run(EXAMPLES / f"{name}.toml", tmp_path)
    finally:
        sys.path.remove(str(EXAMPLES))
    assert out["tf_error"] < 1e-6
    assert out["bode"].stat().st_size > 100_000 and out["report"].stat().st_size > 100_000
    assert np.isfinite(out["json"]["adm_db"])


def test_scenario_script_runs_from_the_command_line(tmp_path):
    # oracle: common practice — the documented command works as written
    name = SCENARIOS[0]
    run = subprocess.run([sys.executable, str(EXAMPLES / f"{name}.py"), str(tmp_path)],
                         capture_output=True, text=True, cwd=ROOT,
                         env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert run.returncode == 0, run.stderr
    assert (tmp_path / f"{name}_report.html").exists()
    assert "python-control hand-off" in run.stdout
