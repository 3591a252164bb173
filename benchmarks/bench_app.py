"""Speed of one explorer update (in-process): a value change → all views refreshed.

Prints the server-side time of a full update (500 frequency points, every view:
gain curves, CMRR with corner and target crossing, poles and zeros, tables),
with BLAS multi-threaded (as a plain Python process starts) and single-threaded
(as ``freqpair app`` runs it). The goal is ≤ 30 ms.

Then, side by side in one run on the two-stage Miller example with its loop,
the same update with the Gains view open, with the Loop view open (loop gain,
closed loop, step and their marks) and with the Poles & zeros view open (the
pole paths of the touched value, 25 steps), and the ratios to the first. The
goal for those is ≤ 40 ms.

    PYTHONPATH=. python benchmarks/bench_app.py
"""
from __future__ import annotations

import pathlib
import statistics
import time

from bokeh.document import Document

from freqpair.app.view import make_doc
from freqpair.cli.app import limit_blas_threads

GOAL_MS = 30.0
VIEWS_GOAL_MS = 40.0
TWO_STAGE = pathlib.Path(__file__).resolve().parent.parent / "examples" / \
    "two_stage_miller_loop.toml"


def run(repeats: int = 40) -> list[float]:
    doc = Document()
    ex = make_doc(doc)
    values = ["1.5 pF", "2 pF", "3.3 pF", "4.7 pF"]
    times = []
    for i in range(repeats):
        t0 = time.perf_counter()
        ok = ex.edit("tail.capacitance", values[i % len(values)])
        times.append((time.perf_counter() - t0) * 1e3)
        assert ok, ex.message_text
    return times


def run_views(repeats: int = 30) -> dict:
    """Update times [ms] of the loop example with each view open, interleaved."""
    doc = Document()
    ex = make_doc(doc, str(TWO_STAGE))
    views = doc.select_one({"name": "views"})
    titles = [t.title for t in views.tabs]
    cases = {"Gains view open": titles.index("Gains"),
             "Loop view open": titles.index("Loop"),
             "Poles & zeros open (paths)": titles.index("Poles & zeros")}
    values = ["6 pF", "8 pF", "10 pF", "12 pF"]
    times = {name: [] for name in cases}
    ex.edit("second_stage.miller_capacitance", "8 pF")     # the paths follow this key
    for i in range(repeats + 1):
        for name, k in cases.items():          # side by side: same load for each case
            views.active = k
            t0 = time.perf_counter()
            ok = ex.edit("second_stage.miller_capacitance", values[i % len(values)])
            dt = (time.perf_counter() - t0) * 1e3
            assert ok, ex.message_text
            if i:                              # the first round warms up
                times[name].append(dt)
    assert ex.pole_paths.computed > 0 and ex.panels[0].computed > 0
    return times


def report(label: str, times: list[float], goal: float = GOAL_MS) -> None:
    med = statistics.median(times)
    print(f"{label:<34} median {med:6.1f} ms   best {min(times):6.1f} ms   "
          f"worst {max(times):6.1f} ms   goal ≤ {goal:.0f} ms: "
          f"{'met' if med <= goal else 'NOT met'}")


def report_views(times: dict) -> None:
    base = statistics.median(next(iter(times.values())))
    for name, t in times.items():
        report(name, t, VIEWS_GOAL_MS)
        print(f"{'':<34} × {statistics.median(t) / base:.2f} the update with Gains open")


if __name__ == "__main__":
    report("update, BLAS default threads", run())
    single = limit_blas_threads()
    if single:
        report("update, BLAS single-threaded", run())
    print("two-stage Miller loop example, 500 points, BLAS "
          f"{'single-threaded' if single else 'default threads'}:")
    report_views(run_views())
