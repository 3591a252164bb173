"""Fitting hidden design values to a measurement.

Oracle for every synthetic measurement here: the exact model at known values
(freqpair's full network of the design with the "hidden" values set), plus
seeded Gaussian noise. The uncertainty checks use the standard Gauss–Newton
covariance s²·(JᵀJ)⁻¹ (textbook non-linear least squares, from memory).
"""
import json
import pathlib
import subprocess
import sys

import numpy as np
import pytest

import freqpair
from freqpair.design.keys import replace_value
from freqpair.studies.fit import FitError, FreeValue, fit_design, parse_free_spec
from freqpair.studies.measured import Measurement, model_response
from freqpair.analysis.responses import StageResponses
from helpers import run_cli, synthetic_measurement

ROOT = pathlib.Path(__file__).resolve().parent.parent
DESIGN_PATH = ROOT / "examples" / "npn_resistor_rc_tail.toml"
HIDDEN = {"tail.capacitance": 5.6e-12, "tail.resistance": 330e3}


@pytest.fixture(scope="module")
def design():
    return freqpair.load_design(DESIGN_PATH)


def _built(design, values):
    for key, value in values.items():
        design = replace_value(design, key, value)
    return design


def _synthetic(design, kind, f, noise_db=0.0, noise_deg=None, seed=0, values=HIDDEN):
    """The exact model at known values plus seeded noise (the test oracle)."""
    return synthetic_measurement(_built(design, values), kind, f, noise_db, noise_deg, seed)


CMRR_F = np.logspace(3, np.log10(50e6), 40)


def test_noise_free_cmrr_gives_back_the_hidden_values(design):
    meas = _synthetic(design, "cmrr", CMRR_F)
    result = fit_design(design, meas, ["tail.capacitance", "tail.resistance"])
    for v in result.values:
        # oracle: the exact model at the known values
        assert v.fitted == pytest.approx(HIDDEN[v.key], rel=1e-5)
        assert v.identifiable and not v.at_bound
    assert result.rms_residual_db < 1e-4
    assert result.rms_residual_db_initial > 1.0
    assert result.warnings == ()


def test_tail_values_recovered_within_3_percent_and_3_sigma_at_02_db_noise(design):
    meas = _synthetic(design, "cmrr", CMRR_F, noise_db=0.2, seed=1)
    result = fit_design(design, meas, ["tail.capacitance", "tail.resistance"])
    for v in result.values:
        truth = HIDDEN[v.key]
        # oracle: exact model at known values; stated tolerance 3 % at 0.2 dB noise
        assert v.fitted == pytest.approx(truth, rel=0.03)
        # oracle: Gauss–Newton standard uncertainty covers the truth within 3σ
        assert abs(v.fitted - truth) < 3 * v.sigma
    # common practice: the rms residual of a good fit is the noise level
    assert 0.12 < result.rms_residual_db < 0.3
    saved = result.design
    assert saved.tail.capacitance == pytest.approx(result.values[0].fitted)


def test_uncertainty_estimate_matches_scatter_over_noise_realisations(design):
    estimates, sigmas = [], []
    for seed in range(16):
        meas = _synthetic(design, "cmrr", CMRR_F, noise_db=0.2, seed=100 + seed)
        v = fit_design(design, meas, ["tail.capacitance", "tail.resistance"]).values[0]
        estimates.append(np.log(v.estimate))
        sigmas.append(v.relative_sigma)
    ratio = np.std(estimates, ddof=1) / np.mean(sigmas)
    # oracle: Gauss–Newton covariance predicts the spread of ln(estimate); with 16
    # samples the sample standard deviation is within about ±40 % (chi-square, 2σ)
    assert 0.6 < ratio < 1.5
    z = (np.array(estimates) - np.log(HIDDEN["tail.capacitance"])) / np.array(sigmas)
    # oracle: normal errors fall within 3σ 99.7 % of the time; allow one outlier in 16
    assert np.sum(np.abs(z) < 3) >= 15
    assert abs(np.mean(z)) < 1.0     # no bias beyond sampling (σ of the mean = 0.25)


