"""Scenario: a line receiver built from a matched-pair transistor array with 1 %
resistors. A 2 % load mismatch and 1 % g_m mismatch turn common-mode hum into
a differential error: what balanced CMRR is left?

Walks through ``npn_mismatched_pair.toml`` (next to this script): summary, python-control
hand-off, Bode plot and report saved as HTML in OUT_DIR (default: the
current folder).

    python examples/npn_mismatched_pair.py [OUT_DIR]
"""
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from walkthrough import main  # noqa: E402

if __name__ == "__main__":
    sys.exit(main(pathlib.Path(__file__).resolve().with_suffix(".toml")))
