"""Monte Carlo mismatch: batched engine against single analyses and textbook statistics."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.design.errors import FreqpairError
from freqpair.studies.montecarlo import MonteCarloSpec, Spread, run_montecarlo, sampled_design

SPEC = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.01),
                                 "mismatch.gm": ("normal", 0.01),
                                 "tail.capacitance": ("uniform", 0.2),
                                 "tail.resistance": ("normal", 0.05),
                                 "load.capacitance": ("normal", 0.05)})
F = np.logspace(1, 9, 41)


@pytest.fixture(scope="module")
def design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


@pytest.fixture(scope="module")
def run(design):
    return run_montecarlo(design, SPEC, 64, seed=7, f_hz=F, chunk=64)


def test_batched_samples_match_single_analyses_of_the_same_sampled_designs(design, run):
    # oracle: freqpair.analyze on the sampled design (independent QZ path, fresh network)
    for i in (0, 13, 63):
        a = freqpair.analyze(sampled_design(design, SPEC, i, 7))
        r = a.responses.at(F)
        assert run.cmrr_se_dc_db[i] == pytest.approx(a.cmrr_se_db, rel=1e-9)
        assert run.cmrr_dc_db[i] == pytest.approx(a.cmrr_db, rel=1e-9)
        assert run.corner_hz[i] == pytest.approx(a.cmrr_corner_hz, rel=1e-9)
        cse = 20 * np.log10(np.abs(r.adm_se / r.acm_se))
        np.testing.assert_allclose(run.cmrr_se_db_f[i], cse, rtol=1e-9)
        # balanced CMRR: A_cm-dm is a difference of two nearly equal outputs; both solvers
        # carry rounding of order 1e-13·|A_cm,se|, so compare the gain on that scale
        acm_dm = np.abs(r.adm) / 10 ** (run.cmrr_db_f[i] / 20)
        np.testing.assert_allclose(acm_dm, np.abs(r.acm_dm), rtol=0,
                                   atol=1e-9 * np.abs(r.acm_se).max())


def test_same_seed_gives_identical_results_and_chunk_size_does_not_matter(design, run):
    # common practice: reproducibility contract (per-sample keyed random streams)
    again = run_montecarlo(design, SPEC, 64, seed=7, f_hz=F, chunk=5)
    np.testing.assert_array_equal(again.values["mismatch.load"], run.values["mismatch.load"])
    np.testing.assert_allclose(again.cmrr_se_db_f, run.cmrr_se_db_f, rtol=1e-12)
    np.testing.assert_allclose(again.corner_hz, run.corner_hz, rtol=1e-12)
    other = run_montecarlo(design, SPEC, 8, seed=8, f_hz=F)
    assert not np.array_equal(other.values["mismatch.load"], run.values["mismatch.load"][:8])


def test_a_sample_does_not_depend_on_the_run_length(design, run):
    # common practice: sample i is keyed by (seed, key, i), not by n
    short = run_montecarlo(design, SPEC, 10, seed=7, f_hz=F)
    np.testing.assert_array_equal(short.values["tail.capacitance"],
                                  run.values["tail.capacitance"][:10])


def _ideal_pair():
    text = BUILTIN_EXAMPLE.replace("beta = 200", "beta = 1e7").replace(
        "early_voltage = 80", "early_voltage = 1e7").replace('capacitance = "2 pF"',
                                                             "capacitance = 0")
    return freqpair.design_from_text(text.replace("load = 0.01", "load = 0.0"))


def test_common_mode_to_differential_gain_spread_matches_small_mismatch_formula():
    # oracle: textbook small-mismatch result (Gray, Hurst, Lewis & Meyer, ch. 3, resistor-
    # loaded pair, from memory): A_cm-dm ≈ −δ·g_m·R_L/(1 + 2·g_m·R_tail), linear in δ;
    # with δ ~ N(0, σ): mean 0, standard deviation σ·g_m·R_L/(1 + 2·g_m·R_tail).
    d = _ideal_pair()
    n, sigma = 4000, 0.01
    res = run_montecarlo(d, MonteCarloSpec.from_dict({"mismatch.load": ("normal", sigma)}),
                         n, seed=3, f_hz=[1e3])
    gm = freqpair.analyze(d).operating_point.small_signal.gm
    rl, rt = 10e3, 1e6
    sd = sigma * gm * rl / (1 + 2 * gm * rt)
    x = res.dc_acm_dm.real
    assert abs(x.mean()) < 4 * sd / math.sqrt(n)                 # 4 standard errors
    assert x.std(ddof=1) == pytest.approx(sd, rel=4 / math.sqrt(2 * n))
    # per sample the ratio to δ follows the formula to first order in δ
    np.testing.assert_allclose(-x / res.values["mismatch.load"], gm * rl / (1 + 2 * gm * rt),
                               rtol=2e-2)
    # median balanced CMRR = (1 + 2 g_m R_tail)/(0.6745 σ) (median of |N(0, σ)|)
    med = (1 + 2 * gm * rt) / (0.6745 * sigma)
    assert 10 ** (np.median(res.cmrr_dc_db) / 20) == pytest.approx(med, rel=0.06)


def test_yield_counts_samples_meeting_the_spec(run):
    # oracle: direct count (common practice definition of yield)
    k = 20
    col = run.cmrr_se_db_f[:, k]
    spec = float(np.median(col))
    assert run.yield_fraction(spec, F[k]) == pytest.approx(np.mean(col >= spec))
    with pytest.raises(FreqpairError, match="not on the Monte Carlo grid"):
        run.yield_fraction(70, 1.234e5)


def test_bands_are_ordered_percentiles_of_the_sample_curves(run):
    # oracle: numpy.percentile on the same per-sample curves (common practice)
    np.testing.assert_allclose(run.band_cmrr_se_db[1], np.percentile(run.cmrr_se_db_f, 50, axis=0))
    assert np.all(run.band_cmrr_se_db[0] <= run.band_cmrr_se_db[2])


def test_bad_spreads_are_one_line_errors(design):
    # common practice: bad input names the field and the value
    with pytest.raises(FreqpairError, match="bias.tail_current: cannot be spread"):
        MonteCarloSpec.from_dict({"bias.tail_current": ("normal", 0.1)})
    with pytest.raises(FreqpairError, match="kind = 'gauss'"):
        Spread("gauss", 0.1)
    wide = MonteCarloSpec.from_dict({"tail.resistance": ("normal", 2.0)})
    with pytest.raises(FreqpairError, match="tail.resistance: sample"):
        run_montecarlo(design, wide, 200, seed=1, f_hz=F)


def test_cli_montecarlo_prints_json_with_bands_and_yield(tmp_path):
    # common practice: one JSON object on stdout, nothing else; no progress bar off a TTY
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "montecarlo",
                          "examples/npn_resistor_rc_tail.toml", "-n", "50", "--points", "20",
                          "--spread", "mismatch.load=normal:1%", "--spec", "70@1M", "--json",
                          "--csv", str(tmp_path / "bands.csv")],
                         capture_output=True, text=True, cwd=str(__import__("pathlib").Path(
                             __file__).parent.parent))
    assert out.returncode == 0, out.stderr
    obj = json.loads(out.stdout)
    assert obj["n_samples"] == 50 and 0 <= obj["yield"]["fraction"] <= 1
    assert set(obj["band_cmrr_se_db"]) == {"p5", "p50", "p95"}
    assert out.stderr == ""
    assert (tmp_path / "bands.csv").read_text().startswith("frequency_hz,")



def test_cli_montecarlo_progress_option_forces_the_bar_off_a_terminal():
    # oracle: README (Monte Carlo section) — "--progress / --no-progress force it";
    # the bar goes to stderr, stdout keeps the one JSON object
    out = subprocess.run([sys.executable, "-m", "freqpair.cli", "montecarlo",
                          "examples/npn_resistor_rc_tail.toml", "-n", "20", "--points", "10",
                          "--spread", "mismatch.load=normal:1%", "--json", "--progress"],
                         capture_output=True, text=True, cwd=str(__import__("pathlib").Path(
                             __file__).parent.parent))
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["n_samples"] == 20
    assert "montecarlo" in out.stderr

def test_benchmark_smoke_runs_at_tiny_size():
    # common practice: the benchmark script runs (no timing asserts)
    import importlib.util
    import pathlib
    path = pathlib.Path(__file__).parent.parent / "benchmarks" / "bench_montecarlo.py"
    spec = importlib.util.spec_from_file_location("bench_montecarlo", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    out = mod.main(["--samples", "20", "--points", "10", "--loop", "2"])
    assert out["ratio"] > 0


# ---------------------------------------------------------------- engine internals

ROOT = __import__("pathlib").Path(__file__).parent.parent
WIDE = MonteCarloSpec.from_dict({"mismatch.load": ("uniform", 0.9),
                                 "mismatch.gm": ("uniform", 0.9),
                                 "tail.capacitance": ("uniform", 0.95),
                                 "tail.resistance": ("uniform", 0.9),
                                 "load.capacitance": ("uniform", 0.95)})


def _direct_gains(design, f_hz):
    """Oracle: scipy.linalg.solve of the sampled design's own freshly stamped G + sC."""
    import scipy.linalg as sla
    from freqpair.circuit.stage import build_stage
    net = build_stage(design).network
    G, C, B = net.matrices()
    exc = np.column_stack([B[:, :2] @ [0.5, -0.5], B[:, :2] @ [1.0, 1.0]])          # DM, CM (DESIGN.md §2)
    rows = np.array([net.selector({"o1": 1.0, "o2": -1.0}), net.selector({"o2": 1.0})])
    return np.array([rows @ sla.solve(G + 2j * np.pi * f * C, exc) for f in f_hz])


