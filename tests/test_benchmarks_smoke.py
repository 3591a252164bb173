"""The benchmark script still runs (tiny size; no timing asserted).

Oracle: numpy.linalg.solve loop inside the script — the methods it times must
agree with each other, or the timings compare different answers.
"""
import importlib.util

from conftest import ROOT


def test_bench_core_runs_at_tiny_size_and_methods_agree(capsys):
    # oracle: per-frequency numpy.linalg.solve (the script's method (c))
    spec = importlib.util.spec_from_file_location("bench_core", ROOT / "benchmarks" / "bench_core.py")
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    result = bench.main(["--points", "20", "--repeat", "1"])
    out = capsys.readouterr().out
    assert "per-frequency solve loop" in out and "analyze()" in out
    assert result["max_rel_qz_vs_loop"] < 1e-9
    assert result["max_rel_batched_vs_loop"] < 1e-12