def test_phase_is_fitted_with_magnitude(design):
    meas = _synthetic(design, "cmrr", CMRR_F, noise_db=0.2, noise_deg=1.0, seed=3)
    result = fit_design(design, meas, ["tail.capacitance=1p:20p", "tail.resistance"])
    for v in result.values:
        assert v.fitted == pytest.approx(HIDDEN[v.key], rel=0.03)   # oracle: exact model
    # common practice: residual rms is the added noise (1 degree)
    assert 0.6 < result.rms_residual_deg < 1.5
    no_phase = fit_design(design, meas, ["tail.capacitance=1p:20p", "tail.resistance"],
                          use_phase=False)
    assert no_phase.rms_residual_deg is None
    # Gauss–Newton: more independent data (the phase) can only shrink the uncertainty
    assert result.values[0].relative_sigma < no_phase.values[0].relative_sigma


def test_load_capacitance_below_the_load_pole_is_flagged_not_fitted(design):
    # the differential gain measured to 10 kHz, far below its ≈ 2 MHz load pole
    f = np.logspace(1, 4, 30)
    meas = _synthetic(design, "adm", f, noise_db=0.05, seed=1,
                      values={"load.capacitance": 6e-12})
    result = fit_design(design, meas, ["load.capacitance"])
    (v,) = result.values
    # oracle: the exact model hardly depends on C_L there (pole far above the data)
    assert not v.identifiable
    assert v.fitted == design.load.capacitance          # kept, not "fitted"
    assert result.design.load.capacitance == design.load.capacitance
    assert any("load.capacitance" in w and "not identifiable" in w for w in result.warnings)
    assert result.flat_directions == (("load.capacitance",),)


def test_invisible_value_beside_a_visible_one_is_flagged_alone(design):
    meas = _synthetic(design, "cmrr", CMRR_F, noise_db=0.1, seed=5)
    # sweep.stop changes only the plotting grid, never the model
    result = fit_design(design, meas, ["tail.capacitance", "tail.resistance",
                                       FreeValue("sweep.stop", 1e9, 1e11)])
    flags = {v.key: v.identifiable for v in result.values}
    # oracle: the exact model at known values does not contain sweep.stop
    assert flags == {"tail.capacitance": True, "tail.resistance": True, "sweep.stop": False}
    assert result.values[0].fitted == pytest.approx(HIDDEN["tail.capacitance"], rel=0.03)


def test_value_pinned_at_a_bound_is_flagged(design):
    meas = _synthetic(design, "cmrr", CMRR_F, noise_db=0.1, seed=2)
    result = fit_design(design, meas, ["tail.capacitance=1p:4p", "tail.resistance"])
    v = result.values[0]
    # oracle: the truth (5.6 pF) lies above the 4 pF bound, so the fit must stop there
    assert v.at_bound and v.fitted == pytest.approx(4e-12, rel=1e-3)
    assert any("upper bound" in w for w in result.warnings)


@pytest.mark.parametrize("spec, lower, upper", [
    ("tail.capacitance", None, None),
    ("tail.capacitance=1p:10p", 1e-12, 1e-11),
    ("tail.resistance = 47k : 4.7M", 47e3, 4.7e6),
    ("pair.cjc0=2.2e-13:5e-12", 2.2e-13, 5e-12),
])
def test_free_value_syntax(spec, lower, upper):
    fv = parse_free_spec(spec)
    # common practice: SI prefixes (p = 1e-12, k = 1e3, M = 1e6)
    assert fv.lower == (pytest.approx(lower) if lower else None)
    assert fv.upper == (pytest.approx(upper) if upper else None)


@pytest.mark.parametrize("free, message", [
    (["tail.capacitance=10p:1p"], "0 < low < high"),
    (["tail.capacitance=0:1p"], "0 < low < high"),
    (["tail.capacitance=1p"], "LOW:HIGH"),
    (["tail.capacitance=1x:2x"], "not a number"),
    (["pair.type"], "not a number"),
    (["pair.ccs"], "zero in the design"),
    (["tail.inductance"], "no such value"),
    (["tail.capacitance", "tail.capacitance"], "twice"),
    ([], "no free values"),
])
def test_bad_free_values_are_one_line_errors(design, free, message):
    meas = _synthetic(design, "cmrr", CMRR_F[:5])
    # common practice: a one-line error naming the value
    with pytest.raises(freqpair.FreqpairError, match=message) as info:
        fit_design(design, meas, free)
    assert "\n" not in str(info.value)


def test_fewer_points_than_free_values_is_refused(design):
    meas = _synthetic(design, "cmrr", CMRR_F[:1])
    with pytest.raises(FitError, match="cannot fix 2 free values"):   # common practice
        fit_design(design, meas, ["tail.capacitance", "tail.resistance"])


