"""Command line face: ``freqpair montecarlo``.

Spread syntax (``--spread``)::

    KEY=normal:SIGMA        e.g. mismatch.load=normal:0.01, tail.capacitance=normal:10%
    KEY=uniform:HALFWIDTH

Mismatch keys spread absolutely (they are relative already); sizes relative
to their nominal value.
"""
from __future__ import annotations

from freqpair.cli.common import CliError, _num, add_scheduler_option, key_spec, print_json, \
    run_with_progress
from freqpair.design.errors import FreqpairError

__all__ = ["register", "parse_spread"]


def parse_spread(text: str):
    """``KEY=normal:σ`` or ``KEY=uniform:w`` → ``(key, Spread)`` (the studies layer's
    parser; its errors name the option)."""
    from freqpair.studies.montecarlo import parse_spread as parse
    key, spec = key_spec(text, "--spread", "KEY=normal:SIGMA or KEY=uniform:HALFWIDTH")
    try:
        return key, parse(spec, field=f"--spread {key}")
    except FreqpairError as exc:
        raise CliError(str(exc)) from None


def _value(text: str, option: str) -> float:
    try:
        return _num(text, option)
    except ValueError as exc:                  # parse_si's own one line names the option
        raise CliError(str(exc)) from None


def _spec_arg(text: str):
    if "@" not in text:
        raise CliError(f"--spec {text!r}: expected DB@FREQ, e.g. 70@1M")
    level, freq = text.split("@", 1)
    return _value(level, "--spec level"), _value(freq, "--spec frequency")


def _fmt(v, unit):
    from freqpair.design.quantities import format_si
    if v is None:
        return "∞"
    return f"{v:.2f} dB" if unit == "dB" else format_si(v, unit)


def _write_samples(path, res) -> None:
    """Every kept sample, one CSV row each (written as it goes, renamed at the end)."""
    from freqpair.cli.sweep import atomic_text_file
    from freqpair.design.files import csv_text
    keys = list(res.values)
    curves = list(res.curves)
    stats = [("cmrr_se_dc_db", res.cmrr_se_dc_db), ("cmrr_dc_db", res.cmrr_dc_db),
             ("cmrr_corner_hz", res.corner_hz)]
    stats = [(k, v) for k, v in stats if v is not None]
    cols = ["sample"] + keys + [k for k, _ in stats] + \
        [f"{c}@{float(f)!r}" for c in curves for f in res.f_hz]
    step = 1024
    with atomic_text_file(path) as fh:
        fh.write(csv_text(cols, []))
        for lo in range(0, res.n, step):
            hi = min(res.n, lo + step)
            rows = ([i] + [float(res.values[k][i]) for k in keys] + [float(v[i]) for _, v in stats]
                    + [float(x) for c in curves for x in res.curves[c][i]]
                    for i in range(lo, hi))
            fh.write(csv_text(cols, rows).split("\n", 1)[1])


