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
    return run_montecarlo(design, SPEC, 64, seed=7, f_hz=F, chunk=64, keep_samples=True)


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
    again = run_montecarlo(design, SPEC, 64, seed=7, f_hz=F, chunk=5, keep_samples=True)
    np.testing.assert_array_equal(again.values["mismatch.load"], run.values["mismatch.load"])
    np.testing.assert_allclose(again.cmrr_se_db_f, run.cmrr_se_db_f, rtol=1e-12)
    np.testing.assert_allclose(again.corner_hz, run.corner_hz, rtol=1e-12)
    other = run_montecarlo(design, SPEC, 8, seed=8, f_hz=F, keep_samples=True)
    assert not np.array_equal(other.values["mismatch.load"], run.values["mismatch.load"][:8])


def test_a_sample_does_not_depend_on_the_run_length(design, run):
    # common practice: sample i is keyed by (seed, key, i), not by n
    short = run_montecarlo(design, SPEC, 10, seed=7, f_hz=F, keep_samples=True)
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
                         n, seed=3, f_hz=[1e3], keep_samples=True)
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


def test_yield_counts_samples_meeting_the_spec(design, run):
    # oracle: direct count over the kept samples (common practice definition of yield)
    k = 20
    col = run.cmrr_se_db_f[:, k]
    spec = float(np.median(col))
    assert run.yield_fraction(spec, F[k]) == pytest.approx(np.mean(col >= spec))
    counted = run_montecarlo(design, SPEC, 64, seed=7, f_hz=F, yields=[(spec, F[k])])
    assert counted.yield_fraction(spec, F[k]) == np.mean(col >= spec)
    with pytest.raises(FreqpairError, match=r"not counted in this run: pass yields=\[\(70"):
        counted.yield_fraction(70, 1.234e5)
    with pytest.raises(FreqpairError, match="outside the Monte Carlo grid"):
        run.yield_fraction(70, 1e10)


def test_bands_are_ordered_percentiles_of_the_sample_curves(run):
    # oracle: numpy.percentile on the same per-sample curves (common practice), read
    # from bins of 1/256 dB: within one bin
    np.testing.assert_allclose(run.band_cmrr_se_db[1], np.percentile(run.cmrr_se_db_f, 50, axis=0),
                               rtol=0, atol=2.0 ** -8)
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
    one = mod.one_run(300, 10, 0, 64)          # what --scale runs in each fresh process
    assert one["n"] == 300 and one["rss_mb"] > 0 and 0 <= one["yield_70db_1mhz"] <= 1
    # the accuracy mode's figures: oracle numpy.percentile of the kept samples
    acc = mod.accuracy(300, 10)
    assert max(v for k, v in acc.items() if k != "corner_relative") <= 2.0 ** -8


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
    exc = np.column_stack([B[:, :2] @ [0.5, -0.5], B[:, :2] @ [1.0, 1.0]])  # DM, CM (§2)
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
    runs = [run_montecarlo(design, SPEC, 23, seed=4, f_hz=F, chunk=c, keep_samples=True)
            for c in (23, 1, 5)]
    for other in runs[1:]:
        for name in ("cmrr_se_db_f", "cmrr_db_f", "cmrr_se_dc_db", "cmrr_dc_db", "corner_hz"):
            np.testing.assert_array_equal(getattr(other, name), getattr(runs[0], name),
                                          err_msg=name)


@pytest.mark.parametrize("f", [np.logspace(1, 3, 9), np.logspace(7, 9, 9)],
                         ids=["grid-below-corners", "grid-above-corners"])
def test_corner_beyond_the_run_grid_matches_single_analyses(design, f):
    # oracle: freqpair.analyze on the sampled design (its own search grid and brentq);
    # the run's grid lies wholly below (above) every corner, so each is bracketed past it
    res = run_montecarlo(design, WIDE, 12, seed=2, f_hz=f, keep_samples=True)
    for i in (0, 5, 11):
        a = freqpair.analyze(sampled_design(design, WIDE, i, 2))
        assert not f[0] <= a.cmrr_corner_hz <= f[-1]
        assert res.corner_hz[i] == pytest.approx(a.cmrr_corner_hz, rel=1e-9)


