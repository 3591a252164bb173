"""Property-based tests: generated valid designs keep the physics' invariants.

Designs are generated as plain dicts (what a TOML file reads into) across wide
but physical ranges: npn/pnp/nmos/pmos pairs, resistor and mirror loads,
ideal/norton/mirror/degenerated/cascode tails, optional second stage and
feedback. Example counts come from the hypothesis profile (tests/conftest.py):
"ci" by default, "deep" with FREQPAIR_HYPOTHESIS_PROFILE=deep.
"""
from __future__ import annotations

import copy
import json
import math

import os

import numpy as np
import pytest
import scipy.constants as sc
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from freqpair.analysis.result import analyze
from freqpair.design.schema import parse_design
from freqpair.design.errors import FreqpairError
from freqpair.design.quantities import format_si
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.stage import build_stage

#: "deep" profile (tests/conftest.py): 10,000 examples for every property test
DEEP = os.environ.get("FREQPAIR_HYPOTHESIS_PROFILE") == "deep"


def examples(n):
    """Per-test example count in the "ci" profile (the "deep" profile's otherwise)."""
    # capsys is read (and so reset) once per example, so sharing it is safe
    return settings(max_examples=10_000 if DEEP else n,
                    suppress_health_check=list(settings().suppress_health_check)
                    + [HealthCheck.function_scoped_fixture])


COMPLEMENT = {"npn": "pnp", "pnp": "npn", "nmos": "pmos", "pmos": "nmos"}


def log_uniform(lo, hi):
    """Floats spread evenly in log between lo and hi."""
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda x: 10.0 ** x)


def absentable(lo, hi):
    """Zero (absent) or a log-uniform value."""
    return st.one_of(st.just(0.0), log_uniform(lo, hi))


def _vt(temperature):
    return sc.k * temperature / sc.e


@st.composite
def device(draw, kind, current, temperature, v_cb_min=0.0):
    """Device keys of one transistor of ``kind`` biased at ``current`` [A].

    MOS sizes are drawn from an overdrive of 0.05-0.8 V so the bias is feasible;
    a bipolar f_T is drawn so that C_pi = g_m/(2π f_T) − C_mu stays positive.
    """
    if kind in ("npn", "pnp"):
        d = {"type": kind, "beta": draw(log_uniform(20, 1000)),
             "early_voltage": draw(log_uniform(5, 500)),
             "vbe": draw(st.floats(0.5, 0.8)),
             "base_resistance": draw(absentable(1, 1e3)),
             "cje": draw(absentable(1e-15, 1e-11)),
             "cjc0": draw(absentable(1e-15, 5e-12)),
             "phi_c": draw(st.floats(0.5, 0.9)),
             "m_c": draw(st.floats(0.2, 0.5)),
             "ccs": draw(absentable(1e-15, 5e-12))}
        how = draw(st.sampled_from(["none", "transit_time", "ft"]))
        if how == "transit_time":
            d["transit_time"] = draw(log_uniform(1e-12, 1e-8))
        elif how == "ft":
            gm = current / _vt(temperature)
            c_total = d["cjc0"] + draw(log_uniform(1e-15, 1e-10))
            d["ft"] = gm / (2 * math.pi * c_total)
        return d
    vov = draw(st.floats(0.05, 0.8))
    kp = draw(log_uniform(20e-6, 400e-6))
    ratio = 2 * current / (kp * vov * vov)            # W/L for that overdrive
    length = draw(log_uniform(0.1e-6, 10e-6))
    return {"type": kind, "mobility_cox": kp, "width": ratio * length, "length": length,
            "threshold": draw(st.floats(0.2, 1.0)),
            "lambda": draw(st.one_of(st.just(0.0), log_uniform(1e-3, 0.3))),
            "cox": draw(absentable(1e-3, 2e-2)),
            "overlap_cap": draw(absentable(1e-11, 1e-9)),
            "cdb": draw(absentable(1e-16, 1e-12))}


