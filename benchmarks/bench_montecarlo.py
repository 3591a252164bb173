"""Monte Carlo speed: batched engine vs a sample-by-sample loop over analyze().

Usage: python benchmarks/bench_montecarlo.py [--samples 10000] [--points 200] [--loop 40]
                                             [--repeat 3]

The batched run is repeated (--repeat) and the fastest wall time reported, with
the CPU time of that run beside it (on a shared machine the wall time also
counts other people's work). The loop is timed on a subset (--loop samples) and
extrapolated to --samples; both run side by side in this one process. Peak
memory: tracemalloc on a separate run of one chunk (tracing slows numpy), and
the process's peak RSS.
"""
from __future__ import annotations

import argparse
import os
import resource
import time
import tracemalloc

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE
from freqpair.studies.montecarlo import (
    MonteCarloSpec,
    default_grid,
    run_montecarlo,
    sampled_design,
)

#: The performance target: 10,000 samples × 200 frequencies [s].
TARGET_S = 2.0


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


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--loop", type=int, default=40, help="samples timed in the loop")
    ap.add_argument("--repeat", type=int, default=3, help="batched runs (the fastest counts)")
    args = ap.parse_args(argv)
    design, spec, f = mismatch_setup(args.points)
    t_batch = t_cpu = float("inf")
    for _ in range(max(1, args.repeat)):
        t0, c0 = time.perf_counter(), time.process_time()
        res = run_montecarlo(design, spec, args.samples, seed=1, f_hz=f)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        if wall < t_batch:
            t_batch, t_cpu = wall, cpu
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024     # KiB → MiB (Linux)
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
          f"CPU {t_cpu:.3f} s; DC CMRR, curves, corners, bands)")
    if args.samples == 10_000 and args.points == 200:
        verdict = "met" if t_batch <= TARGET_S else "missed"
        print(f"target                 : {TARGET_S:8.3f} s  ({verdict})")
    print(f"loop over analyze()    : {t_loop:8.3f} s  (extrapolated from {n_loop} samples, "
          f"{1e3 * t_loop_each:.1f} ms each)")
    print(f"ratio loop/batched     : {t_loop / t_batch:8.1f} x")
    print(f"peak traced memory     : {peak / 2**20:8.1f} MiB  (one 4096-sample chunk, tracemalloc)")
    print(f"process peak RSS       : {rss:8.1f} MiB  (resource.ru_maxrss, whole process)")
    return {"batched_s": t_batch, "batched_cpu_s": t_cpu, "loop_s": t_loop,
            "ratio": t_loop / t_batch, "peak_mib": peak / 2**20}


if __name__ == "__main__":
    main()
