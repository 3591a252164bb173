"""The drawn picture of the stage: valid SVG, every part and value the design gives."""
from __future__ import annotations

import pathlib
import xml.etree.ElementTree as ET

import pytest

import freqpair
from freqpair.design.quantities import format_si
from freqpair.views.schematic import stage_svg

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))
SVG = "{http://www.w3.org/2000/svg}"


def _texts(svg):
    return [t.text for t in ET.fromstring(svg).iter(f"{SVG}text")]


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_schematic_is_valid_svg_with_both_devices(path):
    # oracle: XML well-formedness (xml.etree); the pair has two devices (DESIGN.md §2)
    d = freqpair.load_design(path)
    root = ET.fromstring(stage_svg(d))
    assert root.tag == f"{SVG}svg"
    texts = _texts(stage_svg(d))
    assert {"in1", "in2", "o1", "o2", "t"} <= set(texts)
    prefix = "Q" if d.pair.is_bipolar else "M"
    assert {f"{prefix}1", f"{prefix}2"} <= set(texts)


def test_schematic_labels_values_from_the_design(builtin_design):
    # oracle: the design file's own values (BUILTIN_EXAMPLE text), split ±δ/2 per DESIGN.md §2
    texts = " | ".join(_texts(stage_svg(builtin_design)))
    assert "R_L 10.05 kΩ" in texts and "R_L 9.95 kΩ" in texts   # 10 k, 1 % mismatch
    assert "R_s 1 kΩ" in texts and "C_L 1 pF" in texts
    assert "1 MΩ" in texts and "2 pF" in texts and "I_tail 1 mA" in texts
    assert f"V+ {format_si(12, 'V')}" in texts


def test_ideal_tail_draws_no_tail_resistor():
    # oracle: DESIGN.md §2 — an ideal tail is a current source alone
    d = freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml")
    texts = " | ".join(_texts(stage_svg(d)))
    assert "R_tail" not in texts and "(ideal)" in texts


def test_mirror_load_is_drawn_as_a_mirror(builtin_design):
    # oracle: DESIGN.md §3a — a mirror load has devices, no load resistors, C_L at o2 only
    d = freqpair.replace_value(builtin_design, "load", {
        "type": "mirror", "capacitance": "1 pF",
        "device": {"type": "pnp", "beta": 80, "early_voltage": 45}})
    texts = _texts(stage_svg(d))
    assert not any(t.startswith("R_L") for t in texts)
    assert "mirror load" in texts and any(t.startswith("pnp, β 80") for t in texts)
    assert sum(t.startswith("C_L") for t in texts) == 1


def test_schematic_escapes_the_design_name(builtin_design):
    # oracle: XML escaping rules — a name with markup characters still parses
    d = freqpair.replace_value(builtin_design, "name", 'a <b> & "c"')
    ET.fromstring(stage_svg(d))


# ----------------------------------------------------------------- transistor tails,
# second stage, feedback, and a drawing clear of overlapping labels

import re
import tomllib

import tomli_w

PNP = {"type": "pnp", "beta": 80, "early_voltage": 50}
NPN = {"type": "npn", "beta": 150, "early_voltage": 80}
PMOS = {"type": "pmos", "mobility_cox": "80 uA/V2", "width": "80 um", "length": "1 um",
        "threshold": 0.6, "lambda": 0.05}
NMOS = {"type": "nmos", "mobility_cox": "200 uA/V2", "width": "40 um", "length": "1 um",
        "threshold": 0.5, "lambda": 0.05}
SECOND = {"gm": "8 mS", "output_resistance": "100 k", "input_capacitance": "1 pF",
          "load_capacitance": "20 pF", "miller_capacitance": "8 pF",
          "nulling_resistance": "125"}

DIVIDER = {"type": "divider", "series_resistance": "9 k", "series_capacitance": "1 pF",
           "shunt_resistance": "1 k", "shunt_capacitance": "5 pF"}
ELEMENTS = [  # drawn: the first shunt at t; listed: all the others
    {"kind": "capacitor", "nodes": ["ground", "t"], "value": "1.5 pF", "name": "tail wiring"},
    {"kind": "resistor", "nodes": ["t", "vneg"], "value": "1 M", "name": "tail leak"},
    {"kind": "capacitor", "nodes": ["o1", "b2"], "value": "60 fF", "name": "coupling o1-b2"},
    {"kind": "transconductance", "nodes": ["o2", "o1"], "value": "50 uS",
     "control": ["e1", "ground"],
     "name": "a rather long name for a leakage path between the outputs"},
    {"kind": "capacitor", "nodes": ["o2", "ground"], "value": "0.2 pF"},
]