@st.composite
def designs(draw, loads=("resistor", "mirror"), second_stage=None, mismatch=True):
    """A valid, bias-feasible design dict (SI floats)."""
    kind = draw(st.sampled_from(["npn", "pnp", "nmos", "pmos"]))
    temperature = draw(st.floats(220, 420))
    i_tail = draw(log_uniform(1e-6, 1e-2))
    i_dev = i_tail / 2
    supply = draw(st.floats(5, 20))
    d = {"name": draw(st.text(max_size=20)),
         "supply": {"positive": supply, "negative": -supply},
         "bias": {"tail_current": i_tail,
                  "input_common_mode": draw(st.floats(-1, 1)),
                  "temperature": temperature}}
    d["pair"] = draw(device(kind, i_dev, temperature))
    load = draw(st.sampled_from(loads))
    if load == "resistor":
        drop = draw(st.floats(0.05, 0.4)) * supply         # I·R_L of supply
        d["load"] = {"type": "resistor", "resistance": drop / i_dev,
                     "capacitance": draw(absentable(1e-15, 1e-10))}
    else:
        d["load"] = {"type": "mirror", "capacitance": draw(absentable(1e-15, 1e-10)),
                     "device": draw(device(COMPLEMENT[kind], i_dev, temperature))}
    tail = draw(st.sampled_from(["ideal", "norton", "mirror", "degenerated", "cascode"]))
    if tail == "ideal":
        d["tail"] = {"type": "ideal"}
    elif tail == "norton":
        d["tail"] = {"type": "norton", "resistance": draw(log_uniform(1e4, 1e10)),
                     "capacitance": draw(absentable(1e-15, 1e-10))}
    else:
        d["tail"] = {"type": tail, "device": draw(device(kind, i_tail, temperature)),
                     "extra_capacitance": draw(absentable(1e-15, 1e-10))}
        if tail == "degenerated":
            d["tail"]["degeneration"] = draw(st.floats(0.01, 2.0)) / i_tail
    d["source"] = {"resistance": draw(absentable(1, 1e5))}
    if mismatch:
        d["mismatch"] = {"load": draw(st.floats(-0.2, 0.2)), "gm": draw(st.floats(-0.2, 0.2))}
    if second_stage is None:
        second_stage = draw(st.booleans())
    if second_stage:
        d["second_stage"] = {"gm": draw(log_uniform(1e-4, 1e-1)),
                             "output_resistance": draw(log_uniform(1e3, 1e7)),
                             "input_capacitance": draw(absentable(1e-15, 1e-11)),
                             "load_capacitance": draw(absentable(1e-14, 1e-9)),
                             "miller_capacitance": draw(absentable(1e-14, 1e-10)),
                             "nulling_resistance": draw(absentable(1, 1e5))}
    if draw(st.booleans()):
        d["feedback"] = {"factor": draw(log_uniform(1e-3, 1.0))}
    return d


_UNITS = {"resistance": "Ω", "capacitance": "F", "tail_current": "A", "cje": "F", "cjc0": "F",
          "ccs": "F", "cdb": "F", "transit_time": "s", "ft": "Hz", "early_voltage": "V",
          "extra_capacitance": "F", "degeneration": "Ω"}


def stringify(d, pick):
    """Copy of ``d`` with some values written as SI strings ("2.2 pF"), as users type them."""
    out = copy.deepcopy(d)

    def walk(node):
        for key, value in node.items():
            if isinstance(value, dict):
                walk(value)
            elif key in _UNITS and isinstance(value, float) and value > 0 and pick():
                node[key] = format_si(value, _UNITS[key], digits=15)
    walk(out)
    return out


def feasible(d):
    """Build the stage; a design refused with a one-line message (e.g. λ = 0 on both
    the pair and its mirror load: no DC path at the output) is not what these tests probe."""
    try:
        stage = build_stage(parse_design(d))
        StageResponses(stage).dc()
    except FreqpairError as exc:
        assert "\n" not in str(exc)
        assume(False)
    return stage


def _finite_or_null(tree, where=""):
    if isinstance(tree, dict):
        for k, v in tree.items():
            _finite_or_null(v, f"{where}.{k}")
    elif isinstance(tree, list):
        for i, v in enumerate(tree):
            _finite_or_null(v, f"{where}[{i}]")
    elif tree is not None and not isinstance(tree, (str, bool)):
        assert math.isfinite(tree), f"{where} = {tree!r}"


