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