def test_corners_from_the_lattice_sit_on_the_level_in_a_direct_solve(design, monkeypatch):
    # oracle: each sampled network solved directly (batched LU of its own G + sC,
    # BatchEvaluator.paired) at the returned corner: the single-ended CMRR there is its
    # DC value − 3.01 dB. The refinement itself must not need such per-sample solves.
    from freqpair.analysis.crossings import DB_3
    from freqpair.studies.batch import BatchEvaluator
    from freqpair.studies.montecarlo import _ratio_db, sample_values
    paired = BatchEvaluator.paired
    monkeypatch.setattr(BatchEvaluator, "paired", lambda *a: pytest.fail("per-sample solve"))
    res = run_montecarlo(design, WIDE, 200, seed=7, f_hz=np.logspace(1, 9, 161), chunk=64,
                         keep_samples=True)
    monkeypatch.setattr(BatchEvaluator, "paired", paired)
    ok = np.isfinite(res.corner_hz)
    assert ok.sum() > 150
    ev = BatchEvaluator(design, WIDE.keys)
    dG, dC = ev.deltas(sample_values(design, WIDE, 0, 200, 7))
    g = ev.paired(2j * np.pi * res.corner_hz[ok], dG[ok], dC[ok])
    at_corner = _ratio_db(g.adm_se, g.acm_se, np.abs(res.dc_adm[ok]))
    # 1e-8 dB at a slope of a few dB per decade: ~1e-9 decades
    np.testing.assert_allclose(at_corner, res.cmrr_se_dc_db[ok] - DB_3, rtol=0, atol=1e-8)


def test_mirror_loaded_stage_matches_single_analyses():
    # oracle: freqpair.analyze on the sampled designs; a mirror load has no balanced output
    d = freqpair.load_design(ROOT / "examples" / "npn_mirror_load_simple_mirror_tail.toml")
    spec = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.02),
                                     "mismatch.gm": ("normal", 0.02),
                                     "load.capacitance": ("normal", 0.1)})
    res = run_montecarlo(d, spec, 10, seed=3, f_hz=F, keep_samples=True)
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
    res = run_montecarlo(d, spec, 8, seed=1, f_hz=f, keep_samples=True)
    assert np.all(res.cmrr_se_dc_db == np.inf) and np.all(res.corner_hz == np.inf)
    assert res.to_json()["cmrr_corner_hz"] == {"p5": None, "p50": None, "p95": None}
    a = freqpair.analyze(sampled_design(d, spec, 3, 1))
    r = a.responses.at(f)
    assert a.cmrr_se_db is None
    np.testing.assert_allclose(res.cmrr_se_db_f[3], 20 * np.log10(np.abs(r.adm_se / r.acm_se)),
                               rtol=1e-9)


# ---------------------------------------------------------------- streaming reductions

THREE = MonteCarloSpec.from_dict({"mismatch.load": "normal:1%", "mismatch.gm": "normal:1%",
                                  "tail.capacitance": "uniform:20%"})


@pytest.fixture(scope="module")
def kept(design):
    return run_montecarlo(design, THREE, 6000, seed=5, f_hz=np.logspace(1, 9, 33), chunk=1000,
                          percentiles=(0, 1, 5, 50, 95, 99, 100), keep_samples=True)


