"""The command line: bad files fail cleanly, --json keeps the DESIGN.md §4 contract,
the text summary reads in engineering notation.

Oracle: DESIGN.md §3–§4 (contracts) and common practice for command-line tools
(errors on stderr, non-zero exit, data alone on stdout).
"""
import json
import math
import re

import pytest

from conftest import EXAMPLES, ROOT
from helpers import NPN_PAIR, run_cli

BASE = NPN_PAIR

CONTRACT_KEYS = {"operating_point", "adm_db", "f3db_hz", "ugf_hz", "acm_se_db", "cmrr_se_db",
                 "cmrr_db", "cmrr_corner_hz", "tail"}


BAD_FILES = {
    "unknown_key": BASE.replace("beta = 200", "betta = 200"),
    "missing_key": BASE.replace("beta = 200\n", ""),
    "wrong_type": BASE.replace("beta = 200", "beta = [200]"),
    "negative": BASE.replace('resistance = "10 k"', 'resistance = "-10 k"'),
    "zero": BASE.replace('tail_current = "1 mA"', "tail_current = 0"),
    "nan": BASE.replace("beta = 200", "beta = nan"),
    "inf": BASE.replace("early_voltage = 80", "early_voltage = inf"),
    "tf_and_ft": BASE.replace("beta = 200", 'beta = 200\nft = "1 GHz"\ntransit_time = "1 ns"'),
    "not_toml": "[supply\npositive = 1\n",
    "saturated": BASE.replace('tail_current = "1 mA"', 'tail_current = "5 mA"'),
    "starved": BASE.replace("negative = -12", "negative = -0.8"),
}


class _Ran:
    """What a CLI run left behind (same fields as subprocess.CompletedProcess)."""

    def __init__(self, returncode, stdout, stderr):
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr


def run_in_process(*args):
    """freqpair.cli.main in this process (fast); stdout/stderr captured."""
    import contextlib
    import io

    from freqpair.cli.main import main
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in args])
    return _Ran(code, out.getvalue(), err.getvalue())


#: bad files also run as a real subprocess (the rest in-process, to keep the file fast)
SUBPROCESS_CASES = ("unknown_key", "saturated")


@pytest.fixture(scope="module")
def bad_runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bad")
    runs = {}
    for name, text in BAD_FILES.items():
        path = folder / f"{name}.toml"
        path.write_text(text)
        runs[name] = [run_in_process("analyze", path), run_in_process("analyze", path, "--json")]
        if name in SUBPROCESS_CASES:
            runs[name].append(run_cli("analyze", path, "--json"))
    runs["no_such_file"] = [run_in_process("analyze", folder / "absent.toml", "--json"),
                            run_cli("analyze", folder / "absent.toml")]
    return runs


@pytest.mark.parametrize("name", list(BAD_FILES) + ["no_such_file"])
def test_bad_design_file_exits_nonzero_with_one_stderr_line_and_empty_stdout(bad_runs, name):
    # oracle: DESIGN.md §4 — "exits non-zero with one line on stderr and nothing on stdout"
    for proc in bad_runs[name]:
        assert proc.returncode != 0
        assert proc.stdout == ""
        lines = proc.stderr.splitlines()
        assert len(lines) == 1, proc.stderr
        assert "Traceback" not in proc.stderr
        assert lines[0].startswith("freqpair: error: ")


def test_bad_value_error_line_names_the_key_and_value(bad_runs):
    # oracle: DESIGN.md §3 — the error names the key (and value)
    assert "pair.betta = 200: unknown key" in bad_runs["unknown_key"][0].stderr
    assert "pair.beta: missing required key" in bad_runs["missing_key"][0].stderr
    assert "load.resistance = '-10 k'" in bad_runs["negative"][0].stderr
    assert "pair.beta = nan" in bad_runs["nan"][0].stderr
    assert "pair (npn): saturated" in bad_runs["saturated"][0].stderr


@pytest.fixture(scope="module")
def json_runs():
    return {p.stem: run_cli("analyze", p, "--json") for p in EXAMPLES}


@pytest.mark.parametrize("stem", [p.stem for p in EXAMPLES])
def test_json_output_is_exactly_one_object_with_the_contract_keys(json_runs, stem):
    # oracle: DESIGN.md §4 — one JSON object, nothing else on stdout, SI, null not NaN
    proc = json_runs[stem]
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    obj = json.loads(proc.stdout)          # raises if anything else is on stdout
    assert isinstance(obj, dict)
    assert CONTRACT_KEYS <= set(obj)
    assert set(obj["tail"]) == {"resistance", "capacitance"}
    assert "NaN" not in proc.stdout and "Infinity" not in proc.stdout
    op = obj["operating_point"]
    assert ({"ic", "gm", "rpi", "ro", "cpi", "cmu", "vce", "vcb"} <= set(op)
            or {"id", "gm", "ro", "cgs", "cgd", "vds", "vgs"} <= set(op))
    for key in ("adm_db", "f3db_hz"):
        assert isinstance(obj[key], float) and math.isfinite(obj[key])


def test_json_for_ideal_tail_matched_mos_uses_null(json_runs):
    # oracle: DESIGN.md §2 — zero gain → null dB and null CMRR; ideal tail → null Norton
    obj = json.loads(json_runs["nmos_resistor_ideal_tail"].stdout)
    for key in ("acm_se_db", "cmrr_se_db", "cmrr_db", "cmrr_corner_hz"):
        assert obj[key] is None
    assert obj["tail"] == {"resistance": None, "capacitance": None}


def test_text_summary_uses_engineering_notation():
    # oracle: common practice — engineering notation (SI prefix, exponent a multiple of 3)
    proc = run_cli("analyze", ROOT / "examples" / "npn_resistor_rc_tail.toml")
    assert proc.returncode == 0 and proc.stderr == ""
    text = proc.stdout
    assert re.search(r"I_C\s+= \d+(\.\d+)? [µm]A", text)
    assert re.search(r"f_3dB:\s+\d+(\.\d+)? [kMG]Hz", text)
    assert re.search(r"R = 470 kΩ, C = 3\.3 pF", text)
    assert not re.search(r"\de[-+]?\d", text)          # no raw exponents
    # labels and values line up: every "label:   value" row has its value in one column
    top = text.split("Poles and zeros")[0]   # the metric rows; tables below have their own layout
    cols = {m.start(1) - m.start(0) for m in re.finditer(r"^  [^\n:]+:\s+(\S)", top, re.M)
            if not m.group(0).lstrip().startswith("tail")}
    assert len(cols) == 1, cols


def test_builtin_example_runs_without_a_file():
    # oracle: cli help text — "omit for the built-in example"
    proc = run_cli("analyze", "--json")
    assert proc.returncode == 0
    assert CONTRACT_KEYS <= set(json.loads(proc.stdout))


def test_csv_written_alongside_json(tmp_path):
    # oracle: common practice — CSV with a header row and one row per sweep point
    out = tmp_path / "c.csv"
    proc = run_cli("analyze", ROOT / "examples" / "npn_resistor_rc_tail.toml", "--json",
                   "--csv", out)
    assert proc.returncode == 0
    json.loads(proc.stdout)
    rows = out.read_text().splitlines()
    assert rows[0].startswith("frequency_hz,")
    # 10 Hz … 10 GHz at 40 per decade: 9 decades · 40 + 1 points
    assert len(rows) - 1 == 9 * 40 + 1
