"""Scenario: a bench instrumentation front end. A discrete-style npn pair with
4.7 k collector resistors, a tail modelled as 470 k in parallel with 3.3 pF of
wiring and collector capacitance. Where does CMRR start to fall?

Walks through ``npn_resistor_rc_tail.toml`` (next to this script): summary, python-control
hand-off, Bode plot and report saved as HTML in OUT_DIR (default: the
current folder).

    python examples/npn_resistor_rc_tail.py [OUT_DIR]
"""
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from walkthrough import main  # noqa: E402

if __name__ == "__main__":
    sys.exit(main(pathlib.Path(__file__).resolve().with_suffix(".toml")))