# ------------------------------------------------------------------ invariants
@examples(100)
@given(d=designs(), pick=st.randoms(use_true_random=False))
def test_every_valid_design_gives_finite_json_or_documented_nulls(d, pick):
    # oracle: DESIGN.md §4 contract (null where infinite/undefined, never NaN)
    try:
        res = analyze(parse_design(stringify(d, lambda: pick.random() < 0.3)))
    except FreqpairError as exc:                # refused: one line (DESIGN.md §4)
        assert "\n" not in str(exc) and str(exc)
        return
    out = res.to_json()
    json.dumps(out, allow_nan=False)          # NaN/inf would raise here
    _finite_or_null(out)
    assert out["adm_db"] is not None
    assert out["cmrr_se_db"] is None or out["acm_se_db"] is not None
    if out["ugf_hz"] is not None:               # DESIGN.md §4: UGF only if |A_dm(0)| > 1
        assert res.adm_db > 0
    if out["f3db_hz"] is not None:
        assert out["f3db_hz"] > 0
    if d["load"]["type"] == "mirror":           # DESIGN.md §3a: no balanced CMRR
        assert out["cmrr_db"] is None


def _probe_frequencies(stage_resp):
    poles = np.abs(stage_resp.solver.poles()) / (2 * np.pi)
    f = np.logspace(-1, 12, 14)
    return np.concatenate([f, poles[(poles > 0) & (poles < 1e15)][:8]])


@examples(100)
@given(d=designs(loads=("resistor",), second_stage=False, mismatch=False))
def test_perfectly_matched_pair_has_zero_cm_to_dm_gain(d):
    # oracle: symmetry of the two halves (DESIGN.md §2: A_cm-dm = 0 when matched)
    resp = StageResponses(feasible(d))
    f = _probe_frequencies(resp)
    r = resp.at(f)
    scale = np.maximum(np.abs(r.acm_cm), np.abs(r.adm))
    assert np.all(np.abs(r.acm_dm) <= 1e-9 * scale)
    assert analyze(parse_design(d)).to_json()["cmrr_db"] is None


@examples(100)
@given(d=designs(loads=("resistor",), second_stage=False),
       dl=st.floats(-0.2, 0.2).filter(lambda x: abs(x) > 1e-4),
       dg=st.floats(-0.2, 0.2))
def test_swapping_the_sides_mismatch_flips_acm_dm_and_keeps_cmrr(d, dl, dg):
    # oracle: mirror symmetry of the network (swapping sides exchanges o1 and o2:
    # v_od changes sign under common-mode drive, keeps it under differential drive)
    d["mismatch"] = {"load": dl, "gm": dg}
    e = copy.deepcopy(d)
    e["mismatch"] = {"load": -dl, "gm": -dg}
    a, b = StageResponses(feasible(d)), StageResponses(feasible(e))
    f = _probe_frequencies(a)
    ra, rb = a.at(f), b.at(f)
    tol = 1e-7
    scale = np.maximum(np.abs(ra.acm_cm), np.abs(ra.adm))
    assert np.all(np.abs(ra.acm_dm + rb.acm_dm) <= tol * scale)
    assert np.allclose(ra.adm, rb.adm, rtol=tol, atol=0)
    da, db_ = a.dc(), b.dc()
    if abs(da.acm_dm[0]) <= 1e-12 * abs(da.adm[0]):   # zero CM gain (e.g. MOS, ideal tail)
        assert abs(db_.acm_dm[0]) <= 1e-12 * abs(db_.adm[0])
        return
    # A_cm-dm is a difference of two outputs, so its absolute error sits at the
    # rounding floor of |A_dm| (about 1e-16 of it); a 200 dB CMRR then only agrees
    # to ~1e-6 relative. Compare the common-mode-to-differential gains with that
    # floor, and the CMRR to 1e-6 where it is well above the floor.
    floor = 1e-13 * abs(da.adm[0])
    assert math.isclose(abs(da.acm_dm[0]), abs(db_.acm_dm[0]), rel_tol=1e-6, abs_tol=floor)
    if abs(da.acm_dm[0]) > 1e4 * floor:
        cmrr_a = abs(da.adm[0] / da.acm_dm[0])
        cmrr_b = abs(db_.adm[0] / db_.acm_dm[0])
        assert math.isclose(cmrr_a, cmrr_b, rel_tol=1e-6)


