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
from freqpair.compensation import phase_margin_of  # noqa: E402
from freqpair.sweep import SweepAxis, sweep  # noqa: E402

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
    print(f"{'C_tail':>8} {'phase margin':>13} {'cost':>8} {'UGF':>10} {'f_3dB':>10} "
          f"{'CMRR corner':>12}")
    for i, v in enumerate(values_f):
        print(f"{fmt(v, 'F') if v else '0 F':>8} {pm[i]:>12.2f}° {out['pm_cost_deg'][i]:>7.2f}° "
              f"{fmt(out['ugf_hz'][i], 'Hz'):>10} {fmt(out['f3db_hz'][i], 'Hz'):>10} "
              f"{fmt(out['cmrr_corner_hz'][i], 'Hz'):>12}")
    return out


def main(argv=None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    walkthrough.run(DESIGN, args[0] if args else None)
    print()
    scenario()
    return 0


if __name__ == "__main__":
    sys.exit(main())
