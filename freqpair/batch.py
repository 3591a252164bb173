"""Batched evaluation of many value-perturbed copies of one stage.

Monte Carlo samples of a design differ from the nominal only in a few element
values (load resistors, pair g_m, tail R and C, load capacitors); the
topology, node order and every other value stay the same. Each such element
is a rank-one stamp ``d·u·vᵀ`` (two-terminal: ``u = v = e_a − e_b``; a
transconductance: ``u = e_out − e_in``, ``v = e_ctrl+ − e_ctrl−``), so a
sample's pencil is

    G + s·C = (G0 + s·C0) + U · diag(d(s)) · Vᵀ,   d_k(s) = ΔG_k + s·ΔC_k

with one column of U, V per distinct pattern (R and C on the same node pair
share one). The nominal pencil is reduced once (QZ, as in
:class:`~freqpair.network.FrequencySolver`) for the right-hand sides ``[B, U]``
and the outputs ``[L; Vᵀ]``; each sample and frequency then costs one
small ``r × r`` solve (r ≤ 5) by the push-through identity

    H = H0 − P · (I + D·K)⁻¹ · D · Q,   H0 = L A⁻¹ B, P = L A⁻¹ U,
                                         Q = Vᵀ A⁻¹ B, K = Vᵀ A⁻¹ U,

which is exact (no small-perturbation approximation) and valid for any
deltas, zero included.

Array layout: samples first, then frequency: ``(n_samples, n_f, ...)``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import DesignError
from .network import GROUND, FrequencySolver
from .responses import _B_CM, _B_DM
from .stage import build_stage

__all__ = ["BatchEvaluator", "BATCH_KEYS", "BatchGains"]

#: Design keys a batched evaluation can vary (values that do not move the bias).
BATCH_KEYS = ("mismatch.load", "mismatch.gm", "tail.resistance", "tail.capacitance",
              "load.capacitance")


@dataclass(frozen=True)
class BatchGains:
    """Complex gains of many samples; every array has shape ``(n_samples, ...)``.

    ``adm`` and ``acm_dm`` are None for a stage without a balanced output.
    """

    adm: np.ndarray | None
    adm_se: np.ndarray
    acm_se: np.ndarray
    acm_dm: np.ndarray | None


def _split(delta, side):
    return 1.0 + (delta / 2.0 if side == 1 else -delta / 2.0)


class BatchEvaluator:
    """Evaluate the gains of many samples of one design at once.

    Parameters
    ----------
    design : freqpair.design.Design
        The nominal design.
    keys : sequence of str
        The design keys that vary (a subset of :data:`BATCH_KEYS`).
    """

    def __init__(self, design, keys):
        for key in keys:
            if key not in BATCH_KEYS:
                raise DesignError(f"{key}: cannot be varied in a batched run "
                                  f"(supported: {', '.join(BATCH_KEYS)})")
        self.design = design
        self.keys = tuple(keys)
        self.stage = build_stage(design)
        net = self.stage.network
        self.balanced = self.stage.balanced
        G, C, B = net.matrices()
        self.n = G.shape[0]
        self._index = {name: i for i, name in enumerate(net.node_names)}
        self._by_label = {e[1]: e for e in net.elements}
        # element label -> (key, value function of the key's sampled values)
        self._rules = self._element_rules()
        patterns: list[tuple[bytes, np.ndarray, np.ndarray]] = []
        self._slots: list[tuple[int, str, float, object]] = []   # (col, kind, nominal, fn)
        for label, (key, fn) in self._rules.items():
            kind, _, nodes, nominal = self._by_label[label]
            u, v = self._vectors(kind, nodes)
            tag = u.tobytes() + v.tobytes()
            col = next((i for i, (t, _, _) in enumerate(patterns) if t == tag), None)
            if col is None:
                col = len(patterns)
                patterns.append((tag, u, v))
            self._slots.append((col, kind, nominal, (key, fn)))
        self.rank = len(patterns)
        U = np.array([p[1] for p in patterns]).T.reshape(self.n, self.rank)
        V = np.array([p[2] for p in patterns]).T.reshape(self.n, self.rank)
        rows = np.array([net.selector({"o1": 1.0}), net.selector({"o2": 1.0})])
        exc = np.column_stack([B @ _B_DM, B @ _B_CM])
        self.solver = FrequencySolver(G, C, np.hstack([exc, U]), np.vstack([rows, V.T]))
        self._grid_cache = None

    # ------------------------------------------------------------ set-up
    def _vectors(self, kind, nodes):
        def e(name):
            vec = np.zeros(self.n)
            if name != GROUND:
                vec[self._index[name]] = 1.0
            return vec
        if kind == "VCCS":
            o_from, o_to, cp, cn = nodes
            return e(o_from) - e(o_to), e(cp) - e(cn)
        a, b = nodes
        u = e(a) - e(b)
        return u, u.copy()

    def _element_rules(self) -> dict:
        d = self.design
        st = self.stage
        rules = {}
        for key in self.keys:
            if key == "mismatch.load":
                if d.load.type == "resistor":
                    r = d.load.resistance
                    rules["RL1"] = (key, lambda x, r=r: 1.0 / (r * _split(x, 1)))
                    rules["RL2"] = (key, lambda x, r=r: 1.0 / (r * _split(x, 2)))
                else:
                    g = st.load_small_signal.gm
                    rules["M3.gm"] = (key, lambda x, g=g: g * _split(x, 1))
                    rules["M4.gm"] = (key, lambda x, g=g: g * _split(x, 2))
            elif key == "mismatch.gm":
                g = st.operating_point.small_signal.gm
                rules["Q1.gm"] = (key, lambda x, g=g: g * _split(x, 1))
                rules["Q2.gm"] = (key, lambda x, g=g: g * _split(x, 2))
            elif key in ("tail.resistance", "tail.capacitance"):
                if d.tail.type != "norton":
                    raise DesignError(f"{key}: only a norton tail has this value "
                                      f"(tail.type = {d.tail.type!r})")
                if key == "tail.resistance":
                    rules["Rtail"] = (key, lambda x: 1.0 / x)
                else:
                    rules["Ctail"] = (key, lambda x: x)
            elif key == "load.capacitance":
                labels = ("CL1", "CL2") if d.load.type == "resistor" else ("CL",)
                for lab in labels:
                    rules[lab] = (key, lambda x: x)
        # elements absent from the nominal network (a zero capacitance) carry no rule;
        # a relative spread around zero keeps them zero (checked in deltas()).
        self._absent = {lab: key for lab, (key, _) in rules.items() if lab not in self._by_label}
        return {lab: rule for lab, rule in rules.items() if lab in self._by_label}

    # ------------------------------------------------------------ per sample
    def deltas(self, values: dict[str, np.ndarray]):
        """Per-sample conductance and capacitance deltas, each ``(n_samples, rank)``.

        Parameters
        ----------
        values : dict of str → ndarray (n_samples,)
            Sampled design values for every varied key (SI units).
        """
        n_s = len(next(iter(values.values()))) if values else 0
        dG = np.zeros((n_s, self.rank))
        dC = np.zeros((n_s, self.rank))
        for lab, key in self._absent.items():
            if np.any(values[key] != 0):
                raise DesignError(f"{key}: the nominal value is 0 (absent); a spread around "
                                  "it cannot be batched")
        for col, kind, nominal, (key, fn) in self._slots:
            target = dC if kind == "C" else dG
            target[:, col] += fn(np.asarray(values[key], dtype=float)) - nominal
        return dG, dC

    def _blocks(self, H):
        return H[..., :2, :2], H[..., :2, 2:], H[..., 2:, :2], H[..., 2:, 2:]

    def _combine(self, H0, P, Q, K, D):
        """H = H0 − P (I + D K)⁻¹ D Q for every sample.

        ``H0, P, Q, K`` carry a frequency axis (or none) in front of their
        matrix axes; ``D`` is ``(n_samples, [n_f,] r)``. The r × r systems are
        solved by Gaussian elimination vectorised over samples and frequencies
        (r Python steps; much faster than one LAPACK call per tiny matrix). The
        matrix is the identity plus the relative size of each element change,
        so elimination without pivoting is safe for any non-singular sample;
        a singular one shows as a non-finite value and is reported by the caller.
        """
        r = self.rank
        lead = D.shape[:-1]
        if r == 0:
            return np.broadcast_to(H0, lead + (2, 2)).copy()
        Dm = np.ascontiguousarray(np.moveaxis(D, -1, 0))  # (r, *lead)

        def front(X):   # (..., a, b) broadcast to lead, matrix axes first: (a, b, *lead)
            if X.ndim - 2 < len(lead):
                X = X.reshape((1,) * (len(lead) - X.ndim + 2) + X.shape)
            return np.moveaxis(X, (-2, -1), (0, 1))

        Km, Qm = front(K), front(Q)
        M = np.ascontiguousarray(Dm[:, None] * Km)       # (r, r, *lead), contiguous
        for i in range(r):
            M[i, i] += 1.0
        R = np.ascontiguousarray(Dm[:, None] * Qm)       # (r, 2, *lead)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for k in range(r):
                inv = 1.0 / M[k, k]
                for i in range(k + 1, r):
                    f = M[i, k] * inv
                    if k + 1 < r:
                        M[i, k + 1:] -= f * M[k, k + 1:]
                    R[i] -= f * R[k]
            for k in range(r - 1, -1, -1):
                acc = R[k]
                for j in range(k + 1, r):
                    acc = acc - M[k, j] * R[j]
                R[k] = acc / M[k, k]
        # H = H0 - P X ; P[..., a, j] X[j, b]
        Pm = front(P)
        H = np.array(np.broadcast_to(front(H0), (2, 2) + lead), dtype=complex)
        for a in range(2):
            for j in range(r):
                H[a] -= Pm[a, j] * R[j]
        return np.moveaxis(H, (0, 1), (-2, -1))

    def _gains(self, H) -> BatchGains:
        bal = self.balanced
        return BatchGains(
            adm=(H[..., 0, 0] - H[..., 1, 0]) if bal else None,
            adm_se=H[..., 1, 0].copy(),
            acm_se=H[..., 1, 1].copy(),
            acm_dm=(H[..., 0, 1] - H[..., 1, 1]) if bal else None,
        )

    def dc(self, dG: np.ndarray) -> BatchGains:
        """Gains at s = 0 exactly for every sample; arrays ``(n_samples,)``."""
        H0, P, Q, K = self._blocks(self.solver.dc().astype(complex))
        return self._gains(self._combine(H0, P, Q, K, dG.astype(complex)))

    def on_grid(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray) -> BatchGains:
        """Gains of every sample at every ``s`` [rad/s]; arrays ``(n_samples, n_f)``."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        key = s.tobytes()
        if self._grid_cache is None or self._grid_cache[0] != key:
            self._grid_cache = (key, self._blocks(self.solver.response(s)))
        H0, P, Q, K = self._grid_cache[1]
        D = dG[:, None, :] + s[None, :, None] * dC[:, None, :]
        return self._gains(self._combine(H0, P, Q, K, D))

    def paired(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray) -> BatchGains:
        """Gains of sample i at its own ``s[i]`` [rad/s]; arrays ``(n_samples,)``."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        # a batched direct solve: each point solved on its own, so results never depend
        # on how many points a chunk holds (chunking and executors give identical answers)
        H0, P, Q, K = self._blocks(self.solver.response_direct(s))
        D = dG + s[:, None] * dC
        return self._gains(self._combine(H0, P, Q, K, D))
