"""Generic walk-through of one design file, reused by every scenario script.

    python examples/walkthrough.py DESIGN.toml [OUT_DIR]

1. analyse the design and print the summary;
2. hand the main differential gain to python-control as a zero-pole-gain
   transfer function and check it against freqpair at a few frequencies;
3. save a Bode plot (a restyled freqpair figure) and the full report as HTML.
"""
from __future__ import annotations

import pathlib
import sys

import numpy as np

import freqpair


def table_line(cells, widths) -> str:
    """One line of a fixed-width table: each cell right-aligned in its width
    (a negative width: left-aligned), one space between columns."""
    return " ".join(f"{c:<{-w}}" if w < 0 else f"{c:>{w}}" for c, w in zip(cells, widths))


def print_table(headers, widths, rows) -> None:
    """Print a header line and one line per row (cells already formatted as text)."""
    print(table_line(headers, widths))
    for row in rows:
        print(table_line(row, widths))


def transfer_function(result):
    """The main differential gain as a python-control TransferFunction (s in rad/s)."""
    from freqpair.analysis.poles import response_zpk
    return response_zpk(result, result.primary).transfer_function()


def run(design_path, out_dir=None) -> dict:
    """Walk through one design; returns the paths written and a few numbers."""
    design_path = pathlib.Path(design_path)
    out_dir = pathlib.Path(out_dir or pathlib.Path.cwd())
    out_dir.mkdir(parents=True, exist_ok=True)

    result = freqpair.analyze(freqpair.load_design(design_path))
    print(result)                                   # the terminal summary

    tf = transfer_function(result)
    f_check = np.array([1e3, result.f3db_hz or 1e6, 10 * (result.f3db_hz or 1e6)])
    exact = result.responses.gain(result.primary, f_check)
    handed = np.array([complex(tf(2j * np.pi * f)) for f in f_check])
    worst = float(np.max(np.abs(handed - exact) / np.abs(exact)))
    print(f"\npython-control hand-off: order {len(tf.poles())}, worst relative "
          f"difference from freqpair at {len(f_check)} frequencies: {worst:.1e}")

    from bokeh.io import save
    from bokeh.layouts import column
    from bokeh.resources import INLINE
    from freqpair.views.report_plots import bode_figures
    mag, phase = bode_figures(result, names=[result.primary])
    mag.title.text = f"{design_path.stem}: {mag.title.text}"   # figures are restylable
    mag.height = 260
    bode_path = out_dir / f"{design_path.stem}_bode.html"
    save(column(mag, phase), filename=str(bode_path), resources=INLINE,
         title=f"{design_path.stem} Bode plot")

    report_path = out_dir / f"{design_path.stem}_report.html"
    from freqpair.views.report import write_report
    write_report(result, report_path)
    print(f"wrote {bode_path} and {report_path}")
    return {"bode": bode_path, "report": report_path, "tf_error": worst,
            "json": result.to_json()}


def main(design_path=None, argv=None, scenario=None) -> int:
    """Walk through ``design_path`` (or the first argument), then run ``scenario()``
    if given; the next argument is the output folder."""
    args = list(sys.argv[1:] if argv is None else argv)
    if design_path is None:
        if not args:
            print(__doc__)
            return 2
        design_path = args.pop(0)
    run(design_path, args[0] if args else None)
    if scenario is not None:
        print()
        scenario()
    return 0


if __name__ == "__main__":
    sys.exit(main())
