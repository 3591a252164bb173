"""What several test files share: a plain npn pair, designs changed from it, the CLI.

``design_with`` takes changes as keyword arguments with ``__`` for the dots of a
design key (``pair__beta=100`` sets ``pair.beta``); each change goes through
``freqpair.replace_value``, so it is validated like a design file.
"""
import subprocess
import sys

import freqpair
from conftest import ROOT

#: A resistor-loaded npn pair with a Norton tail: the base the test designs vary.
NPN_PAIR = """\
[supply]
positive = 12
negative = -12
[bias]
tail_current = "1 mA"
[pair]
type = "npn"
beta = 200
early_voltage = 80
[load]
type = "resistor"
resistance = "10 k"
[tail]
type = "norton"
resistance = "1 M"
"""


def design_with(base=NPN_PAIR, **changes):
    """``base`` (TOML text as a str, a design file as a Path, or a Design) with
    ``changes`` applied in order."""
    if isinstance(base, str):
        d = freqpair.design_from_text(base)
    elif isinstance(base, freqpair.Design):
        d = base
    else:
        d = freqpair.load_design(base)
    for key, value in changes.items():
        d = freqpair.replace_value(d, key.replace("__", "."), value)
    return d


def run_cli(*args, cwd=ROOT, timeout=60):
    """``python -m freqpair.cli ARGS`` in a clean environment; the CompletedProcess (text)."""
    return subprocess.run([sys.executable, "-m", "freqpair.cli", *map(str, args)],
                          capture_output=True, text=True, cwd=cwd, timeout=timeout,
                          env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})


def synthetic_measurement(design, kind, f_hz, noise_db=0.0, noise_deg=None, seed=0):
    """The exact model of ``design`` at ``f_hz`` plus seeded noise (the fit tests' oracle):
    magnitude [dB] with σ = ``noise_db``, phase [deg] with σ = ``noise_deg`` (None: no phase)."""
    import numpy as np
    from freqpair.studies.measured import Measurement, model_response
    from freqpair.analysis.responses import StageResponses
    h = model_response(StageResponses(freqpair.build_stage(design)), kind, f_hz)
    rng = np.random.default_rng(seed)
    mag = 20 * np.log10(np.abs(h)) + rng.normal(0.0, noise_db, f_hz.size)
    phase = None
    if noise_deg is not None:
        phase = np.degrees(np.angle(h)) + rng.normal(0.0, noise_deg, f_hz.size)
    return Measurement(kind, f_hz, mag, phase)