_CAP_KEYS = {"cje", "cjc0", "ccs", "transit_time", "cox", "overlap_cap", "cdb", "capacitance",
             "extra_capacitance", "input_capacitance", "load_capacitance",
             "miller_capacitance"}


def scale_capacitances(d, k):
    """Every capacitance (and τ_F; f_T divided) multiplied by ``k``."""
    out = copy.deepcopy(d)

    def walk(node):
        for key, value in node.items():
            if isinstance(value, dict):
                walk(value)
            elif key in _CAP_KEYS:
                node[key] = value * k
            elif key == "ft":
                node[key] = value / k
    walk(out)
    return out


def _pole_set(stage):
    return StageResponses(stage).solver.poles()


@examples(100)
@given(d=designs(), k=log_uniform(1e-3, 1e3))
def test_scaling_every_capacitance_by_k_scales_every_pole_by_one_over_k(d, k):
    # oracle: time constants are R·C, so det(G + sC) with C → kC has roots s/k
    # (textbook: impedance/frequency scaling, e.g. any network-analysis text, from memory)
    p1 = _pole_set(feasible(d))
    pk = _pole_set(feasible(scale_capacitances(d, k)))
    assert p1.size == pk.size
    if p1.size == 0:
        return
    a = np.sort_complex(p1)
    b = np.sort_complex(pk * k)
    order_a = np.lexsort((a.imag, np.abs(a)))
    order_b = np.lexsort((b.imag, np.abs(b)))
    a, b = a[order_a], b[order_b]
    assert np.allclose(np.abs(b), np.abs(a), rtol=1e-6, atol=0)


def rational(solver, b, l, h0, s):
    """H(s) = H(0)·Π(1 − s/z)/Π(1 − s/p) from the poles and zeros, each polished
    as the library polishes them (a pole 1e-12 below the pencil's frequency scale
    is found by the eigenvalue solver only to ≈ 1e-4; polished, to ≈ 1e-9)."""
    from freqpair.analysis.poles import _augmented, _refine
    p = _refine(solver.G, solver.C, solver.poles())
    z = _refine(*_augmented(solver.G, solver.C, b, l), solver.zeros(b, l))
    num = np.prod(1 - s[:, None] / z[None, :], axis=1) if z.size else np.ones_like(s)
    den = np.prod(1 - s[:, None] / p[None, :], axis=1)
    return h0 * num / den


@examples(100)
@given(d=designs(), name=st.sampled_from(["adm_se", "acm_se", "primary"]))
def test_rational_rebuild_from_poles_and_zeros_matches_the_direct_solve(d, name):
    # oracle: numpy.linalg.solve on (G + sC) at each frequency (an independent path
    # from QZ), against the zero-pole-gain form built from the descriptor pencil
    resp = StageResponses(feasible(d))
    name = resp.primary if name == "primary" else name
    l, kind = resp.output_row(name)
    b = resp.excitation(kind)
    h0 = complex(resp.dc().get(name)[0])
    ref0 = abs(complex(resp.dc().get(resp.primary)[0]))
    assume(abs(h0) > 1e-12 * ref0)               # zero to rounding: DESIGN.md §2
    poles = resp.solver.poles()
    assume(np.all(np.abs(poles) > 0))
    f = np.logspace(0, 11, 12)
    s = 2j * np.pi * f
    direct = (l @ np.linalg.solve(resp.solver.G[None] + s[:, None, None] * resp.solver.C[None],
                                  np.broadcast_to(b[:, None], (f.size, b.size, 1))))[:, 0]
    rebuilt = rational(resp.solver, b, l, h0, s)
    ref = np.max(np.abs(direct))
    assert np.allclose(rebuilt, direct, rtol=1e-5, atol=1e-9 * ref)


# ------------------------------------------------------------------ invalid designs
import subprocess  # noqa: E402
import sys  # noqa: E402

import tomli_w  # noqa: E402

from freqpair.cli.main import main  # noqa: E402


def _leaf_keys(d, prefix=""):
    """Dotted keys of every value (not table) in a design dict."""
    out = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out += _leaf_keys(v, key + ".")
        else:
            out.append(key)
    return out


