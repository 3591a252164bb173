"""Speed of the core solver, printed side by side (a script, not a test).

For the full pair network of the built-in example at N frequencies it times
(a) ``FrequencySolver.response`` — QZ reduction + vectorised back-substitution
(with and without the one-time reduction), (b) one batched ``np.linalg.solve``,
(c) a per-frequency Python loop of ``np.linalg.solve`` on the same matrices, and
a whole ``analyze()``; then prints the ratios and the largest relative
disagreement between the methods.

Usage::

    python benchmarks/bench_core.py [--points 1000] [--repeat 30]

Targets: (a) ≥ 10× faster than (c); one response at 1000 points < 1 ms;
analyze < 10 ms. Timings are best-of-repeat wall clock on this machine.
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from freqpair.analysis import analyze
from freqpair.design import BUILTIN_EXAMPLE, design_from_text
from freqpair.network import FrequencySolver
from freqpair.responses import StageResponses
from freqpair.stage import build_stage


def best_ms(fn, repeat: int) -> float:
    """Best wall-clock time of ``fn()`` over ``repeat`` runs [ms]."""
    fn()
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best * 1e3


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=1000, help="frequency points (default 1000)")
    ap.add_argument("--repeat", type=int, default=30, help="repeats, best kept (default 30)")
    args = ap.parse_args(argv)

    design = design_from_text(BUILTIN_EXAMPLE)
    solver = StageResponses(build_stage(design)).solver
    G, C, B, L = solver.G, solver.C, solver.B, solver.L
    s = 2j * np.pi * np.logspace(0, 10, args.points)

    def qz_with_reduction():
        FrequencySolver(G, C, B, L).response(s)

    warm = FrequencySolver(G, C, B, L)
    warm.response(s)

    def batched():
        x = np.linalg.solve(G[None] + s[:, None, None] * C[None], np.broadcast_to(B, (s.size,) + B.shape))
        return L @ x

    def loop():
        return np.array([L @ np.linalg.solve(G + sk * C, B) for sk in s])

    t = {
        "qz_with_reduction_ms": best_ms(qz_with_reduction, args.repeat),
        "qz_reused_ms": best_ms(lambda: warm.response(s), args.repeat),
        "batched_solve_ms": best_ms(batched, args.repeat),
        "loop_solve_ms": best_ms(loop, max(3, args.repeat // 5)),
        "analyze_ms": best_ms(lambda: analyze(design), args.repeat),
    }
    h_qz, h_b, h_l = warm.response(s), batched(), loop()
    scale = np.abs(h_l)
    t["max_rel_qz_vs_loop"] = float(np.max(np.abs(h_qz - h_l) / scale))
    t["max_rel_batched_vs_loop"] = float(np.max(np.abs(h_b - h_l) / scale))

    print(f"network: {G.shape[0]} unknowns, {args.points} frequencies, best of {args.repeat}")
    print(f"  (a) QZ response, incl. reduction   {t['qz_with_reduction_ms']:8.3f} ms")
    print(f"  (a) QZ response, reduction reused  {t['qz_reused_ms']:8.3f} ms")
    print(f"  (b) batched np.linalg.solve        {t['batched_solve_ms']:8.3f} ms")
    print(f"  (c) per-frequency solve loop       {t['loop_solve_ms']:8.3f} ms")
    print(f"  analyze() in-process               {t['analyze_ms']:8.3f} ms")
    print(f"  ratio loop / QZ (reused)           {t['loop_solve_ms'] / t['qz_reused_ms']:8.1f} x")
    print(f"  ratio loop / QZ (incl. reduction)  {t['loop_solve_ms'] / t['qz_with_reduction_ms']:8.1f} x")
    print(f"  ratio batched / QZ (reused)        {t['batched_solve_ms'] / t['qz_reused_ms']:8.1f} x")
    print(f"  max relative disagreement: QZ vs loop {t['max_rel_qz_vs_loop']:.1e}, "
          f"batched vs loop {t['max_rel_batched_vs_loop']:.1e}")
    return t


if __name__ == "__main__":
    main()
