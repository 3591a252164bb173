"""Command line faces: ``freqpair sweep`` and ``freqpair target``.

Axis syntax (``--vary``)::

    KEY=START:STOP:N          N linearly spaced values
    KEY=START:STOP:N:log      N log-spaced values
    KEY=V1,V2,V3              an explicit list

Values take SI prefixes and units ("2p", "2 pF", "1 mA").
"""
from __future__ import annotations

import math
import sys

from .cli_common import (CliError, _num, add_scheduler_option, key_spec, print_json,
                         run_with_progress)

__all__ = ["register", "parse_axis", "register_target"]


def parse_axis(text: str):
    """``KEY=START:STOP:N[:log]`` or ``KEY=V1,V2,…`` → :class:`~freqpair.sweep.SweepAxis`."""
    from .sweep import SweepAxis
    key, spec = key_spec(text, "--vary", "KEY=START:STOP:N[:log] or KEY=V1,V2,...")
    if ":" in spec:
        parts = spec.split(":")
        if len(parts) not in (3, 4) or (len(parts) == 4 and parts[3] not in ("log", "lin")):
            raise CliError(f"--vary {text!r}: expected KEY=START:STOP:N[:log]")
        start, stop = _num(parts[0], f"--vary {key} start"), _num(parts[1], f"--vary {key} stop")
        try:
            n = int(parts[2])
        except ValueError:
            raise CliError(f"--vary {key}: points = {parts[2]!r}: must be a whole number") from None
        if len(parts) == 4 and parts[3] == "log":
            return SweepAxis.log(key, start, stop, n)
        return SweepAxis.linear(key, start, stop, n)
    return SweepAxis(key, tuple(_num(v, f"--vary {key}") for v in spec.split(",")))


def cmd_sweep(args) -> int:
    from .cli import _load
    from .design import atomic_write_text
    from .sweep import DEFAULT_METRICS, sweep
    design = _load(args.design)
    axes = [parse_axis(t) for t in args.vary]
    metrics = tuple(m.strip() for m in args.metrics.split(",")) if args.metrics \
        else DEFAULT_METRICS
    at_hz = _num(args.at, "--at") if args.at else None
    result = run_with_progress(args, math.prod(len(a.values) for a in axes), "sweep",
                               lambda ex, cb: sweep(design, axes, metrics=metrics,
                                                    curves=args.curves, at_hz=at_hz,
                                                    progress=cb, executor=ex))
    fmt = args.format or ("json" if args.out and args.out.endswith(".json") else "csv")
    if args.curves and fmt == "csv":
        raise CliError("--curves: curves need --format json (CSV holds the metric table)")
    text = result.to_json_text() + "\n" if fmt == "json" else result.to_csv()
    if args.out:
        atomic_write_text(args.out, text)
    else:
        sys.stdout.write(text)
    return 0


def register(sub) -> None:
    p = sub.add_parser(
        "sweep", help="sweep one or two design values; table of metrics as CSV or JSON",
        description="Sweep design values and tabulate metrics. Axis syntax: "
                    "KEY=START:STOP:N (linear), KEY=START:STOP:N:log (log spaced) or "
                    "KEY=V1,V2,... (a list); values take SI prefixes (\"2p\", \"1 mA\"). "
                    "Example: freqpair sweep design.toml --vary tail.capacitance=0.1p:100p:31:log",
        epilog="Metrics: adm_db, a_total_db, acm_se_db, f3db_hz, ugf_hz, cmrr_se_db, "
               "cmrr_db, cmrr_textbook_db, cmrr_corner_hz. Points that cannot be analysed "
               "keep their error in the 'error' column.")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("--vary", action="append", required=True, metavar="AXIS",
                   help="a swept value (give once or twice for a 2-D sweep)")
    p.add_argument("--metrics", metavar="LIST", help="comma-separated metric names")
    p.add_argument("--at", metavar="FREQ", help="read gains/CMRR at this frequency, not DC")
    p.add_argument("--curves", action="store_true", help="include A_dm and CMRR curves (JSON)")
    p.add_argument("--format", choices=("csv", "json"), help="output format (default csv, "
                   "or json when --out ends in .json)")
    p.add_argument("--out", "-o", metavar="FILE", help="write to FILE instead of stdout")
    add_scheduler_option(p)
    p.set_defaults(func=cmd_sweep)
    register_target(sub)


