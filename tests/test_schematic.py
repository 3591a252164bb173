"""The drawn picture of the stage: valid SVG, every part and value the design gives."""
from __future__ import annotations

import pathlib
import xml.etree.ElementTree as ET

import pytest

import freqpair
from freqpair.quantities import format_si
from freqpair.schematic import stage_svg

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
    assert any("mirror load (pnp" in t for t in texts)
    assert sum(t.startswith("C_L") for t in texts) == 1


def test_schematic_escapes_the_design_name(builtin_design):
    # oracle: XML escaping rules — a name with markup characters still parses
    d = freqpair.replace_value(builtin_design, "name", 'a <b> & "c"')
    ET.fromstring(stage_svg(d))
