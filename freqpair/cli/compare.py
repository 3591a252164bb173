"""``freqpair compare A.toml B.toml [...] -o compare.html``: designs side by side."""
from __future__ import annotations

import sys

__all__ = ["register", "cmd_compare"]


def cmd_compare(args) -> int:
    from freqpair.analysis.result import analyze
    from freqpair.views.compare import write_compare
    from freqpair.design.files import load_design
    results = [analyze(load_design(path)) for path in args.designs]
    labels = None
    if args.labels:
        labels = [s.strip() for s in args.labels.split(",")]
        if len(labels) != len(results):
            from freqpair.design.errors import DesignError
            raise DesignError(f"--labels = {args.labels!r}: {len(labels)} labels for "
                              f"{len(results)} designs")
    write_compare(results, args.output, labels)
    print(f"freqpair: comparison written to {args.output}", file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``compare`` subcommand to ``sub``."""
    c = sub.add_parser("compare", help="compare designs in one HTML page",
                       description="Overlay the curves of several designs and list their "
                                   "metrics side by side, differences marked.")
    c.add_argument("designs", nargs="+", metavar="DESIGN", help="design files (TOML)")
    c.add_argument("-o", "--output", required=True, metavar="FILE", help="HTML file to write")
    c.add_argument("--labels", metavar="A,B,...", help="column labels, comma-separated")
    c.set_defaults(func=cmd_compare)