def _variant(example, **sections):
    """An example design file with whole sections replaced (checked by the loader)."""
    data = tomllib.loads((ROOT / "examples" / f"{example}.toml").read_text(encoding="utf-8"))
    data.update(sections)
    return freqpair.design_from_text(tomli_w.dumps(data))


VARIANTS = {
    "npn_degenerated_tail": lambda: _variant(
        "npn_mirror_load_simple_mirror_tail", tail={
            "type": "degenerated", "degeneration": "2 k", "extra_capacitance": "0.5 pF",
            "device": {"type": "npn", "beta": 120, "early_voltage": 70}}),
    "npn_cascode_tail_second_stage_rz": lambda: _variant(
        "two_stage_miller_loop", tail={"type": "cascode", "extra_capacitance": "0.2 pF",
                                       "device": {"type": "npn", "beta": 120,
                                                  "early_voltage": 70}},
        second_stage=SECOND),
    "pmos_pair_degenerated_tail_second_stage": lambda: _variant(
        "nmos_mirror_load_cascode_tail", pair=PMOS,
        load={"type": "mirror", "capacitance": "1 pF", "device": NMOS},
        tail={"type": "degenerated", "degeneration": "5 k", "device": PMOS,
              "extra_capacitance": "0.3 pF"},
        second_stage=SECOND, feedback={"factor": 0.5}),
    "pmos_pair_cascode_tail": lambda: _variant(
        "nmos_mirror_load_cascode_tail", pair=PMOS,
        load={"type": "mirror", "capacitance": "1 pF", "device": NMOS},
        tail={"type": "cascode", "device": PMOS, "extra_capacitance": "0.3 pF"}),
    "pnp_pair_mirror_tail_second_stage": lambda: _variant(
        "ota_tail_cap_loop", pair=PNP, load={"type": "mirror", "capacitance": "1 pF",
                                             "device": NPN},
        tail={"type": "mirror", "device": PNP, "extra_capacitance": "0.3 pF"},
        second_stage=dict(SECOND, nulling_resistance=0)),
    "pnp_pair_resistor_load_ideal_tail": lambda: _variant(
        "npn_resistor_rc_tail", pair=PNP, tail={"type": "ideal"}),
    # second edition (DESIGN.md §7): degeneration, cascoded pairs, divider, added elements
    "npn_cascode_degenerated_divider_cf": lambda: _variant(
        "npn_resistor_rc_tail",
        pair=dict(NPN, degeneration="470", cascode=dict(NPN, bias=5)),
        feedback=DIVIDER),
    "pnp_cascode_pair_elements": lambda: _variant(
        "npn_resistor_rc_tail", pair=dict(PNP, cascode=dict(PNP, bias=-5)),
        element=[{"kind": "resistor", "nodes": ["t", "vpos"], "value": "200 k",
                  "name": "tail leak"},
                 {"kind": "transconductance", "nodes": ["o1", "o2"], "value": "-2 mS",
                  "control": ["t", "ground"], "name": "substrate coupling"},
                 {"kind": "capacitor", "nodes": ["o1", "o2"], "value": "30 fF"}]),
    "nmos_cascode_degenerated_pair": lambda: _variant(
        "nmos_resistor_ideal_tail",
        pair=dict(NMOS, degeneration="1 k", body_effect=0.4,
                  cascode=dict(NMOS, bias=2.4, body_effect=0.4)),
        load={"type": "resistor", "resistance": "8 k", "capacitance": "150 fF"}),
    "pmos_cascode_pair_mirror_load_factor": lambda: _variant(
        "nmos_mirror_load_cascode_tail",
        bias={"tail_current": "200 uA", "input_common_mode": 1.2},
        pair=dict(PMOS, body_effect=0.5, cascode=dict(PMOS, bias=0.9)),
        load={"type": "mirror", "capacitance": "0.5 pF", "device": dict(NMOS, body_effect=0.3)},
        tail={"type": "cascode", "device": PMOS, "extra_capacitance": "0.3 pF"},
        feedback={"factor": 0.2}),
    "npn_degenerated_many_elements_factor": lambda: _variant(
        "npn_degenerated_instrumentation", feedback={"factor": 0.1},
        element=ELEMENTS),
    "npn_drawn_element_long_name_mirror_tail": lambda: _variant(
        "npn_mirror_load_simple_mirror_tail",
        pair=dict(NPN, degeneration="2 k"),
        element=[{"kind": "resistor", "nodes": ["vneg", "t"], "value": "4.7 M",
                  "name": "a leakage path to the negative rail, long named"}]),
    "nmos_divider_no_caps_balanced": lambda: _variant(
        "nmos_adc_driver_loop", feedback={"type": "divider", "series_resistance": "30 k",
                                          "shunt_resistance": "10 k"}),
    "nmos_second_stage_divider_cf_cascode_degenerated": lambda: _variant(
        "nmos_cascode_divider_loop",
        pair=dict(NMOS, degeneration="2 k", cascode=dict(NMOS, bias=3.3)),
        feedback=dict(DIVIDER, series_capacitance="0.9 pF"),
        element=ELEMENTS[:1] + ELEMENTS[3:]),
}
ALL = ([(p.stem, lambda p=p: freqpair.load_design(p)) for p in EXAMPLES]
       + list(VARIANTS.items()))


