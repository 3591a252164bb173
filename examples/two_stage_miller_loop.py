"""Scenario: a sensor-interface buffer. An npn pair with a pnp mirror load drives
a second gain stage compensated by a Miller capacitor; the amplifier closes a
loop with a feedback factor of 0.5 (gain of two) and drives 20 pF of cable.
The 8 pF Miller capacitor leaves too little phase margin with the cable: which
capacitor restores 60°, and what does that do to the step response?

Walks through ``two_stage_miller_loop.toml`` (next to this script): summary,
python-control hand-off, Bode plot and report saved as HTML in OUT_DIR
(default: the current folder); then solves the smallest Miller capacitor for a
60° phase margin and prints the loop and step numbers before and after.

    python examples/two_stage_miller_loop.py [OUT_DIR]
"""
import pathlib
import sys

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import walkthrough  # noqa: E402

import freqpair  # noqa: E402
from freqpair.analysis.compensation import smallest_miller_cap  # noqa: E402
from freqpair.analysis.loop import loop_analysis, step_response  # noqa: E402

DESIGN = HERE / "two_stage_miller_loop.toml"
TARGET_PM_DEG = 60.0


def _loop_row(design) -> dict:
    result = freqpair.analyze(design)
    loop = loop_analysis(result)
    t_s, y = step_response(result)
    return {"miller_capacitance_f": design.second_stage.miller_capacitance,
            "phase_margin_deg": loop.phase_margin_deg, "crossover_hz": loop.crossover_hz,
            "closed_loop_f3db_hz": loop.closed_loop_f3db_hz, "peaking_db": loop.peaking_db,
            "overshoot_pct": loop.overshoot_pct, "settling_time_s": loop.settling_time_s,
            "closed_loop_dc_gain": loop.closed_loop_dc_gain,
            "step_peak": float(y[abs(y).argmax()]), "step_t_s": t_s, "step_y": y}


def scenario(design_path=DESIGN) -> dict:
    """The design as given and with the smallest Miller capacitor for 60°.

    Returns
    -------
    dict
        {"as_given": row, "compensated": row, "solved": CompensationResult};
        each row has the Miller capacitance [F], phase margin [deg], crossover
        [Hz], closed-loop −3 dB frequency [Hz], peaking [dB], step overshoot [%],
        1 % settling time [s] and the step response (t [s], y [V]).
    """
    design = freqpair.load_design(design_path)
    solved = smallest_miller_cap(design, TARGET_PM_DEG)
    rows = {"as_given": _loop_row(design), "compensated": _loop_row(solved.design)}
    fmt = freqpair.format_si
    print(f"smallest Miller capacitor for {TARGET_PM_DEG:.0f}° phase margin: "
          f"{fmt(solved.value, 'F')} (reaches {solved.phase_margin_deg:.2f}° at "
          f"{fmt(solved.crossover_hz, 'Hz')})")
    walkthrough.print_table(
        ("", "C_miller", "PM", "crossover", "CL f3dB", "peaking", "overshoot", "settle 1%"),
        (-12, 9, 8, 10, 10, 8, 9, 10),
        [(label, fmt(r["miller_capacitance_f"], "F"), f"{r['phase_margin_deg']:.2f}°",
          fmt(r["crossover_hz"], "Hz"), fmt(r["closed_loop_f3db_hz"], "Hz"),
          f"{r['peaking_db']:.2f} dB", f"{r['overshoot_pct']:.2f} %",
          fmt(r["settling_time_s"], "s")) for label, r in rows.items()])
    print(f"closed-loop gain {rows['as_given']['closed_loop_dc_gain']:.5f} V/V; "
          "the step is that of a 1 V input step")
    return {**rows, "solved": solved}


def main(argv=None) -> int:
    return walkthrough.main(DESIGN, argv, scenario)


if __name__ == "__main__":
    sys.exit(main())
