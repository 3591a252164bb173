"""``freqpair target``: the edge value of one design key for which a metric meets a bound.

With ``--over AXIS`` the target is solved at every point of a grid (CSV or JSON); the
CSV rows are written as the chunks finish, in grid order (bounded memory).
"""
from __future__ import annotations

import math
import sys

from freqpair.cli.common import (
    CliError,
    _num,
    add_scheduler_option,
    key_spec,
    print_json,
    run_with_progress,
)
from freqpair.cli.sweep import parse_axis, write_pieces

__all__ = ["register", "cmd_target"]


def cmd_target(args) -> int:
    from freqpair.cli.common import _load
    from freqpair.design.quantities import format_si
    from freqpair.studies.targets import solve_target
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
                       want=args.want, face="cli")
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
    from freqpair.studies.target_grid import TargetGridResult, iter_target_rows, \
        solve_target_grid
    axes = [parse_axis(t) for t in args.over]
    total = math.prod(len(a.values) for a in axes)
    if not args.json:                     # CSV rows written as chunks finish, in grid order
        run_with_progress(args, total, "target", lambda ex, cb: write_pieces(
            TargetGridResult.csv_stream(iter_target_rows(
                design, axes, key, args.metric, bound, kind, bounds, at_hz, args.want,
                progress=cb, executor=ex, face="cli")), None))
        return 0
    res = run_with_progress(args, total, "target",
                            lambda ex, cb: solve_target_grid(
                                design, axes, key, args.metric, bound, kind, bounds, at_hz,
                                args.want, progress=cb, executor=ex, face="cli"))
    sys.stdout.write(res.to_json_text() + "\n")
    return 0


def register(sub) -> None:
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
