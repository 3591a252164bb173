"""Measured responses: CSV import, errors that name the line, model overlay, overlay figure."""
import math

import numpy as np
import pytest

import freqpair
from helpers import design_with
from freqpair.studies.measured import (
    Measurement,
    MeasurementError,
    normalize_kind,
    overlay,
    parse_measurement_text,
    read_measurement,
    wrap_deg,
)

# A pair close to the textbook idealisation: huge β and V_A, no device capacitances,
# a Norton tail R ∥ C. Used as the oracle stage for the overlay.
IDEAL_PAIR = design_with(name="near-ideal npn pair", supply__positive=15, supply__negative=-15,
                         pair__beta=1e7, pair__early_voltage=1e7, load__resistance="5 k",
                         tail__resistance="200 k", tail__capacitance="4 pF")


def _cmrr_textbook(f_hz, design):
    """Single-ended CMRR of a resistor-loaded pair with large β, r_o:
    (1 + 2·g_m·Z_tail)/2 with Z_tail = R ∥ 1/(sC), and the ratio A_dm,se/A_cm,se
    negative at DC (the common-mode gain inverts). Textbook long-tailed pair
    (Gray & Meyer, Analysis and Design of Analog ICs, §3.5, from memory) and
    DESIGN.md §2."""
    from scipy.constants import Boltzmann, elementary_charge  # CODATA
    vt = Boltzmann * design.bias.temperature / elementary_charge
    beta = design.pair.beta
    gm = beta / (beta + 1) * design.bias.tail_current / 2 / vt
    s = 2j * np.pi * np.asarray(f_hz)
    zt = design.tail.resistance / (1 + s * design.tail.resistance * design.tail.capacitance)
    return -(1 + 2 * gm * zt) / 2


def test_reads_header_units_and_converts_vv_to_db():
    text = "# bench run 3\nFrequency [kHz],Gain [V/V],Phase [deg]\n1,100,10\n\n2.5,10,-20\n"
    m = parse_measurement_text(text, "adm")
    # common practice: 1 kHz = 1e3 Hz; 20·log10 of a voltage ratio
    np.testing.assert_allclose(m.f_hz, [1e3, 2.5e3])
    np.testing.assert_allclose(m.magnitude_db, [40.0, 20.0])
    np.testing.assert_allclose(m.phase_deg, [10.0, -20.0])
    assert list(m.lines) == [3, 5]


def test_cells_may_carry_units_and_si_prefixes():
    text = "freq,cmrr\n1 kHz,80 dB\n1.5k,79 dB\n2 MHz,60 dB\n"
    m = parse_measurement_text(text, "cmrr")
    # common practice: SI prefixes k = 1e3, M = 1e6
    np.testing.assert_allclose(m.f_hz, [1e3, 1.5e3, 2e6])
    np.testing.assert_allclose(m.magnitude_db, [80, 79, 60])
    assert m.phase_deg is None


def test_column_names_mapped_by_options():
    text = "hz;x,level,angle_of\n10,-3,5\n20,-4,6\n".replace(";x", "")
    m = parse_measurement_text(text, "acm_se", frequency_column="hz",
                               magnitude_column="level", phase_column="angle_of",
                               magnitude_unit="dB")
    np.testing.assert_allclose(m.f_hz, [10, 20])   # common practice: values as written
    np.testing.assert_allclose(m.phase_deg, [5, 6])


def test_tab_separated_file_is_read(tmp_path):
    path = tmp_path / "run.tsv"
    path.write_text("frequency_hz\tmagnitude_db\n10\t1\n100\t2\n", encoding="utf-8")
    m = read_measurement(path, "A_dm")
    assert m.kind == "adm" and len(m) == 2   # common practice: tab-separated columns


BAD_FILES = [
    ("frequency_hz,magnitude_db\n10,1\nnan,2\n", "line 3", "frequency"),
    ("frequency_hz,magnitude_db\n10,1\n20,NaN\n", "line 3", "magnitude"),
    ("frequency_hz,magnitude_db\n10,1\n-20,2\n", "line 3", "above 0"),
    ("frequency_hz,magnitude_db\n0,1\n20,2\n", "line 2", "above 0"),
    ("frequency_hz,magnitude_db\n10,1\n30,2\n20,3\n", "line 4", "sorted"),
    ("frequency_hz,magnitude_db\n10,1\n10,2\n", "line 3", "sorted"),
    ("frequency_hz,magnitude_db\n10,1\n20,\n", "line 3", "empty"),
    ("frequency_hz,magnitude_db\n10,1\n20\n", "line 3", "fields"),
    ("frequency_hz,magnitude_db\n10,1\n20,2 V/V\n", "line 3", "mixed units"),
    ("frequency_hz,magnitude\n10,1 dB\n20,2 V/V\n", "line 3", "mixed units"),
    ("frequency_hz,magnitude\n10,1 dB\n20,2\n", "line 3", "mixed units"),
    ("frequency_hz,magnitude_vv\n10,1\n20,0\n", "line 3", "above 0"),
    ("frequency_hz,magnitude_db\n10,1\n2o,2\n", "line 3", "not a number"),
    ("when,level\n10,1\n", "frequency", "--frequency-column"),
    ("frequency_hz,colour\n10,1\n", "magnitude", "--magnitude-column"),
    ("frequency_hz,mag_db,gain_vv\n10,1,1\n", "could both", "--magnitude-column"),
    ("frequency_hz,magnitude\n10,1\n", "unit unknown", "--magnitude-unit"),
    ("frequency_hz,magnitude_db\n", "no data", ""),
    ("# only a comment\n", "no header", ""),
]


