"""Monte Carlo speed, memory and percentile accuracy.

Usage::

    python benchmarks/bench_montecarlo.py              # 10,000 x 200: batched vs a loop over analyze()
    python benchmarks/bench_montecarlo.py --scale 200000 1000000 --points 100
    python benchmarks/bench_montecarlo.py --scale 10000000 --points 100 --workers 2
    python benchmarks/bench_montecarlo.py --accuracy 200000 --points 100

The default run times the streamed batched engine (best of --repeat; CPU time
beside the wall time, which on a shared machine also counts other people's
work) against a sample-by-sample loop over analyze(), timed on a subset and
extrapolated.

``--scale N …`` runs each sample count in a fresh process (so its peak RSS is
that run's alone) and prints wall time, the client's CPU time, samples/s, the
client's peak RSS, the histograms' size and the load average before and after.
With ``--workers W`` the chunks run on a Dask LocalCluster of W worker
processes (1 thread each, ``WORKER_ENV``) started inside that process — its
scheduler too, so the RSS shown includes the scheduler; start-up is timed apart.

``--accuracy N`` keeps every sample and prints the largest difference between
the reported percentiles (bands, DC CMRRs, corner) and numpy.percentile of the
samples.

All runs: the built-in example, three spreads (load and g_m mismatch 1 %, tail
capacitance ±20 %), --points log-spaced frequencies, seed 1.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
import tracemalloc

import numpy as np

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.montecarlo import (
    MonteCarloSpec,
    default_grid,
    run_montecarlo,
    sampled_design,
)

#: The performance target of the first engine: 10,000 samples × 200 frequencies [s].
TARGET_S = 2.0
#: Targets of the streamed engine: client peak RSS [MB] for any sample count, and 10⁶
#: samples × 100 frequencies locally [s].
TARGET_RSS_MB = 300.0
TARGET_1E6_S = 25.0


def mismatch_setup(points: int):
    """The benchmarks' Monte Carlo: the built-in example, three spreads (load and
    g_m mismatch 1 %, tail capacitance ±20 %) and ``points`` log-spaced frequencies.

    Returns
    -------
    (Design, MonteCarloSpec, ndarray of frequencies [Hz])
    """
    design = freqpair.design_from_text(BUILTIN_EXAMPLE)
    spec = MonteCarloSpec.from_dict({"mismatch.load": ("normal", 0.01),
                                     "mismatch.gm": ("normal", 0.01),
                                     "tail.capacitance": ("uniform", 0.2)})
    return design, spec, default_grid(design, points)


def _rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024     # KiB → MiB (Linux)


def one_run(n: int, points: int, workers: int, chunk: int) -> dict:
    """One streamed run in this process (the child of ``--scale``): its figures."""
    design, spec, f = mismatch_setup(points)
    rss_start = _rss_mb()
    cluster = client = None
    t_start = 0.0
    executor = None
    if workers:
        import dask
        from distributed import Client, LocalCluster
        from freqpair.studies.executors import WORKER_ENV, DaskExecutor
        env = dict(dask.config.get("distributed.nanny.pre-spawn-environ"))
        env.update(WORKER_ENV)
        t0 = time.perf_counter()
        with dask.config.set({"distributed.nanny.pre-spawn-environ": env}):
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   host="127.0.0.1", dashboard_address=None,
                                   scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})
        client = Client(cluster, set_as_default=False)
        executor = DaskExecutor(client)
        t_start = time.perf_counter() - t0
    load0 = os.getloadavg()
    t0, c0 = time.perf_counter(), time.process_time()
    res = run_montecarlo(design, spec, n, seed=1, f_hz=f, chunk=chunk, executor=executor,
                         yields=[(70.0, 1e6)])
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    load1 = os.getloadavg()
    out = {"n": n, "points": int(f.size), "workers": workers, "wall_s": wall, "cpu_s": cpu,
           "samples_per_s": n / wall, "rss_mb": _rss_mb(), "rss_start_mb": rss_start,
           "histograms_mb": res.summary.nbytes / 2 ** 20, "load_before": load0[0],
           "load_after": load1[0], "cluster_start_s": t_start,
           "p50_cmrr_se_dc_db": res.to_json()["cmrr_se_dc_db"]["p50"],
           "yield_70db_1mhz": res.yield_fraction(70.0, 1e6)}
    if client is not None:
        client.close()
        cluster.close()
    return out


def scale(counts, points: int, workers: int, chunk: int) -> list[dict]:
    """``one_run`` of each count in a fresh process; prints one line each."""
    where = f"LocalCluster {workers} worker(s) x 1 thread" if workers else "this process"
    print(f"streamed Monte Carlo, {points} frequencies, 3 spreads, {where}, "
          f"{os.cpu_count()} cores")
    print(f"{'samples':>10s} {'wall [s]':>9s} {'CPU [s]':>8s} {'samples/s':>10s} "
          f"{'peak RSS':>9s} {'hist.':>7s} {'load before/after':>18s}")
    rows = []
    for n in counts:
        cmd = [sys.executable, os.path.abspath(__file__), "--one", str(n), "--points",
               str(points), "--workers", str(workers), "--chunk", str(chunk)]
        r = subprocess.run(cmd, capture_output=True, text=True, check=True)
        row = json.loads(r.stdout.strip().splitlines()[-1])
        rows.append(row)
        print(f"{n:10d} {row['wall_s']:9.2f} {row['cpu_s']:8.2f} {row['samples_per_s']:10.0f} "
              f"{row['rss_mb']:7.0f}MB {row['histograms_mb']:5.1f}MB "
              f"{row['load_before']:8.2f} / {row['load_after']:.2f}"
              + (f"   (cluster start {row['cluster_start_s']:.1f} s)" if workers else ""))
    worst = max(r["rss_mb"] for r in rows)
    print(f"client peak RSS target {TARGET_RSS_MB:.0f} MB: "
          f"{'met' if worst <= TARGET_RSS_MB else 'missed'} (largest {worst:.0f} MB)")
    for r in rows:
        if r["n"] == 1_000_000 and r["points"] == 100 and not workers:
            print(f"10^6 x 100 target {TARGET_1E6_S:.0f} s: "
                  f"{'met' if r['wall_s'] <= TARGET_1E6_S else 'missed'} ({r['wall_s']:.1f} s "
                  f"wall, {r['cpu_s']:.1f} s CPU)")
    return rows


def accuracy(n: int, points: int) -> dict:
    """Largest distance of the reported percentiles from numpy.percentile of the samples."""
    design, spec, f = mismatch_setup(points)
    q = (0.1, 1, 5, 25, 50, 75, 95, 99, 99.9)
    res = run_montecarlo(design, spec, n, seed=1, f_hz=f, percentiles=q, keep_samples=True)
    err = {
        "band_cmrr_se_db": np.abs(res.bands["cmrr_se_db"]
                                  - np.percentile(res.cmrr_se_db_f, q, axis=0)).max(),
        "band_cmrr_db": np.abs(res.bands["cmrr_db"]
                               - np.percentile(res.cmrr_db_f, q, axis=0)).max(),
        "cmrr_se_dc_db": np.abs(res.percentile("cmrr_se_dc_db", q)
                                - np.percentile(res.cmrr_se_dc_db, q)).max(),
        "cmrr_dc_db": np.abs(res.percentile("cmrr_dc_db", q)
                             - np.percentile(res.cmrr_dc_db, q)).max(),
        "corner_relative": np.abs(res.percentile("cmrr_corner_hz", q)
                                  / np.percentile(res.corner_hz, q) - 1).max(),
    }
    print(f"percentile accuracy, {n} samples x {f.size} frequencies, percentiles {q}:")
    for k, v in err.items():
        print(f"  {k:18s} max |reported − numpy.percentile| = {v:.3g}"
              + (" dB" if k != "corner_relative" else " (relative)"))
    return {k: float(v) for k, v in err.items()}


def compare_loop(args) -> dict:
    """The first benchmark: the batched engine vs a loop over analyze()."""
    design, spec, f = mismatch_setup(args.points)
    t_batch = t_cpu = float("inf")
    for _ in range(max(1, args.repeat)):
        t0, c0 = time.perf_counter(), time.process_time()
        res = run_montecarlo(design, spec, args.samples, seed=1, f_hz=f)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        if wall < t_batch:
            t_batch, t_cpu = wall, cpu
    rss = _rss_mb()
    tracemalloc.start()             # a second, traced run for the peak (tracing slows it)
    run_montecarlo(design, spec, min(args.samples, 4096), seed=1, f_hz=f)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    n_loop = min(args.loop, args.samples)
    t0 = time.perf_counter()
    for i in range(n_loop):
        a = freqpair.analyze(sampled_design(design, spec, i, 1))
        a.responses.at(f)          # the CMRR curve on the same grid
    t_loop_each = (time.perf_counter() - t0) / n_loop
    t_loop = t_loop_each * args.samples
    load = os.getloadavg()[0]
    print(f"network: full pair (both halves), {res.n} samples x {f.size} frequencies, "
          f"load average {load:.1f} on {os.cpu_count()} cores")
    print(f"batched run_montecarlo : {t_batch:8.3f} s  (best of {max(1, args.repeat)}; "
          f"CPU {t_cpu:.3f} s; DC CMRR, curves, corners, histograms, bands)")
    if args.samples == 10_000 and args.points == 200:
        verdict = "met" if t_batch <= TARGET_S else "missed"
        print(f"target                 : {TARGET_S:8.3f} s  ({verdict})")
    print(f"loop over analyze()    : {t_loop:8.3f} s  (extrapolated from {n_loop} samples, "
          f"{1e3 * t_loop_each:.1f} ms each)")
    print(f"ratio loop/batched     : {t_loop / t_batch:8.1f} x")
    print(f"peak traced memory     : {peak / 2**20:8.1f} MiB  (a 4096-sample run, tracemalloc)")
    print(f"process peak RSS       : {rss:8.1f} MiB  (resource.ru_maxrss, whole process)")
    return {"batched_s": t_batch, "batched_cpu_s": t_cpu, "loop_s": t_loop,
            "ratio": t_loop / t_batch, "peak_mib": peak / 2**20}


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--points", type=int, default=None,
                    help="frequencies (default 200; 100 with --scale/--accuracy)")
    ap.add_argument("--loop", type=int, default=40, help="samples timed in the loop")
    ap.add_argument("--repeat", type=int, default=3, help="batched runs (the fastest counts)")
    ap.add_argument("--scale", type=int, nargs="+", metavar="N",
                    help="streamed runs of these sample counts, each in a fresh process")
    ap.add_argument("--workers", type=int, default=0,
                    help="with --scale: run on a LocalCluster of this many workers")
    ap.add_argument("--chunk", type=int, default=4096, help="samples per chunk")
    ap.add_argument("--accuracy", type=int, metavar="N",
                    help="percentile accuracy against the kept samples of an N-sample run")
    ap.add_argument("--one", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.one is not None:
        print(json.dumps(one_run(args.one, args.points or 100, args.workers, args.chunk)))
        return {}
    if args.scale:
        return {"runs": scale(args.scale, args.points or 100, args.workers, args.chunk)}
    if args.accuracy:
        return accuracy(args.accuracy, args.points or 100)
    args.points = args.points or 200
    return compare_loop(args)


if __name__ == "__main__":
    main()