def _text_boxes(svg):
    """Approximate box (x0, y0, x1, y1) of every text: width 0.55·size per
    character (sans-serif here renders ≈ 0.47·size), from 0.8·size above the baseline to 0.25·size below, placed by
    its text-anchor."""
    boxes = []
    for t in ET.fromstring(svg).iter(f"{SVG}text"):
        x, y, size = float(t.get("x")), float(t.get("y")), float(t.get("font-size"))
        w = 0.55 * size * len(t.text)
        x0 = {"start": x, "middle": x - w / 2, "end": x - w}[t.get("text-anchor")]
        boxes.append((t.text, (x0, y - 0.8 * size, x0 + w, y + 0.25 * size)))
    return boxes


def _overlapping_labels(svg):
    boxes = _text_boxes(svg)
    hits = []
    for i, (a, (ax0, ay0, ax1, ay1)) in enumerate(boxes):
        for b, (bx0, by0, bx1, by1) in boxes[i + 1:]:
            if ax0 < bx1 and bx0 < ax1 and ay0 < by1 and by0 < ay1:
                hits.append((a, b))
    return hits


def test_overlap_check_finds_two_labels_on_top_of_each_other():
    # oracle: common practice (axis-aligned box intersection); two labels drawn at
    # one point must be reported, two labels far apart must not
    svg = (f'<svg xmlns="http://www.w3.org/2000/svg">'
           '<text x="10" y="20" font-size="12" text-anchor="start">R_out 1 kΩ</text>'
           '<text x="30" y="24" font-size="12" text-anchor="start">C_L 2 pF</text>'
           '<text x="300" y="24" font-size="12" text-anchor="end">far away</text></svg>')
    assert _overlapping_labels(svg) == [("R_out 1 kΩ", "C_L 2 pF")]


@pytest.mark.parametrize("name,make", ALL, ids=[n for n, _ in ALL])
def test_no_two_labels_overlap_and_all_lie_inside_the_drawing(name, make):
    # oracle: common practice for drawings (labels readable: no two text boxes
    # intersect, every box inside the viewBox); box size estimated per _text_boxes
    svg = stage_svg(make())
    assert _overlapping_labels(svg) == []
    _, _, w, h = (float(v) for v in ET.fromstring(svg).get("viewBox").split())
    for text, (x0, y0, x1, y1) in _text_boxes(svg):
        assert 0 <= x0 and x1 <= w and 0 <= y0 and y1 <= h, text


def _device_circles(svg):
    """Bipolar device bodies: the circles of radius 24."""
    return sum(c.get("r") == "24" for c in ET.fromstring(svg).iter(f"{SVG}circle"))


def test_degenerated_tail_draws_its_resistor_with_value():
    # oracle: DESIGN.md §3a — a degenerated tail is one device plus R_degeneration
    # (2 k in the design) to the rail; pair 2 + mirror 2 + tail 1 bipolar devices
    d = VARIANTS["npn_degenerated_tail"]()
    svg = stage_svg(d)
    texts = _texts(svg)
    assert f"R_deg {format_si(2e3, 'Ω')}" in texts
    assert "Q_t" in texts and _device_circles(svg) == 5
    assert f"C_extra {format_si(0.5e-12, 'F')}" in texts
    assert f"I_tail {format_si(d.bias.tail_current, 'A')}" in texts