def test_histogram_percentiles_are_within_0p01_db_of_numpy_percentile_of_the_kept_samples(kept):
    # oracle: numpy.percentile (default method 'linear') of the kept samples, same seed;
    # the histograms promise one bin (1/256 dB), the brief 0.01 dB
    q = kept.percentiles
    for name, curves in (("cmrr_se_db", kept.cmrr_se_db_f), ("cmrr_db", kept.cmrr_db_f)):
        exact = np.percentile(curves, q, axis=0)
        assert np.abs(kept.bands[name] - exact).max() <= 2.0 ** -8, name
        assert np.abs(kept.bands[name] - exact).max() <= 0.01
    for name, x in (("cmrr_se_dc_db", kept.cmrr_se_dc_db), ("cmrr_dc_db", kept.cmrr_dc_db)):
        assert np.abs(kept.percentile(name, q) - np.percentile(x, q)).max() <= 2.0 ** -8, name
    # the smallest and largest values are kept exactly
    np.testing.assert_array_equal(kept.bands["cmrr_se_db"][0], kept.cmrr_se_db_f.min(axis=0))
    np.testing.assert_array_equal(kept.bands["cmrr_db"][-1], kept.cmrr_db_f.max(axis=0))
    # corner frequencies: bins of 2^-17 decade in log10 f
    corner = kept.percentile("cmrr_corner_hz", q)
    np.testing.assert_allclose(corner, np.percentile(kept.corner_hz, q), rtol=2e-5, atol=0)
    # any other percentile after the run, from the same histograms
    exact = np.percentile(kept.cmrr_se_db_f, 37.5, axis=0)
    assert np.abs(kept.band_percentile(37.5) - exact).max() <= 2.0 ** -8


def test_bins_hold_the_exact_counts_of_the_kept_samples(kept):
    # oracle: numpy.floor(x·256) of the kept samples, counted with numpy.unique
    h = kept.summary.curves["cmrr_se_db"]
    for row in (0, 16, 32):
        keys, counts = np.unique(np.floor(kept.cmrr_se_db_f[:, row] * 256), return_counts=True)
        c = h.counts[row]
        nz = np.nonzero(c)[0]
        np.testing.assert_array_equal(h.lo[row] + nz, keys.astype(np.int64))
        np.testing.assert_array_equal(c[nz], counts)


def test_infinite_values_count_as_the_largest_in_percentiles():
    # oracle: numpy's 'linear' rule on numpy.sort of the values, with +inf sorting last
    # and any weight on an infinite order statistic giving +inf (numpy itself returns
    # NaN there: inf − inf)
    from freqpair.studies.histogram import BinnedCounts, DB_BIN
    x = np.array([80.0, 81.5, np.inf, 79.25, np.inf, 90.0])
    h = BinnedCounts.of(x, DB_BIN)
    xs = np.sort(x)
    for q in (0, 20, 50, 60, 70, 100):
        r = (x.size - 1) * q / 100
        lo, t = int(np.floor(r)), r - np.floor(r)
        hi = min(lo + 1, x.size - 1)
        want = xs[lo] if t == 0 else (np.inf if np.isinf(xs[hi]) else
                                      xs[lo] + t * (xs[hi] - xs[lo]))
        got = h.percentiles([q])[0, 0]
        assert got == want or abs(got - want) <= DB_BIN, q


def test_merging_chunk_summaries_in_a_shuffled_order_gives_the_same_bits(design):
    # oracle: the summary of the whole range in one chunk (integer counts add exactly)
    import copy
    from freqpair.studies.montecarlo import _Engine, _Request, reduce_chunk
    f = np.logspace(1, 9, 25)
    request = _Request(("cmrr_se_db", "cmrr_db"), ((70.0, 1.1e6, "se"),),
                       ((18, 0.3),), False, 97)
    eng = _Engine(design, THREE, f)
    whole = reduce_chunk(design, THREE, 0, 1500, 3, f, request, eng)
    cuts = [0, 1, 200, 201, 650, 1024, 1499, 1500]
    parts = [reduce_chunk(design, THREE, a, b, 3, f, request, eng) for a, b in zip(cuts, cuts[1:])]
    for seed in (0, 1):
        order = np.random.default_rng(seed).permutation(len(parts))
        merged = None
        for k in order:
            part = copy.deepcopy(parts[k])
            merged = part if merged is None else merged.merge(part)
        assert merged.n == whole.n == 1500
        for name in ("cmrr_se_db", "cmrr_db"):
            assert merged.curves[name] == whole.curves[name], name
            np.testing.assert_array_equal(merged.curves[name].percentiles([5, 50, 95]),
                                          whole.curves[name].percentiles([5, 50, 95]))
        assert merged.corner == whole.corner
        assert all(merged.dc[k] == whole.dc[k] for k in whole.dc)
        np.testing.assert_array_equal(merged.yield_counts, whole.yield_counts)


