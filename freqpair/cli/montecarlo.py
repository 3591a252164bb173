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

__all__ = ["register", "parse_spread"]


def _fraction(text: str, option: str) -> float:
    text = text.strip()
    if text.endswith("%"):
        return _num(text[:-1], option) / 100.0
    return _num(text, option)


def parse_spread(text: str):
    """``KEY=normal:σ`` or ``KEY=uniform:w`` → ``(key, Spread)``."""
    from freqpair.studies.montecarlo import Spread
    expected = "KEY=normal:SIGMA or KEY=uniform:HALFWIDTH"
    key, spec = key_spec(text, "--spread", expected)
    if ":" not in spec:
        raise CliError(f"--spread {text!r}: expected {expected}")
    kind, width = spec.split(":", 1)
    return key, Spread(kind.strip(), _fraction(width, f"--spread {key}"))


def _spec_arg(text: str):
    if "@" not in text:
        raise CliError(f"--spec {text!r}: expected DB@FREQ, e.g. 70@1M")
    level, freq = text.split("@", 1)
    return _num(level, "--spec level"), _num(freq, "--spec frequency")


def _fmt(v, unit):
    from freqpair.design.quantities import format_si
    if v is None:
        return "∞"
    return f"{v:.2f} dB" if unit == "dB" else format_si(v, unit)


def cmd_montecarlo(args) -> int:
    import numpy as np
    from freqpair.cli.common import _load
    from freqpair.design.files import atomic_write_text
    from freqpair.studies.montecarlo import MonteCarloSpec, default_grid, run_montecarlo
    design = _load(args.design)
    spec = MonteCarloSpec(tuple(parse_spread(t) for t in args.spread))
    yspec = _spec_arg(args.spec) if args.spec else None
    f = default_grid(design, args.points)
    if yspec is not None:
        f = np.unique(np.append(f, yspec[1]))
    q = tuple(_num(x, "--percentiles") for x in args.percentiles.split(","))
    res = run_with_progress(args, args.samples, "montecarlo",
                            lambda ex, cb: run_montecarlo(
                                design, spec, args.samples, args.seed, f_hz=f, chunk=args.chunk,
                                percentiles=q, progress=cb, executor=ex),
                            show=args.progress)
    obj = res.to_json(yspec)
    if args.csv:
        from freqpair.design.files import csv_text
        cols = ["frequency_hz"] + [f"cmrr_se_db_p{p:g}" for p in res.percentiles]
        bands = [res.band_cmrr_se_db]
        if res.band_cmrr_db is not None:
            cols += [f"cmrr_db_p{p:g}" for p in res.percentiles]
            bands.append(res.band_cmrr_db)
        rows = ([float(fr)] + [v for band in bands for v in band[:, k]]
                for k, fr in enumerate(res.f_hz))
        atomic_write_text(args.csv, csv_text(cols, rows))
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
    return 0


def register(sub) -> None:
    p = sub.add_parser(
        "montecarlo", help="Monte Carlo mismatch: CMRR percentile bands, corner spread, yield",
        description="Sample mismatch and value spreads and report CMRR(f) percentile bands, "
                    "the spread of the DC CMRR and of the CMRR corner, and the yield against a "
                    "spec. Spread syntax: KEY=normal:SIGMA or KEY=uniform:HALFWIDTH "
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
    p.add_argument("--chunk", type=int, default=4096, help="samples per chunk (memory bound)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--csv", metavar="FILE", help="write the CMRR bands per frequency as CSV")
    add_scheduler_option(p)
    g = p.add_mutually_exclusive_group()
    g.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="force the progress bar (default: on a terminal only)")
    g.add_argument("--no-progress", dest="progress", action="store_false")
    p.set_defaults(func=cmd_montecarlo)