@pytest.mark.parametrize("name,bipolar", [("npn_cascode_tail_second_stage_rz", True),
                                          ("pmos_pair_cascode_tail", False)])
def test_cascode_tail_draws_two_stacked_devices(name, bipolar):
    # oracle: DESIGN.md §3a — a cascode tail is two devices (current source and
    # cascode), both carrying I_tail, the tail node at the top of the stack
    svg = stage_svg(VARIANTS[name]())
    texts = _texts(svg)
    q = "Q" if bipolar else "M"
    assert sorted(t for t in texts if re.fullmatch(r"[QM]_t\d?", t)) == [f"{q}_t1", f"{q}_t2"]
    assert {"cascode", "current source"} <= set(texts)
    if bipolar:
        assert _device_circles(svg) == 6         # pair 2 + mirror load 2 + tail 2
    # the cascode device (t2) sits above the current source (t1): smaller y
    ys = {t.text: float(t.get("y")) for t in ET.fromstring(svg).iter(f"{SVG}text")}
    assert ys[f"{q}_t2"] < ys[f"{q}_t1"]


def test_simple_mirror_tail_is_one_device_with_a_labelled_bias_node():
    # oracle: DESIGN.md §3a — the simple mirror tail is the output device, base at
    # AC ground (the mirror's V_BE bias)
    d = freqpair.load_design(ROOT / "examples" / "npn_mirror_load_simple_mirror_tail.toml")
    texts = _texts(stage_svg(d))
    assert [t for t in texts if re.fullmatch(r"[QM]_t\d?", t)] == ["Q_t"]
    assert "V_BE" in texts and "simple mirror output" in texts
    assert any(t.startswith("npn, β 120") for t in texts)     # tail.device beta = 120


def test_second_stage_is_drawn_with_its_values():
    # oracle: DESIGN.md §3a — inverting transconductor g_m2 from o2 to out, R_out and
    # C_L at out, C_in at o2, Miller C_c with R_z in series; values from SECOND
    texts = _texts(stage_svg(VARIANTS["npn_cascode_tail_second_stage_rz"]()))
    joined = " | ".join(texts)
    assert "−g_m2" in texts and "out" in texts
    assert f"g_m2 {format_si(8e-3, 'S')}" in texts
    assert f"C_c {format_si(8e-12, 'F')}" in texts
    assert f"R_z {format_si(125, 'Ω')}" in texts
    assert "R_out" in texts and format_si(100e3, "Ω") in texts
    assert "C_L2" in texts and format_si(20e-12, "F") in joined
    assert f"C_in {format_si(1e-12, 'F')}" in texts


def test_second_stage_without_nulling_resistor_draws_none_and_widens_the_drawing():
    # oracle: DESIGN.md §3a — nulling_resistance 0 means absent; common practice —
    # the drawing grows to hold the extra stage
    base = freqpair.load_design(ROOT / "examples" / "ota_tail_cap_loop.toml")
    with_second = VARIANTS["pnp_pair_mirror_tail_second_stage"]()
    svg = stage_svg(with_second)
    assert not any(t.startswith("R_z") for t in _texts(svg))
    w_one = float(ET.fromstring(stage_svg(base)).get("viewBox").split()[2])
    w_two = float(ET.fromstring(svg).get("viewBox").split()[2])
    assert w_two > w_one


def test_feedback_factor_is_shown_only_in_a_loop():
    # oracle: DESIGN.md §3 [feedback] factor (0.5 in the file)
    d = freqpair.load_design(ROOT / "examples" / "two_stage_miller_loop.toml")
    assert "feedback β_f = 0.5" in _texts(stage_svg(d))
    plain = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    assert not any("β_f" in t for t in _texts(stage_svg(plain)))


