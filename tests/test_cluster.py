"""Executors: local vs a Dask LocalCluster on loopback (2 worker processes × 1 thread).

The oracle throughout is the local executor's run of the same request: the
contract (common practice for seeded, chunked computations) is that the same
seed and grid give bit-identical answers whichever executor runs them.
"""
import json
import os
import pathlib
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

import freqpair
import freqpair.studies.targets
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.executors import (
    INSTALL_HINT,
    ClusterError,
    DaskExecutor,
    LocalExecutor,
    get_executor,
)
from freqpair.studies.montecarlo import MonteCarloSpec, run_montecarlo
from freqpair.studies.sweep import SweepAxis, sweep
from freqpair.studies.target_grid import solve_target_grid

SPEC = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.01),
                                 "mismatch.gm": ("normal", 0.01),
                                 "tail.capacitance": ("uniform", 0.2)})
F = np.logspace(1, 9, 40)
EXAMPLE = str(pathlib.Path(__file__).resolve().parent.parent / "examples" / "npn_resistor_rc_tail.toml")


@pytest.fixture(scope="module")
def design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


# ---------------------------------------------------------------- no cluster needed

def _tagged(i, delay_s):
    time.sleep(delay_s)
    return i


def test_local_executor_returns_results_in_order_and_reports_each_chunk():
    # common practice: map semantics — results in argument order, one progress call per chunk
    seen = []
    out = list(LocalExecutor().map_chunks(_tagged, [(i, 0.0) for i in range(5)], seen.append))
    assert out == [0, 1, 2, 3, 4]
    assert sorted(seen) == [0, 1, 2, 3, 4]


def test_missing_dask_is_one_line_naming_the_extra(monkeypatch):
    # common practice: optional dependency → one-line install hint, never a traceback
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(ClusterError) as info:
        DaskExecutor("tcp://127.0.0.1:8786")
    assert str(info.value) == INSTALL_HINT and "\n" not in str(info.value)
    assert 'freqpair[cluster]' in INSTALL_HINT