def test_chunk_size_changes_no_bit_of_the_streamed_answer(design):
    # common practice: reproducibility contract — the JSON answer is the same bits for
    # any chunk size (the reductions merge integer counts)
    a = run_montecarlo(design, THREE, 900, seed=9, f_hz=F, chunk=900, yields=[(60, 3e5)])
    b = run_montecarlo(design, THREE, 900, seed=9, f_hz=F, chunk=7, yields=[(60, 3e5)])
    assert json.dumps(a.to_json((60, 3e5))) == json.dumps(b.to_json((60, 3e5)))
    for name in a.bands:
        np.testing.assert_array_equal(a.bands[name], b.bands[name])


def test_client_memory_does_not_grow_with_the_sample_count(design):
    # oracle: tracemalloc's peak of the traced allocations (Python's own accounting)
    # for 50,000 and 200,000 samples: only the histograms' windows may widen (their
    # tails reach a little further), never a per-sample array
    import gc
    import tracemalloc
    f = np.logspace(1, 9, 20)
    peaks = []
    for n in (50_000, 200_000):
        gc.collect()
        tracemalloc.start()
        res = run_montecarlo(design, THREE, n, seed=1, f_hz=f, chunk=2048)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
        assert res.n == n
        del res
    # 4× the samples: at most 2 MiB more (measured ≈ 1 MiB: the balanced CMRR's tails)
    assert peaks[1] <= peaks[0] + 2 * 2 ** 20, [p / 2 ** 20 for p in peaks]


def test_yield_between_grid_points_matches_each_sample_interpolated_in_log_f(kept, design):
    # oracle: the kept samples, each sample's curve interpolated linearly in log10 f with
    # numpy.interp at the spec frequency, then counted (common practice definition of yield)
    f = kept.f_hz
    at = float(np.sqrt(f[20] * f[21]) * 1.1)              # between grid points 20 and 21
    assert not np.any(np.isclose(f, at))
    x = np.log10(f)
    per_sample = np.array([np.interp(np.log10(at), x, row) for row in kept.cmrr_se_db_f])
    spec = float(np.median(per_sample))
    want = np.mean(per_sample >= spec)
    assert kept.yield_fraction(spec, at) == pytest.approx(want, abs=1 / kept.n)
    counted = run_montecarlo(design, THREE, 6000, seed=5, f_hz=f, chunk=1000,
                             yields=[(spec, at), (spec - 1, at, "balanced")])
    assert counted.yield_fraction(spec, at) == pytest.approx(want, abs=1 / kept.n)
    bal = np.array([np.interp(np.log10(at), x, row) for row in kept.cmrr_db_f])
    assert counted.yield_fraction(spec - 1, at, "balanced") == \
        pytest.approx(np.mean(bal >= spec - 1), abs=1 / kept.n)


def test_band_between_grid_points_is_the_bands_interpolated_in_log_f(kept):
    # oracle: numpy.interp of each percentile curve over log10 f (the documented rule)
    f = kept.f_hz
    at = float(10 ** (0.3 * np.log10(f[9]) + 0.7 * np.log10(f[10])))
    got = kept.band_at(at, "cmrr_se_db")
    for q, row in zip(kept.percentiles, kept.band_cmrr_se_db):
        assert got[f"p{q:g}"] == pytest.approx(np.interp(np.log10(at), np.log10(f), row),
                                               rel=1e-12)
    assert kept.band_at(float(f[12]))["p50"] == kept.band_cmrr_se_db[3, 12]
    with pytest.raises(FreqpairError, match="outside the Monte Carlo grid"):
        kept.band_at(1.0)