def _set(d, key, value):
    node = d
    parts = key.split(".")
    for p in parts[:-1]:
        node = node[p]
    node[parts[-1]] = value


def _delete(d, key):
    node = d
    parts = key.split(".")
    for p in parts[:-1]:
        node = node[p]
    del node[parts[-1]]


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def run_cli(capsys, work, data=None, text=None):
    """In-process ``freqpair analyze FILE --json``: (exit code, stdout, stderr)."""
    path = work / "design.toml"
    path.write_text(text if text is not None else tomli_w.dumps(data), encoding="utf-8")
    code = main(["analyze", str(path), "--json"])
    out, err = capsys.readouterr()
    return code, out, err


def assert_refused(code, out, err, names):
    # oracle: DESIGN.md §4 — non-zero exit, one stderr line naming the key, nothing on stdout
    assert code != 0
    assert out == ""
    assert err.endswith("\n") and err.count("\n") == 1, err
    assert "Traceback" not in err and "internal error" not in err, err
    assert err.startswith("freqpair: error: ")
    assert names in err, (names, err)


_WRONG_TYPES = st.sampled_from([[1, 2], {"x": 1}, True, "abc", "12 parsecs", "", [],
                                "1 meg", "--5"])
_NON_FINITE = st.sampled_from([math.nan, math.inf, -math.inf, "inf", "nan"])
_NUMERIC_SIZES = ("beta", "early_voltage", "vbe", "resistance", "tail_current", "temperature",
                  "mobility_cox", "width", "length", "threshold", "degeneration", "gm",
                  "output_resistance", "factor", "start", "stop", "phi_c")
_ABSENTABLE = ("capacitance", "cje", "cjc0", "ccs", "cdb", "cox", "overlap_cap",
               "extra_capacitance", "base_resistance", "lambda", "nulling_resistance",
               "input_capacitance", "load_capacitance", "miller_capacitance", "m_c")


def _numeric_keys(d):
    return [k for k in _leaf_keys(d) if not k.endswith("type") and k != "name"]


@examples(400)
@given(d=designs(second_stage=None), data=st.data())
def test_a_wrong_type_or_non_finite_value_is_refused_naming_its_key(d, data, capsys, work):
    key = data.draw(st.sampled_from(_numeric_keys(d)))
    bad = data.draw(st.one_of(_WRONG_TYPES, _NON_FINITE))
    if key == "sweep.points_per_decade" and bad == "":
        bad = "x"
    _set(d, key, bad)
    assert_refused(*run_cli(capsys, work, d), key)


@examples(400)
@given(d=designs(), data=st.data())
def test_an_out_of_range_value_is_refused_naming_its_key(d, data, capsys, work):
    keys = [k for k in _numeric_keys(d) if k.rsplit(".", 1)[-1] in _NUMERIC_SIZES + _ABSENTABLE
            and not k.startswith("mismatch.")]            # mismatch is signed
    key = data.draw(st.sampled_from(keys))
    leaf = key.rsplit(".", 1)[-1]
    if leaf in _NUMERIC_SIZES and key != "source.resistance":   # R_s = 0 means absent
        bad = data.draw(st.sampled_from([0.0, -1.0, "-2 k", -1e-12]))
    else:
        bad = data.draw(st.sampled_from([-1.0, "-2 p", -1e-15]))
    _set(d, key, bad)
    assert_refused(*run_cli(capsys, work, d), key)


@examples(300)
@given(d=designs(), data=st.data())
def test_a_missing_or_unknown_key_is_refused_naming_it(d, data, capsys, work):
    required = ["supply", "bias", "pair", "load", "tail", "supply.positive", "supply.negative",
                "bias.tail_current", "pair.type", "load.type", "tail.type"]
    for table in ("pair", "load.device", "tail.device"):
        sub = d
        try:
            for p in table.split("."):
                sub = sub[p]
        except KeyError:
            continue
        required += [f"{table}.{k}" for k in ("beta", "early_voltage", "mobility_cox", "width",
                                             "length", "threshold", "lambda") if k in sub]
    if d["load"]["type"] == "resistor":
        required.append("load.resistance")
    if d["tail"]["type"] == "norton":
        required.append("tail.resistance")
    if d["tail"]["type"] == "degenerated":
        required.append("tail.degeneration")
    if data.draw(st.booleans()):
        key = data.draw(st.sampled_from(required))
        _delete(d, key)
    else:
        tables = [""] + [k + "." for k in ("supply", "bias", "pair", "load", "tail", "source",
                                          "mismatch")]
        key = data.draw(st.sampled_from(tables)) + data.draw(
            st.sampled_from(["colour", "tail_curent", "Beta", "resistence", "x"]))
        _set(d, key, 1.0)
    assert_refused(*run_cli(capsys, work, d), key)


