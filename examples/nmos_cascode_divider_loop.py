"""Scenario: a CMOS op-amp's input stage closed for a gain of ten. A cascoded
nmos pair with body effect, a pmos mirror, a cascode tail and a Miller second
stage, in a 90 k / 10 k feedback divider whose node carries 8 pF (the op-amp's
input and a trace). The divider's pole sits near the crossover: the loop rings.
Which capacitor across the feedback resistor brings the margin back?

Walks through ``nmos_cascode_divider_loop.toml`` (next to this script):
summary, python-control hand-off, Bode plot and report saved as HTML in OUT_DIR
(default: the current folder); then solves the feedback capacitor for a 60°
margin and tabulates the loop for a few values of it, beside the capacitor that
cancels the divider's pole (R_f·C_f = R_g·C_g).

    python examples/nmos_cascode_divider_loop.py [OUT_DIR]
"""
import pathlib
import sys

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import walkthrough  # noqa: E402

import freqpair  # noqa: E402
from freqpair.analysis.compensation import series_capacitance_for  # noqa: E402

DESIGN = HERE / "nmos_cascode_divider_loop.toml"


def scenario(design_path=DESIGN, target_pm_deg=60.0) -> dict:
    """Solve C_f for ``target_pm_deg``; tabulate the loop at 0, the solution and the
    pole-cancelling value.

    Returns
    -------
    dict
        "c_f_solved_f", "c_f_cancel_f", and per tabulated C_f: "c_f_f",
        "phase_margin_deg", "overshoot_pct", "crossover_hz".
    """
    design = freqpair.load_design(design_path)
    fb = design.feedback
    cancel = fb.shunt_resistance * fb.shunt_capacitance / fb.series_resistance
    solved = series_capacitance_for(design, target_pm_deg)
    values = [0.0, solved.value, cancel, 2 * cancel]
    out = {"c_f_solved_f": solved.value, "c_f_cancel_f": cancel, "c_f_f": values,
           "phase_margin_deg": [], "overshoot_pct": [], "crossover_hz": []}
    for c_f in values:
        loop = freqpair.analyze(freqpair.replace_value(design, "feedback.series_capacitance",
                                                       c_f)).loop()
        out["phase_margin_deg"].append(loop.phase_margin_deg)
        out["overshoot_pct"].append(loop.overshoot_pct)
        out["crossover_hz"].append(loop.crossover_hz)
    fmt = freqpair.format_si
    print(f"smallest C_f for a {target_pm_deg:g}° margin: {fmt(solved.value, 'F')}; "
          f"C_f that cancels the divider pole: {fmt(cancel, 'F')}")
    walkthrough.print_table(
        ("C_f", "phase margin", "overshoot", "crossover"), (10, 13, 10, 12),
        [(fmt(v, "F") if v else "0 F", f"{out['phase_margin_deg'][i]:.2f}°",
          f"{out['overshoot_pct'][i]:.2f} %", fmt(out["crossover_hz"][i], "Hz"))
         for i, v in enumerate(values)])
    return out


def main(argv=None) -> int:
    return walkthrough.main(DESIGN, argv, scenario)


if __name__ == "__main__":
    sys.exit(main())
