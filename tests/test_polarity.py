"""pnp and pmos stages are mirror images of npn and nmos stages."""
import pytest

from freqpair.analysis.result import analyze
from freqpair.design.schema import parse_design
from freqpair.design.errors import BiasError, DesignError
from freqpair.circuit.stage import build_stage

KEYS = ("adm_db", "f3db_hz", "ugf_hz", "acm_se_db", "cmrr_se_db", "cmrr_corner_hz")


def bjt(kind, **kw):
    d = {"type": kind, "beta": 120, "early_voltage": 60, "cje": 1e-12,
         "transit_time": 0.3e-9, "cjc0": 0.5e-12, "ccs": 0.4e-12, "base_resistance": 100}
    d.update(kw)
    return d


def mos(kind, **kw):
    d = {"type": kind, "mobility_cox": 150e-6, "width": 30e-6, "length": 1e-6,
         "threshold": 0.5, "lambda": 0.04, "cox": 4.6e-3, "overlap_cap": 0.3e-9,
         "cdb": 15e-15}
    d.update(kw)
    return d


def stage_dict(pair, load, tail, pos, neg, cm, i_tail=0.5e-3):
    return {"supply": {"positive": pos, "negative": neg},
            "bias": {"tail_current": i_tail, "input_common_mode": cm},
            "pair": pair, "load": load, "tail": tail, "source": {"resistance": 500}}


def _same(a, b):
    # 1e-8: bipolar C_cs returns to the substrate (vneg) for both polarities
    # (DESIGN.md §7f), so the mirror-image network is not the same matrix; the
    # common-mode gains agree to rounding amplified by their cancellation
    for key in KEYS:
        va, vb = getattr(a, key), getattr(b, key)
        assert (va is None) == (vb is None), key
        if va is not None:
            assert va == pytest.approx(vb, rel=1e-8), key


def test_pnp_stage_is_mirror_image_of_npn_stage():
    # the hybrid-pi model is the same for both polarities (Gray, Hurst, Lewis, Meyer,
    # §1.4, from memory): a pnp stage on mirrored rails must give the npn numbers
    npn = stage_dict(bjt("npn"), {"type": "mirror", "capacitance": 1e-12, "device": bjt("pnp")},
                     {"type": "degenerated", "degeneration": 1e3, "device": bjt("npn")},
                     6.0, -4.0, 0.5)
    pnp = stage_dict(bjt("pnp"), {"type": "mirror", "capacitance": 1e-12, "device": bjt("npn")},
                     {"type": "degenerated", "degeneration": 1e3, "device": bjt("pnp")},
                     4.0, -6.0, -0.5)
    a, b = analyze(parse_design(npn)), analyze(parse_design(pnp))
    _same(a, b)
    assert b.tail.resistance == pytest.approx(a.tail.resistance, rel=1e-12)
    assert b.tail.capacitance == pytest.approx(a.tail.capacitance, rel=1e-12)


def test_pmos_stage_is_mirror_image_of_nmos_stage():
    # square-law saturated MOS small-signal model is polarity-free (Razavi §2.4, from memory)
    n = stage_dict(mos("nmos"), {"type": "mirror", "capacitance": 0.3e-12, "device": mos("pmos")},
                   {"type": "cascode", "device": mos("nmos", width=120e-6), "extra_capacitance": 0.2e-12},
                   3.3, 0.0, 2.0)
    p = stage_dict(mos("pmos"), {"type": "mirror", "capacitance": 0.3e-12, "device": mos("nmos")},
                   {"type": "cascode", "device": mos("pmos", width=120e-6), "extra_capacitance": 0.2e-12},
                   0.0, -3.3, -2.0)
    _same(analyze(parse_design(n)), analyze(parse_design(p)))


def test_pnp_operating_point_sits_above_the_input():
    d = parse_design(stage_dict(bjt("pnp", vbe=0.65), {"type": "resistor", "resistance": 4e3},
                                {"type": "ideal"}, 5.0, -5.0, 1.0))
    op = build_stage(d).operating_point
    ic = 120 / 121 * 0.25e-3
    # DESIGN.md §2/§3a: V_E = V_B + V_EB; collector at V_neg + I_C·R; magnitudes reported
    assert op.v_common == pytest.approx(1.65)
    assert op.v_output == pytest.approx(-5 + ic * 4e3)
    assert op.v_out_common == pytest.approx(1.65 - (-5 + ic * 4e3))
    assert op.v_cb == pytest.approx(1.0 - (-5 + ic * 4e3))


def test_pmos_tail_starved_against_positive_rail_names_device():
    # DESIGN.md §3a: a pmos simple mirror needs V_ov between the rail and the tail node
    d = parse_design(stage_dict(mos("pmos"), {"type": "resistor", "resistance": 2e3},
                                {"type": "mirror", "device": mos("pmos", width=2e-6)},
                                1.2, -3.0, 0.0))
    with pytest.raises(BiasError, match=r"^tail.device \(pmos simple mirror\): starved"):
        build_stage(d)


def test_wrong_mirror_polarity_is_a_design_error():
    with pytest.raises(DesignError, match=r"^load.device.type = 'npn': a npn pair needs a pnp"):
        parse_design(stage_dict(bjt("npn"), {"type": "mirror", "device": bjt("npn")},
                                {"type": "ideal"}, 5.0, -5.0, 0.0))