def test_cli_without_dask_prints_one_line_and_exits_nonzero():
    # common practice: CLI error contract — one line on stderr, nothing on stdout
    code = ("import sys; sys.modules['distributed'] = None; from freqpair.cli.main import main; "
            "sys.exit(main(sys.argv[1:]))")
    r = subprocess.run([sys.executable, "-c", code, "montecarlo", EXAMPLE, "--spread",
                        "mismatch.load=normal:1%", "-n", "10", "--scheduler",
                        "tcp://127.0.0.1:8786", "--json"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.strip().count("\n") == 0 and "freqpair[cluster]" in r.stderr


def test_cli_target_over_a_grid_gives_one_row_per_point_matching_solve_target(design):
    # oracle: freqpair.studies.targets.solve_target at each grid point (single solves)
    r = subprocess.run([sys.executable, "-m", "freqpair.cli", "target", EXAMPLE, "--vary",
                        "tail.capacitance=0.1p:100p", "--metric", "cmrr_se_db", "--at", "100k",
                        "--min", "60", "--over", "bias.tail_current=1m,2m", "--json"],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    rows = json.loads(r.stdout)["rows"]
    base = freqpair.load_design(EXAMPLE)
    for row, tail in zip(rows, (1e-3, 2e-3)):
        one = freqpair.studies.targets.solve_target(
            freqpair.replace_value(base, "bias.tail_current", tail), "tail.capacitance",
            "cmrr_se_db", 60.0, "min", (1e-13, 1e-10), at_hz=1e5)
        assert row["bias.tail_current"] == tail and row["tail.capacitance"] == one.value


def test_default_executor_is_local():
    # common practice: the documented default (None → this process)
    assert isinstance(get_executor(None), LocalExecutor)


# ---------------------------------------------------------------- on a LocalCluster

distributed = pytest.importorskip("distributed", reason="dask[distributed] is not installed "
                                  '(pip install "freqpair[cluster]")')


@pytest.fixture(scope="module")
def cluster():
    import cloudpickle
    cloudpickle.register_pickle_by_value(sys.modules[__name__])   # _tagged on the workers
    cl = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})
    client = distributed.Client(cl, set_as_default=False)
    yield cl, client
    client.close()
    cl.close()
    cloudpickle.unregister_pickle_by_value(sys.modules[__name__])


@pytest.fixture(scope="module")
def local_mc(design):
    return run_montecarlo(design, SPEC, 3000, seed=11, f_hz=F, keep_samples=True)


def test_dask_executor_gives_results_in_argument_order_when_they_finish_out_of_order(cluster):
    # common practice: map semantics; the first chunk sleeps longest so it finishes last
    ex = DaskExecutor(cluster[1])
    args = [(i, 0.3 if i == 0 else 0.0) for i in range(6)]
    finished = []
    assert list(ex.map_chunks(_tagged, args, finished.append)) == list(range(6))
    assert sorted(finished) == list(range(6)) and finished != sorted(finished)


def test_monte_carlo_on_the_cluster_equals_the_local_run_exactly(cluster, design, local_mc):
    # oracle: the local executor's run (same seed) — bit-identical, not merely close
    ex = DaskExecutor(cluster[1])
    done = []
    res = run_montecarlo(design, SPEC, 3000, seed=11, f_hz=F, executor=ex, progress=done.append,
                         keep_samples=True)
    assert sum(done) == 3000 and len(done) > 1          # split into several tasks
    for name in ("cmrr_se_db_f", "cmrr_db_f", "cmrr_se_dc_db", "cmrr_dc_db", "corner_hz",
                 "band_cmrr_se_db", "band_cmrr_db", "dc_adm", "dc_acm_dm"):
        np.testing.assert_array_equal(getattr(res, name), getattr(local_mc, name), err_msg=name)
    for key in SPEC.keys:
        np.testing.assert_array_equal(res.values[key], local_mc.values[key])
    assert json.dumps(res.to_json((70.0, float(F[20])))) == \
        json.dumps(local_mc.to_json((70.0, float(F[20]))))


def test_streamed_monte_carlo_on_the_cluster_equals_the_local_run_bit_for_bit(cluster, design):
    # oracle: the local executor's run (same seed, another chunk size): every histogram,
    # every yield count and the JSON answer are the same bits, merged in whatever order
    # the cluster's tasks finished
    yields = [(70.0, 1.3e6), (100.0, 2e4, "balanced")]
    a = run_montecarlo(design, SPEC, 4000, seed=3, f_hz=F, chunk=1000, yields=yields)
    b = run_montecarlo(design, SPEC, 4000, seed=3, f_hz=F, chunk=300, yields=yields,
                       executor=DaskExecutor(cluster[1], min_chunk=100, chunks_per_slot=8))
    for name in a.summary.curves:
        assert a.summary.curves[name] == b.summary.curves[name], name
    for name in a.summary.dc:
        assert a.summary.dc[name] == b.summary.dc[name], name
    assert a.summary.corner == b.summary.corner
    np.testing.assert_array_equal(a.summary.yield_counts, b.summary.yield_counts)
    assert json.dumps(a.to_json((70.0, 1.3e6))) == json.dumps(b.to_json((70.0, 1.3e6)))
    assert a.yields == b.yields


def test_psrr_band_on_the_cluster_equals_the_local_run_bit_for_bit(cluster):
    # oracle: the local executor's run (same seed, another chunk size) — the PSRR bands'
    # histograms, the DC PSRR spreads and the JSON answer are the same bits; a two-stage
    # design, so PSRR is read at its output ``out``
    d = freqpair.load_design(pathlib.Path(EXAMPLE).parent / "two_stage_miller_loop.toml")
    spec = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.01),
                                     "mismatch.gm": ("normal", 0.01),
                                     "tail.resistance": ("normal", 0.1)})
    curves = ("psrr_neg_db", "psrr_pos_db")
    yields = [(100.0, 1e3, "psrr_neg")]
    a = run_montecarlo(d, spec, 3000, seed=6, f_hz=F, chunk=1000, curves=curves, yields=yields)
    b = run_montecarlo(d, spec, 3000, seed=6, f_hz=F, chunk=256, curves=curves, yields=yields,
                       executor=DaskExecutor(cluster[1], min_chunk=100, chunks_per_slot=8))
    for name in curves:
        assert a.summary.curves[name] == b.summary.curves[name], name
        np.testing.assert_array_equal(a.bands[name], b.bands[name])
    for name in ("psrr_neg_dc_db", "psrr_pos_dc_db"):
        assert a.summary.dc[name] == b.summary.dc[name], name
    np.testing.assert_array_equal(a.summary.yield_counts, b.summary.yield_counts)
    assert json.dumps(a.to_json()) == json.dumps(b.to_json())


def test_dask_executor_keeps_only_a_window_of_chunks_in_flight(cluster):
    # common practice: bounded buffering — the chunk arguments are drawn lazily, never
    # more than the window ahead of the results handed on
    ex = DaskExecutor(cluster[1])
    drawn = []

    def args():
        for i in range(60):
            drawn.append(i)
            yield (i, 0.0)
    seen = []
    for r in ex.map_chunks(_tagged, args()):
        seen.append(r)
        assert len(drawn) - len(seen) <= ex.window
    assert seen == list(range(60)) and ex.window < 60


