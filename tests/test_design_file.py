"""Design files: one-line errors naming key and value, headroom errors, round trip.

Oracle: DESIGN.md §3 (the design-file contract) and §2 (operating point and
headroom rules), checked by hand-computed numbers where a number is named.
"""
import copy
import math

import pytest

import freqpair
from freqpair.design.schema import design_to_dict, parse_design
from freqpair.design.errors import BiasError, DesignError, FreqpairError

BASE = {
    "supply": {"positive": 12, "negative": -12},
    "bias": {"tail_current": "1 mA"},
    "pair": {"type": "npn", "beta": 200, "early_voltage": 80},
    "load": {"type": "resistor", "resistance": "10 k"},
    "tail": {"type": "norton", "resistance": "1 M"},
}

NMOS_PAIR = {"type": "nmos", "mobility_cox": "200 uA/V2", "width": "20 um",
             "length": "1 um", "threshold": 0.5, "lambda": 0.05}


def with_value(data, dotted, value):
    """Copy of ``data`` with a dotted key set (``...`` deletes it)."""
    data = copy.deepcopy(data)
    node = data
    *parents, last = dotted.split(".")
    for part in parents:
        node = node.setdefault(part, {})
    if value is ...:
        del node[last]
    else:
        node[last] = value
    return data


def error_of(data, exc=DesignError):
    with pytest.raises(exc) as info:
        freqpair.analyze(parse_design(data))
    msg = str(info.value)
    assert "\n" not in msg          # one line (DESIGN.md §3)
    return msg


# ------------------------------------------------------------------ bad keys/values
@pytest.mark.parametrize("dotted, value, words", [
    ("pair.betta", 200, ["pair.betta", "200", "unknown key"]),          # misspelt key
    ("supply.ground", 0, ["supply.ground", "unknown key"]),
    ("extra_table", {"a": 1}, ["extra_table", "unknown key"]),
    ("pair.beta", ..., ["pair.beta", "missing"]),
    ("bias.tail_current", ..., ["bias.tail_current", "missing"]),
    ("tail", ..., ["tail", "missing"]),
    ("pair.beta", "two hundred", ["pair.beta", "two hundred"]),        # wrong type
    ("pair.beta", [1, 2], ["pair.beta", "[1, 2]"]),
    ("pair.beta", True, ["pair.beta", "True"]),
    ("name", 5, ["name", "5", "string"]),
    ("sweep.points_per_decade", 2.5, ["sweep.points_per_decade", "2.5", "whole number"]),
    ("pair.beta", -5, ["pair.beta", "-5", "greater than 0"]),          # sign rules
    ("pair.beta", 0, ["pair.beta", "0", "greater than 0"]),
    ("load.resistance", "-10 k", ["load.resistance", "-10 k"]),
    ("tail.resistance", 0, ["tail.resistance", "0"]),
    ("bias.tail_current", "0 A", ["bias.tail_current", "0 A"]),
    ("load.capacitance", "-1 pF", ["load.capacitance", "-1 pF"]),
    ("pair.cje", -1e-12, ["pair.cje", "-1e-12"]),
    ("bias.temperature", 0, ["bias.temperature", "0"]),
    ("pair.beta", math.nan, ["pair.beta", "nan", "finite"]),           # non-finite
    ("pair.beta", "nan", ["pair.beta", "nan", "finite"]),
    ("pair.early_voltage", math.inf, ["pair.early_voltage", "inf", "finite"]),
    ("load.resistance", -math.inf, ["load.resistance", "inf"]),
    ("tail.capacitance", "inf", ["tail.capacitance", "inf", "finite"]),
    ("load.resistance", "1 meg", ["load.resistance", "1 meg", "unit"]),  # not mega
    ("supply.positive", "12 Ohm", ["supply.positive", "12 Ohm", "unit"]),
    ("pair.type", "triode", ["pair.type", "triode"]),
    ("tail.type", "magic", ["tail.type", "magic"]),
    ("mismatch.load", 1.5, ["mismatch.load", "1.5"]),
    ("supply.negative", 20, ["supply.positive", "12", "negative = 20"]),
    ("sweep", {"start": "1 MHz", "stop": "1 kHz"}, ["sweep.stop", "1000", "start"]),
])
def test_bad_design_value_gives_one_line_naming_key_and_value(dotted, value, words):
    # oracle: DESIGN.md §3 — "a clear one-line error naming the key"
    msg = error_of(with_value(BASE, dotted, value))
    for word in words:
        assert word in msg, (word, msg)


