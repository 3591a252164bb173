"""Make the SYNTHETIC demo measurement in examples/measured/ (no bench was involved).

Scenario (invented): the bench front end of ``npn_resistor_rc_tail.toml`` was
built, and its single-ended CMRR measured from 1 kHz to 50 MHz falls earlier
than designed. Here the "built stage" is simply the same design with a
330 kΩ tail resistance and 5.6 pF of tail-node capacitance (instead of the
assumed 470 kΩ and 3.3 pF), evaluated exactly by freqpair, with seeded
Gaussian noise of 0.2 dB on the magnitude and 1° on the phase.

Try::

    python examples/make_demo_measurement.py
    freqpair fit examples/npn_resistor_rc_tail.toml \\
        examples/measured/bench_front_end_cmrr_synthetic.csv --kind cmrr \\
        --free tail.capacitance --free tail.resistance -o fitted.toml
"""
from __future__ import annotations

import argparse
import io
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DESIGN = HERE / "npn_resistor_rc_tail.toml"
OUT = HERE / "measured" / "bench_front_end_cmrr_synthetic.csv"
HIDDEN = {"tail.resistance": 330e3, "tail.capacitance": 5.6e-12}
SEED = 20240611


def make(path: Path = OUT, seed: int = SEED) -> Path:
    """Write the synthetic CMRR measurement to ``path`` and return it."""
    import freqpair
    from freqpair.design.files import atomic_write_text
    from freqpair.design.keys import replace_value
    from freqpair.studies.measured import model_response
    from freqpair.analysis.responses import StageResponses

    built = freqpair.load_design(DESIGN)
    for key, value in HIDDEN.items():
        built = replace_value(built, key, value)
    f = np.logspace(3, np.log10(50e6), 48)
    h = model_response(StageResponses(freqpair.build_stage(built)), "cmrr", f)
    rng = np.random.default_rng(seed)
    mag = 20 * np.log10(np.abs(h)) + rng.normal(0.0, 0.2, f.size)
    phase = np.degrees(np.angle(h)) + rng.normal(0.0, 1.0, f.size)
    phase = 180.0 - np.mod(180.0 - phase, 360.0)
    buf = io.StringIO()
    buf.write("# SYNTHETIC measurement made by examples/make_demo_measurement.py, not bench data.\n")
    buf.write(f"# Model of {DESIGN.name} with " +
              ", ".join(f"{k} = {v:g}" for k, v in HIDDEN.items()) +
              f"; noise 0.2 dB / 1 deg, seed {SEED if seed == SEED else seed}.\n")
    buf.write("# single-ended CMRR = A_dm,se / A_cm,se\n")
    buf.write("frequency [Hz],CMRR [dB],phase [deg]\n")
    for fi, mi, pi in zip(f, mag, phase):
        buf.write(f"{fi:.6g},{mi:.3f},{pi:.2f}\n")
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, buf.getvalue())
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=OUT, help="CSV file to write")
    parser.add_argument("--seed", type=int, default=SEED, help="noise seed")
    args = parser.parse_args()
    print(f"wrote {make(args.out, args.seed)} (synthetic)")


if __name__ == "__main__":
    main()
