"""freqpair.views.explore: the explorer's data, checked against independent code paths."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.errors import DesignError
from freqpair.views.explore import (
    CURVE_COLUMNS,
    curves_csv,
    editable_values,
    explore,
    explore_grid,
    switch_kind,
)

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


@pytest.fixture(scope="module")
def design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


@pytest.fixture(scope="module")
def data(design):
    return explore(design, target_db=60.0)


def _direct(design, f_hz):
    """Gains by a plain per-frequency dense solve of (G + sC) x = B (numpy.linalg.solve)."""
    stage = freqpair.build_stage(design)
    G, C, B = stage.network.matrices()
    n = stage.network
    l1, l2 = n.selector({"o1": 1.0}), n.selector({"o2": 1.0})
    out = []
    for f in np.atleast_1d(f_hz):
        x = np.linalg.solve(G + 2j * np.pi * f * C, B[:, :2])      # in1, in2
        dm, cm = x @ np.array([0.5, -0.5]), x @ np.array([1.0, 1.0])
        out.append({"adm": l1 @ dm - l2 @ dm, "adm_se": l2 @ dm, "acm_se": l2 @ cm,
                    "acm_dm": l1 @ cm - l2 @ cm})
    return out


def test_gain_curves_match_a_direct_dense_solve(design, data):
    f = data["curves"]["f_hz"]
    idx = [0, 137, 333, 499]
    ref = _direct(design, f[idx])
    for k, i in enumerate(idx):
        # oracle: numpy.linalg.solve of G + j2πf·C at each frequency, same network
        assert data["curves"]["adm_db"][i] == pytest.approx(20 * math.log10(abs(ref[k]["adm"])),
                                                            abs=1e-9)
        assert data["curves"]["acm_se_db"][i] == pytest.approx(
            20 * math.log10(abs(ref[k]["acm_se"])), abs=1e-9)
        cmrr = 20 * math.log10(abs(ref[k]["adm_se"]) / abs(ref[k]["acm_se"]))
        assert data["curves"]["cmrr_se_db"][i] == pytest.approx(cmrr, abs=1e-9)


def test_target_crossing_is_where_direct_solve_cmrr_equals_target(design, data):
    f = data["target_cross_hz"]
    assert f is not None and data["target"]["f_hz"] == [f]
    r = _direct(design, [f])[0]
    # oracle: dense direct solve at the reported frequency gives the target level
    assert 20 * math.log10(abs(r["adm_se"]) / abs(r["acm_se"])) == pytest.approx(60.0, abs=1e-6)


def test_corner_mark_is_3db_below_dc_cmrr(design, data):
    an = freqpair.analyze(design)
    f = data["corner"]["f_hz"][0]
    assert f == an.cmrr_corner_hz
    r = _direct(design, [f])[0]
    # oracle: DESIGN.md §2 corner definition (−20·log10 √2 dB) checked by a dense solve
    level = 20 * math.log10(abs(r["adm_se"]) / abs(r["acm_se"]))
    assert level == pytest.approx(an.cmrr_se_db - 20 * math.log10(math.sqrt(2)), abs=1e-6)
    assert data["corner"]["cmrr_db"][0] == pytest.approx(level, abs=1e-6)


def test_target_above_dc_cmrr_has_no_crossing_and_says_so(design):
    d = explore(design, target_db=200.0)
    assert d["target_cross_hz"] is None and d["target"]["f_hz"] == []
    row = [v for q, v in zip(d["metrics"]["quantity"], d["metrics"]["value"]) if "target" in q]
    assert row == ["already below at DC"]   # common practice: say why there is no mark


def test_poles_are_roots_of_the_network_determinant(design, data):
    stage = freqpair.build_stage(design)
    G, C, _ = stage.network.matrices()
    pz = data["poles_zeros"]
    poles = [complex(r, i) * 2 * np.pi for k, r, i in zip(pz["kind"], pz["re_hz"], pz["im_hz"])
             if k == "pole"]
    assert poles
    for p in poles:
        # oracle: smallest singular value of G + pC (numpy SVD) vanishes at a natural frequency
        sv = np.linalg.svd(G + p * C, compute_uv=False)
        assert sv[-1] <= 1e-9 * sv[0]


def test_grid_spans_the_sweep_with_500_points(design):
    f = explore_grid(design)
    # oracle: numpy.logspace over the design's [sweep] (common practice)
    np.testing.assert_allclose(f, np.logspace(0, 10, 500), rtol=1e-12)


def test_editable_values_text_parses_back_to_the_value(design):
    values = editable_values(design)
    keys = {v.key for v in values}
    assert {"tail.capacitance", "bias.tail_current", "pair.beta", "mismatch.load"} <= keys
    for v in values:
        if v.scale == "int":
            assert int(v.text) == v.value
            continue
        # oracle: quantiphy reading the shown engineering text (DESIGN.md §3 syntax)
        got = freqpair.replace_value(design, v.key, v.text)
        assert freqpair.get_value(got, v.key) == pytest.approx(v.value, rel=1e-6)
        assert v.slider_lo <= v.slider_value() <= v.slider_hi


def test_switching_the_pair_to_nmos_gives_a_feasible_mos_design(design):
    d = switch_kind(design, "pair", "nmos")
    assert d.pair.type == "nmos"
    an = freqpair.analyze(d)
    # oracle: DESIGN.md §2 square law g_m = sqrt(2·μC_ox·(W/L)·I_D)
    assert an.operating_point.small_signal.gm == pytest.approx(
        math.sqrt(2 * 200e-6 * 20 * 0.5e-3), rel=1e-12)


def test_mirror_load_device_follows_pair_polarity(design):
    d = switch_kind(switch_kind(design, "load", "mirror"), "pair", "nmos")
    # oracle: DESIGN.md §3a — an nmos pair needs a pmos mirror
    assert d.load.device.type == "pmos"


def test_unknown_kind_is_a_one_line_error_naming_it(design):
    with pytest.raises(DesignError, match=r"tail.type = 'magic'"):
        switch_kind(design, "tail", "magic")


def test_csv_has_a_header_and_one_row_per_frequency(data):
    text = curves_csv(data["curves"])
    lines = text.strip().split("\n")
    assert lines[0].split(",") == list(CURVE_COLUMNS)     # common practice: header row
    assert len(lines) == 501
    assert "nan" not in text.lower()


def test_zero_common_mode_gain_shows_no_curve_instead_of_minus_300_db():
    text = BUILTIN_EXAMPLE.replace('type = "norton"\nresistance = "1 M"\ncapacitance = "2 pF"',
                                   'type = "ideal"')
    text = text.replace("load = 0.01", "load = 0.0")
    d = freqpair.design_from_text(text)
    d = switch_kind(d, "pair", "nmos")
    data = explore(d)
    # oracle: DESIGN.md §2 — a matched MOS pair with an ideal tail has zero CM gain
    assert np.all(np.isnan(data["curves"]["acm_dm_db"]))
    assert "nan" not in " ".join(data["metrics"]["value"]).lower()


def test_switching_tail_kind_keeps_the_tail_device_of_the_right_polarity():
    d = freqpair.load_design(EXAMPLES / "nmos_mirror_load_cascode_tail.toml")
    m = switch_kind(d, "tail", "mirror")
    # oracle: DESIGN.md §3a — a transistor tail's devices have the pair's polarity; the
    # designer's own device (here W = 80 µm) is kept, not replaced by a default
    assert m.tail.type == "mirror" and m.tail.device == d.tail.device
    assert m.tail.extra_capacitance == d.tail.extra_capacitance
    back = switch_kind(switch_kind(m, "pair", "pmos"), "pair", "nmos")
    assert back.tail.device.type == "nmos" and back.load.device.type == "pmos"


def test_pole_zero_points_are_the_primary_gain_with_cancelled_pairs_left_out(design):
    matched = freqpair.replace_value(design, "mismatch.load", 0)
    an = freqpair.analyze(matched)
    pz = explore(matched, analysis=an)["poles_zeros"]
    n_nat = len(an.natural_frequencies_rad_s)
    # oracle: DESIGN.md §2 symmetry — a perfectly matched pair's balanced gain sees only the
    # differential half circuit (2 poles: input and output node); the 3 tail/common-mode
    # natural frequencies cancel against zeros and are not drawn
    assert pz["kind"].count("pole") == 2 and n_nat == 5


def test_added_second_stage_has_the_documented_defaults_and_removal_restores(design):
    from freqpair.views.explore import with_second_stage
    two = with_second_stage(design, True)
    s = two.second_stage
    # DESIGN.md §3a example stage values (the explorer's documented starting point)
    assert (s.gm, s.output_resistance, s.input_capacitance, s.load_capacitance,
            s.miller_capacitance, s.nulling_resistance) == (4e-3, 150e3, 0.5e-12, 10e-12,
                                                            3e-12, 0.0)
    assert with_second_stage(two, True) is two
    assert with_second_stage(two, False) == design
    # textbook (Gray & Meyer §9.4, from memory): the two-stage DC gain is A_1·g_m2·R_out2
    an = freqpair.analyze(two)
    assert 10 ** (an.a_total_db / 20) == pytest.approx(
        10 ** (an.adm_db_first / 20) * 4e-3 * 150e3, rel=1e-9)


def test_design_difference_names_the_old_value_kind_or_section(design):
    from freqpair.views.explore import design_difference, switch_kind, with_second_stage
    changed = freqpair.replace_value(design, "tail.capacitance", "20 pF")
    # common practice: a snapshot is labelled by its own value of what was changed
    assert design_difference(design, changed) == "C_tail 2 pF"
    assert design_difference(changed, design) == "C_tail 20 pF"
    assert design_difference(design, design) == ""
    assert design_difference(design, switch_kind(design, "tail", "ideal")) == "tail norton"
    two = with_second_stage(design, True)
    assert design_difference(design, two) == "no second stage"
    assert design_difference(two, design) == "with second stage"
    many = freqpair.replace_value(freqpair.replace_value(changed, "load.resistance", "5 k"),
                                  "source.resistance", "50")
    assert design_difference(design, many) == "R_load 10 kΩ, C_tail 2 pF, +1 more"