def test_spec_from_dict_reads_the_command_line_spread_strings():
    # oracle: the tuple form of the same spreads (one parser for both faces)
    a = MonteCarloSpec.from_dict({"mismatch.load": "normal:1%", "tail.capacitance":
                                  "uniform: 0.2", "mismatch.gm": "normal:10m"})
    b = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.01),
                                  "tail.capacitance": ("uniform", 0.2),
                                  "mismatch.gm": ("normal", 0.01)})
    assert a == b
    for bad, match in (("gauss:1%", "mismatch.load = 'gauss:1%': kind 'gauss'"),
                       ("normal", "mismatch.load = 'normal': expected normal:SIGMA"),
                       ("normal:1x", "mismatch.load width = '1x'")):
        with pytest.raises(FreqpairError, match=match) as info:
            MonteCarloSpec.from_dict({"mismatch.load": bad})
        assert "\n" not in str(info.value)


def test_cli_spread_errors_name_the_option_in_one_line():
    # common practice: CLI error contract — exit 2, one stderr line naming the option
    for spread, match in (("mismatch.load=gauss:1%", "--spread mismatch.load = 'gauss:1%'"),
                          ("mismatch.load=normal:1x", "--spread mismatch.load width = '1x'"),
                          ("mismatch.load", "--spread 'mismatch.load': expected KEY=")):
        out = subprocess.run([sys.executable, "-m", "freqpair.cli", "montecarlo",
                              "examples/npn_resistor_rc_tail.toml", "-n", "10",
                              "--spread", spread], capture_output=True, text=True, cwd=ROOT)
        assert out.returncode == 2 and out.stdout == "", out.stderr
        assert len(out.stderr.strip().splitlines()) == 1 and match in out.stderr, out.stderr


def test_cli_keep_samples_writes_every_sample_and_the_same_summary(tmp_path):
    # oracle: the library's kept samples for the same seed; the JSON summary is the same
    # with and without --keep-samples (the percentiles come from the histograms either way)
    base = [sys.executable, "-m", "freqpair.cli", "montecarlo",
            "examples/npn_resistor_rc_tail.toml", "-n", "300", "--points", "12", "--seed", "2",
            "--spread", "mismatch.load=normal:1%", "--spread", "tail.capacitance=uniform:20%",
            "--json"]
    plain = subprocess.run(base, capture_output=True, text=True, cwd=ROOT)
    path = tmp_path / "samples.csv"
    kept_run = subprocess.run(base + ["--keep-samples", str(path)], capture_output=True,
                              text=True, cwd=ROOT)
    assert plain.returncode == 0 and kept_run.returncode == 0, kept_run.stderr
    assert json.loads(plain.stdout) == json.loads(kept_run.stdout)
    import csv
    with path.open() as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 300
    d = freqpair.load_design(ROOT / "examples" / "npn_resistor_rc_tail.toml")
    spec = MonteCarloSpec.from_dict({"mismatch.load": "normal:1%",
                                     "tail.capacitance": "uniform:20%"})
    lib = run_montecarlo(d, spec, 300, seed=2, f_hz=np.logspace(1, 10, 12), keep_samples=True)
    assert float(rows[7]["mismatch.load"]) == lib.values["mismatch.load"][7]
    assert float(rows[7]["cmrr_corner_hz"]) == lib.corner_hz[7]
    assert float(rows[299][f"cmrr_se_db@{float(lib.f_hz[5])!r}"]) == lib.cmrr_se_db_f[299, 5]


# ---------------------------------------------------------------- two stages, body effect, PSRR

TWO_STAGE_RESISTOR = BUILTIN_EXAMPLE.replace("[sweep]", """[second_stage]
gm = "4 mS"
output_resistance = "150 k"
input_capacitance = "0.5 pF"
load_capacitance = "10 pF"
miller_capacitance = "3 pF"
nulling_resistance = 0

[sweep]""")
PSRR = ("psrr_pos_db", "psrr_neg_db")
ALL_FIVE = {"mismatch.load": "normal:5%", "mismatch.gm": "normal:5%",
            "load.capacitance": "normal:20%", "tail.resistance": "normal:20%",
            "tail.capacitance": "uniform:50%"}
NO_NORTON = {k: v for k, v in ALL_FIVE.items() if not k.startswith("tail.")}
F_PSRR = np.logspace(0, 10, 21)