def cmd_target(args) -> int:
    from .cli import _load
    from .quantities import format_si
    from .targets import solve_target
    design = _load(args.design)
    key, rng = key_spec(args.vary, "--vary", "KEY=A:B (the search range)")
    if rng.count(":") != 1:
        raise CliError(f"--vary {args.vary!r}: expected KEY=A:B (the search range)")
    lo, hi = (_num(v, f"--vary {key}") for v in rng.split(":"))
    if (args.min is None) == (args.max is None):
        raise CliError("give exactly one of --min BOUND (metric ≥ bound) or --max BOUND")
    kind, bound = ("min", _num(args.min, "--min")) if args.min is not None else \
        ("max", _num(args.max, "--max"))
    at_hz = _num(args.at, "--at") if args.at else None
    if args.over:
        return _target_over(args, design, key, kind, bound, (lo, hi), at_hz)
    res = solve_target(design, key, args.metric, bound, kind, (lo, hi), at_hz=at_hz,
                       want=args.want)
    if args.json:
        print_json(res.to_json())
    else:
        op = "≥" if kind == "min" else "≤"
        where = f" at {format_si(at_hz, 'Hz')}" if at_hz else ""
        edge = " (bound holds up to this end of the range)" if res.at_range_end else ""
        print(f"{res.key} = {res.value:.6g}  ({'largest' if res.feasible == 'below' else 'smallest'}"
              f" value meeting {res.metric} {op} {bound:g}{where}){edge}")
        mv = "—" if res.metric_value is None else f"{res.metric_value:.6g}"
        print(f"re-analysed: {res.metric} = {mv} — {'met' if res.met else 'NOT met'}")
    return 0 if res.met else 1


def _target_over(args, design, key, kind, bound, bounds, at_hz) -> int:
    """``freqpair target … --over AXIS``: the target at every grid point (CSV or JSON)."""
    from .target_grid import solve_target_grid
    axes = [parse_axis(t) for t in args.over]
    res = run_with_progress(args, math.prod(len(a.values) for a in axes), "target",
                            lambda ex, cb: solve_target_grid(
                                design, axes, key, args.metric, bound, kind, bounds, at_hz,
                                args.want, progress=cb, executor=ex))
    sys.stdout.write(res.to_json_text() + "\n" if args.json else res.to_csv())
    return 0


def register_target(sub) -> None:
    p = sub.add_parser(
        "target", help="solve one design value so that a metric meets a bound",
        description="Find the edge value of one design key for which a metric meets a bound; "
                    "the answer is re-analysed. Example: freqpair target design.toml "
                    "--vary tail.capacitance=0.1p:100p --metric cmrr_se_db --at 100k --min 80")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("--vary", required=True, metavar="KEY=A:B", help="key and search range")
    p.add_argument("--metric", required=True, help="metric name (as in `freqpair sweep`)")
    p.add_argument("--min", metavar="BOUND", help="the metric must be at least BOUND")
    p.add_argument("--max", metavar="BOUND", help="the metric must be at most BOUND")
    p.add_argument("--at", metavar="FREQ", help="read the metric at this frequency")
    p.add_argument("--want", choices=("largest", "smallest"),
                   help="which edge of the feasible range (default: inferred)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--over", action="append", metavar="AXIS",
                   help="solve at every point of this grid axis (KEY=START:STOP:N[:log] or "
                        "KEY=V1,V2,...; give once or twice); prints CSV, or JSON with --json")
    add_scheduler_option(p)
    p.set_defaults(func=cmd_target)
