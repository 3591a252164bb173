"""Command line: ``freqpair fit DESIGN MEASURED.csv --kind KIND --free KEY[=LOW:HIGH] ...``."""
from __future__ import annotations

import argparse
import sys

__all__ = ["register", "cmd_fit", "format_fit"]

_EPILOG = """\
free values:
  --free KEY            fit KEY between its design value /10 and x10
  --free KEY=LOW:HIGH   fit KEY between LOW and HIGH (SI numbers: 1p, 470k, 2.2e-12)
  e.g. --free tail.capacitance=0.5p:20p --free tail.resistance --free pair.cjc0
  signed values (mismatch.load, mismatch.gm, bias.input_common_mode, supply.*)
  are fitted on a linear scale; mismatch bounds default to -0.2:0.2, e.g.
  --free mismatch.load=-0.05:0.05 --free bias.input_common_mode=-2:2
  magnitude-only data (|A_cm-dm|, balanced CMRR) cannot tell a mismatch's sign:
  a warning says so; a measured A_cm-dm phase settles it

kinds: adm (the design's differential gain), adm_se, acm_se, acm_dm,
       cmrr (single-ended CMRR), cmrr_balanced

measurement CSV: a header row, then frequency, magnitude and optional phase
per row; units in the header ("frequency [kHz]", "CMRR [dB]", "gain [V/V]",
"phase [deg]") or in the cells ("-20 dB"); lines starting with # are skipped.

A value the measurement cannot see is reported as not identifiable and kept
at its design value; a value that ends at a bound is flagged. Warnings go to
stderr; with --strict they make the command fail (exit 1, no file written).
"""


def _unit(key: str) -> str:
    last = key.rsplit(".", 1)[-1]
    if "capacitance" in last or last in ("cje", "cjc0", "ccs", "cdb"):
        return "F"
    if "resistance" in last or last == "degeneration":
        return "Ω"
    if key.startswith("mismatch."):
        return ""
    if key.startswith("supply.") or last == "input_common_mode":
        return "V"
    return {"tail_current": "A", "transit_time": "s", "ft": "Hz", "gm": "S",
            "early_voltage": "V"}.get(last, "")


def format_fit(result, measurement) -> str:
    """Readable summary of a :class:`~freqpair.studies.fit.FitResult`."""
    from freqpair.studies.measured import KINDS
    from freqpair.design.quantities import format_si as _si

    def format_si(value, unit):
        # relative values (mismatch) read best as plain numbers: 0.012, not "12 m"
        return _si(value, unit) if unit else f"{value:.4g}"
    f = measurement.f_hz
    lines = [f"freqpair fit — {result.kind} ({KINDS[result.kind]}), {result.n_points} points, "
             f"{format_si(f[0], 'Hz')} … {format_si(f[-1], 'Hz')}"]
    width = max(len(v.key) for v in result.values)
    lines.append(f"  {'value':<{width}}  {'design':>11}  {'fitted':>11}  {'± 1σ':>22}  bounds")
    for v in result.values:
        u = _unit(v.key)
        if not v.identifiable:
            unc = "not identifiable"
        elif v.sigma is None:
            unc = "∞"
        elif v.relative_sigma is None:
            unc = f"± {format_si(v.sigma, u)}"
        else:
            unc = f"± {format_si(v.sigma, u)} ({v.relative_sigma:.2%})"
        if v.identifiable and not v.sign_identifiable:
            unc += " sign?"
        flag = "  (at bound)" if v.at_bound and v.identifiable else ""
        lines.append(f"  {v.key:<{width}}  {format_si(v.initial, u):>11}  "
                     f"{format_si(v.fitted, u):>11}  {unc:>22}  "
                     f"{format_si(v.lower, u)} … {format_si(v.upper, u)}{flag}")
    initial = ("no dB value (the design's gain is zero)"
               if result.rms_residual_db_initial is None
               else f"{result.rms_residual_db_initial:.3g} dB")
    text = f"rms residual: {initial} with the design, {result.rms_residual_db:.3g} dB fitted"
    if result.rms_residual_deg is not None:
        text += f" (phase {result.rms_residual_deg:.3g} deg)"
    lines.append(text)
    return "\n".join(lines)


