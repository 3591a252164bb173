"""Fitting signed design values (mismatch, input common mode) on a linear scale.

Oracle for every synthetic measurement here: the exact model at known values
(freqpair's full network of the design with the "hidden" mismatch set), plus
seeded Gaussian noise. Uncertainty checks use the plain Gauss–Newton covariance
s²·(JᵀJ)⁻¹ of linear least squares (textbook non-linear least squares, from
memory). The sign argument: swapping the two sides of the pair turns +δ into −δ
and v_od into −v_od at the same v_ic, so |A_cm-dm| is unchanged and its phase
moves by 180° (DESIGN.md §2 definitions).
"""
import json

import numpy as np
import pytest

import freqpair
from freqpair.design.keys import replace_value
from freqpair.studies.fit import (
    MISMATCH_BOUNDS,
    FitError,
    fit_design,
    is_signed_key,
    parse_free_spec,
)
from freqpair.studies.measured import Measurement, model_response
from freqpair.analysis.responses import StageResponses
from helpers import run_cli, synthetic_measurement
from conftest import ROOT

DESIGN_PATH = ROOT / "examples" / "npn_mismatched_pair.toml"
TRUE_DELTA = 0.012
F_HZ = np.logspace(2, 8, 40)


@pytest.fixture(scope="module")
def matched():
    """The mismatched-pair example made perfectly matched: the fit's starting design."""
    d = freqpair.load_design(DESIGN_PATH)
    return replace_value(replace_value(d, "mismatch.gm", 0.0), "mismatch.load", 0.0)


def _synthetic(design, kind, delta=TRUE_DELTA, noise_db=0.0, noise_deg=None, seed=0):
    """The exact model with mismatch.load = delta, plus seeded noise (the test oracle)."""
    truth = replace_value(design, "mismatch.load", delta)
    return synthetic_measurement(truth, kind, F_HZ, noise_db, noise_deg, seed)


def test_load_mismatch_from_acm_dm_with_phase_within_10_percent_and_3_sigma(matched):
    meas = _synthetic(matched, "acm_dm", noise_db=0.1, noise_deg=0.5, seed=0)
    result = fit_design(matched, meas, ["mismatch.load"])
    (v,) = result.values
    assert v.space == "linear"
    # oracle: exact model at δ = +0.012; stated tolerance 10 %
    assert v.fitted == pytest.approx(TRUE_DELTA, rel=0.10)
    # oracle: plain Gauss–Newton σ (linear parameter) covers the truth within 3σ
    assert v.sigma is not None and abs(v.fitted - TRUE_DELTA) < 3 * v.sigma
    assert v.relative_sigma == pytest.approx(v.sigma / abs(v.estimate))
    # the phase settles the sign: no sign warning
    assert v.sign_identifiable and v.identifiable
    assert not any("sign" in w for w in result.warnings)
    assert result.design.mismatch.load == pytest.approx(v.fitted)
    # common practice: rms residual of a good fit is the added noise level
    assert 0.05 < result.rms_residual_db < 0.15
    assert 0.25 < result.rms_residual_deg < 0.8
    # the matched starting design has A_cm-dm = 0: no dB residual to report (DESIGN.md §2)
    assert result.rms_residual_db_initial is None


def test_negative_mismatch_found_with_phase_even_from_a_positive_guess(matched):
    meas = _synthetic(matched, "acm_dm", delta=-TRUE_DELTA, noise_db=0.1, noise_deg=0.5,
                      seed=1)
    start = replace_value(matched, "mismatch.load", 0.02)
    (v,) = fit_design(start, meas, ["mismatch.load"]).values
    # oracle: exact model at δ = −0.012 (the A_cm-dm phase flips with the sign)
    assert v.fitted == pytest.approx(-TRUE_DELTA, rel=0.10)
    assert v.sign_identifiable


