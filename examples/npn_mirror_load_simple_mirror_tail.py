"""Scenario: the front end of a general-purpose bipolar op-amp on ±5 V rails. An
npn pair at 40 µA total, loaded by a slow lateral-pnp current mirror, with a
plain npn mirror output as the tail. Where do the mirror pole (and the zero
near it) and the CMRR corner land, and how much does a faster pnp help?

Walks through ``npn_mirror_load_simple_mirror_tail.toml`` (next to this
script): summary, python-control hand-off, Bode plot and report saved as HTML
in OUT_DIR (default: the current folder); then prints the mirror pole-zero
pair, the phase at unity gain and the CMRR corner for three pnp transition
frequencies, each beside its textbook estimate.

    python examples/npn_mirror_load_simple_mirror_tail.py [OUT_DIR]
"""
import pathlib
import sys

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import walkthrough  # noqa: E402

import freqpair  # noqa: E402
from freqpair.analysis.hand import hand_table  # noqa: E402
from freqpair.analysis.poles import response_zpk  # noqa: E402

DESIGN = HERE / "npn_mirror_load_simple_mirror_tail.toml"
PNP_FT_HZ = (5e6, 20e6, 100e6)


def _nearest_real(roots_rad_s, f_hz):
    """The real root [Hz] nearest in log frequency to ``f_hz``."""
    real = np.abs(roots_rad_s[np.abs(roots_rad_s.imag) < 1e-9 * np.abs(roots_rad_s)].real)
    real_hz = real / (2 * np.pi)
    return float(real_hz[np.argmin(np.abs(np.log(real_hz / f_hz)))])


def scenario(design_path=DESIGN, ft_values_hz=PNP_FT_HZ) -> dict:
    """The design with each pnp transition frequency in ``ft_values_hz`` [Hz].

    Returns
    -------
    dict
        pnp f_T [Hz] → {"mirror_pole_hz", "mirror_pole_hand_hz", "mirror_zero_hz",
        "ugf_hz", "phase_at_ugf_deg", "cmrr_corner_hz", "cmrr_corner_hand_hz",
        "tail_resistance_ohm", "tail_capacitance_f"}.
    """
    design = freqpair.load_design(design_path)
    fmt = freqpair.format_si
    out = {}
    for ft in ft_values_hz:
        r = freqpair.analyze(freqpair.replace_value(design, "load.device.ft", ft))
        hand = {row.key: row for row in hand_table(r)}
        zpk = response_zpk(r, r.primary)
        pole = hand["mirror_pole_hz"].exact
        zero = _nearest_real(zpk.zeros_rad_s, 2 * pole)
        phase = float(np.degrees(np.angle(r.responses.gain(r.primary, [r.ugf_hz])[0])))
        row = {"mirror_pole_hz": pole, "mirror_pole_hand_hz": hand["mirror_pole_hz"].approx,
               "mirror_zero_hz": zero, "ugf_hz": r.ugf_hz, "phase_at_ugf_deg": phase,
               "cmrr_corner_hz": r.cmrr_corner_hz,
               "cmrr_corner_hand_hz": hand["cmrr_corner_hz"].approx,
               "tail_resistance_ohm": r.tail.resistance,
               "tail_capacitance_f": r.tail.capacitance}
        out[ft] = row
    walkthrough.print_table(
        ("pnp f_T", "mirror pole", "(hand)", "its zero", "UGF", "phase @UGF", "CMRR corner",
         "(hand)"), (8, 12, 11, 10, 10, 11, 12, 11),
        [(fmt(ft, "Hz"), fmt(row["mirror_pole_hz"], "Hz"), fmt(row["mirror_pole_hand_hz"], "Hz"),
          fmt(row["mirror_zero_hz"], "Hz"), fmt(row["ugf_hz"], "Hz"),
          f"{row['phase_at_ugf_deg']:.1f}°", fmt(row["cmrr_corner_hz"], "Hz"),
          fmt(row["cmrr_corner_hand_hz"], "Hz")) for ft, row in out.items()])
    first = out[ft_values_hz[0]]
    print(f"tail (npn simple mirror), Norton view: {fmt(first['tail_resistance_ohm'], 'Ω')} "
          f"∥ {fmt(first['tail_capacitance_f'], 'F')}")
    return out


def main(argv=None) -> int:
    return walkthrough.main(DESIGN, argv, scenario)


if __name__ == "__main__":
    sys.exit(main())
