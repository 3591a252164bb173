"""``freqpair compensate DESIGN --target-pm 60 [--solve miller|nulling|feedback|series_capacitance]
[--range a b]``."""
from __future__ import annotations

import sys

__all__ = ["register"]

_SOLVERS = {"miller": "smallest_miller_cap", "nulling": "nulling_resistor_for",
            "feedback": "feedback_factor_limit", "series_capacitance": "series_capacitance_for"}
_WHAT = {"miller": "smallest Miller capacitor", "nulling": "smallest nulling resistor",
         "feedback": "largest feedback factor",
         "series_capacitance": "smallest capacitor across the feedback resistor"}


def cmd_compensate(args) -> int:
    from freqpair.analysis import compensation
    from freqpair.cli.common import _load
    from freqpair.cli.common import print_json
    from freqpair.design.errors import DesignError
    from freqpair.design.quantities import format_si, parse_si
    design = _load(args.design)
    bounds = None
    if args.range is not None:
        unit = {"miller": "farad", "nulling": "ohm", "feedback": "none",
                "series_capacitance": "farad"}[args.solve]
        bounds = tuple(parse_si(v, field="--range", unit=unit) for v in args.range)
    if args.target_pm is None or not 0 < args.target_pm < 180:
        raise DesignError(f"--target-pm = {args.target_pm!r}: must be between 0 and 180 degrees")
    result = getattr(compensation, _SOLVERS[args.solve])(design, args.target_pm, bounds)
    if args.json:
        print_json(result.to_json())
        return 0
    unit = compensation._UNITS[result.key]
    value = format_si(result.value, unit) if unit else f"{result.value:.4g}"
    pm = ("∞ (|T| stays below 1)" if result.phase_margin_deg == float("inf")
          else f"{result.phase_margin_deg:.2f}°")
    print(f"freqpair compensation — {design.name or '(unnamed design)'}")
    print(f"  {_WHAT[args.solve]} for a {args.target_pm:g}° phase margin:")
    print(f"    {result.key} = {value}")
    print(f"  phase margin there: {pm}"
          + (f" at {format_si(result.crossover_hz, 'Hz')}" if result.crossover_hz else ""))
    return 0


def register(sub) -> None:
    """Add the ``compensate`` subcommand to an argparse subparsers object."""
    p = sub.add_parser(
        "compensate", help="solve a Miller capacitor, nulling resistor, feedback factor or "
                           "feedback capacitor for a target phase margin",
        description="Find the smallest Miller capacitor (or nulling resistor) that reaches a "
                    "target phase margin, or the feedback factor at which the margin drops "
                    "to the target, or the smallest capacitor across a feedback divider's "
                    "series resistor (series_capacitance). The design needs [feedback] (and "
                    "[second_stage] for miller/nulling, a divider for series_capacitance).")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("--target-pm", type=float, required=True, metavar="DEG",
                   help="target phase margin [degrees]")
    p.add_argument("--solve", choices=sorted(_SOLVERS), default="miller",
                   help="what to solve for (default: miller)")
    p.add_argument("--range", nargs=2, metavar=("A", "B"),
                   help="search range, SI values (e.g. '100f' '100p'); defaults: miller "
                        "10 fF–1 nF, nulling 0–1 MΩ, feedback 1e-4–1, series_capacitance "
                        "0–1 nF")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_compensate)
