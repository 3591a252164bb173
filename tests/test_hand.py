"""Hand approximations beside the exact values: formulas, regimes where they hold, notes."""
import math

import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.analysis.hand import hand_json, hand_table

from conftest import ROOT
from helpers import design_with

BENCH = ROOT / "examples" / "npn_resistor_rc_tail.toml"


def _variant(path, **changes):
    return freqpair.analyze(design_with(path, **changes))


def _rows(a):
    return {r.key: r for r in hand_table(a)}


def test_hand_values_follow_the_textbook_formulas():
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    d, ss = a.design, a.operating_point.small_signal
    rows = _rows(a)
    r_out = 1 / (1 / d.load.resistance + 1 / ss.ro)
    r_in = 1 / (1 / ss.r_in + 1 / (d.source.resistance + ss.rb))
    # oracle: Gray, Hurst, Lewis, Meyer, Analysis and Design of Analog ICs, 5th ed.,
    # §7.2 (Miller effect) and §3.5 (differential pair), from memory
    miller = 1 / (2 * math.pi * r_in * (ss.c_in + ss.c_fb * (1 + ss.gm * r_out)))
    assert rows["miller_input_pole_hz"].approx == pytest.approx(miller, rel=1e-12)
    assert rows["cmrr_corner_hz"].approx == pytest.approx(
        1 / (2 * math.pi * d.tail.resistance * d.tail.capacitance), rel=1e-12)
    assert rows["acm_se_dc"].approx == pytest.approx(-d.load.resistance / (2 * d.tail.resistance))
    assert rows["acm_dm_dc"].approx == pytest.approx(
        -d.load.resistance / (2 * d.tail.resistance) * (d.mismatch.load + d.mismatch.gm))
    # oracle: Gray et al. §7.3 (open-circuit time constants), from memory
    tau = (r_in * ss.c_in + ss.c_fb * (r_in + r_out + ss.gm * r_in * r_out)
           + r_out * (d.load.capacitance + ss.c_out))
    assert rows["octc_f3db_hz"].approx == pytest.approx(1 / (2 * math.pi * tau), rel=1e-12)


def test_error_pct_is_relative_to_the_exact_value():
    for r in hand_table(freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))):
        if r.error_pct is not None:
            # oracle: common practice (error = (approx − exact)/|exact|)
            assert r.error_pct == pytest.approx(100 * (r.approx - r.exact) / abs(r.exact))


def test_miller_pole_and_octc_hold_when_the_input_pole_dominates():
    a = _variant(BENCH, source__resistance="50 k", load__capacitance=0)
    rows = _rows(a)
    # oracle: Gray et al. §7.2–7.3 (from memory): with a large source resistance the
    # Miller input pole is dominant and OCTC estimates f_3dB closely
    assert rows["miller_input_pole_hz"].note is None
    assert abs(rows["miller_input_pole_hz"].error_pct) < 5
    assert abs(rows["octc_f3db_hz"].error_pct) < 5
    assert abs(rows["gbw_hz"].error_pct) < 5
    assert rows["output_pole_hz"].note is not None      # pole splitting: flagged


def test_output_pole_holds_when_the_load_capacitance_dominates():
    a = _variant(BENCH, source__resistance=0, pair__base_resistance=0,
                 load__capacitance="100 pF")
    rows = _rows(a)
    # oracle: Gray et al. §7.2 (from memory): dominant output pole 1/(2π R_out C_out)
    assert rows["output_pole_hz"].note is None
    assert abs(rows["output_pole_hz"].error_pct) < 1
    assert rows["miller_input_pole_hz"].approx is None
    assert "no source or base resistance" in rows["miller_input_pole_hz"].note


def test_common_mode_formulas_hold_for_large_beta_ro_and_tail_capacitance():
    a = _variant(BENCH, pair__cjc0=0, pair__beta=10000, pair__early_voltage=100000,
                 tail__capacitance="100 pF", mismatch__load=0.02, mismatch__gm=0.01)
    rows = _rows(a)
    # oracle: Gray et al. §3.5.5–3.5.6 (from memory): A_cm ≈ −R_L/(2R_EE),
    # A_cm-dm ≈ −(R_L/2R_EE)(ΔR/R + Δg_m/g_m), tail zero 1/(2π R_EE C_EE), for g_m R_EE ≫ 1
    for key in ("acm_se_dc", "acm_dm_dc", "cmrr_corner_hz"):
        assert rows[key].note is None, key
        assert abs(rows[key].error_pct) < 3, key
    assert rows["acm_se_dc"].exact < 0


def test_notes_flag_approximations_outside_their_validity():
    rows = _rows(freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE)))
    # oracle: common practice — the built-in example has C_tail = 2 pF against
    # 2·C_mu ≈ 0.9 pF and input/output poles within 10×
    assert "C_mu" in rows["cmrr_corner_hz"].note
    assert "Miller split" in rows["miller_input_pole_hz"].note
    rows = _rows(_variant(BENCH, source__resistance=0, pair__base_resistance=1,
                          load__capacitance="10 pF", pair__cje="20 pF"))
    note = rows["miller_input_pole_hz"].note
    assert note is not None and ("not dominant" in note or "Miller split" in note)


def test_ideal_tail_rows_are_null_not_nan():
    a = freqpair.analyze(freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml"))
    data = hand_json(a)
    # oracle: DESIGN.md §4 (null where undefined)
    assert data["cmrr_corner_hz"] == {"exact": None, "approx": None, "error_pct": None}
    for row in data.values():
        assert all(v is None or math.isfinite(v) for v in row.values())


def test_mirror_load_table_has_a_mirror_pole_row_and_no_balanced_rows():
    text = BUILTIN_EXAMPLE.replace(
        '[load]\ntype = "resistor"\nresistance = "10 k"\ncapacitance = "1 pF"',
        '[load]\ntype = "mirror"\ncapacitance = "1 pF"\n[load.device]\ntype = "pnp"\n'
        'beta = 80\nearly_voltage = 45\ncje = "1 pF"\ntransit_time = "1 ns"')
    a = freqpair.analyze(freqpair.design_from_text(text))
    rows = _rows(a)
    # oracle: Gray et al. §4.3.5 (from memory): the mirror pole ≈ g_m3/(2π·2C_pi3)
    assert "mirror_pole_hz" in rows and "acm_dm_dc" not in rows
    assert rows["mirror_pole_hz"].exact is not None
    assert abs(rows["adm_dc"].error_pct) < 5
    assert rows["adm_dc"].exact > 0          # A_dm,se = v_o2/v_id is non-inverting