def test_pnp_pair_swaps_the_rails():
    # oracle: DESIGN.md §3a — pnp devices hang from the positive rail (mirror image)
    texts = _texts(stage_svg(VARIANTS["pnp_pair_resistor_load_ideal_tail"]()))
    assert any(t.startswith("V− ") for t in texts) and any(t.startswith("V+ ") for t in texts)
    ys = {t.text.split()[0]: float(t.get("y")) for t in
          ET.fromstring(stage_svg(VARIANTS["pnp_pair_resistor_load_ideal_tail"]()))
          .iter(f"{SVG}text") if t.text.startswith(("V+", "V−"))}
    assert ys["V−"] < ys["V+"]


# ----------------------------------------------------------------- second edition:
# degeneration, cascoded pair, feedback divider, added elements, body effect

def _ys(svg):
    """Baseline height of each text (the first one of that text)."""
    ys = {}
    for t in ET.fromstring(svg).iter(f"{SVG}text"):
        ys.setdefault(t.text, float(t.get("y")))
    return ys


def _height(svg):
    return float(ET.fromstring(svg).get("viewBox").split()[3])


SECOND_EDITION = list(VARIANTS)[list(VARIANTS).index("npn_cascode_degenerated_divider_cf"):]


@pytest.mark.parametrize("name", SECOND_EDITION)
def test_second_edition_variants_are_well_formed_svg(name):
    # oracle: XML well-formedness (xml.etree); DESIGN.md §2 — both pair devices drawn
    root = ET.fromstring(stage_svg(VARIANTS[name]()))
    assert root.tag == f"{SVG}svg"
    texts = [t.text for t in root.iter(f"{SVG}text")]
    assert {"in1", "in2", "o1", "o2", "t"} <= set(texts)


@pytest.mark.parametrize("name", ["npn_degenerated_instrumentation",
                                  "nmos_cascode_degenerated_pair"])
def test_degeneration_draws_R_E_in_each_leg_with_e_nodes(name):
    # oracle: DESIGN.md §7a — one R_E per side, from the emitter/source (e1, e2) to t;
    # the value from the design file (1 kΩ in both)
    d = (VARIANTS[name]() if name in VARIANTS
         else freqpair.load_design(ROOT / "examples" / f"{name}.toml"))
    svg = stage_svg(d)
    texts = _texts(svg)
    label = f"R_E {format_si(d.pair.degeneration, 'Ω')}"
    assert label == f"R_E {format_si(1e3, 'Ω')}"
    assert texts.count(label) == 2
    assert {"e1", "e2"} <= set(texts)
    ys = _ys(svg)
    # e_k lies between the pair device (its name) and the tail node
    prefix = "Q" if d.pair.is_bipolar else "M"
    assert ys[f"{prefix}1"] < ys["e1"] < ys["t"]


def test_no_degeneration_draws_no_R_E_and_no_e_nodes():
    # oracle: DESIGN.md §7a — degeneration 0 (the default) means none; e1/e2 exist
    # only with degeneration > 0 (§7d)
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    texts = _texts(stage_svg(d))
    assert not any(t.startswith("R_E") for t in texts)
    assert "e1" not in texts and "e2" not in texts


@pytest.mark.parametrize("name,prefix,bias", [
    ("npn_cascode_degenerated_divider_cf", "Q", 5.0),
    ("pnp_cascode_pair_elements", "Q", -5.0),
    ("nmos_cascode_degenerated_pair", "M", 2.4),
    ("pmos_cascode_pair_mirror_load_factor", "M", 0.9),
])
def test_cascoded_pair_sits_between_c_and_o_with_its_bias(name, prefix, bias):
    # oracle: DESIGN.md §7c — on each side the cascode device joins c_k (the pair
    # device's collector/drain) to o_k; its base/gate on the DC bias (values from VARIANTS)
    d = VARIANTS[name]()
    svg = stage_svg(d)
    texts = _texts(svg)
    assert {"c1", "c2", f"{prefix}_c1", f"{prefix}_c2"} <= set(texts)
    assert f"V_bias {format_si(bias, 'V')}" in texts
    ys = _ys(svg)
    for k in (1, 2):
        assert ys[f"o{k}"] < ys[f"{prefix}_c{k}"] < ys[f"c{k}"] < ys[f"{prefix}{k}"]
    if prefix == "Q":
        # pair 2 + cascode 2 bipolar bodies (resistor load, Norton tail)
        assert _device_circles(svg) == 4
    assert any(t.startswith(f"cascode: {d.pair.type}") for t in texts)


