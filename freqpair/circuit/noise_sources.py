"""The stage's noise sources: which elements are noisy, and with what density.

Each source is a current between two network nodes with a one-sided power
spectral density S(f) = S_white·(1 + f_c/f) [A²/Hz] (DESIGN.md §7h):

- every physical resistor R (loads, R_s, r_b, the Norton tail resistor,
  degeneration resistors, the nulling resistor, added resistors): 4kT/R
  across it (Johnson–Nyquist);
- a bipolar device: collector shot 2q·I_C from collector to emitter, and base
  shot 2q·I_B (I_B = I_C/β) from the internal base to the emitter, the base
  term × (1 + f_c/f) with f_c the device table's ``flicker_corner``;
- a MOS device: channel noise 4kT·γ_n·g_m from drain to source × (1 + f_c/f),
  γ_n = ``noise_gamma``, g_m that side's own (mismatch included).

r_pi, r_o and the second stage's output resistance are model resistances and
noiseless; so are an ideal tail and the second stage's transconductor.
All sources are uncorrelated. Bias currents are the nominal ones.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from freqpair.circuit.constants import BOLTZMANN_J_PER_K, ELEMENTARY_CHARGE_C

__all__ = ["NoiseSource", "resistor_noise", "device_noise"]


@dataclass(frozen=True)
class NoiseSource:
    """One noise current from node ``a`` to node ``b`` (through the source).

    Attributes
    ----------
    name : str
        How the source is named where contributors are listed (``"RL1"``,
        ``"Q1.rb"``, ``"Q1 collector shot"``, ``"Q2 channel"``).
    a, b : str
        Network nodes.
    white_a2_hz : float
        The white part of the density [A²/Hz].
    flicker_corner_hz : float
        f_c [Hz]; 0 for a white source.
    kind : str
        "resistor", "collector shot", "base shot" or "channel".
    """

    name: str
    a: str
    b: str
    white_a2_hz: float
    flicker_corner_hz: float = 0.0
    kind: str = "resistor"

    def density(self, f_hz) -> np.ndarray:
        """S(f) [A²/Hz] at frequencies ``f_hz`` [Hz] (> 0)."""
        f = np.asarray(f_hz, dtype=float)
        if self.flicker_corner_hz == 0.0:
            return np.full(f.shape, self.white_a2_hz)
        return self.white_a2_hz * (1.0 + self.flicker_corner_hz / f)


def resistor_noise(name: str, a: str, b: str, ohms: float, temperature_k: float) -> NoiseSource:
    """Johnson–Nyquist current noise 4kT/R [A²/Hz] of a resistor between ``a`` and ``b``."""
    return NoiseSource(name, a, b, 4.0 * BOLTZMANN_J_PER_K * temperature_k / ohms)


def device_noise(name: str, dev, ss, inner: str, output: str, common: str,
                 temperature_k: float) -> list[NoiseSource]:
    """The noise currents of one transistor at its bias point.

    Parameters
    ----------
    name : str
        The device's label prefix (``"Q1"``, ``"M3"``, ``"tail.q1"``).
    dev : device keys (for β, ``flicker_corner``, ``noise_gamma``)
    ss : SmallSignal
        Its small-signal values (g_m with that side's mismatch).
    inner, output, common : str
        Internal base/gate (after r_b), collector/drain and emitter/source nodes.
    temperature_k : float

    Returns
    -------
    list of NoiseSource
    """
    fc = dev.flicker_corner
    q = ELEMENTARY_CHARGE_C
    if ss.kind == "bipolar":
        ic = ss.current
        return [NoiseSource(f"{name} collector shot", output, common, 2.0 * q * ic, 0.0,
                            "collector shot"),
                NoiseSource(f"{name} base shot", inner, common, 2.0 * q * ic / dev.beta, fc,
                            "base shot")]
    white = 4.0 * BOLTZMANN_J_PER_K * temperature_k * dev.noise_gamma * ss.gm
    return [NoiseSource(f"{name} channel", output, common, white, fc, "channel")]