def _psrr_case(name):
    """(design, spreads) per case: one stage and two stages, each load kind, a MOS
    design with body effect (g_mb follows g_m) and a cascode tail."""
    if name == "builtin":
        return freqpair.design_from_text(BUILTIN_EXAMPLE), ALL_FIVE
    if name == "two_stage_resistor_load":
        return freqpair.design_from_text(TWO_STAGE_RESISTOR), ALL_FIVE
    d = freqpair.load_design(ROOT / "examples" / f"{name}.toml")
    return d, (ALL_FIVE if d.tail.type == "norton" else NO_NORTON)


def _rebuilt(design, values, i):
    """The sampled design of sample i, rebuilt from its sampled values."""
    for key, x in values.items():
        design = freqpair.replace_value(design, key, float(x[i]))
    return design


@pytest.mark.parametrize("case, key", [("two_stage_resistor_load", "load.capacitance"),
                                       ("nmos_cascode_divider_loop", "mismatch.gm")])
def test_a_spread_moves_the_elements_it_names_and_only_those(case, key):
    # oracle: freqpair.analyze of each sampled design rebuilt with freqpair.replace_value
    # (its own freshly stamped network). A resistor-loaded stage's C_L at o2 and a second
    # stage's C_L at out carry the same label; a MOS pair's g_mb scales with its g_m
    # (DESIGN.md §7b) — the batched gains follow the design file, not the labels
    from freqpair.studies.batch import BatchEvaluator
    from freqpair.studies.montecarlo import sample_values
    d, _ = _psrr_case(case)
    spec = MonteCarloSpec.from_dict({key: "normal:20%" if key.startswith("load") else "normal:5%"})
    ev = BatchEvaluator(d, spec.keys)
    values = sample_values(d, spec, 0, 4, 13)
    dG, dC = ev.deltas(values)
    g = ev.on_grid(2j * np.pi * F_PSRR, dG, dC)
    for i in range(4):
        r = freqpair.analyze(_rebuilt(d, values, i)).responses.at(F_PSRR)
        np.testing.assert_allclose(g.adm_se[i], r.adm_se, rtol=1e-9)
        np.testing.assert_allclose(g.acm_se[i], r.acm_se, rtol=1e-9)


@pytest.mark.parametrize("case", ["builtin", "two_stage_resistor_load",
                                  "npn_mirror_load_simple_mirror_tail", "two_stage_miller_loop",
                                  "nmos_cascode_divider_loop"])
