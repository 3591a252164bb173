"""What sets each pole and zero: normalized sensitivities d ln|s| / d ln x.

For a simple eigenvalue p of the pencil (A, E) (``(A + p·E)·v = 0``,
``uᴴ·(A + p·E) = 0``) and an element of value x with stamps ∂A/∂x, ∂E/∂x,

    dp/dx = −uᴴ (∂A/∂x + p ∂E/∂x) v / (uᴴ E v)

(first-order eigenvalue perturbation). Poles use (G, C); the zeros of one
gain use the augmented pencil [[G, b], [l, 0]], [[C, 0], [0, 0]] with the
element stamps in the top-left block.

Share of an element: S = d ln|s| / d ln g for conductances and g_m, and
−d ln|s| / d ln C for capacitors. Scaling every capacitor by k scales every
root by 1/k, and every conductance and g_m by k scales it by k, so each kind's
shares sum to 1: "the tail capacitance sets 97 % of the CMRR corner".
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from freqpair.analysis.poles import response_zpk
from freqpair.circuit.network import element_stamp

__all__ = ["ElementSensitivity", "RootSensitivity", "pencil_sensitivities",
           "pole_sensitivities", "root_sensitivities", "side_group"]

#: |uᴴ E v| below this (relative to |u|·|E v|) marks a multiple / defective root.
DEFECTIVE_REL_TOL = 1e-9

_SIDE = re.compile(r"^(Rs|RL|CL|Q)([12])(\..+)?$")


def side_group(label: str) -> str:
    """Group name for the matching elements of both sides: ``RL1`` → ``RL1+RL2``,
    ``Q2.cpi`` → ``Q1.cpi+Q2.cpi``; other labels are their own group."""
    m = _SIDE.match(label)
    if not m:
        return label
    pre, _, suf = m.groups()
    suf = suf or ""
    return f"{pre}1{suf}+{pre}2{suf}"


@dataclass(frozen=True)
class ElementSensitivity:
    """Sensitivity of one root to one element.

    Attributes
    ----------
    label : str
        The element's label in the network (``"Rtail"``, ``"Q1.cpi"``, ``"Q2.gm"``).
    kind : str
        ``"G"`` (conductance), ``"C"`` (capacitor) or ``"VCCS"`` (g_m).
    value : float
        Element value [S or F].
    d_ln_mag : float
        d ln|s| / d ln x (x the value: S or F). For a resistor, d ln|s|/d ln R = −this.
    d_root_rad_s : complex
        ds / d ln x [rad/s].
    """

    label: str
    kind: str
    value: float
    d_ln_mag: float
    d_root_rad_s: complex

    @property
    def share(self) -> float:
        """Fraction of the root's magnitude set by this element (see module notes)."""
        return -self.d_ln_mag if self.kind == "C" else self.d_ln_mag


@dataclass(frozen=True)
class RootSensitivity:
    """All element sensitivities of one pole or zero ``root_rad_s`` [rad/s]."""

    kind: str
    root_rad_s: complex
    elements: tuple

    def top(self, n: int = 3, group_sides: bool = False) -> list[tuple[str, float]]:
        """The ``n`` largest contributors as (label, share), by |share|."""
        shares: dict[str, float] = {}
        for e in self.elements:
            key = side_group(e.label) if group_sides else e.label
            shares[key] = shares.get(key, 0.0) + e.share
        ranked = sorted(shares.items(), key=lambda kv: -abs(kv[1]))
        return [(k, float(v)) for k, v in ranked[:n] if math.isfinite(v)]


def _augment(M, b=None, l=None):
    n = M.shape[0]
    out = np.zeros((n + 1, n + 1))
    out[:n, :n] = M
    if b is not None:
        out[:n, n] = b
        out[n, :n] = l
    return out


def _polish(A, E, lam0, u, v, steps: int = 3):
    """Two-sided Rayleigh-quotient iteration from (λ, u, v): eigenvectors accurate to
    full relative precision even for roots far below the pencil's frequency scale."""
    lam = lam0
    for _ in range(steps):
        try:
            M = A + lam * E
            v2 = np.linalg.solve(M, E @ v)
            u2 = np.linalg.solve(M.conj().T, E.conj().T @ u)
        except np.linalg.LinAlgError:
            break
        if not (np.all(np.isfinite(v2)) and np.all(np.isfinite(u2))):
            break
        v2 /= np.linalg.norm(v2)
        u2 /= np.linalg.norm(u2)
        den = np.vdot(u2, E @ v2)
        if den == 0:
            break
        new = -np.vdot(u2, A @ v2) / den
        if not np.isfinite(new) or abs(new - lam0) > 1e-3 * abs(lam0):
            break
        lam, u, v = new, u2, v2
    return lam, u, v


