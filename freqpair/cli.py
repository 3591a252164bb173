"""Command line: ``freqpair analyze DESIGN.toml [--json] [--csv FILE]``."""
from __future__ import annotations

import argparse
import os
import sys

from .errors import FreqpairError

__all__ = ["main"]


def _load(path):
    from .design import BUILTIN_EXAMPLE, design_from_text, load_design
    if path is None:
        return design_from_text(BUILTIN_EXAMPLE, origin="built-in example")
    return load_design(path)


def cmd_analyze(args) -> int:
    from .analysis import analyze
    from .cli_common import print_json
    from .summary import format_summary
    design = _load(args.design)
    result = analyze(design)
    if args.csv:
        from .export import write_curves_csv
        write_curves_csv(result, args.csv)
    if args.json:
        print_json(result.to_json())
    else:
        print(format_summary(result))
    return 0


def add_optional_design(p) -> None:
    """The positional DESIGN of a subcommand that falls back to the built-in example."""
    p.add_argument("design", nargs="?", help="design file (TOML); omit for the built-in example")


def register_analyze(sub) -> None:
    p = sub.add_parser("analyze", help="analyse a design file (or the built-in example)",
                       description="Analyse a design: operating point, gains, f_3dB, UGF, "
                                   "CMRR and its corner. With no DESIGN, the built-in example.")
    add_optional_design(p)
    p.add_argument("--example", action="store_true", help="use the built-in example design")
    p.add_argument("--json", action="store_true", help="print one JSON object (SI units)")
    p.add_argument("--csv", metavar="FILE", help="also write the curves to FILE as CSV")
    p.set_defaults(func=cmd_analyze)


#: Subcommand registrars, one per face: each takes the subparsers object.
#: Add a new subcommand as ``register(sub)`` in its own module and list it here.
SUBCOMMANDS = [
    "freqpair.cli:register_analyze",
    "freqpair.cli_fit:register",
    "freqpair.cli_compensate:register",
    "freqpair.cli_sweep:register",          # sweep, target
    "freqpair.cli_montecarlo:register",
    "freqpair.cli_report:register",
    "freqpair.cli_app:register",
]


def build_parser() -> argparse.ArgumentParser:
    import importlib
    parser = argparse.ArgumentParser(
        prog="freqpair",
        description="Exact small-signal frequency analysis of differential input stages.")
    sub = parser.add_subparsers(dest="command", required=True)
    for spec in SUBCOMMANDS:
        module, func = spec.split(":")
        getattr(importlib.import_module(module), func)(sub)
    return parser


def main(argv=None) -> int:
    """Entry point; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except FreqpairError as exc:
        print(f"freqpair: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("freqpair: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # last resort: one line, never a traceback
        if os.environ.get("FREQPAIR_DEBUG"):
            raise
        msg = str(exc).splitlines()[0] if str(exc) else ""
        print(f"freqpair: internal error: {exc.__class__.__name__}: {msg} "
              "(set FREQPAIR_DEBUG=1 for details)", file=sys.stderr)
        return 3


if __name__ == "__main__":
    sys.exit(main())