def test_batched_psrr_curves_match_psrr_db_of_single_analyses_of_the_sampled_designs(case):
    # oracle: freqpair.analyze of each sampled design (rebuilt with freqpair.replace_value
    # from the run's sampled values) → freqpair.analysis.supply.psrr_db at the same
    # frequencies, and its DC PSRR± (DESIGN.md §7f: single-ended output o2, or out with a
    # second stage, against A_dm,se or A_total)
    from freqpair.analysis.supply import psrr_db, single_ended_name
    d, spreads = _psrr_case(case)
    spec = MonteCarloSpec.from_dict(spreads)
    res = run_montecarlo(d, spec, 12, seed=21, f_hz=F_PSRR, chunk=5, keep_samples=True,
                         curves=PSRR + ("adm_se_db", "cmrr_se_db"))
    for i in (0, 5, 11):
        a = freqpair.analyze(_rebuilt(d, res.values, i))
        r = a.responses.at(F_PSRR)
        se = single_ended_name(a.responses)
        assert se == ("a_total" if d.second_stage is not None else "adm_se")
        for name, rail, dc in (("psrr_pos_db", "vpos", a.supply.psrr_pos_db),
                               ("psrr_neg_db", "vneg", a.supply.psrr_neg_db)):
            np.testing.assert_allclose(res.curves[name][i], psrr_db(r, rail, se), rtol=1e-9,
                                       atol=1e-9, err_msg=f"{case} sample {i} {name}")
            got = getattr(res, name.replace("_db", "_dc_db"))[i]
            assert got == pytest.approx(dc, rel=1e-9, abs=1e-9), (case, i, name)
        # the first stage's curves at o2 in the same run (the load capacitance spread is
        # C_L at o2, not the second stage's, and g_mb follows g_m's mismatch)
        np.testing.assert_allclose(res.curves["adm_se_db"][i], 20 * np.log10(np.abs(r.adm_se)),
                                   rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(res.curves["cmrr_se_db"][i],
                                   20 * np.log10(np.abs(r.adm_se / r.acm_se)), rtol=1e-9)


def test_rail_gain_zero_to_rounding_gives_an_infinite_psrr():
    # oracle: DESIGN.md §7f — a rail gain below 1e-12·|A_se(0)| makes that PSRR infinite
    # (analyze: null at DC); where the rail's gain is above that, freqpair.analyze →
    # psrr_db of the sampled design. The matched MOS pair's negative rail reaches o2 only
    # through C_db: its gain is exactly 0 at DC and falls below the floor at 1 mHz.
    from freqpair.analysis.supply import psrr_db
    d = freqpair.load_design(ROOT / "examples" / "nmos_resistor_ideal_tail.toml")
    spec = MonteCarloSpec.from_dict({"load.capacitance": "normal:10%"})
    f = np.array([1e-3, 1e2, 1e5, 1e8])
    res = run_montecarlo(d, spec, 6, seed=4, f_hz=f, keep_samples=True, curves=PSRR)
    assert np.all(res.psrr_neg_dc_db == np.inf) and np.all(np.isfinite(res.psrr_pos_dc_db))
    assert res.to_json()["psrr_neg_dc_db"] == {"p5": None, "p50": None, "p95": None}
    a = freqpair.analyze(_rebuilt(d, res.values, 2))
    assert a.supply.psrr_neg_db is None
    r = a.responses.at(f)
    below = np.abs(r.a_vneg) <= 1e-12 * np.abs(a.responses.dc().adm_se[0])
    assert below.tolist() == [True, False, False, False]
    assert res.curves["psrr_neg_db"][2, 0] == np.inf
    np.testing.assert_allclose(res.curves["psrr_neg_db"][2, 1:], psrr_db(r, "vneg", "adm_se")[1:],
                               rtol=1e-9)


@pytest.fixture(scope="module")
def kept_psrr():
    d = freqpair.load_design(ROOT / "examples" / "two_stage_miller_loop.toml")
    spec = MonteCarloSpec.from_dict({"mismatch.load": "normal:1%", "mismatch.gm": "normal:1%",
                                     "tail.resistance": "normal:10%"})
    return run_montecarlo(d, spec, 5000, seed=8, f_hz=np.logspace(1, 9, 17), chunk=700,
                          percentiles=(0, 1, 5, 50, 95, 99, 100), curves=PSRR, keep_samples=True,
                          yields=[(100.0, 1e3, "psrr_pos")])


def test_psrr_bands_from_histograms_are_within_0p01_db_of_numpy_percentile(kept_psrr):
    # oracle: numpy.percentile (default method 'linear') of the kept samples, same seed;
    # the histograms promise one bin (1/256 dB), the brief 0.01 dB
    res = kept_psrr
    q = res.percentiles
    for name in PSRR:
        exact = np.percentile(res.curves[name], q, axis=0)
        err = np.abs(res.bands[name] - exact).max()
        assert err <= 2.0 ** -8 and err <= 0.01, (name, err)
        dc = name.replace("_db", "_dc_db")
        x = getattr(res, dc)
        assert np.abs(res.percentile(dc, q) - np.percentile(x, q)).max() <= 2.0 ** -8, dc
    np.testing.assert_array_equal(res.band_psrr_neg_db, res.bands["psrr_neg_db"])
    obj = res.to_json()
    assert obj["band_psrr_pos_db"]["p50"] == [float(v) for v in res.bands["psrr_pos_db"][3]]
    assert set(obj["psrr_neg_dc_db"]) == {"p0", "p1", "p5", "p50", "p95", "p99", "p100"}
    # a PSRR yield counted as the samples went by: oracle the kept samples counted directly
    k = int(np.nonzero(np.isclose(res.f_hz, 1e3))[0][0])
    assert res.yield_fraction(100.0, 1e3, "psrr_pos") == \
        np.mean(res.curves["psrr_pos_db"][:, k] >= 100.0)


def test_psrr_band_does_not_depend_on_the_chunk_size():
    # common practice: reproducibility contract — the same bits for any chunk size
    d = freqpair.design_from_text(TWO_STAGE_RESISTOR)
    a = run_montecarlo(d, THREE, 600, seed=9, f_hz=F, chunk=600, curves=PSRR)
    b = run_montecarlo(d, THREE, 600, seed=9, f_hz=F, chunk=37, curves=PSRR)
    assert json.dumps(a.to_json()) == json.dumps(b.to_json())
    for name in PSRR:
        assert a.summary.curves[name] == b.summary.curves[name]


def test_cli_metric_psrr_neg_prints_the_band_in_json_text_and_csv(tmp_path):
    # oracle: the library's run with curves=("psrr_neg_db",) on the same seed and grid
    # (the CLI's --metric is an alias of --bands psrr_neg_db)
    path = "examples/two_stage_miller_loop.toml"
    base = [sys.executable, "-m", "freqpair.cli", "montecarlo", path, "-n", "400", "--seed", "3",
            "--points", "15", "--spread", "mismatch.load=normal:1%",
            "--spread", "tail.resistance=normal:10%", "--metric", "psrr_neg"]
    out = subprocess.run(base + ["--json", "--csv", str(tmp_path / "b.csv")],
                         capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0 and out.stderr == "", out.stderr
    obj = json.loads(out.stdout)
    assert set(obj["band_psrr_neg_db"]) == {"p5", "p50", "p95"}
    assert len(obj["band_psrr_neg_db"]["p50"]) == 15 and "band_cmrr_se_db" not in obj
    d = freqpair.load_design(ROOT / path)
    spec = MonteCarloSpec.from_dict({"mismatch.load": "normal:1%", "tail.resistance": "normal:10%"})
    lib = run_montecarlo(d, spec, 400, seed=3, f_hz=np.logspace(1, 10, 15), curves=("psrr_neg_db",))
    assert obj["band_psrr_neg_db"] == lib.to_json()["band_psrr_neg_db"]
    assert obj["psrr_neg_dc_db"] == lib.stats("psrr_neg_dc_db")
    header = (tmp_path / "b.csv").read_text().splitlines()[0]
    assert header == "frequency_hz,psrr_neg_db_p5,psrr_neg_db_p50,psrr_neg_db_p95"
    text = subprocess.run(base, capture_output=True, text=True, cwd=ROOT)
    assert text.returncode == 0, text.stderr
    assert "PSRR− at DC (at out)" in text.stdout and "PSRR− at out band [dB]" in text.stdout
    # --metric and --bands together: the union, in the order given
    both = subprocess.run(base + ["--bands", "cmrr_se_db", "--metric", "psrr_pos", "--json"],
                          capture_output=True, text=True, cwd=ROOT)
    assert both.returncode == 0, both.stderr
    assert [k for k in json.loads(both.stdout) if k.startswith("band_")] == \
        ["band_psrr_pos_db", "band_cmrr_se_db"]


def test_cli_bad_metric_is_one_line_naming_the_option():
    # common practice: CLI error contract — exit 2, one stderr line naming option and value
    for metric, match in (("psrr", "--metric 'psrr': unknown (choose from cmrr_se, cmrr, "
                                   "psrr_pos, psrr_neg)"),
                          ("cmrr", "--metric 'cmrr': a mirror-loaded stage has one output")):
        out = subprocess.run([sys.executable, "-m", "freqpair.cli", "montecarlo",
                              "examples/two_stage_miller_loop.toml", "-n", "10",
                              "--spread", "mismatch.load=normal:1%", "--metric", metric],
                             capture_output=True, text=True, cwd=ROOT)
        assert out.returncode == 2 and out.stdout == "", out.stderr
        assert len(out.stderr.strip().splitlines()) == 1 and match in out.stderr, out.stderr