def pencil_sensitivities(A, E, stamps, s0: float):
    """Finite eigenvalues of (A, E) and their derivatives with respect to elements.

    Parameters
    ----------
    A, E : ndarray, shape (n, n)
        The pencil A + s·E.
    stamps : list of (dA, dE)
        Derivatives of A and E with respect to each element's value.
    s0 : float
        Frequency scale [rad/s] for conditioning.

    Returns
    -------
    roots : ndarray of complex, shape (k,)
        Finite eigenvalues [rad/s].
    droot : ndarray of complex, shape (k, n_elements)
        ds/dx per element [rad/s per unit of x]; NaN for multiple/defective roots.
    """
    w, vl, vr = sla.eig(A, -E * s0, left=True, right=True, homogeneous_eigvals=True)
    alpha, beta = w[0], w[1]
    norm = np.hypot(np.abs(alpha), np.abs(beta))
    ok = norm > 0
    finite = ok & (np.abs(beta) > 1e-12 * np.abs(alpha))
    idx = np.nonzero(finite)[0]
    roots = alpha[idx] / beta[idx] * s0
    droot = np.full((idx.size, len(stamps)), np.nan, dtype=complex)
    for r, i in enumerate(idx):
        roots[r], u, v = _polish(A, E, roots[r], vl[:, i], vr[:, i])
        Ev = E @ v
        den = np.vdot(u, Ev)
        if abs(den) <= DEFECTIVE_REL_TOL * np.linalg.norm(u) * np.linalg.norm(Ev) or den == 0:
            continue
        p = roots[r]
        for k, (dA, dE) in enumerate(stamps):
            droot[r, k] = -np.vdot(u, (dA + p * dE) @ v) / den
    return roots, droot


def _network_parts(analysis, name, kind):
    resp = analysis.responses
    net = resp.stage.network
    G, C = resp.solver.G, resp.solver.C
    stamps = [element_stamp(net, k) for k in range(len(net.elements))]
    if kind == "pole":
        return G, C, stamps, net
    l, exc = resp.output_row(name)
    b = resp.excitation(exc)
    return (_augment(G, b, l), _augment(C), [(_augment(dA), _augment(dC)) for dA, dC in stamps],
            net)


def root_sensitivities(analysis, name: str, kind: str, roots) -> list:
    """Sensitivities of the given roots (poles or zeros of gain ``name``).

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    name : str
        Response name (for zeros; poles are shared by every gain).
    kind : str
        ``"pole"`` or ``"zero"``.
    roots : array of complex
        Roots [rad/s] to report, matched to the nearest eigenvalue of the pencil.

    Returns
    -------
    list of RootSensitivity or None
        None where the root is at the origin or multiple (no defined sensitivity).
    """
    roots = np.atleast_1d(np.asarray(roots, dtype=complex))
    if roots.size == 0:
        return []
    A, E, stamps, net = _network_parts(analysis, name, kind)
    eig, d = pencil_sensitivities(A, E, stamps, analysis.responses.solver.s0)
    out = []
    for r in roots:
        if r == 0 or eig.size == 0:
            out.append(None)
            continue
        j = int(np.argmin(np.abs(eig - r)))
        if not np.all(np.isfinite(d[j])):
            out.append(None)
            continue
        p = eig[j]
        items = []
        for k, (etype, label, _nodes, value) in enumerate(net.elements):
            dp_dlnx = d[j, k] * value
            items.append(ElementSensitivity(label or f"element{k}", etype, float(value),
                                            float((dp_dlnx / p).real), complex(dp_dlnx)))
        out.append(RootSensitivity(kind, complex(r), tuple(items)))
    return out


def pole_sensitivities(analysis, name: str | None = None, kind: str = "pole") -> list:
    """Sensitivities of every pole (or zero) of one gain, cancelled pairs excluded.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
    name : str, optional
        Response name; default the primary gain.
    kind : str
        ``"pole"`` or ``"zero"``.

    Returns
    -------
    list of RootSensitivity or None
        In the order of ``response_zpk(analysis, name).poles_rad_s`` (or zeros).
    """
    zpk = response_zpk(analysis, name)
    roots = zpk.poles_rad_s if kind == "pole" else zpk.zeros_rad_s
    return root_sensitivities(analysis, zpk.name, kind, roots)