def test_grid_gains_of_wide_samples_match_a_direct_solve_of_each_sampled_network(design):
    # oracle: scipy.linalg.solve on each sampled design's own network (fresh stamps, LAPACK),
    # all five element kinds varied by up to ±95 %: the closed-form expansion is exact
    from freqpair.studies.batch import BatchEvaluator
    from freqpair.studies.montecarlo import sample_values
    ev = BatchEvaluator(design, WIDE.keys)
    dG, dC = ev.deltas(sample_values(design, WIDE, 0, 12, 5))
    f = np.logspace(1, 10, 19)
    g = ev.on_grid(2j * np.pi * f, dG, dC)
    for i in (0, 4, 11):
        h = _direct_gains(sampled_design(design, WIDE, i, 5), f)
        np.testing.assert_allclose(g.adm[i], h[:, 0, 0], rtol=1e-9)
        np.testing.assert_allclose(g.adm_se[i], h[:, 1, 0], rtol=1e-9)
        np.testing.assert_allclose(g.acm_se[i], h[:, 1, 1], rtol=1e-9)
        np.testing.assert_allclose(g.acm_dm[i], h[:, 0, 1], rtol=1e-9)


def test_chunk_size_changes_no_bit_of_the_results(design):
    # common practice: reproducibility contract — a sample's numbers never depend on the
    # chunk it ran in (fixed-shape matrix products, per-sample refinement)
    runs = [run_montecarlo(design, SPEC, 23, seed=4, f_hz=F, chunk=c) for c in (23, 1, 5)]
    for other in runs[1:]:
        for name in ("cmrr_se_db_f", "cmrr_db_f", "cmrr_se_dc_db", "cmrr_dc_db", "corner_hz"):
            np.testing.assert_array_equal(getattr(other, name), getattr(runs[0], name),
                                          err_msg=name)


