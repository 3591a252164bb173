"""The second edition's values in every face: JSON keys, CSV, sweeps, summary, bad input.

Oracles: the JSON contract (DESIGN.md §4 and §7e–§7h: the keys in every answer);
freqpair.analyze on the same design (faces show the library's numbers); the
design-file contract of §3/§7 (one-line errors naming key and value).
"""
import json
import math

import numpy as np
import pytest

import freqpair
from conftest import EXAMPLES, ROOT
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.targets import metric_value
from helpers import design_with, run_cli

NEW_KEYS = ("psrr_pos_db", "psrr_neg_db", "psrr_pos_corner_hz", "psrr_neg_corner_hz",
            "zin_dm_ohm", "zin_cm_ohm", "zin_dm_corner_hz", "beta_dc", "noise")


def _finite_or_null(v):
    return v is None or (isinstance(v, float) and math.isfinite(v))


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_every_json_answer_has_the_second_edition_keys(path):
    # oracle: DESIGN.md §7 — "the keys of 7e–7h are in every --json answer"
    run = run_cli("analyze", path, "--json")
    assert run.returncode == 0, run.stderr
    obj = json.loads(run.stdout)
    for key in NEW_KEYS:
        assert key in obj, key
    for key in NEW_KEYS[:-2]:
        assert _finite_or_null(obj[key]), (key, obj[key])
    d = freqpair.load_design(path)
    if d.feedback is None:
        assert obj["beta_dc"] is None
    else:
        assert obj["beta_dc"] == pytest.approx(d.feedback.factor, rel=1e-15)
    noise = obj["noise"]
    assert set(noise) >= {"spot", "band_hz", "input_rms_v", "output_rms_v"}
    assert noise["band_hz"] == list(d.noise.band)                 # §7h (defaults 10 Hz … 100 kHz)
    assert [s["f_hz"] for s in noise["spot"]] == list(d.noise.spot_frequencies)
    spot = noise["spot"][0]
    assert set(spot) >= {"f_hz", "input_v_rthz", "output_v_rthz", "nf_db", "contributors"}
    shares = [c["share"] for c in spot["contributors"]]
    assert sum(shares) == pytest.approx(1.0, abs=1e-9)
    assert shares == sorted(shares, reverse=True)
    assert (spot["nf_db"] is None) == (d.source.resistance == 0)


def test_divider_beta_dc_is_rg_over_rf_plus_rg():
    # oracle: DESIGN.md §7e — beta_dc = R_g/(R_f + R_g) for a divider
    d = design_with(feedback={"type": "divider", "series_resistance": "9 k",
                              "shunt_resistance": "1 k", "shunt_capacitance": "5 pF"})
    assert freqpair.analyze(d).to_json()["beta_dc"] == pytest.approx(0.1, rel=1e-15)


