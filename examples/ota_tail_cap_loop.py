"""Scenario: a unity-gain buffer for a high-impedance photodiode bias network. A
single-stage npn pair with a pnp mirror load drives 2 pF and is wired as a
follower (feedback factor 1). The 10 k source resistance lets the tail node
move with the signal, so the 8 pF at the tail node (a long wire to the bias
transistor) costs phase margin as well as CMRR. How much?

Walks through ``ota_tail_cap_loop.toml`` (next to this script): summary,
python-control hand-off, Bode plot and report saved as HTML in OUT_DIR
(default: the current folder); then sweeps the tail capacitance and prints the
phase margin, unity-gain frequency and CMRR corner at each value.

    python examples/ota_tail_cap_loop.py [OUT_DIR]
"""
import pathlib
import sys

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import walkthrough  # noqa: E402

import freqpair  # noqa: E402
from freqpair.analysis.compensation import phase_margin_of  # noqa: E402
from freqpair.studies.sweep import SweepAxis, sweep  # noqa: E402

DESIGN = HERE / "ota_tail_cap_loop.toml"
TAIL_CAPACITANCES_F = (0.0, 1e-12, 2e-12, 4e-12, 8e-12, 16e-12, 32e-12)


def scenario(design_path=DESIGN, values_f=TAIL_CAPACITANCES_F) -> dict:
    """Sweep ``tail.capacitance`` over ``values_f`` [F].

    Returns
    -------
    dict
        "tail_capacitance_f", "phase_margin_deg", "ugf_hz", "f3db_hz",
        "cmrr_corner_hz": lists in sweep order (None where undefined);
        "pm_cost_deg": phase margin lost against the first value [deg].
    """
    design = freqpair.load_design(design_path)
    table = sweep(design, [SweepAxis("tail.capacitance", values_f)],
                  metrics=("f3db_hz", "ugf_hz", "cmrr_corner_hz"))
    rows = table.to_rows()
    pm = [phase_margin_of(design, "tail.capacitance", v) for v in values_f]
    out = {"tail_capacitance_f": list(values_f), "phase_margin_deg": pm,
           "ugf_hz": [r["ugf_hz"] for r in rows], "f3db_hz": [r["f3db_hz"] for r in rows],
           "cmrr_corner_hz": [r["cmrr_corner_hz"] for r in rows],
           "pm_cost_deg": [pm[0] - p for p in pm]}
    fmt = freqpair.format_si
    walkthrough.print_table(
        ("C_tail", "phase margin", "cost", "UGF", "f_3dB", "CMRR corner"), (8, 13, 8, 10, 10, 12),
        [(fmt(v, "F") if v else "0 F", f"{pm[i]:.2f}°", f"{out['pm_cost_deg'][i]:.2f}°",
          fmt(out["ugf_hz"][i], "Hz"), fmt(out["f3db_hz"][i], "Hz"),
          fmt(out["cmrr_corner_hz"][i], "Hz")) for i, v in enumerate(values_f)])
    return out


def main(argv=None) -> int:
    return walkthrough.main(DESIGN, argv, scenario)


if __name__ == "__main__":
    sys.exit(main())