@pytest.mark.parametrize("kind", ["acm_dm", "cmrr_balanced"])
def test_magnitude_only_gives_the_size_and_warns_about_the_sign(matched, kind):
    meas = _synthetic(matched, kind, noise_db=0.1, seed=2)
    result = fit_design(matched, meas, ["mismatch.load"])
    (v,) = result.values
    # oracle: exact model at δ = +0.012; |δ| within 10 %
    assert abs(v.fitted) == pytest.approx(TRUE_DELTA, rel=0.10)
    # oracle: side swap leaves |A_cm-dm| and |A_dm/A_cm-dm| unchanged, so ±δ tie
    assert not v.sign_identifiable
    assert any(w.startswith("mismatch.load: sign not identifiable from magnitude data; "
                            "phase data needed") for w in result.warnings)
    # the tie keeps the positive sign when the design has δ = 0 (documented choice)
    assert v.fitted > 0


def test_magnitude_only_keeps_the_designs_sign_in_a_tie(matched):
    meas = _synthetic(matched, "acm_dm", noise_db=0.1, seed=3)
    start = replace_value(matched, "mismatch.load", -0.03)
    (v,) = fit_design(start, meas, ["mismatch.load"]).values
    # oracle: the mirrored minimum −|δ| fits as well as +|δ| (side swap)
    assert v.fitted == pytest.approx(-TRUE_DELTA, rel=0.10)
    assert not v.sign_identifiable


def test_one_signed_bound_imposes_the_sign_without_a_warning(matched):
    meas = _synthetic(matched, "acm_dm", noise_db=0.1, seed=4)
    result = fit_design(matched, meas, ["mismatch.load=0.001:0.05"])
    (v,) = result.values
    # oracle: exact model at δ = +0.012; the bounds exclude −δ, so nothing is mirrored
    assert v.fitted == pytest.approx(TRUE_DELTA, rel=0.10)
    assert v.sign_identifiable and result.warnings == ()


def test_log_and_linear_values_fitted_together(matched):
    truth = replace_value(matched, "tail.capacitance", 8e-12)
    meas = _synthetic(truth, "acm_dm", noise_db=0.1, noise_deg=0.5, seed=5)
    result = fit_design(matched, meas, ["mismatch.load", "tail.capacitance"])
    got = {v.key: v for v in result.values}
    # oracle: exact model at δ = 0.012, C_tail = 8 pF
    assert got["mismatch.load"].fitted == pytest.approx(TRUE_DELTA, rel=0.10)
    assert got["tail.capacitance"].fitted == pytest.approx(8e-12, rel=0.10)
    assert got["tail.capacitance"].space == "log"
    assert got["mismatch.load"].space == "linear"


def test_gm_mismatch_invisible_in_the_differential_gain_is_flagged(matched):
    truth = replace_value(matched, "mismatch.gm", 0.01)
    h = model_response(StageResponses(freqpair.build_stage(truth)), "adm", F_HZ)
    rng = np.random.default_rng(6)
    meas = Measurement("adm", F_HZ, 20 * np.log10(np.abs(h)) + rng.normal(0, 0.1, F_HZ.size),
                       None)
    result = fit_design(matched, meas, ["mismatch.gm=-0.05:0.05"])
    (v,) = result.values
    # textbook (balanced pair, from memory): A_dm ∝ 2·g_m1·g_m2/(g_m1 + g_m2) = g_m·(1 − δ²/4),
    # second order in δ, so 0.1 dB data cannot see a few per cent of g_m mismatch
    assert not v.identifiable and v.fitted == 0.0
    assert result.design.mismatch.gm == 0.0
    assert any("mismatch.gm" in w and "not identifiable" in w for w in result.warnings)