@pytest.mark.parametrize("text, where, what", BAD_FILES)
def test_bad_measurement_is_one_line_naming_the_place(text, where, what):
    # common practice: a data error names the line and the offending value
    with pytest.raises(MeasurementError) as info:
        parse_measurement_text(text, "cmrr", origin="bench.csv")
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith("bench.csv")
    assert where in msg and what in msg


def test_mixed_units_between_option_and_header_is_refused():
    # common practice: a unit stated twice must agree
    with pytest.raises(MeasurementError, match="mixed units"):
        parse_measurement_text("f,mag [dB]\n1,2\n", "adm", magnitude_unit="V/V")


def test_unknown_kind_and_missing_file_are_one_line(tmp_path):
    with pytest.raises(MeasurementError, match="kind = 'gain'"):
        normalize_kind("gain")
    with pytest.raises(MeasurementError, match="cannot read") as info:
        read_measurement(tmp_path / "absent.csv", "cmrr")
    assert "\n" not in str(info.value)


def test_measurement_object_rejects_unsorted_frequencies():
    # common practice: a response is a function of increasing frequency
    with pytest.raises(MeasurementError, match="strictly increasing"):
        Measurement("cmrr", [10.0, 5.0], [1.0, 2.0], None)


def test_wrap_deg_maps_into_half_open_interval():
    # common practice: angles modulo 360° in (−180°, 180°]
    np.testing.assert_allclose(wrap_deg([190.0, -190.0, 180.0, -180.0, 540.0]),
                               [-170.0, 170.0, 180.0, 180.0, 180.0])


def test_overlay_model_matches_textbook_cmrr_and_residual_is_measured_minus_model():
    design = IDEAL_PAIR
    f = np.logspace(2, 7, 11)
    truth = _cmrr_textbook(f, design)
    meas = Measurement("cmrr", f, 20 * np.log10(np.abs(truth)) + 1.0,
                       np.degrees(np.angle(truth)) + 5.0)
    ov = overlay(freqpair.analyze(design), meas)
    # oracle: textbook (1 + 2·g_m·Z_tail)/2, exact to O(1/β) with these values
    np.testing.assert_allclose(ov.model_db, 20 * np.log10(np.abs(truth)), atol=1e-3)
    np.testing.assert_allclose(wrap_deg(ov.model_deg - np.degrees(np.angle(truth))), 0,
                               atol=1e-2)
    np.testing.assert_allclose(ov.residual_db, 1.0, atol=1e-3)
    np.testing.assert_allclose(ov.residual_deg, 5.0, atol=1e-2)
    assert math.isclose(ov.rms_residual_db, 1.0, abs_tol=1e-3)
    assert ov.to_json()["frequency_hz"] == list(f)


def test_overlay_of_zero_model_gain_is_refused(builtin_design):
    # DESIGN.md §2: A_cm-dm of a perfectly matched pair is exactly zero — no dB value
    matched = freqpair.replace_value(builtin_design, "mismatch.load", 0.0)
    meas = Measurement("acm_dm", [1e3, 1e4], [-60.0, -50.0], None)
    with pytest.raises(MeasurementError, match="zero"):
        overlay(freqpair.analyze(matched), meas)


def test_overlay_figure_holds_measurement_model_and_residual():
    pytest.importorskip("bokeh")
    from freqpair.views.measured_plots import overlay_columns, overlay_figure
    design = IDEAL_PAIR
    f = np.logspace(3, 6, 7)
    meas = Measurement("cmrr", f, np.full(7, 60.0), np.full(7, 170.0))
    ov = overlay(freqpair.analyze(design), meas)
    fig = overlay_figure(ov)
    names = {r.name for r in fig.renderers}
    assert {"measured", "model", "residual", "residual_zero"} <= names
    src = fig.select(name="measured")[0].data_source
    # common practice: the plotted columns are the overlay's own arrays
    np.testing.assert_allclose(src.data["residual"], ov.residual_db)
    assert fig.x_range.start > 0    # log axis never starts at 0 Hz
    np.testing.assert_allclose(overlay_columns(ov, "phase")["residual"], ov.residual_deg)
    no_phase = overlay(freqpair.analyze(design), Measurement("cmrr", f, np.full(7, 60.0), None))
    with pytest.raises(ValueError, match="no phase"):
        overlay_figure(no_phase, "phase")
