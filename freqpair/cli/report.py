"""``freqpair report DESIGN.toml [--measured CSV --kind K] [--locus KEY=A:B:N] [-o report.html]``."""
from __future__ import annotations

import sys

__all__ = ["register", "cmd_report"]


def cmd_report(args) -> int:
    from freqpair.analysis.result import analyze
    from freqpair.design.files import load_design
    from freqpair.views.report import write_report
    measurement = None
    if args.measured is not None or args.kind is not None:
        from freqpair.studies.measured import MeasurementError, read_measurement
        if args.measured is None or args.kind is None:
            raise MeasurementError("--measured and --kind go together: give the measurement "
                                   "file and what it measured (" + ", ".join(_kinds()) + ")")
        measurement = read_measurement(args.measured, args.kind,
                                       frequency_column=args.frequency_column,
                                       magnitude_column=args.magnitude_column,
                                       phase_column=args.phase_column)
    locus = None
    if args.locus:
        from freqpair.cli.locus import parse_range
        locus = parse_range(args.locus)
    result = analyze(load_design(args.design))
    write_report(result, args.output, measurement, locus)
    print(f"freqpair: report written to {args.output}", file=sys.stderr)
    return 0


def _kinds():
    from freqpair.studies.measured import KINDS
    return list(KINDS)


def register(sub) -> None:
    """Add the ``report`` subcommand to ``sub``."""
    p = sub.add_parser("report", help="write a standalone HTML report of a design",
                       description="Analyse a design and write one standalone HTML file "
                                   "(works offline): picture of the stage, operating point, "
                                   "gains, bandwidth, CMRR and corner, poles and zeros, hand "
                                   "estimates, margins, interactive Bode and CMRR plots.")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("-o", "--output", default="report.html", metavar="FILE",
                   help="HTML file to write (default report.html)")
    p.add_argument("--measured", metavar="CSV", help="a bench measurement to lay over the model "
                   "(section 'Measurement against the model')")
    p.add_argument("--kind", metavar="KIND", help="what the measurement is: adm, adm_se, "
                   "acm_se, acm_dm, cmrr, cmrr_balanced")
    for role in ("frequency", "magnitude", "phase"):
        p.add_argument(f"--{role}-column", metavar="NAME",
                       help=f"measurement column holding the {role} (default: found by name)")
    p.add_argument("--locus", metavar="KEY=A:B:N[:log]",
                   help="add the pole paths of the primary gain while KEY moves (section "
                        "'Pole paths')")
    p.set_defaults(func=cmd_report)
