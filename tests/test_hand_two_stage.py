"""Hand rows of the two-stage amplifier: pole splitting, Miller zero, GBW, overall gain.

Oracle throughout: the two-stage op-amp compensation formulas of Gray, Hurst, Lewis &
Meyer, *Analysis and Design of Analog Integrated Circuits*, 5th ed., §9.4 (from memory):
p1 ≈ 1/(g_m2·R_1·R_2·C_c), p2 ≈ g_m2·C_c/(C_1·C_2 + C_c·(C_1 + C_2)),
z = 1/(C_c·(1/g_m2 − R_z)), GBW ≈ G_m1/C_c, A(0) = A_1(0)·(−g_m2·R_2); they hold for
C_c ≫ C_1, C_2 and g_m2·R_2 ≫ 1.
"""
import json
import math

import pytest
from bokeh.document import Document

import freqpair
from freqpair.app.view import make_doc
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.analysis.hand import hand_json, hand_table
from freqpair.views.report import report_html

from conftest import ROOT
from helpers import design_with, run_cli
from loop_designs import clean_two_stage

TWO_STAGE_KEYS = {"two_stage_dominant_pole_hz", "two_stage_split_pole_hz", "miller_zero_hz",
                  "two_stage_gbw_hz", "a_total_dc"}
SINGLE_STAGE_KEYS = {"adm_dc", "miller_input_pole_hz", "output_pole_hz", "octc_f3db_hz",
                     "gbw_hz", "cmrr_corner_hz", "acm_se_dc", "acm_dm_dc",
                     # supply rejection, input impedance and noise rows (DESIGN.md §7f–§7h)
                     "psrr_pos_db_dc", "psrr_neg_db_dc", "zin_dm_dc", "zin_dm_corner_hz",
                     "noise_en_spot"}
EXAMPLE = ROOT / "examples" / "two_stage_miller_loop.toml"

# values of the clean two-stage design (tests/loop_designs.py): square-law nmos pair,
# λ = 0, no device capacitances, ideal tail, resistor load; the second stage's numbers
GM1 = math.sqrt(2 * 200e-6 * 20 * 100e-6)      # g_m = sqrt(2·μC_ox·W/L·I_D), I_D = 100 µA
R1, R2, GM2 = 100e3, 200e3, 5e-3
C_LOAD, C_IN = 0.2e-12, 0.05e-12
C1 = C_LOAD + C_IN
TWO_PI = 2 * math.pi

# in the regime: C_c = 10 pF ≫ C_1 = 0.25 pF, C_2 = 0.5 pF; g_m2·R_2 = 1000 ≫ 1
CC, C2 = 10e-12, 0.5e-12


def _rows(design):
    return {r.key: r for r in hand_table(freqpair.analyze(design))}


@pytest.fixture(scope="module")
def in_regime():
    return _rows(clean_two_stage(c_c=CC, c_out=C2))


def test_hand_values_are_the_textbook_two_stage_formulas(in_regime):
    r = in_regime
    # oracle: Gray et al. §9.4 (from memory), evaluated here from the design's numbers;
    # the first stage drives o2 single-ended: G_m1 = g_m1/2 with a resistor load
    # (Gray et al. §3.5, from memory)
    assert r["two_stage_dominant_pole_hz"].approx == pytest.approx(
        1 / (TWO_PI * GM2 * R1 * R2 * CC), rel=1e-12)
    assert r["two_stage_split_pole_hz"].approx == pytest.approx(
        GM2 * CC / (TWO_PI * (C1 * C2 + CC * (C1 + C2))), rel=1e-12)
    assert r["miller_zero_hz"].approx == pytest.approx(GM2 / (TWO_PI * CC), rel=1e-12)
    assert r["two_stage_gbw_hz"].approx == pytest.approx(GM1 / 2 / (TWO_PI * CC), rel=1e-12)
    assert r["a_total_dc"].approx == pytest.approx(-(GM1 / 2) * R1 * GM2 * R2, rel=1e-12)


def test_exact_and_hand_agree_where_the_textbook_says_they_hold(in_regime):
    r = in_regime
    # oracle: Gray et al. §9.4 (from memory) — approximations; tolerances stated here:
    # poles 2 %, GBW 3 %; the zero and the DC gain are exact in this network (1e-9)
    assert abs(r["two_stage_dominant_pole_hz"].error_pct) < 2
    assert abs(r["two_stage_split_pole_hz"].error_pct) < 2
    assert abs(r["two_stage_gbw_hz"].error_pct) < 3
    assert r["miller_zero_hz"].exact == pytest.approx(r["miller_zero_hz"].approx, rel=1e-9)
    assert r["a_total_dc"].exact == pytest.approx(r["a_total_dc"].approx, rel=1e-9)
    assert all(r[k].note is None for k in TWO_STAGE_KEYS)


def test_exact_split_pole_is_a_real_pole_of_a_total_not_the_dominant_one(in_regime):
    r = in_regime
    # oracle: common practice — pole splitting puts the two poles decades apart
    # (here p2/p1 ≈ g_m2·R_1·R_2·C_c²/(C_1·C_2 + C_c·(C_1+C_2)) ≫ 1, Gray et al. §9.4)
    assert r["two_stage_split_pole_hz"].exact > 1e4 * r["two_stage_dominant_pole_hz"].exact


