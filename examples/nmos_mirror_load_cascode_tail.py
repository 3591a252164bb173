"""Scenario: the input stage of a low-power sensor-interface amplifier on a 3.3 V
single supply. An nmos pair with a pmos mirror load drives one output; the
200 µA tail is a cascoded nmos current source. What does the cascode buy, and
what does the 0.4 pF of routing at the tail node cost?

Walks through ``nmos_mirror_load_cascode_tail.toml`` (next to this script):
summary, python-control hand-off, Bode plot and report saved as HTML in OUT_DIR
(default: the current folder); then prints the Norton view freqpair derives
for the tail and the CMRR with and without the cascode and the routing.

    python examples/nmos_mirror_load_cascode_tail.py [OUT_DIR]
"""
import pathlib
import sys

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import walkthrough  # noqa: E402

import freqpair  # noqa: E402
from freqpair.studies.targets import metric_value  # noqa: E402

DESIGN = HERE / "nmos_mirror_load_cascode_tail.toml"
PROBE_HZ = 1e6      # a frequency to read the CMRR at, well above both corners


def scenario(design_path=DESIGN) -> dict:
    """Tail variants of the design → their Norton view and CMRR numbers.

    Returns
    -------
    dict
        variant name → {"tail_resistance_ohm", "tail_capacitance_f",
        "cmrr_se_db", "cmrr_corner_hz", "cmrr_se_at_probe_db"}.
    """
    design = freqpair.load_design(design_path)
    simple = freqpair.replace_value(design, "tail.type", "mirror")
    variants = {
        "cascode, 0.4 pF routing": design,
        "cascode, no routing": freqpair.replace_value(design, "tail.extra_capacitance", 0),
        "simple mirror, 0.4 pF routing": simple,
        "simple mirror, no routing": freqpair.replace_value(simple, "tail.extra_capacitance", 0),
    }
    fmt = freqpair.format_si
    out = {}
    for label, d in variants.items():
        r = freqpair.analyze(d)
        row = {"tail_resistance_ohm": r.tail.resistance,
               "tail_capacitance_f": r.tail.capacitance,
               "pair_capacitance_f": r.tail.pair_capacitance,
               "cmrr_se_db": r.cmrr_se_db, "cmrr_corner_hz": r.cmrr_corner_hz,
               "cmrr_se_at_probe_db": metric_value(r, "cmrr_se_db", PROBE_HZ)}
        out[label] = row
    walkthrough.print_table(
        ("tail", "R_tail", "C_tail", "CMRR DC", "corner", "CMRR @ " + fmt(PROBE_HZ, "Hz")),
        (-30, 10, 9, 10, 11, 13),
        [(label, fmt(row["tail_resistance_ohm"], "Ω"), fmt(row["tail_capacitance_f"], "F"),
          f"{row['cmrr_se_db']:.2f} dB", fmt(row["cmrr_corner_hz"], "Hz"),
          f"{row['cmrr_se_at_probe_db']:.2f} dB") for label, row in out.items()])
    print(f"(the pair adds {fmt(out['cascode, 0.4 pF routing']['pair_capacitance_f'], 'F')} "
          "of its own at the tail node in every case)")
    return out


def main(argv=None) -> int:
    return walkthrough.main(DESIGN, argv, scenario)


if __name__ == "__main__":
    sys.exit(main())