def cmd_montecarlo(args) -> int:
    import numpy as np
    from freqpair.cli.common import _load
    from freqpair.design.files import atomic_write_text
    from freqpair.studies.montecarlo import MonteCarloSpec, default_grid, run_montecarlo
    design = _load(args.design)
    spec = MonteCarloSpec(tuple(parse_spread(t) for t in args.spread))
    yspec = _spec_arg(args.spec) if args.spec else None
    if args.points < 1:
        raise CliError(f"--points = {args.points}: must be a whole number ≥ 1")
    f = default_grid(design, args.points)
    if yspec is not None:                 # the spec frequency on the grid: counted exactly
        f = np.unique(np.append(f, yspec[1]))
    q = tuple(_value(x, "--percentiles") for x in args.percentiles.split(","))
    for opt, v, low in (("--samples", args.samples, 1), ("--chunk", args.chunk, 1),
                        ("--seed", args.seed, 0)):
        if v < low:
            raise CliError(f"{opt} = {v}: must be a whole number ≥ {low}")
    if not all(0 <= x <= 100 for x in q):
        raise CliError(f"--percentiles = {args.percentiles!r}: each in [0, 100]")
    curves = None
    if args.bands:
        from freqpair.studies.montecarlo import BALANCED_CURVES, CURVES
        curves = tuple(c.strip() for c in args.bands.split(",") if c.strip())
        for c in curves:
            if c not in CURVES:
                raise CliError(f"--bands {c!r}: unknown (choose from {', '.join(CURVES)})")
            if c in BALANCED_CURVES and design.load.type == "mirror":
                raise CliError(f"--bands {c!r}: a mirror-loaded stage has one output "
                               "(no balanced curves)")
    res = run_with_progress(args, args.samples, "montecarlo",
                            lambda ex, cb: run_montecarlo(
                                design, spec, args.samples, args.seed, f_hz=f,
                                chunk=args.chunk, percentiles=q, progress=cb, executor=ex,
                                yields=[yspec] if yspec else (), curves=curves,
                                keep_samples=bool(args.keep_samples)),
                            show=args.progress)
    obj = res.to_json(yspec)
    if args.csv:
        from freqpair.design.files import csv_text
        cols = ["frequency_hz"] + [f"{name}_p{p:g}" for name in res.bands
                                   for p in res.percentiles]
        bands = list(res.bands.values())
        rows = ([float(fr)] + [v for band in bands for v in band[:, k]]
                for k, fr in enumerate(res.f_hz))
        atomic_write_text(args.csv, csv_text(cols, rows))
    if args.keep_samples:
        _write_samples(args.keep_samples, res)
    if args.json:
        print_json(obj)
        return 0
    print(f"Monte Carlo: {res.n} samples, seed {res.seed}; spreads: "
          + ", ".join(f"{k} {s.kind} {s.width:g}" for k, s in spec.spreads))
    for name, label, unit in (("cmrr_se_dc_db", "single-ended CMRR at DC", "dB"),
                              ("cmrr_dc_db", "balanced CMRR at DC", "dB"),
                              ("cmrr_corner_hz", "CMRR corner", "Hz")):
        st = obj.get(name)
        if st:
            print(f"  {label:26s} " + "   ".join(f"{k}: {_fmt(v, unit)}" for k, v in st.items()))
    if "yield" in obj:
        y = obj["yield"]
        print(f"  yield: {100 * y['fraction']:.2f} % of samples have single-ended CMRR ≥ "
              f"{y['cmrr_se_db_min']:g} dB at {_fmt(y['at_hz'], 'Hz')}")
    print(f"  (percentiles as numpy's default, from bins of {obj['bin_width_db']:g} dB: "
          f"within {obj['bin_width_db']:.4f} dB)")
    return 0


def register(sub) -> None:
    p = sub.add_parser(
        "montecarlo", help="Monte Carlo mismatch: CMRR percentile bands, corner spread, yield",
        description="Sample mismatch and value spreads and report CMRR(f) percentile bands, "
                    "the spread of the DC CMRR and of the CMRR corner, and the yield against a "
                    "spec. Samples are reduced as they go (histograms of 1/256 dB bins, "
                    "percentiles as numpy's default within 0.004 dB), so memory does not grow "
                    "with the sample count. Spread syntax: KEY=normal:SIGMA or KEY=uniform:HALFWIDTH "
                    "(fractions, '1%%' allowed). Keys: mismatch.load, mismatch.gm (spread "
                    "around the nominal δ), tail.resistance, tail.capacitance, "
                    "load.capacitance (relative to nominal). Example: freqpair montecarlo "
                    "design.toml -n 10000 --seed 1 --spread mismatch.load=normal:1%% "
                    "--spread tail.capacitance=uniform:20%% --spec 70@1M")
    p.add_argument("design", help="design file (TOML)")
    p.add_argument("--spread", action="append", required=True, metavar="KEY=KIND:WIDTH",
                   help="a distribution (repeat for several keys)")
    p.add_argument("-n", "--samples", type=int, default=1000, help="number of samples")
    p.add_argument("--seed", type=int, default=0, help="random seed (same seed, same result)")
    p.add_argument("--points", type=int, default=200,
                   help="log-spaced frequencies over the design's sweep range")
    p.add_argument("--spec", metavar="DB@FREQ", help="yield spec: single-ended CMRR ≥ DB at FREQ")
    p.add_argument("--percentiles", default="5,50,95", help="band percentiles")
    p.add_argument("--chunk", type=int, default=4096,
                   help="samples evaluated at once (memory bound: about 10 kB per sample at "
                        "100 frequencies)")
    p.add_argument("--bands", metavar="LIST",
                   help="curves to band, comma-separated: cmrr_se_db, cmrr_db, adm_db, "
                        "adm_se_db, acm_se_db, acm_dm_db (default: the CMRRs)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--csv", metavar="FILE", help="write the bands per frequency as CSV")
    p.add_argument("--keep-samples", metavar="FILE",
                   help="keep every sample and write them to FILE as CSV (one row per sample: "
                        "sampled values, DC CMRRs, corner, each curve at each frequency). "
                        "Holds all of them in memory: 8 bytes per sample and frequency per "
                        "curve, e.g. 10^6 samples x 100 frequencies x 2 CMRRs = 1.6 GB. "
                        "Without it memory does not grow with -n")
    add_scheduler_option(p)
    g = p.add_mutually_exclusive_group()
    g.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="force the progress bar (default: on a terminal only)")
    g.add_argument("--no-progress", dest="progress", action="store_false")
    p.set_defaults(func=cmd_montecarlo)
