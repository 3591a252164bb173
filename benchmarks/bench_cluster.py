"""Monte Carlo throughput: this process vs a Dask LocalCluster on loopback.

Usage::

    python benchmarks/bench_cluster.py                     # 20,000 samples (quick)
    python benchmarks/bench_cluster.py --samples 1000000   # the full run

Runs the same seeded Monte Carlo (built-in example, 3 spreads, --points
frequencies) on the local executor and on LocalClusters of 1 … --workers
worker processes (1 thread each), prints samples/s side by side with the
scaling against the local run, and checks that every run gives bit-identical
results (the merged histograms, the yield counts and the JSON answer). Cluster start-up is timed apart from the run. Workers get
``freqpair.studies.executors.WORKER_ENV`` (a fixed glibc mmap threshold); the last row
repeats the largest cluster with Dask's default worker environment. A LocalCluster shares
this machine's cores, so its scaling is bounded by them (and by whatever else
runs); on a real cluster pass ``executor="tcp://scheduler:8786"`` instead.
"""
from __future__ import annotations

import argparse
import json
import os
import pathlib
import sys
import time

import numpy as np

from freqpair.studies.executors import DaskExecutor
from freqpair.studies.montecarlo import run_montecarlo

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from bench_montecarlo import mismatch_setup  # noqa: E402


def _run(design, spec, n, f, executor, chunk):
    t0 = time.perf_counter()
    res = run_montecarlo(design, spec, n, seed=1, f_hz=f, executor=executor, chunk=chunk,
                         yields=[(70.0, 1e6)])
    return time.perf_counter() - t0, res


def _same(a, b) -> bool:
    """Bit-identical answers: every histogram, the yield counts and the JSON text."""
    return (all(a.summary.curves[k] == b.summary.curves[k] for k in a.summary.curves)
            and all(a.summary.dc[k] == b.summary.dc[k] for k in a.summary.dc)
            and a.summary.corner == b.summary.corner
            and np.array_equal(a.summary.yield_counts, b.summary.yield_counts)
            and json.dumps(a.to_json()) == json.dumps(b.to_json()))


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--samples", type=int, default=20_000, help="Monte Carlo samples "
                    "(the documented full run is 1000000)")
    ap.add_argument("--points", type=int, default=100, help="frequencies per curve")
    ap.add_argument("--workers", type=int, default=2, help="most LocalCluster workers")
    ap.add_argument("--chunk", type=int, default=4096, help="largest chunk (samples)")
    args = ap.parse_args(argv)
    import dask
    from distributed import Client, LocalCluster
    from freqpair.studies.executors import WORKER_ENV

    design, spec, f = mismatch_setup(args.points)
    print(f"Monte Carlo: {args.samples} samples x {f.size} frequencies, built-in example, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}")
    t_local, ref = _run(design, spec, args.samples, f, None, args.chunk)
    rows = [("local (this process)", t_local, 0.0, True)]
    runs = [(w, True) for w in range(1, args.workers + 1)] + [(args.workers, False)]
    for w, tuned in runs:
        env = dict(dask.config.get("distributed.nanny.pre-spawn-environ"))
        if tuned:
            env.update(WORKER_ENV)
        t0 = time.perf_counter()
        with dask.config.set({"distributed.nanny.pre-spawn-environ": env}), \
                LocalCluster(n_workers=w, threads_per_worker=1, processes=True,
                             host="127.0.0.1", dashboard_address=None,
                             scheduler_kwargs={"dashboard_address": "127.0.0.1:0"}) as cluster, \
                Client(cluster, set_as_default=False) as client:
            t_start = time.perf_counter() - t0
            t_run, res = _run(design, spec, args.samples, f, DaskExecutor(client), args.chunk)
        same = _same(res, ref)
        del res
        rows.append((f"LocalCluster {w} worker{'s' if w > 1 else ''} x 1 thread"
                     + ("" if tuned else ", Dask env"), t_run, t_start, same))
    print(f"{'executor':44s} {'run [s]':>9s} {'samples/s':>11s} {'vs local':>9s} "
          f"{'start [s]':>9s}  identical")
    out = {}
    for name, t, t_start, same in rows:
        rate = args.samples / t
        print(f"{name:44s} {t:9.2f} {rate:11.0f} {t_local / t:8.2f}x {t_start:9.1f}  "
              f"{'yes' if same else 'NO'}")
        out[name] = {"seconds": t, "samples_per_s": rate, "identical": same}
    return out


if __name__ == "__main__":
    main()
