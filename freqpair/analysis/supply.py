"""Supply rejection: the rails' gains to the single-ended output and PSRR± (DESIGN.md §7f).

With the inputs at 0, A_vpos = v_so/v_vpos and A_vneg = v_so/v_vneg, where v_so
is the single-ended output (o2, or ``out`` with a second stage). PSRR+ =
|A_se/A_vpos| and PSRR− = |A_se/A_vneg| with A_se the single-ended
differential gain (A_dm,se, or A_total). Their corners are the lowest
frequencies where each falls 3.01 dB below its DC value, root-found on the
exact response like the CMRR corner. A rail gain that is zero to rounding
(below 1e-12·|A_se(0)|) makes that PSRR and its corner null.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from freqpair.analysis.crossings import DB_3, db, lowest_crossing
from freqpair.analysis.responses import ZERO_GAIN_RATIO, StageResponses
from freqpair.circuit.frequency import s_of_hz

__all__ = ["SupplyRejection", "supply_rejection", "psrr_db", "single_ended_name"]


@dataclass(frozen=True)
class SupplyRejection:
    """PSRR at DC [dB] and its corner [Hz] for each rail (None: infinite/undefined)."""

    psrr_pos_db: float | None
    psrr_neg_db: float | None
    psrr_pos_corner_hz: float | None
    psrr_neg_corner_hz: float | None

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"psrr_pos_db": fin(self.psrr_pos_db), "psrr_neg_db": fin(self.psrr_neg_db),
                "psrr_pos_corner_hz": fin(self.psrr_pos_corner_hz),
                "psrr_neg_corner_hz": fin(self.psrr_neg_corner_hz)}


def single_ended_name(resp: StageResponses) -> str:
    """The single-ended differential gain PSRR divides: A_total or A_dm,se."""
    return "a_total" if "out" in resp.rows else "adm_se"


def psrr_db(responses_set, rail: str, se_name: str) -> np.ndarray:
    """PSRR [dB] of ``rail`` ("vpos"/"vneg") on a :class:`ResponseSet`'s frequencies
    (+inf where the rail's gain is exactly zero)."""
    a_se = responses_set.get(se_name)
    a_rail = responses_set.get(f"a_{rail}")
    with np.errstate(divide="ignore", invalid="ignore"):
        return db(a_se) - db(a_rail)


class _Both:
    """The signal gains of one ResponseSet (every ``sel``-th point) beside the rails'
    gains of another, read through ``get``."""

    def __init__(self, signal, rails, sel):
        self.signal, self.rails, self.sel = signal, rails, sel

    def get(self, name):
        if name in ("a_vpos", "a_vneg"):
            return self.rails.get(name)
        return self.signal.get(name)[self.sel]


def supply_rejection(resp: StageResponses, grid_hz: np.ndarray, on_grid) -> SupplyRejection:
    """PSRR± at DC and their −3 dB corners.

    Parameters
    ----------
    resp : StageResponses
    grid_hz : ndarray
        The bracketing grid [Hz] (from the network's roots, as for the CMRR corner).
    on_grid : ResponseSet
        ``resp.at(grid_hz)``.

    Returns
    -------
    SupplyRejection
    """
    dc = resp.dc()
    se = single_ended_name(resp)
    a_se0 = abs(complex(dc.get(se)[0]))
    # bracket on every third point of the grid (the curves are smooth rationals):
    # the rails' right-hand sides alone, the signal's taken from ``on_grid``
    coarse = grid_hz[::3]
    rails = resp.at(coarse, rails_only=True, refine=False)
    sel = slice(None, None, 3)
    on_coarse = _Both(on_grid, rails, sel)
    out = {}
    for rail, key in (("vpos", "pos"), ("vneg", "neg")):
        a_rail0 = abs(complex(dc.get(f"a_{rail}")[0]))
        if a_se0 == 0 or a_rail0 <= ZERO_GAIN_RATIO * a_se0:
            out[key] = (None, None)
            continue
        level = 20 * math.log10(a_se0) - 20 * math.log10(a_rail0)
        row, _ = resp.output_row(se)
        exc = np.column_stack([resp.excitation("dm"), resp.excitation(rail)])

        def curve(f, row=row, exc=exc):
            h = np.array([resp.solver.transfer_at(complex(s), exc, row)
                          for s in s_of_hz(np.atleast_1d(f))])          # (n_f, 2)
            return db(h[:, 0]) - db(h[:, 1])

        corner = lowest_crossing(curve, level - DB_3, coarse, psrr_db(on_coarse, rail, se))
        out[key] = (level, corner)
    return SupplyRejection(out["pos"][0], out["neg"][0], out["pos"][1], out["neg"][1])