def test_cascode_makes_the_drawing_taller_and_keeps_the_pnp_rails_swapped():
    # oracle: common practice — the drawing grows to hold an extra row; DESIGN.md §3a
    # — a pnp stage is the mirror image (V− on top)
    plain = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    assert _height(stage_svg(VARIANTS["npn_cascode_degenerated_divider_cf"]())) > \
        _height(stage_svg(plain))
    pnp = stage_svg(VARIANTS["pnp_cascode_pair_elements"]())
    ys = {k.split()[0]: v for k, v in _ys(pnp).items() if k.startswith(("V+ ", "V− "))}
    assert ys["V−"] < ys["V+"]


def test_no_cascode_draws_no_c_nodes():
    # oracle: DESIGN.md §7c/§7d — c1/c2 exist only with [pair.cascode]
    texts = _texts(stage_svg(freqpair.load_design(ROOT / "examples"
                                                  / "nmos_adc_driver_loop.toml")))
    assert not {"c1", "c2"} & set(texts) and not any(t.startswith("V_bias") for t in texts)


@pytest.mark.parametrize("name,r_f,c_f,r_g,c_g,out", [
    ("npn_cascode_degenerated_divider_cf", 9e3, 1e-12, 1e3, 5e-12, "o1−o2"),
    ("nmos_divider_no_caps_balanced", 30e3, 0.0, 10e3, 0.0, "o1−o2"),
    ("nmos_second_stage_divider_cf_cascode_degenerated", 9e3, 0.9e-12, 1e3, 5e-12, "out"),
])
def test_divider_draws_Rf_Cf_Rg_Cg_and_the_beta_arrow(name, r_f, c_f, r_g, c_g, out):
    # oracle: DESIGN.md §7e — R_f ∥ C_f from the output to the feedback node, R_g ∥ C_g
    # to ground, β(0) = R_g/(R_f+R_g) (values from DIVIDER / VARIANTS, β by hand)
    svg = stage_svg(VARIANTS[name]())
    texts = _texts(svg)
    assert f"R_f {format_si(r_f, 'Ω')}" in texts and f"R_g {format_si(r_g, 'Ω')}" in texts
    assert (f"C_f {format_si(c_f, 'F')}" in texts) == (c_f > 0)
    assert any(t.startswith("C_f") for t in texts) == (c_f > 0)
    assert (f"C_g {format_si(c_g, 'F')}" in texts) == (c_g > 0)
    assert any(t.startswith("C_g") for t in texts) == (c_g > 0)
    beta = r_g / (r_f + r_g)
    assert f"feedback β(0) = R_g/(R_f+R_g) = {beta:.4g}" in texts
    assert "fb" in texts and out in texts
    assert not any("β_f" in t for t in texts)        # a divider is not a bare factor


def test_divider_in_the_example_shows_its_values():
    # oracle: examples/nmos_cascode_divider_loop.toml — R_f 90 k, C_f 0, R_g 10 k,
    # C_g 8 pF: β(0) = 10/(90+10) = 0.1
    svg = stage_svg(freqpair.load_design(ROOT / "examples" / "nmos_cascode_divider_loop.toml"))
    texts = _texts(svg)
    assert f"R_f {format_si(90e3, 'Ω')}" in texts and f"R_g {format_si(10e3, 'Ω')}" in texts
    assert f"C_g {format_si(8e-12, 'F')}" in texts
    assert not any(t.startswith("C_f") for t in texts)
    assert "feedback β(0) = R_g/(R_f+R_g) = 0.1" in texts


def test_feedback_factor_keeps_the_arrow_beside_or_under_the_notes():
    # oracle: DESIGN.md §2 — a factor is β_f alone (0.2 / 0.1 in VARIANTS); no divider parts
    for name, beta in (("pmos_cascode_pair_mirror_load_factor", 0.2),
                       ("npn_degenerated_many_elements_factor", 0.1)):
        texts = _texts(stage_svg(VARIANTS[name]()))
        assert f"feedback β_f = {beta:g}" in texts
        assert not any(t.startswith(("R_f", "R_g", "feedback β(0)")) for t in texts)


