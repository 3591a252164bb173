"""The pole-zero table: each exact pole and zero of a gain with the elements that set it.

Roots come from :func:`freqpair.analysis.poles.response_zpk`; contributor
shares from the pencil sensitivities of :mod:`freqpair.analysis.sensitivity`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from freqpair.analysis.poles import response_zpk
from freqpair.analysis.sensitivity import root_sensitivities

__all__ = ["PoleZeroRow", "pole_zero_table", "DOUBLET_REL"]

#: A kept pole and zero closer than this (relative) are flagged as a doublet.
DOUBLET_REL = 0.05


@dataclass(frozen=True)
class PoleZeroRow:
    """One pole or zero (a complex pair is one row standing for ``re ± j·im``).

    Attributes
    ----------
    kind : str
        ``"pole"`` or ``"zero"``.
    f_hz : float
        Magnitude |s|/2π [Hz] (the natural frequency of a complex pair).
    re_hz, im_hz : float
        Re s/2π and Im s/2π [Hz], signs kept (im_hz ≥ 0; > 0 means a pair ±).
    q : float or None
        Quality factor |s|/(2·|Re s|) of a complex pair; None for a real root.
    contributors : list of (str, float)
        Elements that set the root's magnitude, largest first: (label, share),
        share = d ln|s| / d ln g for a conductance or g_m, and −d ln|s| / d ln C for
        a capacitor (each kind sums to 1 over the network).
    note : str or None
        "at the origin", "right half-plane", "doublet (...)", or None.
    """

    kind: str
    f_hz: float
    re_hz: float
    im_hz: float
    q: float | None
    contributors: list = field(default_factory=list)
    note: str | None = None

    @property
    def is_pair(self) -> bool:
        return self.im_hz > 0



def _note(root: complex, kind: str) -> str | None:
    if root == 0:
        return "at the origin" + (" (integrator)" if kind == "pole" else " (blocks DC)")
    if root.real > 0:
        return "right half-plane" + (" (unstable)" if kind == "pole" else "")
    return None


def pole_zero_table(analysis, name: str | None = None, top: int = 3,
                    group_sides: bool = True) -> list[PoleZeroRow]:
    """Poles and zeros of one gain with the elements that set each.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    name : str, optional
        Response name; default the primary gain.
    top : int
        How many contributors to keep per root.
    group_sides : bool
        Merge the matching elements of the two sides (``RL1+RL2``).

    Returns
    -------
    list of PoleZeroRow
        Poles first, then zeros, each by increasing |s|; cancelled pairs are not
        rows (see :func:`response_zpk`).
    """
    zpk = response_zpk(analysis, name)
    rows = []
    for kind, roots in (("pole", zpk.poles_rad_s), ("zero", zpk.zeros_rad_s)):
        shown = [r for r in roots if r.imag >= 0]
        sens = root_sensitivities(analysis, zpk.name, kind, np.array(shown, dtype=complex))
        for r, rs in zip(shown, sens):
            mag = abs(r)
            q = None if r.imag == 0 or r.real == 0 else mag / (2 * abs(r.real))
            contributors = rs.top(top, group_sides=group_sides) if rs is not None else []
            note = _note(r, kind)
            other = zpk.zeros_rad_s if kind == "pole" else zpk.poles_rad_s
            if note is None and other.size and mag > 0:
                gap = float(np.min(np.abs(other - r))) / mag
                if gap < DOUBLET_REL:
                    note = f"doublet (a {'zero' if kind == 'pole' else 'pole'} {100 * gap:.2g} % away)"
            rows.append(PoleZeroRow(kind, mag / (2 * math.pi), r.real / (2 * math.pi),
                                    r.imag / (2 * math.pi), q, contributors, note))
    return rows
