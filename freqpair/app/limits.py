"""Sizes shared by the explorer's view and its panels (no Bokeh, no imports back)."""
from __future__ import annotations

__all__ = ["N_POINTS", "MAX_PINS"]

#: Frequency points per curve.
N_POINTS = 500
#: Pinned snapshots kept at once; pinning one more drops the oldest.
MAX_PINS = 5
