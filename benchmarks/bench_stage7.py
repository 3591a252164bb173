"""Speed of the second edition's computations, measured side by side (a script, not a test).

Prints best and median wall times over ``--repeat`` runs (one BLAS thread, as
the core runs) and the ratios the targets name:

- ``analyze()`` with supply rejection and input impedance against the same
  ``analyze()`` with those two parts left out (the first edition's work):
  target ≤ 1.5×, on the built-in example;
- noise at 1,000 frequencies with every contributor (one transposed solve per
  frequency on the network's reduction) against one response at the same
  1,000 frequencies (all gains): target ≤ 2×;
- a pole path of 25 steps (the Miller capacitor of the two-stage example):
  target ≤ 50 ms;
- ``analyze()`` of the largest example — cascoded pair, cascode tail, second
  stage, three added elements, divider loop: target ≤ 4 ms.

Usage::

    python benchmarks/bench_stage7.py [--repeat 30]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import pathlib

import numpy as np

ROOT = pathlib.Path(__file__).resolve().parent.parent


def timings_ms(fn, repeat: int) -> tuple[float, float]:
    """Best and median wall-clock time of ``fn()`` over ``repeat`` runs [ms]."""
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t0) * 1e3)
    return min(times), statistics.median(times)


def largest_design():
    import freqpair
    d = freqpair.load_design(ROOT / "examples" / "nmos_cascode_divider_loop.toml")
    return freqpair.replace_value(d, "element", [
        {"kind": "capacitor", "nodes": ["t", "ground"], "value": "0.3 pF", "name": "wiring"},
        {"kind": "capacitor", "nodes": ["o2", "in1"], "value": "20 fF", "name": "coupling"},
        {"kind": "resistor", "nodes": ["out", "vneg"], "value": "10 M", "name": "leak"}])


def measure(repeat: int) -> dict:
    import freqpair
    import freqpair.analysis.result as result_mod
    from freqpair.analysis.noise import noise_curves
    from freqpair.circuit.blas_threads import single_blas_thread
    from freqpair.design.files import BUILTIN_EXAMPLE
    from freqpair.studies.locus import locus

    out = {}
    example = freqpair.design_from_text(BUILTIN_EXAMPLE)
    out["analyze (all)"] = timings_ms(lambda: freqpair.analyze(example), repeat)
    keep = (result_mod.supply_rejection, result_mod.input_impedance)
    result_mod.supply_rejection = lambda *a: None
    result_mod.input_impedance = lambda *a: None
    try:
        out["analyze (without PSRR, Z_in)"] = timings_ms(lambda: freqpair.analyze(example),
                                                         repeat)
    finally:
        result_mod.supply_rejection, result_mod.input_impedance = keep
    a = freqpair.analyze(example)
    f = np.logspace(0, 10, 1000)
    with single_blas_thread():
        out["one response, 1000 points"] = timings_ms(lambda: a.responses.at(f), repeat)
        out["noise, 1000 points, all sources"] = timings_ms(
            lambda: noise_curves(a.responses, f), repeat)
    two = freqpair.load_design(ROOT / "examples" / "two_stage_miller_loop.toml")
    values = np.logspace(-12, -10, 25)
    out["pole path, 25 steps"] = timings_ms(
        lambda: locus(two, "second_stage.miller_capacitance", values), max(3, repeat // 5))
    big = largest_design()
    out["analyze, largest example"] = timings_ms(lambda: freqpair.analyze(big), repeat)
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=30)
    args = ap.parse_args(argv)
    t = measure(max(args.repeat, 1))
    print(f"second-edition timings (best, median of {args.repeat}; load average "
          f"{os.getloadavg()[0]:.2f})")
    for name, (best, med) in t.items():
        print(f"  {name:<36} {best:8.2f} ms {med:8.2f} ms")
    r1 = [t["analyze (all)"][i] / t["analyze (without PSRR, Z_in)"][i] for i in (0, 1)]
    r2 = [t["noise, 1000 points, all sources"][i] / t["one response, 1000 points"][i]
          for i in (0, 1)]
    print(f"analyze with PSRR and Z_in / without: {r1[0]:.2f} (best) {r1[1]:.2f} (median)"
          "  target ≤ 1.5")
    print(f"noise at 1000 points / one response:  {r2[0]:.2f} (best) {r2[1]:.2f} (median)"
          "  target ≤ 2")
    print(f"pole path of 25 steps: {t['pole path, 25 steps'][0]:.1f} ms best  target ≤ 50 ms")
    print(f"analyze of the largest example: {t['analyze, largest example'][0]:.2f} ms best  "
          "target ≤ 4 ms")
    return 0


if __name__ == "__main__":
    sys.exit(main())
