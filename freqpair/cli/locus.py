"""``freqpair locus DESIGN --vary KEY=A:B:N[:log] [--gain NAME] [--json]``: pole paths.

Prints a table (one row per value: the value, then each path's pole in Hz)
or, with ``--json``, the DESIGN.md §7i object.
"""
from __future__ import annotations

import math
import sys

from freqpair.cli.common import CliError, _num, key_spec, print_json

__all__ = ["register", "cmd_locus", "parse_range"]

GAINS = ("adm", "adm_se", "acm_se", "acm_dm", "acm_cm", "a_total", "acm_total", "a_vpos",
         "a_vneg")


def parse_range(text: str) -> tuple[str, list[float]]:
    """``KEY=A:B:N[:log]`` → ``(key, values)`` (N ≥ 2 values, linear unless ``log``)."""
    import numpy as np
    key, spec = key_spec(text, "--vary", "KEY=A:B:N[:log]")
    parts = spec.split(":")
    if len(parts) not in (3, 4) or (len(parts) == 4 and parts[3] not in ("log", "lin")):
        raise CliError(f"--vary {text!r}: expected KEY=A:B:N[:log]")
    a, b = _num(parts[0], f"--vary {key} start"), _num(parts[1], f"--vary {key} stop")
    try:
        n = int(parts[2])
    except ValueError:
        raise CliError(f"--vary {key}: points = {parts[2]!r}: must be a whole number") from None
    if n < 2 or n > 10_000:
        raise CliError(f"--vary {key}: points = {n}: must be between 2 and 10000")
    if len(parts) == 4 and parts[3] == "log":
        if not (a > 0 and b > 0):
            raise CliError(f"--vary {key}: log spacing needs A and B > 0 (got {a:g}, {b:g})")
        return key, list(np.logspace(math.log10(a), math.log10(b), n))
    return key, list(np.linspace(a, b, n))


def _unit(key: str) -> str:
    """The SI unit of a design key, from its name."""
    last = key.rsplit(".", 1)[-1]
    if last.endswith("capacitance") or last in ("cje", "cjc0", "ccs", "cdb", "csb"):
        return "F"
    if last.endswith("resistance") or last in ("degeneration", "resistance"):
        return "Ω"
    if last.endswith("current"):
        return "A"
    if last == "gm":
        return "S"
    return ""


def _cell(z) -> str:
    from freqpair.design.quantities import format_si
    if z is None or not math.isfinite(abs(z)):
        return "—"
    if z.imag == 0:
        return format_si(z.real, "Hz")
    sign = "+" if z.imag > 0 else "−"
    return f"{format_si(z.real, 'Hz')} {sign} j{format_si(abs(z.imag), 'Hz')}"


def cmd_locus(args) -> int:
    from freqpair.cli.common import _load
    from freqpair.design.quantities import format_si
    from freqpair.studies.locus import locus
    design = _load(args.design)
    key, values = parse_range(args.vary)
    result = locus(design, key, values, gain=args.gain)
    if args.json:
        print_json(result.to_json())
        return 0
    which = "poles" if not args.zeros else "zeros"
    paths = result.poles_hz if which == "poles" else result.zeros_hz
    print(f"freqpair pole paths — {design.name or '(unnamed design)'}: {which} of "
          f"{result.gain} [Hz, s/2π] while {key} moves")
    header = [key] + [f"path {i + 1}" for i in range(paths.shape[1])]
    rows = []
    for k, v in enumerate(result.values):
        if k in result.errors:
            rows.append([format_si(v, _unit(key)), f"(cannot analyse: {result.errors[k]})"])
            continue
        rows.append([format_si(v, _unit(key))] + [_cell(z) for z in paths[k]])
    widths = [max(len(r[i]) if i < len(r) else 0 for r in rows + [header])
              for i in range(len(header))]
    for r in [header] + rows:
        sys.stdout.write("  ".join(c.rjust(w) for c, w in zip(r, widths)).rstrip() + "\n")
    return 0


def register(sub) -> None:
    p = sub.add_parser(
        "locus", help="follow the exact poles (or zeros) of a gain while one value moves",
        description="Pole paths: the exact poles and zeros of a named gain at each value of "
                    "one design key, each pole paired with the nearest one of the previous "
                    "value. Example: freqpair locus design.toml --vary "
                    "second_stage.miller_capacitance=1p:100p:25:log --gain a_total")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("--vary", required=True, metavar="KEY=A:B:N[:log]",
                   help="the moving value: N values from A to B (log-spaced with :log)")
    p.add_argument("--gain", choices=GAINS, help="which gain (default: the stage's primary "
                   "gain — A_dm, A_dm,se with a mirror load, A_total with a second stage)")
    p.add_argument("--zeros", action="store_true", help="tabulate the zeros instead of poles")
    p.add_argument("--json", action="store_true", help="print one JSON object (poles and zeros)")
    p.set_defaults(func=cmd_locus)