# ---------------------------------------------------------------- command line
def _run(*args, cwd):
    return run_cli(*args, cwd=cwd)


def _write_csv(path, meas):
    rows = ["frequency [Hz],CMRR [dB]"] + [f"{f:.9g},{m:.6f}" for f, m in
                                           zip(meas.f_hz, meas.magnitude_db)]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


def test_cli_fit_writes_fitted_design_and_json(design, tmp_path):
    csv_path = tmp_path / "bench.csv"
    _write_csv(csv_path, _synthetic(design, "cmrr", CMRR_F, noise_db=0.2, seed=11))
    out = tmp_path / "fitted.toml"
    proc = _run("fit", DESIGN_PATH, csv_path, "--kind", "cmrr", "--free",
                "tail.capacitance=1p:20p", "--free", "tail.resistance", "-o", out, "--json",
                cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)            # exactly one JSON object on stdout
    assert [v["key"] for v in data["free"]] == ["tail.capacitance", "tail.resistance"]
    fitted = freqpair.load_design(out)
    # oracle: exact model at known values; 3 % at 0.2 dB noise
    assert fitted.tail.capacitance == pytest.approx(HIDDEN["tail.capacitance"], rel=0.03)
    assert fitted.tail.resistance == pytest.approx(HIDDEN["tail.resistance"], rel=0.03)
    assert fitted.pair == design.pair          # values not freed are untouched
    assert list(tmp_path.glob(".*.part")) == []   # atomic write leaves no temporary


def test_cli_bad_measurement_is_one_line_naming_the_line(tmp_path):
    csv_path = tmp_path / "bench.csv"
    csv_path.write_text("frequency [Hz],CMRR [dB]\n1000,80\n-2000,79\n", encoding="utf-8")
    proc = _run("fit", DESIGN_PATH, csv_path, "--kind", "cmrr", "--free", "tail.capacitance",
                cwd=tmp_path)
    # common practice: exit 2, one line on stderr naming the line, nothing on stdout
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr.count("\n") == 1 and "line 3" in proc.stderr


def test_cli_strict_refuses_an_unidentifiable_fit(design, tmp_path):
    csv_path = tmp_path / "gain.csv"
    meas = _synthetic(design, "adm", np.logspace(1, 4, 20))
    csv_path.write_text("frequency_hz,magnitude_db\n" + "".join(
        f"{f:.9g},{m:.6f}\n" for f, m in zip(meas.f_hz, meas.magnitude_db)), encoding="utf-8")
    out = tmp_path / "fitted.toml"
    proc = _run("fit", DESIGN_PATH, csv_path, "--kind", "adm", "--free", "load.capacitance",
                "-o", out, "--strict", cwd=tmp_path)
    # the data (to 10 kHz) cannot see the load pole: flagged, and --strict fails
    assert proc.returncode == 1 and "not identifiable" in proc.stderr
    assert not out.exists()


def test_demo_measurement_is_labelled_synthetic_and_fits_back(tmp_path):
    csv_path = tmp_path / "demo.csv"
    proc = subprocess.run([sys.executable, str(ROOT / "examples" / "make_demo_measurement.py"),
                           "--out", str(csv_path)], capture_output=True, text=True,
                          env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"}, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert "SYNTHETIC" in csv_path.read_text(encoding="utf-8").splitlines()[0]
    from freqpair.studies.measured import read_measurement
    meas = read_measurement(csv_path, "cmrr")
    design = freqpair.load_design(DESIGN_PATH)
    result = fit_design(design, meas, ["tail.capacitance", "tail.resistance"])
    for v in result.values:   # oracle: the script's hidden values (exact model + noise)
        assert v.fitted == pytest.approx(HIDDEN[v.key], rel=0.03)


def test_phase_of_opposite_sign_convention_is_warned(design):
    f = np.logspace(3, 7, 20)
    h = model_response(StageResponses(freqpair.build_stage(design)), "adm", f)
    # oracle: DESIGN.md §2 sign convention; the inverted measurement is −A_dm exactly
    meas = Measurement("adm", f, 20 * np.log10(np.abs(h)), np.degrees(np.angle(-h)))
    result = fit_design(design, meas, ["load.capacitance"])
    assert any("180°" in w for w in result.warnings)
