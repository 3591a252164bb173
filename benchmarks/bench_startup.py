"""Start-up time of the command line, measured side by side (a script, not a test).

Runs, interleaved so that machine load hits every command alike, ``--runs``
times each (default 9):

- ``python -c pass`` (a bare interpreter),
- ``python -c "import numpy, scipy.linalg"`` (what any exact analysis needs),
- ``freqpair --help``,
- ``freqpair analyze --example --json``,

and prints the median wall time of each and the ratios the targets name
(the package is byte-compiled first, as ``pip install`` does, so that an
environment with ``PYTHONDONTWRITEBYTECODE`` does not time the compiler):

- ``analyze --example --json`` ≤ 1.3 × the bare numpy + scipy.linalg import;
- ``freqpair --help`` ≤ 1.1 × bare Python + 0.15 s.

Usage::

    python benchmarks/bench_startup.py [--runs 9]
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time

COMMANDS = {
    "python -c pass": [sys.executable, "-c", "pass"],
    "import numpy, scipy.linalg": [sys.executable, "-c", "import numpy, scipy.linalg"],
    "freqpair --help": [sys.executable, "-m", "freqpair.cli", "--help"],
    "freqpair analyze --example --json": [sys.executable, "-m", "freqpair.cli", "analyze",
                                          "--example", "--json"],
}


def wall_s(cmd) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def measure(runs: int) -> dict[str, float]:
    """Median wall time [s] of each command over ``runs`` interleaved runs."""
    import compileall
    import freqpair
    compileall.compile_dir(os.path.dirname(freqpair.__file__), quiet=1)
    for cmd in COMMANDS.values():      # warm the file cache once
        wall_s(cmd)
    times = {name: [] for name in COMMANDS}
    for _ in range(runs):
        for name, cmd in COMMANDS.items():
            times[name].append(wall_s(cmd))
    return {name: statistics.median(v) for name, v in times.items()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=9)
    args = ap.parse_args(argv)
    med = measure(max(args.runs, 1))
    load = os.getloadavg()[0]
    print(f"start-up, median of {args.runs} interleaved runs (load average {load:.2f}):")
    for name, t in med.items():
        print(f"  {name:<36} {t * 1e3:7.0f} ms")
    base = med["import numpy, scipy.linalg"]
    ratio = med["freqpair analyze --example --json"] / base
    help_limit = 1.1 * med["python -c pass"] + 0.15
    print(f"analyze / (numpy + scipy.linalg import) = {ratio:.2f}  (target ≤ 1.30)")
    print(f"freqpair --help = {med['freqpair --help'] * 1e3:.0f} ms, limit 1.1 × bare python "
          f"+ 150 ms = {help_limit * 1e3:.0f} ms  "
          f"({'met' if med['freqpair --help'] <= help_limit else 'NOT met'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