def test_scheduler_address_works_like_a_client(cluster, design):
    # oracle: the local executor's run; the address form opens and closes its own client
    a = run_montecarlo(design, SPEC, 500, seed=2, f_hz=F, keep_samples=True)
    b = run_montecarlo(design, SPEC, 500, seed=2, f_hz=F, executor=cluster[0].scheduler_address,
                       keep_samples=True)
    np.testing.assert_array_equal(a.cmrr_se_db_f, b.cmrr_se_db_f)
    np.testing.assert_array_equal(a.corner_hz, b.corner_hz)


def test_sweep_on_the_cluster_equals_the_local_sweep_exactly(cluster, design):
    # oracle: the local executor's sweep of the same grid (failing points included:
    # a 40 mA tail saturates the built-in example, and its error must travel back)
    axes = [SweepAxis.log("tail.capacitance", 1e-13, 1e-10, 5),
            SweepAxis("bias.tail_current", (0.5e-3, 1e-3, 40e-3))]
    a = sweep(design, axes, curves=True, at_hz=1e5)
    done = []
    b = sweep(design, axes, curves=True, at_hz=1e5, executor=DaskExecutor(cluster[1]),
              progress=done.append)
    assert a.errors and a.errors == b.errors
    assert sum(done) == 15
    for m in a.metrics:
        np.testing.assert_array_equal(a.table[m], b.table[m], err_msg=m)
    for k in a.curves:
        np.testing.assert_array_equal(a.curves[k], b.curves[k], err_msg=k)
    assert a.to_csv() == b.to_csv()
    from freqpair.studies.sweep import SweepResult, iter_sweep_rows
    streamed = "".join(SweepResult.csv_stream(iter_sweep_rows(
        design, axes, at_hz=1e5, executor=DaskExecutor(cluster[1]), chunk=2)))
    assert streamed == a.to_csv()


def test_target_over_a_grid_on_the_cluster_equals_the_local_solve(cluster, design):
    # oracle: the local executor's solve; plus each point equals a single solve_target
    axes = [SweepAxis("bias.tail_current", (1e-3, 2e-3))]
    args = (design, axes, "tail.capacitance", "cmrr_se_db", 80.0, "min", (1e-13, 1e-10), 1e5)
    a = solve_target_grid(*args)
    b = solve_target_grid(*args, executor=DaskExecutor(cluster[1]))
    assert a.to_json_text() == b.to_json_text()
    one = freqpair.studies.targets.solve_target(
        freqpair.replace_value(design, "bias.tail_current", 2e-3), "tail.capacitance",
        "cmrr_se_db", 80.0, "min", (1e-13, 1e-10), at_hz=1e5)
    assert b.value[1] == one.value


def test_cli_montecarlo_with_scheduler_prints_the_same_json_as_locally(cluster):
    # oracle: the same command run locally (CLI face of the reproducibility contract)
    cmd = [sys.executable, "-m", "freqpair.cli", "montecarlo", EXAMPLE, "--spread",
           "mismatch.load=normal:1%", "--spread", "tail.capacitance=uniform:20%", "-n", "600",
           "--seed", "4", "--points", "30", "--spec", "70@1M", "--json"]
    local = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    remote = subprocess.run(cmd + ["--scheduler", cluster[0].scheduler_address],
                            capture_output=True, text=True, timeout=120)
    assert local.returncode == 0 and remote.returncode == 0, remote.stderr
    assert json.loads(remote.stdout) == json.loads(local.stdout)


def test_bad_scheduler_address_is_one_line_naming_the_value():
    # common practice: bad input → one-line error naming the field and value
    with pytest.raises(ClusterError, match="scheduler = 'localhost:8786'"):
        DaskExecutor("localhost:8786")


def test_a_worker_killed_mid_run_is_recovered_and_the_result_is_identical(cluster, design,
                                                                          local_mc):
    # oracle: the local executor's run; recovery is the engine's (task retried elsewhere)
    cl, client = cluster
    before = set(client.run(os.getpid).values())
    killed = []

    def kill_on_first_result(_i):
        if killed:
            return
        busy = [w for w, keys in client.processing().items() if keys]
        pid = client.run(os.getpid, workers=[busy[0]])[busy[0]]
        os.kill(pid, signal.SIGKILL)
        killed.append(pid)

    ex = DaskExecutor(client, min_chunk=100, chunks_per_slot=8)   # 16+ tasks of ≤ 188
    res = run_montecarlo(design, SPEC, 3000, seed=11, f_hz=F, executor=ex,
                         progress=kill_on_first_result, keep_samples=True)
    assert killed and killed[0] in before
    np.testing.assert_array_equal(res.cmrr_se_db_f, local_mc.cmrr_se_db_f)
    np.testing.assert_array_equal(res.corner_hz, local_mc.corner_hz)
    np.testing.assert_array_equal(res.values["mismatch.gm"], local_mc.values["mismatch.gm"])
    client.wait_for_workers(2, timeout=30)                # the nanny restarted the worker
    assert killed[0] not in set(client.run(os.getpid).values())