def test_both_transit_time_and_ft_is_an_error_naming_both():
    # oracle: DESIGN.md §3 — "give at most one"
    data = with_value(with_value(BASE, "pair.ft", "400 MHz"), "pair.transit_time", "0.3 ns")
    msg = error_of(data)
    assert msg.startswith("pair.ft = 4e+08")
    assert "transit_time" in msg


def test_unknown_key_in_ideal_tail_is_named():
    # oracle: DESIGN.md §3 — an ideal tail has no resistance key
    msg = error_of(with_value(BASE, "tail", {"type": "ideal", "resistance": "1 M"}))
    assert msg.startswith("tail.resistance = '1 M': unknown key")


def test_invalid_toml_is_one_line_naming_the_file(tmp_path):
    # oracle: DESIGN.md §3 ("and line where the parser gives one")
    p = tmp_path / "broken.toml"
    p.write_text("[supply]\npositive = = 3\n")
    with pytest.raises(DesignError) as info:
        freqpair.load_design(p)
    assert "broken.toml" in str(info.value) and "line 2" in str(info.value)
    assert "\n" not in str(info.value)


def test_missing_file_is_a_design_error(tmp_path):
    # oracle: common practice — a missing input is a user error, not a traceback
    with pytest.raises(DesignError, match="nothing.toml"):
        freqpair.load_design(tmp_path / "nothing.toml")


def test_every_freqpair_error_is_a_freqpair_error_subclass():
    # oracle: the brief — all deliberate errors derive from FreqpairError
    assert issubclass(DesignError, FreqpairError) and issubclass(BiasError, FreqpairError)


# ------------------------------------------------------------------ headroom
def test_saturated_pair_names_device_and_voltages():
    # oracle: DESIGN.md §2 — V_C = 12 − I_C·R_L; I_C = α·5 mA/2 ≈ 2.49 mA → V_C ≈ −12.9 V,
    # V_E = −0.7 V, V_CE ≈ −12.2 V < 0.2 V
    data = with_value(BASE, "bias.tail_current", "5 mA")
    data = with_value(data, "supply.negative", -20)
    msg = error_of(data, BiasError)
    assert msg.startswith("pair (npn): saturated")
    alpha = 200 / 201
    vce = 12 - alpha * 2.5e-3 * 10e3 - (-0.7)
    assert f"V_CE = {vce:.3g} V" in msg


def test_starved_tail_names_tail_and_voltages():
    # oracle: DESIGN.md §2 — V_E − V_neg = −0.7 − (−0.8) = 0.1 V < 0.3 V compliance
    msg = error_of(with_value(BASE, "supply.negative", -0.8), BiasError)
    assert msg.startswith("tail: starved")
    assert "0.1 V < 0.3 V" in msg


def test_mos_out_of_saturation_names_device_and_voltages():
    # oracle: DESIGN.md §2 (square law) — I_D = 0.5 mA, V_ov = sqrt(2·I_D/(μC_ox·W/L))
    # = sqrt(1e-3/4e-3) = 0.5 V; V_D = 3.3 − 0.5 mA·5 k = 0.8 V; V_S = 1.5 − 1.0 = 0.5 V;
    # V_DS = 0.3 V < V_ov = 0.5 V
    data = with_value(BASE, "pair", NMOS_PAIR)
    data = with_value(data, "supply", {"positive": 3.3, "negative": -1})
    data = with_value(data, "bias", {"tail_current": "1 mA", "input_common_mode": 1.5})
    data = with_value(data, "load.resistance", "5 k")
    msg = error_of(data, BiasError)
    assert msg.startswith("pair (nmos): out of saturation")
    assert "V_DS = 0.3 V < V_ov = 0.5 V" in msg