def test_added_elements_in_the_example_are_drawn_or_listed():
    # oracle: examples/npn_degenerated_instrumentation.toml and the rule of the module
    # docstring — the shunt at t (1.5 pF to ground) is drawn; the couplings
    # o1–b2 and o2–b1 (60 fF) are listed, one line each
    texts = _texts(stage_svg(freqpair.load_design(
        ROOT / "examples" / "npn_degenerated_instrumentation.toml")))
    assert "tail wiring" in texts and format_si(1.5e-12, "F") in texts
    assert "added elements" in texts
    assert f"coupling o1-b2: capacitor {format_si(60e-15, 'F')}, o1 – b2" in texts
    assert f"coupling o2-b1: capacitor {format_si(60e-15, 'F')}, o2 – b1" in texts
    assert not any(t.startswith("tail wiring:") for t in texts)   # drawn, not listed


def test_added_elements_rule_on_every_kind():
    # oracle: the rule of the module docstring with ELEMENTS — the first shunt at t is
    # drawn (its ground end reversed in the file), a second shunt at t, a coupling,
    # a transconductance (with its control nodes, DESIGN.md §7d) and a shunt at o2
    # are listed; an unnamed element is element.N (N from 0, DESIGN.md §7d), a long
    # name is cut with "…"
    texts = _texts(stage_svg(VARIANTS["npn_degenerated_many_elements_factor"]()))
    listed = [t for t in texts if ": " in t and " – " in t]
    assert "tail wiring" in texts and format_si(1.5e-12, "F") in texts
    assert listed[0] == f"tail leak: resistor {format_si(1e6, 'Ω')}, t – vneg"
    assert listed[1] == f"coupling o1-b2: capacitor {format_si(60e-15, 'F')}, o1 – b2"
    assert listed[2].endswith(f"…: transconductance {format_si(50e-6, 'S')}, o2 – o1, "
                              "controlled by e1 – ground")
    assert listed[2].startswith("a rather long name")
    assert listed[3] == f"element.4: capacitor {format_si(0.2e-12, 'F')}, o2 – ground"
    assert len(listed) == 4


def test_a_drawn_element_to_a_rail_is_marked_with_the_rail():
    # oracle: DESIGN.md §7d/§7f — a resistor from t to vpos (200 k in VARIANTS) ends on
    # the positive rail, V+ (a pnp stage: the drawn bottom rail is also V+)
    texts = _texts(stage_svg(VARIANTS["pnp_cascode_pair_elements"]()))
    assert "tail leak" in texts and format_si(200e3, "Ω") in texts
    assert "V+" in texts
    assert (f"substrate coupling: transconductance {format_si(-2e-3, 'S')}, o1 – o2, "
            "controlled by t – ground") in texts
    assert f"element.2: capacitor {format_si(30e-15, 'F')}, o1 – o2" in texts


def test_no_added_elements_no_list():
    # oracle: DESIGN.md §7d — without [[element]] there is nothing to list
    texts = _texts(stage_svg(freqpair.load_design(ROOT / "examples" / "ota_tail_cap_loop.toml")))
    assert "added elements" not in texts


def test_body_effect_is_noted_per_device_group():
    # oracle: DESIGN.md §7b — γ per device table; the example sets 0.45 √V on the pair,
    # the cascode and the tail device (none on the load); VARIANTS: 0.5 pair, 0.3 load
    texts = _texts(stage_svg(freqpair.load_design(
        ROOT / "examples" / "nmos_cascode_divider_loop.toml")))
    assert "body effect γ = 0.45 √V (pair, cascode, tail)" in texts
    texts = _texts(stage_svg(VARIANTS["pmos_cascode_pair_mirror_load_factor"]()))
    assert "body effect γ = 0.5 √V (pair); γ = 0.3 √V (load)" in texts
    plain = _texts(stage_svg(freqpair.load_design(ROOT / "examples"
                                                  / "nmos_adc_driver_loop.toml")))
    assert not any(t.startswith("body effect") for t in plain)


def test_a_long_drawn_name_is_cut_and_the_rail_marked():
    # oracle: the rule of the module docstring (names longer than the place for them
    # end in "…"); DESIGN.md §7d — the element joins t to vneg (V−), 4.7 MΩ
    from freqpair.views.schematic import NAME_DRAWN
    texts = _texts(stage_svg(VARIANTS["npn_drawn_element_long_name_mirror_tail"]()))
    cut = [t for t in texts if t.startswith("a leakage path")]
    assert len(cut) == 1 and cut[0].endswith("…") and len(cut[0]) == NAME_DRAWN
    assert format_si(4.7e6, "Ω") in texts and "V−" in texts
    assert "added elements" not in texts
