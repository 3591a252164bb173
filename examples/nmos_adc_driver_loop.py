"""Scenario: the input pair of an ADC driver on a 5 V rail. An nmos pair with 4 k
loads; the tail is a short-channel current source, modelled as 50 k in
parallel with 0.8 pF. The stage sits in a loop with a feedback factor of 0.25:
how much bandwidth and CMRR are left, and how stable is the loop?

Walks through ``nmos_adc_driver_loop.toml`` (next to this script): summary, python-control
hand-off, Bode plot and report saved as HTML in OUT_DIR (default: the
current folder).

    python examples/nmos_adc_driver_loop.py [OUT_DIR]
"""
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from walkthrough import main  # noqa: E402

if __name__ == "__main__":
    sys.exit(main(pathlib.Path(__file__).resolve().with_suffix(".toml")))