def test_mos_tail_starved_names_tail():
    # oracle: DESIGN.md §2 — V_S = 0 − (0.5 + 0.5) = −1 V, rail −1.1 V → 0.1 V < 0.3 V
    data = with_value(BASE, "pair", NMOS_PAIR)
    data = with_value(data, "supply", {"positive": 5, "negative": -1.1})
    data = with_value(data, "load.resistance", "2 k")
    msg = error_of(data, BiasError)
    assert msg.startswith("tail: starved: V_S")


# ------------------------------------------------------------------ round trip
@pytest.mark.parametrize("source", ["builtin", "examples"])
def test_save_then_load_gives_an_equal_design(tmp_path, source, builtin_design):
    # oracle: common practice — serialisation round trip is the identity
    from conftest import EXAMPLES
    designs = [builtin_design] if source == "builtin" else [freqpair.load_design(p)
                                                             for p in EXAMPLES]
    for k, design in enumerate(designs):
        path = tmp_path / f"d{k}.toml"
        freqpair.save_design(design, path)
        again = freqpair.load_design(path)
        assert again == design
        assert design_to_dict(again) == design_to_dict(design)


def test_round_trip_keeps_the_nmos_lambda_key(tmp_path):
    # oracle: DESIGN.md §3 — the key is spelled "lambda" in the file
    design = parse_design(with_value(BASE, "pair", NMOS_PAIR))
    path = tmp_path / "n.toml"
    freqpair.save_design(design, path)
    assert "lambda = 0.05" in path.read_text()
    assert freqpair.load_design(path) == design


def test_si_strings_parse_to_the_documented_values():
    # oracle: SI prefixes (BIPM SI brochure): k = 1e3, M = 1e6, m = 1e-3, p = 1e-12
    data = with_value(BASE, "load", {"type": "resistor", "resistance": "10kΩ",
                                     "capacitance": "2 pF"})
    data = with_value(data, "tail.resistance", "1 M")
    data = with_value(data, "bias.tail_current", "1.5 mA")
    d = parse_design(data)
    assert d.load.resistance == pytest.approx(10e3, rel=1e-15)
    assert d.load.capacitance == pytest.approx(2e-12, rel=1e-15)
    assert d.tail.resistance == pytest.approx(1e6, rel=1e-15)
    assert d.bias.tail_current == pytest.approx(1.5e-3, rel=1e-15)


def test_decimal_comma_is_refused_not_read_as_a_thousands_separator(builtin_design):
    # common practice: "1,5 k" typed with a decimal comma means 1.5 kΩ; reading it as
    # 15 kΩ (thousands separator) would silently give a value 10× off — refuse it
    with pytest.raises(freqpair.DesignError, match=r"load\.resistance = '1,5 k'.*decimal point"):
        freqpair.replace_value(builtin_design, "load.resistance", "1,5 k")


def test_a_design_pickles_by_reference_and_leaves_the_schema_alone(builtin_design):
    # common practice: designs travel to cluster workers by pickle (cloudpickle there);
    # every section class must be found by its module and name, not rebuilt by value —
    # a class rebuilt on unpickling would overwrite the field table of the original
    import pickle

    import cloudpickle

    from freqpair.design import fields
    d = freqpair.replace_value(builtin_design, "pair.degeneration", 100.0)
    for dumps in (pickle.dumps, cloudpickle.dumps):
        again = pickle.loads(dumps(d))
        assert again == d and type(again.pair) is type(d.pair)
    assert pickle.loads(pickle.dumps(fields.REQUIRED)) is fields.REQUIRED
    with pytest.raises(DesignError, match="pair.beta: missing required key"):
        parse_design(with_value(BASE, "pair.beta", ...))
