"""``freqpair analyze [DESIGN.toml | --example] [--json] [--csv FILE]``."""
from __future__ import annotations

from freqpair.cli.common import add_optional_design

__all__ = ["register", "cmd_analyze"]


def cmd_analyze(args) -> int:
    from freqpair.analysis.result import analyze
    from freqpair.cli.common import _load, print_json
    design = _load(args.design)
    if args.at:
        from freqpair.cli.common import CliError, _num
        from freqpair.design.keys import replace_value
        spots = [_num(v, "--at") for v in args.at]
        for text, f in zip(args.at, spots):
            if not f > 0:
                raise CliError(f"--at = {text!r}: must be a frequency above 0 Hz")
        design = replace_value(design, "noise.spot_frequencies",
                               spots + [f for f in design.noise.spot_frequencies
                                        if f not in spots])
    result = analyze(design)
    if args.csv:
        from freqpair.views.export import write_curves_csv
        write_curves_csv(result, args.csv)
    if args.json:
        print_json(result.to_json())
    else:
        from freqpair.analysis.summary import format_summary
        print(format_summary(result))
    return 0


def register(sub) -> None:
    p = sub.add_parser("analyze", help="analyse a design file (or the built-in example)",
                       description="Analyse a design: operating point, gains, f_3dB, UGF, "
                                   "CMRR and its corner. With no DESIGN, the built-in example.")
    add_optional_design(p)
    p.add_argument("--example", action="store_true", help="use the built-in example design")
    p.add_argument("--json", action="store_true", help="print one JSON object (SI units)")
    p.add_argument("--csv", metavar="FILE", help="also write the curves to FILE as CSV")
    p.add_argument("--at", action="append", metavar="FREQ",
                   help="a noise spot frequency (repeatable; the first one also gets the R_s "
                        "that minimises the noise figure in the summary)")
    p.set_defaults(func=cmd_analyze)