@pytest.mark.parametrize("feedback, words", [
    ({"type": "divider", "factor": 0.1, "series_resistance": 9e3, "shunt_resistance": 1e3},
     ["feedback.factor", "unknown key"]),
    ({"factor": 0.1, "series_resistance": 9e3}, ["feedback.series_resistance", "unknown key"]),
    ({"type": "divider", "series_resistance": 0, "shunt_resistance": 1e3},
     ["feedback.series_resistance", "0", "greater than 0"]),
    ({"type": "divider", "series_resistance": 9e3, "shunt_resistance": -1},
     ["feedback.shunt_resistance", "-1"]),
])
def test_bad_feedback_is_one_line_naming_key_and_value(feedback, words):
    # oracle: DESIGN.md §7e ("factor under a divider ... is an unknown-key error") and §3
    with pytest.raises(freqpair.DesignError) as info:
        design_with(feedback=feedback)
    msg = str(info.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg, (w, msg)


@pytest.mark.parametrize("element, words", [
    ({"kind": "capacitor", "nodes": ["t", "nowhere"], "value": "1 pF"},
     ["element.0.nodes", "nowhere", "in1, in2, b1, b2, o1, o2, t, ground, vpos, vneg"]),
    ({"kind": "resistor", "nodes": ["o1", "o2"], "value": "-5 k"},
     ["element.0.value", "-5 k", "greater than 0"]),
    ({"kind": "capacitor", "nodes": ["o1"], "value": "1 pF"}, ["element.0.nodes"]),
    ({"kind": "inductor", "nodes": ["o1", "o2"], "value": 1}, ["element.0.kind", "inductor"]),
    ({"kind": "resistor", "nodes": ["o1", "o2"], "value": "1 k", "control": ["o1", "t"]},
     ["element.0.control", "unknown key"]),
    ({"kind": "transconductance", "nodes": ["o1", "ground"], "value": "1 mS"},
     ["element.0.control", "missing"]),
    ({"kind": "capacitor", "nodes": ["e1", "ground"], "value": "1 pF"},
     ["element.0.nodes", "e1"]),                      # e1 exists only with degeneration
])
def test_bad_element_is_one_line_naming_key_and_value(element, words):
    # oracle: DESIGN.md §7d — an unknown node is a one-line error listing the stage's nodes
    with pytest.raises(freqpair.DesignError) as info:
        design_with(element=[element])
    msg = str(info.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg, (w, msg)


def test_a_zero_capacitor_or_a_huge_resistor_to_nothing_changes_nothing():
    # oracle: DESIGN.md §7d — a 0 F capacitor is absent; 1e30 Ω is open to 1e-20
    base = freqpair.analyze(design_with(BUILTIN_EXAMPLE))
    for el in ({"kind": "capacitor", "nodes": ["t", "ground"], "value": 0},
               {"kind": "resistor", "nodes": ["o1", "vneg"], "value": 1e30}):
        a = freqpair.analyze(design_with(BUILTIN_EXAMPLE, element=[el]))
        for key in ("adm_db", "f3db_hz", "cmrr_se_db", "psrr_pos_db", "zin_dm_ohm"):
            got, want = a.to_json()[key], base.to_json()[key]
            assert got == pytest.approx(want, rel=1e-12), key


def test_degeneration_to_zero_gives_the_undegenerated_numbers():
    # oracle: DESIGN.md §7a — R_E = 0 is no resistor (nodes e1, e2 absent); as R_E → 0
    # every number approaches it, the gap shrinking in proportion (g_m·R_E ≪ 1)
    base = freqpair.analyze(design_with(BUILTIN_EXAMPLE)).to_json()
    gaps = []
    for r_e in (0.1, 0.01):
        near = freqpair.analyze(design_with(BUILTIN_EXAMPLE, pair__degeneration=r_e)).to_json()
        gaps.append(max(abs(near[k] / base[k] - 1)
                        for k in ("adm_db", "f3db_hz", "cmrr_se_db", "zin_dm_ohm")))
    assert gaps[1] < 3e-4 and gaps[1] < 0.2 * gaps[0]


def test_an_added_tail_capacitor_is_the_same_as_a_larger_tail_capacitance():
    # oracle: circuit theory — two capacitors in parallel add
    a = freqpair.analyze(design_with(tail__capacitance="2 pF", element=[
        {"kind": "capacitor", "nodes": ["t", "vneg"], "value": "3 pF", "name": "wiring"}]))
    b = freqpair.analyze(design_with(tail__capacitance="5 pF"))
    assert a.cmrr_corner_hz == pytest.approx(b.cmrr_corner_hz, rel=1e-10)


def test_an_element_value_sweeps_by_name_and_by_index():
    # oracle: DESIGN.md §7d — sweeps by element.NAME.value or element.N.value
    d = design_with(element=[{"kind": "capacitor", "nodes": ["t", "vneg"], "value": "1 pF",
                              "name": "wiring"}])
    by_name = freqpair.replace_value(d, "element.wiring.value", 4e-12)
    by_index = freqpair.replace_value(d, "element.0.value", 4e-12)
    assert by_name == by_index and by_name.element[0].value == 4e-12
    assert freqpair.get_value(d, "element.wiring.value") == pytest.approx(1e-12)
    run = run_cli("sweep", "-", "--vary", "element.wiring.value=1p,2p")  # stdin not a path
    assert run.returncode != 0


def test_sweep_metrics_of_the_new_sections_equal_the_analysis():
    # oracle: freqpair.analyze on the same design, point by point
    from freqpair.studies.sweep import SweepAxis, sweep
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    metrics = ("psrr_pos_db", "psrr_neg_db", "zin_dm_ohm", "input_noise_v_rthz",
               "input_rms_v")
    values = (0.5e-3, 2e-3)
    rows = sweep(d, [SweepAxis("bias.tail_current", values)], metrics=metrics,
                 at_hz=10e3).to_rows()
    for row, v in zip(rows, values):
        a = freqpair.analyze(freqpair.replace_value(d, "bias.tail_current", v))
        for m in metrics:
            at = None if m == "input_rms_v" else 10e3
            assert row[m] == pytest.approx(metric_value(a, m, at), rel=1e-12), m


def test_csv_columns_hold_the_library_values(tmp_path):
    # oracle: freqpair.analyze — the curves the library computes at the same frequencies
    from freqpair.analysis.noise import noise_curves
    from freqpair.analysis.supply import psrr_db
    path = tmp_path / "c.csv"
    run = run_cli("analyze", "--example", "--csv", path)
    assert run.returncode == 0, run.stderr
    lines = path.read_text().splitlines()
    head = lines[0].split(",")
    for col in ("psrr_pos_db", "psrr_neg_db", "zin_dm_ohm", "zin_cm_ohm",
                "input_noise_v_rthz", "output_noise_v_rthz", "a_vpos_db", "a_vneg_db"):
        assert col in head, col
    data = np.array([[float(x) if x else np.nan for x in ln.split(",")] for ln in lines[1:]])
    col = {name: data[:, i] for i, name in enumerate(head)}
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    f = col["frequency_hz"][::97]
    r = a.responses.at(f)
    np.testing.assert_allclose(col["psrr_neg_db"][::97], psrr_db(r, "vneg", "adm_se"),
                               rtol=1e-12)
    np.testing.assert_allclose(col["zin_dm_ohm"][::97], np.abs(r.zin_dm), rtol=1e-12)
    np.testing.assert_allclose(col["input_noise_v_rthz"][::97],
                               noise_curves(a.responses, f).input_v_rthz, rtol=1e-12)


def test_summary_shows_supply_input_and_noise_sections():
    # oracle: the library's numbers, formatted as the summary formats them
    run = run_cli("analyze", "--example")
    text = run.stdout
    a = freqpair.analyze(freqpair.design_from_text(BUILTIN_EXAMPLE))
    assert "Supply rejection" in text and "Input impedance" in text and "Noise" in text
    assert f"{a.supply.psrr_pos_db:.2f} dB" in text
    assert freqpair.format_si(a.input_impedance.zin_dm_ohm, "Ω") in text
    assert freqpair.format_si(a.noise().spots[0].input_v_rthz, "V/√Hz") in text
    assert "noiseless" in text                    # the idealisations are said


def test_cascode_without_headroom_is_one_line_naming_the_cascode():
    # oracle: DESIGN.md §7c — each headroom violation is a one-line error naming the device
    d = design_with(pair__cascode={"beta": 150, "early_voltage": 60, "bias": 11.9})
    with pytest.raises(freqpair.BiasError) as info:
        freqpair.analyze(d)
    msg = str(info.value)
    assert msg.startswith("pair.cascode (npn): saturated") and "\n" not in msg


def test_cascode_of_the_other_polarity_is_refused():
    with pytest.raises(freqpair.DesignError, match="pair.cascode.type = 'pnp'"):
        design_with(pair__cascode={"type": "pnp", "beta": 150, "early_voltage": 60,
                                   "bias": 5})


def test_compensate_finds_the_feedback_capacitor_on_the_command_line(tmp_path):
    # oracle: the re-analysed phase margin of the answer (the loop itself is checked
    # against python-control elsewhere)
    src = (ROOT / "examples" / "two_stage_miller_loop.toml").read_text()
    src = src.replace("[feedback]\nfactor = 0.5", "[feedback]\ntype = \"divider\"\n"
                      "series_resistance = \"10 k\"\nshunt_resistance = \"10 k\"\n"
                      "shunt_capacitance = \"20 pF\"")
    path = tmp_path / "div.toml"
    path.write_text(src)
    d = freqpair.load_design(path)
    assert d.feedback.type == "divider"
    base_pm = freqpair.analyze(d).loop().phase_margin_deg
    target = min(base_pm + 5.0, 89.0)
    run = run_cli("compensate", path, "--solve", "series_capacitance", "--target-pm",
                  str(target), "--json")
    if run.returncode != 0:
        assert "cannot reach" in run.stderr and len(run.stderr.splitlines()) == 1
        return
    obj = json.loads(run.stdout)
    again = freqpair.analyze(freqpair.replace_value(d, "feedback.series_capacitance",
                                                    obj["value"]))
    assert again.loop().phase_margin_deg >= target - 1e-6