def test_input_common_mode_is_signed_and_needs_bounds_at_zero(matched):
    assert is_signed_key("bias.input_common_mode") and is_signed_key("supply.negative")
    assert not is_signed_key("tail.capacitance")
    meas = _synthetic(matched, "acm_dm", seed=7)
    # common practice: one-line error naming the key
    with pytest.raises(FitError, match="bias.input_common_mode = 0: give bounds") as info:
        fit_design(matched, meas, ["bias.input_common_mode", "mismatch.load"])
    assert "\n" not in str(info.value)
    result = fit_design(matched, meas, ["bias.input_common_mode=-2:2", "mismatch.load"])
    ic = result.values[0]
    assert ic.space == "linear" and ic.lower == -2.0 and ic.upper == 2.0


@pytest.mark.parametrize("spec, lower, upper", [
    ("mismatch.load=-0.05:0.05", -0.05, 0.05),
    ("mismatch.gm = -5m : 5m", -5e-3, 5e-3),
    ("bias.input_common_mode=-1.5:2.5", -1.5, 2.5),
])
def test_negative_bounds_parse(spec, lower, upper):
    fv = parse_free_spec(spec)
    # common practice: SI numbers with a sign (m = 1e-3)
    assert (fv.lower, fv.upper) == (pytest.approx(lower), pytest.approx(upper))


@pytest.mark.parametrize("free, message", [
    (["mismatch.load=0.05:-0.05"], "low < high"),
    (["mismatch.load=-1.5:0.5"], "bound -1.5 is not allowed"),
    (["tail.resistance=-5:1M"], "bound -5 is not allowed"),
])
def test_bad_signed_bounds_are_one_line_errors(matched, free, message):
    meas = _synthetic(matched, "acm_dm", seed=8)
    # common practice: one-line error naming key and value
    with pytest.raises(freqpair.FreqpairError, match=message) as info:
        fit_design(matched, meas, free)
    assert "\n" not in str(info.value)


def test_default_mismatch_bounds_are_plus_minus_20_percent(matched):
    meas = _synthetic(matched, "acm_dm", noise_db=0.1, noise_deg=0.5, seed=9)
    (v,) = fit_design(matched, meas, ["mismatch.load"]).values
    assert (v.lower, v.upper) == MISMATCH_BOUNDS == (-0.2, 0.2)   # documented default


# ---------------------------------------------------------------- command line
def _write_csv(path, meas):
    rows = ["frequency [Hz],gain [dB],phase [deg]"]
    rows += [f"{f:.9g},{m:.6f},{p:.5f}" for f, m, p in
             zip(meas.f_hz, meas.magnitude_db, meas.phase_deg)]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


def test_cli_fits_a_signed_mismatch_end_to_end(matched, tmp_path):
    design_path = tmp_path / "matched.toml"
    freqpair.save_design(matched, design_path)
    csv_path = tmp_path / "acm_dm.csv"
    _write_csv(csv_path, _synthetic(matched, "acm_dm", noise_db=0.1, noise_deg=0.5, seed=10))
    out = tmp_path / "fitted.toml"
    proc = run_cli("fit", design_path, csv_path, "--kind", "acm_dm",
                   "--free", "mismatch.load=-0.05:0.05", "-o", out, "--json", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    (v,) = data["free"]
    # oracle: exact model at δ = +0.012
    assert v["space"] == "linear" and v["lower"] == -0.05 and v["upper"] == 0.05
    assert v["fitted"] == pytest.approx(TRUE_DELTA, rel=0.10) and v["sign_identifiable"]
    assert data["rms_residual_db_initial"] is None     # null, never NaN or −300 dB
    assert freqpair.load_design(out).mismatch.load == pytest.approx(v["fitted"])
    text = run_cli("fit", design_path, csv_path, "--kind", "acm_dm", "--no-phase",
                   "--free", "mismatch.load=-0.05:0.05", cwd=tmp_path)
    assert text.returncode == 0, text.stderr
    assert "sign not identifiable from magnitude data" in text.stderr
    assert "phase data needed" in text.stderr
    assert "mismatch.load" in text.stdout and "sign?" in text.stdout
    assert "nan" not in text.stdout.lower()
