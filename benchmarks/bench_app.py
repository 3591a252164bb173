"""Speed of one explorer update (in-process): a value change → all views refreshed.

Prints the server-side time of a full update (500 frequency points, every view:
gain curves, CMRR with corner and target crossing, poles and zeros, tables),
with BLAS multi-threaded (as a plain Python process starts) and single-threaded
(as ``freqpair app`` runs it). The goal is ≤ 30 ms.

    PYTHONPATH=. python benchmarks/bench_app.py
"""
from __future__ import annotations

import statistics
import time

from bokeh.document import Document

from freqpair.app.view import make_doc
from freqpair.cli.app import limit_blas_threads

GOAL_MS = 30.0


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


def report(label: str, times: list[float]) -> None:
    med = statistics.median(times)
    print(f"{label:<34} median {med:6.1f} ms   best {min(times):6.1f} ms   "
          f"worst {max(times):6.1f} ms   goal ≤ {GOAL_MS:.0f} ms: "
          f"{'met' if med <= GOAL_MS else 'NOT met'}")


if __name__ == "__main__":
    report("update, BLAS default threads", run())
    if limit_blas_threads():
        report("update, BLAS single-threaded", run())
