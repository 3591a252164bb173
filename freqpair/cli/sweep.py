"""``freqpair sweep``: one or two design values swept, a table of metrics.

Axis syntax (``--vary``)::

    KEY=START:STOP:N          N linearly spaced values
    KEY=START:STOP:N:log      N log-spaced values
    KEY=V1,V2,V3              an explicit list

Values take SI prefixes and units ("2p", "2 pF", "1 mA").

CSV output is written as the chunks finish, in grid order (to ``--out`` through a
temporary file renamed at the end, or to stdout), so a grid of any size runs in
bounded memory; JSON output gathers the whole table first.
"""
from __future__ import annotations

import contextlib
import math
import os
import sys
import tempfile
from pathlib import Path

from freqpair.cli.common import (
    CliError,
    _num,
    add_scheduler_option,
    key_spec,
    print_json,
    run_with_progress,
)

__all__ = ["register", "parse_axis", "atomic_text_file", "write_pieces"]


@contextlib.contextmanager
def atomic_text_file(path):
    """A text file for ``path`` written as it goes, atomically.

    The text goes to a temporary file in the same folder, renamed over ``path``
    when the block ends; on any error the temporary file is removed and ``path``
    is left as it was — the streaming form of
    :func:`freqpair.design.files.atomic_write_text` (same file mode rules).
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent or ".")
    try:
        try:                               # the mode a plain open() would give
            mode = os.stat(path).st_mode & 0o777
        except OSError:
            umask = os.umask(0o022)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_pieces(pieces, out: str | None) -> None:
    """Text pieces to the file ``out`` (atomically, as they come) or to stdout."""
    if out:
        with atomic_text_file(out) as fh:
            for piece in pieces:
                fh.write(piece)
    else:
        for piece in pieces:
            sys.stdout.write(piece)


def parse_axis(text: str):
    """``KEY=START:STOP:N[:log]`` or ``KEY=V1,V2,…`` → :class:`~freqpair.studies.sweep.SweepAxis`."""
    from freqpair.studies.sweep import SweepAxis
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
    from freqpair.cli.common import _load
    from freqpair.design.files import atomic_write_text
    from freqpair.studies.sweep import DEFAULT_METRICS, sweep
    design = _load(args.design)
    axes = [parse_axis(t) for t in args.vary]
    metrics = tuple(m.strip() for m in args.metrics.split(",")) if args.metrics \
        else DEFAULT_METRICS
    at_hz = _num(args.at, "--at") if args.at else None
    fmt = args.format or ("json" if args.out and args.out.endswith(".json") else "csv")
    if args.curves and fmt == "csv":
        raise CliError("--curves: curves need --format json (CSV holds the metric table)")
    total = math.prod(len(a.values) for a in axes)
    if fmt == "csv":                      # rows written as chunks finish, in grid order
        from freqpair.studies.sweep import SweepResult, iter_sweep_rows
        run_with_progress(args, total, "sweep", lambda ex, cb: write_pieces(
            SweepResult.csv_stream(iter_sweep_rows(design, axes, metrics=metrics, at_hz=at_hz,
                                                   progress=cb, executor=ex)), args.out))
        return 0
    result = run_with_progress(args, total, "sweep",
                               lambda ex, cb: sweep(design, axes, metrics=metrics,
                                                    curves=args.curves, at_hz=at_hz,
                                                    progress=cb, executor=ex))
    text = result.to_json_text() + "\n"
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
               "cmrr_db, cmrr_textbook_db, cmrr_corner_hz; psrr_pos_db, psrr_neg_db, "
               "psrr_pos_corner_hz, psrr_neg_corner_hz; zin_dm_ohm, zin_cm_ohm, "
               "zin_dm_corner_hz; input_noise_v_rthz, output_noise_v_rthz, nf_db, "
               "input_rms_v, output_rms_v; with [feedback] phase_margin_deg, gain_margin_db, "
               "crossover_hz, closed_loop_f3db_hz, peaking_db, overshoot_pct, "
               "settling_time_s. --at reads the gains, CMRR, PSRR, |Z_in| and noise "
               "densities at that frequency; other metrics keep their own meaning. Points "
               "that cannot be analysed keep their error in the 'error' column.")
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
