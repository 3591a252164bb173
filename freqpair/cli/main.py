"""The ``freqpair`` command: the parser, one registrar per subcommand, one-line errors.

Nothing heavy is imported here: each subcommand's module registers its
options with the standard library only and imports what it needs when it runs,
so ``freqpair --help`` starts in the time of a bare Python.
"""
from __future__ import annotations

import argparse
import os
import sys


__all__ = ["main"]


#: Subcommand registrars, one per face: each takes the subparsers object.
#: Add a new subcommand as ``register(sub)`` in its own module and list it here.
SUBCOMMANDS = [
    "freqpair.cli.analyze:register",
    "freqpair.cli.fit:register",
    "freqpair.cli.compensate:register",
    "freqpair.cli.locus:register",
    "freqpair.cli.sweep:register",
    "freqpair.cli.target:register",
    "freqpair.cli.montecarlo:register",
    "freqpair.cli.report:register",
    "freqpair.cli.compare:register",
    "freqpair.cli.app:register",
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
    from freqpair.design.errors import FreqpairError
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
