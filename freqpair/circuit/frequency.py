"""The frequency grid: Hz stored, immutable; ``s = j·2π·f`` computed here only."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FrequencyGrid", "s_of_hz"]


def s_of_hz(f_hz) -> np.ndarray:
    """Complex frequency s = j·2π·f [rad/s] for frequencies in Hz."""
    return 2j * np.pi * np.asarray(f_hz, dtype=float)


@dataclass(frozen=True)
class FrequencyGrid:
    """An immutable frequency grid in Hz."""

    f_hz: np.ndarray

    def __post_init__(self):
        f = np.asarray(self.f_hz, dtype=float)
        if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
            raise ValueError("frequency grid: need a 1-D array of positive finite Hz values")
        f = f.copy()
        f.setflags(write=False)
        object.__setattr__(self, "f_hz", f)

    @classmethod
    def log_sweep(cls, start_hz: float, stop_hz: float, points_per_decade: int) -> "FrequencyGrid":
        """Logarithmic grid from ``start_hz`` to ``stop_hz`` inclusive."""
        decades = np.log10(stop_hz / start_hz)
        n = max(int(np.ceil(decades * points_per_decade)) + 1, 2)
        return cls(np.logspace(np.log10(start_hz), np.log10(stop_hz), n))

    @classmethod
    def from_design(cls, design) -> "FrequencyGrid":
        """The design's ``[sweep]`` grid."""
        sw = design.sweep
        return cls.log_sweep(sw.start, sw.stop, sw.points_per_decade)

    @property
    def w(self) -> np.ndarray:
        """Angular frequency [rad/s]."""
        return 2 * np.pi * self.f_hz

    @property
    def s(self) -> np.ndarray:
        """Complex frequency j·ω [rad/s]."""
        return s_of_hz(self.f_hz)

    def __len__(self) -> int:
        return self.f_hz.size