@pytest.mark.parametrize("f", [np.logspace(1, 3, 9), np.logspace(7, 9, 9)],
                         ids=["grid-below-corners", "grid-above-corners"])
def test_corner_beyond_the_run_grid_matches_single_analyses(design, f):
    # oracle: freqpair.analyze on the sampled design (its own search grid and brentq);
    # the run's grid lies wholly below (above) every corner, so each is bracketed past it
    res = run_montecarlo(design, WIDE, 12, seed=2, f_hz=f)
    for i in (0, 5, 11):
        a = freqpair.analyze(sampled_design(design, WIDE, i, 2))
        assert not f[0] <= a.cmrr_corner_hz <= f[-1]
        assert res.corner_hz[i] == pytest.approx(a.cmrr_corner_hz, rel=1e-9)


def test_corner_refinement_needs_few_exact_evaluations(design, monkeypatch):
    # common practice: a secant step from a cubic interpolant of the grid converges
    # superlinearly; more than 6 rounds of exact solves means the seed or the update broke
    from freqpair.studies import montecarlo
    calls = []
    real = montecarlo._Engine.cmrr_se_at
    monkeypatch.setattr(montecarlo._Engine, "cmrr_se_at",
                        lambda self, *a: calls.append(1) or real(self, *a))
    res = run_montecarlo(design, SPEC, 64, seed=7, f_hz=np.logspace(1, 9, 161), chunk=64)
    assert np.all(np.isfinite(res.corner_hz))
    assert len(calls) <= 6


def test_mirror_loaded_stage_matches_single_analyses():
    # oracle: freqpair.analyze on the sampled designs; a mirror load has no balanced output
    d = freqpair.load_design(ROOT / "examples" / "npn_mirror_load_simple_mirror_tail.toml")
    spec = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.02),
                                     "mismatch.gm": ("normal", 0.02),
                                     "load.capacitance": ("normal", 0.1)})
    res = run_montecarlo(d, spec, 10, seed=3, f_hz=F)
    assert res.cmrr_db_f is None and res.cmrr_dc_db is None
    for i in (0, 9):
        a = freqpair.analyze(sampled_design(d, spec, i, 3))
        r = a.responses.at(F)
        np.testing.assert_allclose(res.cmrr_se_db_f[i], 20 * np.log10(np.abs(r.adm_se / r.acm_se)),
                                   rtol=1e-9)
        assert res.cmrr_se_dc_db[i] == pytest.approx(a.cmrr_se_db, rel=1e-9)
        assert res.corner_hz[i] == pytest.approx(a.cmrr_corner_hz, rel=1e-9)


def test_matched_mos_pair_with_ideal_tail_has_infinite_dc_cmrr_and_no_corner_in_every_sample():
    # oracle: DESIGN.md §2 — a common-mode gain zero to rounding makes the CMRR infinite
    # and the corner null; analyze on the sampled design agrees on the curve above DC
    d = freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml")
    spec = MonteCarloSpec.from_dict({"load.capacitance": ("normal", 0.1)})
    f = np.logspace(2, 9, 15)
    res = run_montecarlo(d, spec, 8, seed=1, f_hz=f)
    assert np.all(res.cmrr_se_dc_db == np.inf) and np.all(res.corner_hz == np.inf)
    assert res.to_json()["cmrr_corner_hz"] == {"p5": None, "p50": None, "p95": None}
    a = freqpair.analyze(sampled_design(d, spec, 3, 1))
    r = a.responses.at(f)
    assert a.cmrr_se_db is None
    np.testing.assert_allclose(res.cmrr_se_db_f[3], 20 * np.log10(np.abs(r.adm_se / r.acm_se)),
                               rtol=1e-9)
