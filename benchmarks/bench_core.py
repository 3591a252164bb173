"""Speed of the core solver, printed side by side (a script, not a test).

For the full pair network of the built-in example at N frequencies it times
(a) ``FrequencySolver.response`` — QZ reduction + vectorised back-substitution
+ one refinement step (with the reduction reused, and including a fresh
reduction), (b) one batched ``np.linalg.solve``, (c) a per-frequency Python
loop of ``np.linalg.solve`` on the same matrices, and a whole ``analyze()``;
(a), (b) and (c) are timed both with the default BLAS threads and with one BLAS
thread (the solver itself runs on one; for (a) with default threads the limit
is bypassed). It prints best and median times,
the ratios, and the largest relative disagreement of each method with the loop.

Usage::

    python benchmarks/bench_core.py [--points 1000] [--repeat 30]

Targets: (a) ≥ 10× faster than (c); one response at 1000 points < 1 ms;
analyze < 10 ms. Timings are wall clock on this machine: best of the repeats
(what the code can do) and the median (what a user sees on a busy machine).
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from freqpair.analysis.result import analyze
from freqpair.circuit.blas_threads import single_blas_thread
from freqpair.design.files import BUILTIN_EXAMPLE, design_from_text
from freqpair.circuit.network import FrequencySolver
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.stage import build_stage


def timings_ms(fn, repeat: int) -> tuple[float, float]:
    """Best and median wall-clock time of ``fn()`` over ``repeat`` runs [ms]."""
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times) * 1e3, float(np.median(times)) * 1e3


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=1000, help="frequency points (default 1000)")
    ap.add_argument("--repeat", type=int, default=30, help="repeats (default 30)")
    args = ap.parse_args(argv)

    design = design_from_text(BUILTIN_EXAMPLE)
    solver = StageResponses(build_stage(design)).solver
    G, C, B, L = solver.G, solver.C, solver.B, solver.L
    s = 2j * np.pi * np.logspace(0, 10, args.points)

    def qz_with_reduction():
        return FrequencySolver(G, C, B, L).response(s)

    warm = FrequencySolver(G, C, B, L)
    warm.response(s)

    def batched():
        x = np.linalg.solve(G[None] + s[:, None, None] * C[None],
                            np.broadcast_to(B, (s.size,) + B.shape))
        return L @ x

    def loop():
        return np.array([L @ np.linalg.solve(G + sk * C, B) for sk in s])

    def one_thread(fn):
        def run():
            with single_blas_thread():
                return fn()
        return run

    r = args.repeat
    rows = {
        "qz_reused": timings_ms(lambda: warm.response(s), r),
        "qz_with_reduction": timings_ms(qz_with_reduction, r),
        # the same sweep with the solver's one-thread limit bypassed (default BLAS)
        "qz_reused_default_blas": timings_ms(
            lambda: FrequencySolver.response.__wrapped__(warm, s), r),
        "batched_solve": timings_ms(batched, r),
        "batched_solve_1thread": timings_ms(one_thread(batched), r),
        "loop_solve": timings_ms(loop, max(3, r // 5)),
        "loop_solve_1thread": timings_ms(one_thread(loop), max(3, r // 5)),
        "analyze": timings_ms(lambda: analyze(design), r),
    }
    t = {}
    for key, (best, med) in rows.items():
        t[f"{key}_ms"] = best
        t[f"{key}_median_ms"] = med
    h_qz, h_b, h_l = warm.response(s), batched(), loop()
    scale = np.abs(h_l)
    t["max_rel_qz_vs_loop"] = float(np.max(np.abs(h_qz - h_l) / scale))
    t["max_rel_batched_vs_loop"] = float(np.max(np.abs(h_b - h_l) / scale))

    labels = {
        "qz_reused": "(a) QZ response, reduction reused",
        "qz_with_reduction": "(a) QZ response, incl. reduction",
        "qz_reused_default_blas": "(a) QZ reused, default BLAS",
        "batched_solve": "(b) batched solve, default BLAS",
        "batched_solve_1thread": "(b) batched solve, 1 BLAS thr.",
        "loop_solve": "(c) per-frequency solve loop",
        "loop_solve_1thread": "(c) per-frequency loop, 1 BLAS thr.",
        "analyze": "analyze() in-process",
    }
    print(f"network: {G.shape[0]} unknowns, {args.points} frequencies, {r} repeats")
    print(f"  {'':36s} {'best':>9s} {'median':>9s}")
    for key, label in labels.items():
        print(f"  {label:36s} {t[key + '_ms']:7.3f}ms {t[key + '_median_ms']:7.3f}ms")
    print("  ratios (best, median)")
    for num in ("loop_solve", "loop_solve_1thread", "batched_solve", "batched_solve_1thread"):
        for den in ("qz_reused", "qz_with_reduction"):
            rb = t[num + "_ms"] / t[den + "_ms"]
            rm = t[num + "_median_ms"] / t[den + "_median_ms"]
            print(f"    {labels[num][4:]:32s} / QZ {den[3:]:15s} {rb:7.1f}x {rm:7.1f}x")
    print(f"  max relative disagreement: QZ vs loop {t['max_rel_qz_vs_loop']:.1e}, "
          f"batched vs loop {t['max_rel_batched_vs_loop']:.1e}")
    return t


if __name__ == "__main__":
    main()
