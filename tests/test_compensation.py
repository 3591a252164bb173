"""Compensation solving (freqpair.analysis.compensation) and the compensate subcommand."""
import json
import math
import subprocess
import sys

import control
import numpy as np
import pytest

import freqpair
from freqpair.analysis.compensation import (
    CompensationError,
    feedback_factor_limit,
    nulling_resistor_for,
    smallest_miller_cap,
)
from freqpair.design.keys import replace_value
from freqpair.design.errors import FreqpairError
from freqpair.analysis.loop import loop_model

from conftest import ROOT

EXAMPLE = ROOT / "examples" / "two_stage_miller_loop.toml"


def _control_pm(design):
    """Phase margin by python-control stability_margins on the design's loop zpk."""
    m = loop_model(freqpair.analyze(design))
    w0 = 1e7
    z, p = m.zeros_rad_s / w0, m.poles_rad_s / w0
    k = m.sign * m.beta * m.a0 * np.prod(-p).real / np.prod(-z).real
    return control.stability_margins(control.zpk(z, p, k))[1]


@pytest.fixture(scope="module")
def example():
    return freqpair.load_design(EXAMPLE)


def test_smallest_miller_cap_reaches_target_and_a_smaller_one_does_not(example):
    res = smallest_miller_cap(example, 60.0)
    # oracle: python-control stability_margins on the solved and a 3 % smaller design
    assert _control_pm(res.design) == pytest.approx(60.0, abs=0.1)
    smaller = replace_value(example, "second_stage.miller_capacitance", 0.97 * res.value)
    assert _control_pm(smaller) < 60.0


def test_feedback_factor_limit_is_where_margin_drops_to_target(example):
    res = feedback_factor_limit(example, 60.0)
    # oracle: python-control stability_margins just at and above the limit
    assert _control_pm(res.design) == pytest.approx(60.0, abs=0.1)
    assert _control_pm(replace_value(example, "feedback.factor", 1.05 * res.value)) < 60.0


def test_nulling_resistor_reaches_target_when_feasible(example):
    design = replace_value(example, "second_stage.miller_capacitance", 12e-12)
    res = nulling_resistor_for(design, 60.0, (0.0, 20e3))
    # oracle: python-control stability_margins on the solved design
    assert _control_pm(res.design) == pytest.approx(60.0, abs=0.1)
    assert _control_pm(replace_value(design, "second_stage.nulling_resistance",
                                     0.95 * res.value)) < 60.0


def test_unreachable_target_says_cannot_reach_within_range(example):
    with pytest.raises(CompensationError, match=r"cannot reach .* within \[1 pF, 2 pF\]"):
        smallest_miller_cap(example, 60.0, (1e-12, 2e-12))   # oracle: common practice


def test_compensation_without_feedback_is_a_keyed_error(builtin_design):
    with pytest.raises(FreqpairError, match="feedback"):     # oracle: common practice
        feedback_factor_limit(builtin_design, 60.0)


def test_cli_compensate_json_and_error_line():
    base = [sys.executable, "-m", "freqpair.cli", "compensate", str(EXAMPLE)]
    ok = subprocess.run(base + ["--target-pm", "60", "--solve", "feedback", "--json"],
                        capture_output=True, text=True, cwd=ROOT, timeout=60)
    assert ok.returncode == 0, ok.stderr
    data = json.loads(ok.stdout)
    # oracle: same solver through the library (one computation, two faces; common practice)
    assert data["key"] == "feedback.factor"
    assert data["phase_margin_deg"] == pytest.approx(60.0, abs=1e-3)
    bad = subprocess.run(base + ["--target-pm", "60", "--range", "1p", "2p"],
                         capture_output=True, text=True, cwd=ROOT, timeout=60)
    assert bad.returncode == 2 and bad.stdout == ""
    assert len(bad.stderr.strip().splitlines()) == 1 and "cannot reach" in bad.stderr