def _write_plot(path, design, measurement) -> None:
    from bokeh.embed import file_html
    from bokeh.layouts import column
    from bokeh.resources import CDN

    from freqpair.analysis.result import analyze
    from freqpair.design.files import atomic_write_text
    from freqpair.studies.measured import overlay
    from freqpair.views.measured_plots import overlay_figure
    ov = overlay(analyze(design), measurement)
    figs = [overlay_figure(ov)]
    if ov.measured_deg is not None:
        figs.append(overlay_figure(ov, "phase"))
    atomic_write_text(path, file_html(column(*figs), CDN, title="freqpair fit"))


def cmd_fit(args) -> int:
    from freqpair.cli.common import _load
    from freqpair.cli.common import print_json
    from freqpair.design.keys import replace_value
    from freqpair.design.files import save_design
    from freqpair.studies.fit import fit_design
    from freqpair.studies.measured import read_measurement
    design = _load(args.design)
    meas = read_measurement(args.measured, args.kind, frequency_column=args.frequency_column,
                            magnitude_column=args.magnitude_column,
                            phase_column=args.phase_column, magnitude_unit=args.magnitude_unit,
                            use_phase=not args.no_phase)
    result = fit_design(design, meas, args.free)
    for w in result.warnings:
        print(f"freqpair: warning: {w}", file=sys.stderr)
    if args.strict and result.warnings:
        print("freqpair: error: --strict: warnings above; no fitted design written",
              file=sys.stderr)
        return 1
    fitted = result.design
    if args.output:
        from pathlib import Path
        src = Path(args.measured).name
        label = f"{design.name} (fitted to {src})" if design.name else f"fitted to {src}"
        fitted = replace_value(fitted, "name", label)
        save_design(fitted, args.output)
    if args.plot:
        _write_plot(args.plot, fitted, meas)
    if args.json:
        out = result.to_json()
        out["measured"] = str(args.measured)
        out["output"] = str(args.output) if args.output else None
        print_json(out)
    else:
        print(format_fit(result, meas))
        if args.output:
            print(f"wrote {args.output}")
    return 0


def register(sub) -> None:
    """Add the ``fit`` subcommand to the CLI's subparsers."""
    p = sub.add_parser(
        "fit", help="fit design values (tail R/C, load C, ...) to a measured response",
        description="Fit chosen design values so the model matches a measured gain or CMRR "
                    "(bounded least squares in log magnitude and phase, on log values), "
                    "report each value with its standard uncertainty, flag values the "
                    "measurement cannot see, and write the fitted design.",
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("design", help="design file (TOML): known values and first guesses")
    p.add_argument("measured", help="measurement CSV file")
    p.add_argument("--kind", required=True,
                   help="what was measured: adm, adm_se, acm_se, acm_dm, cmrr, cmrr_balanced")
    p.add_argument("--free", action="append", required=True, metavar="KEY[=LOW:HIGH]",
                   help="a design value to fit (repeat for more); see below")
    p.add_argument("-o", "--output", metavar="FITTED.toml", help="write the fitted design here")
    p.add_argument("--plot", metavar="FILE.html",
                   help="write an HTML plot of measurement, fitted model and residual")
    p.add_argument("--frequency-column", metavar="NAME", help="CSV column with the frequency")
    p.add_argument("--magnitude-column", metavar="NAME", help="CSV column with the magnitude")
    p.add_argument("--phase-column", metavar="NAME", help="CSV column with the phase [deg]")
    p.add_argument("--magnitude-unit", choices=["dB", "V/V"],
                   help="unit of the magnitude when the file does not say")
    p.add_argument("--no-phase", action="store_true", help="ignore a phase column")
    p.add_argument("--json", action="store_true", help="print one JSON object (SI units)")
    p.add_argument("--strict", action="store_true",
                   help="fail (exit 1, write nothing) when the fit gives a warning")
    p.set_defaults(func=cmd_fit)
