"""Command line face: ``freqpair montecarlo``.

Spread syntax (``--spread``)::

    KEY=normal:SIGMA        e.g. mismatch.load=normal:0.01, tail.capacitance=normal:10%
    KEY=uniform:HALFWIDTH

Mismatch keys spread absolutely (they are relative already); sizes relative
to their nominal value.

``--metric`` names a banded curve in the trade's words — ``cmrr_se``, ``cmrr``,
``psrr_pos``, ``psrr_neg`` — and is the same as ``--bands NAME_db``.
"""
from __future__ import annotations

from freqpair.cli.common import CliError, _num, add_scheduler_option, key_spec, print_json, \
    run_with_progress
from freqpair.design.errors import FreqpairError

__all__ = ["register", "parse_spread", "METRICS"]

#: ``--metric`` names → the banded curve they select
METRICS = {"cmrr_se": "cmrr_se_db", "cmrr": "cmrr_db", "psrr_pos": "psrr_pos_db",
           "psrr_neg": "psrr_neg_db"}
#: how the printed summary names each curve
_LABELS = {"cmrr_se_db": "single-ended CMRR", "cmrr_db": "balanced CMRR",
           "adm_db": "|A_dm|", "adm_se_db": "|A_dm,se|", "acm_se_db": "|A_cm,se|",
           "acm_dm_db": "|A_cm-dm|", "psrr_pos_db": "PSRR+", "psrr_neg_db": "PSRR−"}
#: rows of a band printed as text (the full band: --json or --csv)
_TEXT_ROWS = 12


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
             ("cmrr_corner_hz", res.corner_hz), ("psrr_pos_dc_db", res.psrr_pos_dc_db),
             ("psrr_neg_dc_db", res.psrr_neg_dc_db)]
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


def _curves(args, design):
    """The banded curves asked for by ``--metric`` and ``--bands`` (None: the default)."""
    from freqpair.studies.montecarlo import BALANCED_CURVES, CURVES
    asked = []
    for option, text, names in (("--metric", args.metric, METRICS),
                                ("--bands", args.bands, {c: c for c in CURVES})):
        for item in (text or "").split(","):
            item = item.strip()
            if not item:
                continue
            if item not in names:
                raise CliError(f"{option} {item!r}: unknown (choose from {', '.join(names)})")
            curve = names[item]
            if curve in BALANCED_CURVES and design.load.type == "mirror":
                raise CliError(f"{option} {item!r}: a mirror-loaded stage has one output "
                               "(no balanced curves)")
            asked.append(curve)
    return tuple(dict.fromkeys(asked)) or None


def _band_rows(f):
    """Grid indices shown in a printed band: every point of a short grid, else the
    first and last points and the points nearest each decade between them."""
    import numpy as np
    if f.size <= _TEXT_ROWS:
        return list(range(f.size))
    x = np.log10(f)
    decades = np.arange(np.ceil(x[0]), np.floor(x[-1]) + 1)
    picks = np.abs(x[None, :] - decades[:, None]).argmin(axis=1)
    step = max(1, -(-picks.size // (_TEXT_ROWS - 2)))
    return sorted({0, f.size - 1, *picks[::step].tolist()})


def _print_band(res, name, output) -> None:
    from freqpair.design.quantities import format_si
    band = res.bands[name]
    where = f" at {output}" if name.startswith("psrr") else ""
    head = f"  {_LABELS.get(name, name)}{where} band [dB]"
    print(f"{head:34s}" + "".join(f"{'p' + format(q, 'g'):>10s}" for q in res.percentiles))
    for k in _band_rows(res.f_hz):
        cells = "".join(f"{'∞' if v == float('inf') else format(v, '.2f'):>10s}"
                        for v in band[:, k])
        print(f"    {format_si(float(res.f_hz[k]), 'Hz'):30s}{cells}")


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
    curves = _curves(args, design)
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
    output = "out" if design.second_stage is not None else "o2"
    for name, label, unit in (("cmrr_se_dc_db", "single-ended CMRR at DC", "dB"),
                              ("cmrr_dc_db", "balanced CMRR at DC", "dB"),
                              ("cmrr_corner_hz", "CMRR corner", "Hz"),
                              ("psrr_pos_dc_db", f"PSRR+ at DC (at {output})", "dB"),
                              ("psrr_neg_dc_db", f"PSRR− at DC (at {output})", "dB")):
        st = obj.get(name)
        if st:
            print(f"  {label:26s} " + "   ".join(f"{k}: {_fmt(v, unit)}" for k, v in st.items()))
    for name in curves or ():          # the bands asked for by --metric / --bands
        _print_band(res, name, output)
    if curves:
        print("  (every grid frequency: --json or --csv)")
    if "yield" in obj:
        y = obj["yield"]
        print(f"  yield: {100 * y['fraction']:.2f} % of samples have single-ended CMRR ≥ "
              f"{y['cmrr_se_db_min']:g} dB at {_fmt(y['at_hz'], 'Hz')}")
    print(f"  (percentiles as numpy's default, from bins of {obj['bin_width_db']:g} dB: "
          f"within {obj['bin_width_db']:.4f} dB)")
    return 0


def register(sub) -> None:
    p = sub.add_parser(
        "montecarlo", help="Monte Carlo mismatch: CMRR/PSRR percentile bands, corner spread, yield",
        description="Sample mismatch and value spreads and report CMRR(f) (or PSRR(f): "
                    "--metric psrr_neg) percentile bands, "
                    "the spread of the DC CMRR and of the CMRR corner, and the yield against a "
                    "spec. Samples are reduced as they go (histograms of 1/256 dB bins, "
                    "percentiles as numpy's default within 0.004 dB), so memory does not grow "
                    "with the sample count. Spread syntax: KEY=normal:SIGMA or KEY=uniform:HALFWIDTH "
                    "(fractions, '1%' allowed). Keys: mismatch.load, mismatch.gm (spread "
                    "around the nominal δ), tail.resistance, tail.capacitance, "
                    "load.capacitance (relative to nominal). Example: freqpair montecarlo "
                    "design.toml -n 10000 --seed 1 --spread mismatch.load=normal:1% "
                    "--spread tail.capacitance=uniform:20% --spec 70@1M")
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
                        "adm_se_db, acm_se_db, acm_dm_db, psrr_pos_db, psrr_neg_db "
                        "(default: the CMRRs)")
    p.add_argument("--metric", metavar="LIST",
                   help="the same by name, comma-separated: cmrr_se, cmrr, psrr_pos, psrr_neg "
                        "(e.g. --metric psrr_neg = --bands psrr_neg_db); the bands asked for "
                        "are printed, and a PSRR's DC spread with them. PSRR is read at the "
                        "single-ended output (o2, or out with a second stage)")
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