@examples(300)
@given(d=designs(loads=("resistor",)), how=st.sampled_from(["saturate", "starve", "rails",
                                                            "mismatch"]))
def test_an_infeasible_bias_or_range_is_refused_naming_device_or_key(d, how, capsys, work):
    i_dev = d["bias"]["tail_current"] / 2
    span = d["supply"]["positive"] - d["supply"]["negative"]
    if how == "saturate":                         # I·R_L drop larger than the whole supply
        d["load"]["resistance"] = 2 * span / i_dev
        names = "pair ("
    elif how == "starve":                         # tail node pushed to the rail
        pos = d["pair"]["type"] in ("npn", "nmos")
        d["bias"]["input_common_mode"] = (d["supply"]["negative"] if pos
                                          else d["supply"]["positive"])
        names = "tail"
    elif how == "rails":
        d["supply"]["negative"] = d["supply"]["positive"] + 1
        names = "supply"
    else:
        d["mismatch"] = {"load": 1.5, "gm": 0.0}
        names = "mismatch.load"
    assert_refused(*run_cli(capsys, work, d), names)


@examples(200)
@given(text=st.text(max_size=200))
def test_arbitrary_text_is_refused_in_one_line(text, capsys, work):
    # oracle: DESIGN.md §4 (a file that is not a design: one line, non-zero exit)
    code, out, err = run_cli(capsys, work, text=text)
    assert code != 0 and out == ""
    assert err.count("\n") == 1 and "Traceback" not in err and "internal error" not in err


