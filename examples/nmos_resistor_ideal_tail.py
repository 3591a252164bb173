"""Scenario: the pre-amplifier of a clocked comparator in a 0.35 um-class
process. An nmos pair with 20 k poly loads and an (assumed) ideal tail: how
much bandwidth does the pre-amp have?

Walks through ``nmos_resistor_ideal_tail.toml`` (next to this script): summary, python-control
hand-off, Bode plot and report saved as HTML in OUT_DIR (default: the
current folder).

    python examples/nmos_resistor_ideal_tail.py [OUT_DIR]
"""
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from walkthrough import main  # noqa: E402

if __name__ == "__main__":
    sys.exit(main(pathlib.Path(__file__).resolve().with_suffix(".toml")))