def test_right_half_plane_zero_is_positive_and_left_half_plane_zero_negative():
    rhp = _rows(clean_two_stage(c_c=CC, c_out=C2))["miller_zero_hz"]
    lhp = _rows(clean_two_stage(c_c=CC, c_out=C2, r_z=2 / GM2))["miller_zero_hz"]
    # oracle: z = 1/(C_c·(1/g_m2 − R_z)): R_z = 0 → +g_m2/C_c, R_z = 2/g_m2 → −g_m2/C_c
    # (Gray et al. §9.4, from memory; exact for this network)
    assert rhp.exact == pytest.approx(GM2 / (TWO_PI * CC), rel=1e-9)
    assert lhp.exact == pytest.approx(-GM2 / (TWO_PI * CC), rel=1e-9)
    assert lhp.approx == pytest.approx(lhp.exact, rel=1e-9)
    assert "left half plane" in lhp.note


def test_nulling_resistor_of_one_over_gm2_puts_the_zero_at_infinity_and_notes_its_pole():
    r = _rows(clean_two_stage(c_c=CC, c_out=C2, r_z=1 / GM2))
    # oracle: z = 1/(C_c·(1/g_m2 − R_z)) → ∞ for R_z = 1/g_m2 (Gray et al. §9.4, from memory)
    z = r["miller_zero_hz"]
    assert z.exact is None and z.approx is None and "at infinity" in z.note
    # R_z adds a pole near 1/(R_z·C_1) ≈ 3 GHz, within 10× of the ≈ 1 GHz split pole
    # (same section: the nulling resistor's extra pole)
    assert "nulling resistor" in r["two_stage_split_pole_hz"].note


def test_small_miller_capacitor_is_noted_on_the_split_pole():
    r = _rows(clean_two_stage(c_c=3e-12, c_out="10 pF"))
    # oracle: common practice — the split-pole formula assumes C_c ≫ C_1, C_2 (Gray et al.
    # §9.4, from memory); here C_c = 3 pF < C_2 = 10 pF
    assert "is not ≫ C_1" in r["two_stage_split_pole_hz"].note


def test_low_second_stage_gain_is_noted_on_dominant_pole_and_gbw():
    d = design_with(clean_two_stage(c_c=CC, c_out=C2), second_stage__output_resistance="1 k")
    r = _rows(d)
    # oracle: the dominant-pole and GBW formulas need g_m2·R_2 ≫ 1 (Gray et al. §9.4, from
    # memory); here g_m2·R_2 = 5
    assert "g_m2·R_2 = 5 is not ≫ 1" in r["two_stage_dominant_pole_hz"].note
    assert "is not ≫ 1" in r["two_stage_gbw_hz"].note


def test_second_pole_below_the_gbw_is_noted_in_the_example():
    r = _rows(freqpair.load_design(EXAMPLE))
    gbw = r["two_stage_gbw_hz"]
    # oracle: common practice — a one-pole roll-off reaches unity gain at the GBW only
    # when the second pole lies above it
    assert r["two_stage_split_pole_hz"].exact < gbw.approx
    assert "second pole" in gbw.note
    # oracle: active-load first stage g_m·(r_o2∥r_o4) times −g_m2·R_2 (Gray et al. §4.3.5
    # and §9.4, from memory): the base current through r_pi is small, 3 %
    assert abs(r["a_total_dc"].error_pct) < 3
    assert r["a_total_dc"].approx < 0


def test_no_miller_capacitor_gives_no_split_pole_formula_and_says_why():
    r = _rows(clean_two_stage(c_c=0))
    # oracle: common practice — without C_c there is no pole splitting and no Miller zero
    for key in ("two_stage_dominant_pole_hz", "two_stage_split_pole_hz", "miller_zero_hz",
                "two_stage_gbw_hz"):
        assert r[key].approx is None and "no Miller capacitor" in r[key].note


def test_json_hand_keys_only_with_a_second_stage():
    two = hand_json(freqpair.analyze(clean_two_stage(c_c=CC, c_out=C2)))
    one = hand_json(freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE)))
    # oracle: the task's JSON contract — the new keys appear with [second_stage] only,
    # and the single-stage keys stay as documented in DEVELOPERS.md
    assert TWO_STAGE_KEYS <= set(two)
    assert not TWO_STAGE_KEYS & set(one)
    assert set(one) == SINGLE_STAGE_KEYS
    assert set(two["miller_zero_hz"]) == {"exact", "approx", "error_pct"}


def test_cli_json_carries_the_two_stage_rows():
    out = run_cli("analyze", EXAMPLE, "--json")
    assert out.returncode == 0, out.stderr
    hand = json.loads(out.stdout)["hand"]
    # oracle: z = g_m2/(2π·C_c) with R_z = 0, g_m2 = 8 mS, C_c = 8 pF from the example
    # file (Gray et al. §9.4, from memory; exact for this network)
    assert hand["miller_zero_hz"]["approx"] == pytest.approx(8e-3 / (TWO_PI * 8e-12), rel=1e-12)
    assert hand["miller_zero_hz"]["exact"] == pytest.approx(8e-3 / (TWO_PI * 8e-12), rel=1e-6)


def test_summary_report_and_app_show_the_two_stage_rows():
    design = clean_two_stage(c_c=CC, c_out=C2)
    a = freqpair.analyze(design)
    labels = [r.label for r in hand_table(a) if r.key in TWO_STAGE_KEYS]
    assert len(labels) == len(TWO_STAGE_KEYS)
    doc = Document()
    ex = make_doc(doc, design=design)
    ex.show_view("Hand estimates")      # the table is filled while it is shown
    shown = ex.hand.data["quantity"]
    # oracle: common practice — every face renders the same hand table
    for text in (str(a), report_html(a)):
        assert all(label in text for label in labels)
    assert all(label in shown for label in labels)