@pytest.mark.parametrize("edit, names", [
    ('beta = 200', "pair.beta"),
    ('resistance = "nan"', "tail.resistance"),
    ('[load]\ntype = "resistor"', "load.type"),
])
def test_a_real_subprocess_refuses_a_bad_file_in_one_line(tmp_path, edit, names):
    # oracle: DESIGN.md §4 (exit non-zero, one stderr line, empty stdout), as a user runs it
    from freqpair.design.files import BUILTIN_EXAMPLE
    bad = {"beta = 200": "beta = -200", 'resistance = "nan"': 'resistance = "nan"',
           '[load]\ntype = "resistor"': '[load]\ntype = "resistr"'}[edit]
    text = BUILTIN_EXAMPLE.replace('resistance = "1 M"', bad) if "nan" in edit \
        else BUILTIN_EXAMPLE.replace(edit, bad)
    path = tmp_path / "bad.toml"
    path.write_text(text, encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "freqpair.cli", "analyze", str(path), "--json"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode != 0 and proc.stdout == ""
    assert proc.stderr.count("\n") == 1 and names in proc.stderr, proc.stderr


# ------------------------------------------------------------------ the second edition
def _drop(dev, current):
    """|V_BE| or |V_GS| of ``dev`` (a generated device dict) at ``current``."""
    if dev["type"] in ("npn", "pnp"):
        return dev.get("vbe", 0.7)
    ratio = dev["width"] / dev["length"]
    return dev["threshold"] + math.sqrt(2 * current / (dev["mobility_cox"] * ratio))


@st.composite
def designs7(draw):
    """A design of :func:`designs` with the keys of DESIGN.md §7 drawn too: pair
    degeneration, MOS body effect and C_sb, a cascoded pair biased mid-way, added
    elements between the stage's nodes, a feedback divider."""
    d = draw(designs())
    kind = d["pair"]["type"]
    pol = 1 if kind in ("npn", "nmos") else -1
    i_dev = d["bias"]["tail_current"] / 2
    if draw(st.booleans()):
        d["pair"]["degeneration"] = draw(st.floats(0.001, 0.3)) / i_dev
    mos = kind in ("nmos", "pmos")
    if mos and draw(st.booleans()):
        d["pair"]["body_effect"] = draw(st.floats(0.0, 1.0))
        d["pair"]["csb"] = draw(absentable(1e-16, 1e-12))
    cascoded = draw(st.booleans())
    if cascoded:
        casc = draw(device(kind, i_dev, d["bias"]["temperature"]))
        rail = d["supply"]["positive"] if pol > 0 else d["supply"]["negative"]
        if d["load"]["type"] == "resistor":
            v_out = rail - pol * i_dev * d["load"]["resistance"]
        else:
            v_out = rail - pol * _drop(d["load"]["device"], i_dev)
        v_e = d["bias"]["input_common_mode"] - pol * _drop(d["pair"], i_dev)
        v_c = (v_e + v_out) / 2
        casc["bias"] = v_c + pol * _drop(casc, i_dev)
        d["pair"]["cascode"] = casc
    nodes = ["t", "o1", "o2", "ground", "vpos", "vneg", "b1", "in2"]
    if cascoded:
        nodes += ["c1", "c2"]
    if d["pair"].get("degeneration", 0) > 0:
        nodes += ["e1"]
    elements = []
    for _ in range(draw(st.integers(0, 3))):
        a, b = draw(st.lists(st.sampled_from(nodes), min_size=2, max_size=2, unique=True))
        kind_el = draw(st.sampled_from(["capacitor", "resistor"]))
        value = draw(absentable(1e-15, 1e-11)) if kind_el == "capacitor" \
            else draw(log_uniform(1e3, 1e9))
        elements.append({"kind": kind_el, "nodes": [a, b], "value": value})
    if elements:
        d["element"] = elements
    if "feedback" in d and draw(st.booleans()):
        d["feedback"] = {"type": "divider", "series_resistance": draw(log_uniform(1e2, 1e6)),
                         "shunt_resistance": draw(log_uniform(1e2, 1e6)),
                         "series_capacitance": draw(absentable(1e-15, 1e-10)),
                         "shunt_capacitance": draw(absentable(1e-15, 1e-10))}
    return d


@examples(60)
@given(d=designs7())
def test_second_edition_designs_give_finite_json_or_documented_nulls(d):
    # oracle: DESIGN.md §4 and §7 — null where infinite/undefined, never NaN; the keys of
    # §7e–§7h in every answer; a refusal is one line
    try:
        res = analyze(parse_design(d))
        out = res.to_json()
    except FreqpairError as exc:
        assert "\n" not in str(exc) and str(exc)
        return
    json.dumps(out, allow_nan=False)
    _finite_or_null(out)
    for key in ("psrr_pos_db", "psrr_neg_db", "zin_dm_ohm", "zin_cm_ohm", "beta_dc", "noise"):
        assert key in out
    shares = [c["share"] for c in out["noise"]["spot"][0]["contributors"]]
    assert not shares or abs(sum(shares) - 1.0) < 1e-9
    assert out["noise"]["input_rms_v"] is None or out["noise"]["input_rms_v"] >= 0


@examples(40)
@given(d=designs7(), node=st.sampled_from(["t", "o2", "vneg", "b2"]))
def test_an_absent_capacitor_or_an_open_resistor_changes_nothing(d, node):
    # oracle: DESIGN.md §7d — a 0 F capacitor is absent; 1e30 Ω beside ≥ 1e9 Ω paths is
    # open to 1e-12 relative (circuit theory)
    try:
        base = analyze(parse_design(d)).to_json()
    except FreqpairError:
        assume(False)
    for added in ({"kind": "capacitor", "nodes": [node, "ground"], "value": 0.0},
                  {"kind": "resistor", "nodes": [node, "ground"], "value": 1e30}):
        extra = copy.deepcopy(d)
        extra["element"] = list(d.get("element", [])) + [added]
        same = analyze(parse_design(extra)).to_json()
        for key in ("adm_db", "f3db_hz", "cmrr_se_db", "psrr_pos_db", "zin_dm_ohm"):
            assert (base[key] is None) == (same[key] is None), (key, added["kind"])
            if base[key] is not None:
                assert same[key] == pytest.approx(base[key], rel=1e-9), (key, added["kind"])
