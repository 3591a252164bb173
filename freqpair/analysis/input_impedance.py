"""Input impedance of the stage, differential and common mode (DESIGN.md §7g).

Z_in,dm(f) = (v_b1 − v_b2)/i_1 under the DM drive and Z_in,cm(f) =
v̄_b/(i_1 + i_2) under the CM drive, v̄_b = (v_b1 + v_b2)/2, i_k the current
from R_s into node b_k (R_s itself not included). The values at DC are the
network solved at s = 0; above 1e15 Ω (a MOS gate) they count as infinite.
The DM corner is the lowest frequency where |Z_in,dm| is 3.01 dB below its
DC value, root-found on the exact response.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from freqpair.analysis.crossings import DB_3, db, lowest_crossing
from freqpair.analysis.responses import StageResponses
from freqpair.circuit.frequency import s_of_hz

__all__ = ["InputImpedance", "input_impedance", "INFINITE_OHM"]

#: Above this an input impedance is infinite (DESIGN.md §7g).
INFINITE_OHM = 1e15


@dataclass(frozen=True)
class InputImpedance:
    """|Z_in,dm| and |Z_in,cm| at DC [Ω] and the DM corner [Hz] (None: infinite/undefined)."""

    zin_dm_ohm: float | None
    zin_cm_ohm: float | None
    zin_dm_corner_hz: float | None

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"zin_dm_ohm": fin(self.zin_dm_ohm), "zin_cm_ohm": fin(self.zin_cm_ohm),
                "zin_dm_corner_hz": fin(self.zin_dm_corner_hz)}


def _finite_ohm(z: complex) -> float | None:
    mag = abs(z)
    return None if not math.isfinite(mag) or mag > INFINITE_OHM else mag


def input_impedance(resp: StageResponses, grid_hz: np.ndarray, on_grid) -> InputImpedance:
    """Z_in,dm and Z_in,cm at DC and the DM corner.

    Parameters
    ----------
    resp : StageResponses
    grid_hz : ndarray
        The bracketing grid [Hz].
    on_grid : ResponseSet
        ``resp.at(grid_hz)``.

    Returns
    -------
    InputImpedance
    """
    dc = resp.dc()
    z_dm0 = _finite_ohm(complex(dc.zin_dm[0]))
    z_cm0 = _finite_ohm(complex(dc.zin_cm[0]))
    corner = None
    if z_dm0 is not None:
        r = resp.rows
        L = resp.solver.L
        rows = np.vstack([L[r["vb1"]] - L[r["vb2"]], L[r["i1"]]])
        b = resp.excitation("dm")

        def curve(f):
            h = np.array([resp.solver.transfer_at(complex(s), b, rows)
                          for s in s_of_hz(np.atleast_1d(f))])           # (n_f, 2)
            with np.errstate(divide="ignore", invalid="ignore"):
                return db(h[:, 0] / h[:, 1])

        level = 20 * math.log10(z_dm0) - DB_3
        corner = lowest_crossing(curve, level, grid_hz, db(on_grid.zin_dm))
    return InputImpedance(z_dm0, z_cm0, corner)
