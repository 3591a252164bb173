"""Batched evaluation of many value-perturbed copies of one stage.

Monte Carlo samples of a design differ from the nominal only in a few element
values (load resistors, pair g_m, tail R and C, load capacitors); the
topology, node order and every other value stay the same. Each such element
is a rank-one stamp ``d·u·vᵀ`` (two-terminal: ``u = v = e_a − e_b``; a
transconductance: ``u = e_out − e_in``, ``v = e_ctrl+ − e_ctrl−``), so a
sample's pencil is

    G + s·C = (G0 + s·C0) + U · diag(d(s)) · Vᵀ,   d_k(s) = ΔG_k + s·ΔC_k

with one column of U, V per distinct pattern (R and C on the same node pair
share one; a MOS device's g_mb, which scales with its g_m, joins the g_m's
column: ``v = v_gs + (g_mb/g_m)·v_bs``). Elements are found by label, kind and
nodes, the stage's own first (a second stage's C_L is also labelled "CL2").
The nominal pencil is reduced once (QZ, as in
:class:`~freqpair.circuit.network.FrequencySolver`) for the right-hand sides ``[B, U]``
and the outputs ``[L; Vᵀ]``, which gives at each frequency

    H = H0 − P · (I + D·K)⁻¹ · D · Q,   H0 = L A⁻¹ B, P = L A⁻¹ U,
                                         Q = Vᵀ A⁻¹ B, K = Vᵀ A⁻¹ U,

exact (no small-perturbation approximation) for any deltas, zero included.

On a frequency grid the r × r systems (r ≤ 5) are solved in closed form. By
multilinearity of the determinant in the rows of ``I + D·K``,

    det(I + D·K)              = Σ_S d^S · det K[S, S]
    det(I + D·K) · H[a, b]    = Σ_S d^S · det [[K, Q_b], [P_a, H0_ab]][S+, S+]

over the subsets S of the r columns (``S+`` = S and the bordering row/column,
``d^S`` = Π_{k∈S} d_k). The minors depend on frequency only and are computed
once per grid; with ``d_k = ΔG_k + s·ΔC_k`` expanded, each polynomial is a sum
of per-sample monomials (products of ΔG's and ΔC's, real) times per-frequency
weights (minor × s^m, complex): one real matrix product for all samples and
frequencies. The CMRR is a ratio of two numerators (the determinant cancels).

Root refinement (CMRR corners) evaluates the same expansion on fixed lattices
of frequencies (:meth:`BatchEvaluator.db_on_grid` with a small plan), so no
sample ever needs its own n × n solve; :meth:`BatchEvaluator.paired` (each
sample's own ``G + s·C`` solved directly) stays as an independent check.

Array layout: samples first, then frequency: ``(n_samples, n_f, ...)``.
Outputs are the rows ``[o1 − o2, o2]`` (and ``out`` with a second stage) and
excitations the columns ``[DM, CM, vpos, vneg]`` (:data:`DRIVES`). Supply
rejection (DESIGN.md §7f) is the ratio of two numerators at the single-ended
output v_so (o2, or ``out`` with a second stage): PSRR± = |N(v_so, DM)| /
|N(v_so, rail)|, the determinant cancelling as it does for the CMRR.
"""
from __future__ import annotations

import contextlib
import itertools
import threading
from dataclasses import dataclass

import numpy as np

from freqpair.design.errors import DesignError
from freqpair.circuit.network import GROUND, FrequencySolver
from freqpair.analysis.responses import EXCITATIONS, ZERO_GAIN_RATIO
from freqpair.circuit.stage import TAIL_NODE, build_stage

__all__ = ["BatchEvaluator", "BATCH_KEYS", "BatchGains", "CURVES", "BALANCED_CURVES",
           "PSRR_CURVES", "DRIVES", "excitations", "single_threaded_blas"]

#: Design keys a batched evaluation can vary (values that do not move the bias).
BATCH_KEYS = ("mismatch.load", "mismatch.gm", "tail.resistance", "tail.capacitance",
              "load.capacitance")


@dataclass(frozen=True)
class BatchGains:
    """Complex gains of many samples; every array has shape ``(n_samples, ...)``.

    ``adm`` and ``acm_dm`` are None for a stage without a balanced output.
    ``a_se`` is the single-ended differential gain PSRR divides (A_dm,se, or
    A_total with a second stage); ``a_vpos``, ``a_vneg`` are the rails' gains to
    the same output (DESIGN.md §7f).
    """

    adm: np.ndarray | None
    adm_se: np.ndarray
    acm_se: np.ndarray
    acm_dm: np.ndarray | None
    a_se: np.ndarray | None = None
    a_vpos: np.ndarray | None = None
    a_vneg: np.ndarray | None = None


#: Sample × frequency elements per matrix-product block: the block holds
#: ``rows = GEMM_ELEMENTS // n_f`` samples (8 … 256; a function of n_f only, so
#: every chunk uses the same shapes) and its product 10 reals per element (~1.6 MB).
GEMM_ELEMENTS = 20_000
#: Samples per batched direct solve (one n × n complex matrix each, ~2.4 MB for 12 nodes).
SOLVE_BLOCK = 1024
#: The drives, columns of the expansion's right-hand sides (DESIGN.md §2, §7f):
#: differential, common mode, and each rail alone (the inputs at 0).
DRIVES = ("dm", "cm", "vpos", "vneg")
#: Polynomials of the grid expansion: det(I + D·K), then the numerators of
#: (balanced, DM), (balanced, CM), (o2, DM), (o2, CM), and at the single-ended
#: output v_so (o2, or ``out`` with a second stage) (v_so, DM), (v_so, vpos),
#: (v_so, vneg). Without a second stage v_so is o2 and "a_se" is "adm_se" (one
#: polynomial, :attr:`BatchEvaluator.poly_alias`).
_POLYS = ("det", "adm", "acm_dm", "adm_se", "acm_se", "a_se", "a_vpos", "a_vneg")
#: polynomial → (output, drive) of its numerator
_TERMS = {1: ("balanced", "dm"), 2: ("balanced", "cm"), 3: ("o2", "dm"), 4: ("o2", "cm"),
          5: ("so", "dm"), 6: ("so", "vpos"), 7: ("so", "vneg")}
#: Per-frequency values [dB] of :meth:`BatchEvaluator.db_on_grid`: name → (numerator
#: polynomial, denominator polynomial, which one the zero-to-rounding rule tests).
#: A CMRR whose common-mode gain is zero to rounding is +inf, a PSRR whose rail gain
#: is, likewise; such a gain is −inf dB.
_CURVE_POLYS = {
    "cmrr_se_db": (3, 4, "den"),
    "cmrr_db": (1, 2, "den"),
    "adm_db": (1, 0, "num"),
    "adm_se_db": (3, 0, "num"),
    "acm_se_db": (4, 0, "num"),
    "acm_dm_db": (2, 0, "num"),
    "psrr_pos_db": (5, 6, "den"),
    "psrr_neg_db": (5, 7, "den"),
}
#: Curve names [dB]: CMRRs (single-ended, balanced), the gains |A_dm|, |A_dm,se|,
#: |A_cm,se|, |A_cm-dm| (DESIGN.md §2) and PSRR+, PSRR− at the single-ended output
#: (DESIGN.md §7f).
CURVES = tuple(_CURVE_POLYS)
#: The curves that need a balanced (two-output) stage.
BALANCED_CURVES = ("cmrr_db", "adm_db", "acm_dm_db")
#: The supply-rejection curves: their zero-to-rounding reference is |A_se(0)|
#: (A_dm,se or A_total), not the first stage's differential gain.
PSRR_CURVES = ("psrr_pos_db", "psrr_neg_db")
#: Block height of the small lattice plans (root refinement): fixed, like GEMM_ELEMENTS.
LATTICE_ROWS = 32
#: Lattice blocks per stacked product (bounds the temporaries to a few MB).
LATTICE_BATCH = 32
_BLAS = None


@contextlib.contextmanager
def single_threaded_blas():
    """BLAS on one thread: identical results with any thread count (workers of a
    cluster run single-threaded) and, for these small products, faster on a busy
    machine (worker-thread wake-ups)."""
    global _BLAS
    try:
        if _BLAS is None:
            from threadpoolctl import ThreadpoolController
            _BLAS = ThreadpoolController()
        limiter = _BLAS.limit(limits=1, user_api="blas")
    except Exception:                     # threadpoolctl missing or unusable: no limit
        limiter = contextlib.nullcontext()
    with limiter:
        yield


def _split(delta, side):
    return 1.0 + (delta / 2.0 if side == 1 else -delta / 2.0)


def excitations(B: np.ndarray, kinds=("dm", "cm")) -> np.ndarray:
    """The drives ``kinds`` (from :data:`DRIVES`) as columns ``(n, len(kinds))`` of
    the input matrix ``B``.

    The first four columns of ``B`` are the sources in1, in2, vpos, vneg
    (:data:`freqpair.analysis.responses.EXCITATIONS`): v_id = v_in1 − v_in2 = 1 is
    ``[0.5, −0.5, 0, 0]``, v_ic = 1 is ``[1, 1, 0, 0]``, a rail alone ``[0, 0, 1, 0]``
    or ``[0, 0, 0, 1]``. Sources that a drive does not name stay at 0.
    """
    n_src = min(B.shape[1], 4)
    return np.column_stack([B[:, :n_src] @ EXCITATIONS[k][:n_src] for k in kinds])


class BatchEvaluator:
    """Evaluate the gains of many samples of one design at once.

    Parameters
    ----------
    design : freqpair.design.schema.Design
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
        #: the single-ended output PSRR is read at: "o2", or "out" with a second stage
        self.single_ended = self.stage.final_node
        G, C, B = net.matrices()
        self.n = G.shape[0]
        self._index = {name: i for i, name in enumerate(net.node_names)}
        # element label -> (element, key, value function of the key's sampled values)
        self._rules = self._element_rules()
        patterns: list[tuple[bytes, np.ndarray, np.ndarray]] = []
        self._slots: list[tuple[int, str, float, object]] = []   # (col, kind, nominal, fn)
        for label, (element, key, fn, partners) in self._rules.items():
            kind, _, nodes, nominal = element
            u, v = self._vectors(kind, nodes)
            for p_kind, _, p_nodes, p_value in partners:
                # a MOS device's g_mb scales with its g_m (DESIGN.md §7b) and drives the
                # same output: one column, v = (v_gs + g_mb/g_m · v_bs) control vector
                v = v + (p_value / nominal) * self._vectors(p_kind, p_nodes)[1]
            tag = u.tobytes() + v.tobytes()
            col = next((i for i, (t, _, _) in enumerate(patterns) if t == tag), None)
            if col is None:
                col = len(patterns)
                patterns.append((tag, u, v))
            self._slots.append((col, kind, nominal, (key, fn)))
        self.rank = len(patterns)
        U = np.array([p[1] for p in patterns]).T.reshape(self.n, self.rank)
        V = np.array([p[2] for p in patterns]).T.reshape(self.n, self.rank)
        rows = [net.selector({"o1": 1.0, "o2": -1.0}), net.selector({"o2": 1.0})]
        if self.single_ended != "o2":
            rows.append(net.selector({self.single_ended: 1.0}))
        rows = np.array(rows)
        #: output rows [o1 − o2, o2(, out)]; which row each output name is
        self.n_out = rows.shape[0]
        out_row = {"balanced": 0, "o2": 1, "so": self.n_out - 1}
        #: polynomial → (output row, drive column) of its numerator
        self._pairs = {p: (out_row[o], DRIVES.index(d)) for p, (o, d) in _TERMS.items()}
        #: polynomials that are the same as another one (v_so = o2: A_se is A_dm,se)
        self.poly_alias = {5: 3} if self.single_ended == "o2" else {}
        alias = self.poly_alias
        self._curve_polys = {name: (alias.get(a, a), alias.get(b, b), test)
                             for name, (a, b, test) in _CURVE_POLYS.items()}
        #: the polynomials of a full plan (:meth:`on_grid`), aliases left out
        self.all_polys = tuple(p for p in range(len(_POLYS)) if p not in alias)
        exc = excitations(B, DRIVES)
        self.solver = FrequencySolver(G, C, np.hstack([exc, U]), np.vstack([rows, V.T]))
        #: the solver's frequency scale [rad/s] (the expansion's s/s0 and s0·ΔC)
        self.s0 = self.solver.s0
        # per column: which factors its delta has (0: absent, 1: ΔG, 2: s·ΔC)
        has_g = [any(c == col and k != "C" for c, k, _, _ in self._slots)
                 for col in range(self.rank)]
        has_c = [any(c == col and k == "C" for c, k, _, _ in self._slots)
                 for col in range(self.rank)]
        self._options = [(0,) + ((1,) if has_g[j] else ()) + ((2,) if has_c[j] else ())
                         for j in range(self.rank)]
        #: monomials as tuples of factor codes per column, in :meth:`_monomials` order
        self.monomials = [()]
        for opts in self._options:
            self.monomials = [m + (o,) for o in opts for m in self.monomials]
        self._plans: dict[bytes, _GridPlan] = {}
        self._plans_lock = threading.Lock()
        # for the direct per-sample solve
        self._G, self._C, self._rhs = G, C, exc
        self._stamp_entries = [[(p, q, U[p, j] * V[q, j]) for p in np.nonzero(U[:, j])[0]
                                for q in np.nonzero(V[:, j])[0]] for j in range(self.rank)]
        self._row_entries = [[(k, r[k]) for k in np.nonzero(r)[0]] for r in rows]

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

    def _element(self, kind, label, first_nodes=()):
        """The stage's own element ``label`` of ``kind`` whose nodes begin with
        ``first_nodes``, or None (absent: a zero value is not stamped).

        The first one stamped: the stage stamps its own elements before a second
        stage's and the added ones, which may carry the same label (a resistor-
        loaded stage's C_L at o2 and the second stage's at ``out`` are both "CL2").
        """
        n = len(first_nodes)
        for e in self.stage.network.elements:
            if e[0] == kind and e[1] == label and tuple(e[2][:n]) == tuple(first_nodes):
                return e
        return None

    def _element_rules(self) -> dict:
        d = self.design
        st = self.stage
        rules = {}          # label -> (kind, first nodes, key, value function)
        for key in self.keys:
            if key == "mismatch.load":
                if d.load.type == "resistor":
                    r = d.load.resistance
                    rules["RL1"] = ("G", ("o1",), key, lambda x, r=r: 1.0 / (r * _split(x, 1)))
                    rules["RL2"] = ("G", ("o2",), key, lambda x, r=r: 1.0 / (r * _split(x, 2)))
                else:
                    g = st.load_small_signal.gm
                    rules["M3.gm"] = ("VCCS", (), key, lambda x, g=g: g * _split(x, 1))
                    rules["M4.gm"] = ("VCCS", (), key, lambda x, g=g: g * _split(x, 2))
            elif key == "mismatch.gm":
                g = st.operating_point.small_signal.gm
                rules["Q1.gm"] = ("VCCS", (), key, lambda x, g=g: g * _split(x, 1))
                rules["Q2.gm"] = ("VCCS", (), key, lambda x, g=g: g * _split(x, 2))
            elif key in ("tail.resistance", "tail.capacitance"):
                if d.tail.type != "norton":
                    raise DesignError(f"{key}: only a norton tail has this value "
                                      f"(tail.type = {d.tail.type!r})")
                if key == "tail.resistance":
                    rules["Rtail"] = ("G", (TAIL_NODE,), key, lambda x: 1.0 / x)
                else:
                    rules["Ctail"] = ("C", (TAIL_NODE,), key, lambda x: x)
            elif key == "load.capacitance":
                at = (("CL1", "o1"), ("CL2", "o2")) if d.load.type == "resistor" else \
                    (("CL", "o2"),)
                for lab, node in at:
                    rules[lab] = ("C", (node, GROUND), key, lambda x: x)
        found = {lab: self._element(kind, lab, nodes)
                 for lab, (kind, nodes, _, _) in rules.items()}
        # a device's body transconductance follows its g_m (the same mismatch factor)
        partners = {lab: [e for e in (self._element("VCCS", lab[:-3] + ".gmb"),) if e]
                    if lab.endswith(".gm") else [] for lab in rules}
        # elements absent from the nominal network (a zero capacitance) carry no rule;
        # a relative spread around zero keeps them zero (checked in deltas()).
        self._absent = {lab: rules[lab][2] for lab, e in found.items() if e is None}
        return {lab: (found[lab], key, fn, partners[lab]) for lab, (_, _, key, fn)
                in rules.items() if found[lab] is not None}

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
        """``(H0, P, Q, K)`` of the solver's ``[L; Vᵀ] A⁻¹ [drives, U]``."""
        o, e = self.n_out, len(DRIVES)
        return H[..., :o, :e], H[..., :o, e:], H[..., o:, :e], H[..., o:, e:]

    def _combine(self, H0, P, Q, K, D):
        """H = H0 − P (I + D K)⁻¹ D Q for every sample (used at DC).

        ``H0, P, Q, K`` carry a frequency axis (or none) in front of their
        matrix axes; ``D`` is ``(n_samples, [n_f,] r)``. The r × r systems are
        solved by Gaussian elimination vectorised over samples (r Python steps;
        much faster than one LAPACK call per tiny matrix). The
        matrix is the identity plus the relative size of each element change,
        so elimination without pivoting is safe for any non-singular sample;
        a singular one shows as a non-finite value and is reported by the caller.
        """
        r = self.rank
        lead = D.shape[:-1]
        n_o, n_e = H0.shape[-2:]
        if r == 0:
            return np.broadcast_to(H0, lead + (n_o, n_e)).copy()
        Dm = np.ascontiguousarray(np.moveaxis(D, -1, 0))  # (r, *lead)

        def front(X):   # (..., a, b) broadcast to lead, matrix axes first: (a, b, *lead)
            if X.ndim - 2 < len(lead):
                X = X.reshape((1,) * (len(lead) - X.ndim + 2) + X.shape)
            return np.moveaxis(X, (-2, -1), (0, 1))

        Km, Qm = front(K), front(Q)
        M = np.ascontiguousarray(Dm[:, None] * Km)       # (r, r, *lead), contiguous
        for i in range(r):
            M[i, i] += 1.0
        R = np.ascontiguousarray(Dm[:, None] * Qm)       # (r, n_e, *lead)
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
        H = np.array(np.broadcast_to(front(H0), (n_o, n_e) + lead), dtype=complex)
        for a in range(n_o):
            for j in range(r):
                H[a] -= Pm[a, j] * R[j]
        return np.moveaxis(H, (0, 1), (-2, -1))

    def _gains(self, H) -> BatchGains:
        """Named gains from ``H[..., row, col]``, rows [o1 − o2, o2(, out)], columns
        [DM, CM, vpos, vneg]."""
        bal = self.balanced
        so = self.n_out - 1
        return BatchGains(
            adm=H[..., 0, 0].copy() if bal else None,
            adm_se=H[..., 1, 0].copy(),
            acm_se=H[..., 1, 1].copy(),
            acm_dm=H[..., 0, 1].copy() if bal else None,
            a_se=H[..., so, 0].copy(),
            a_vpos=H[..., so, 2].copy(),
            a_vneg=H[..., so, 3].copy(),
        )

    def dc(self, dG: np.ndarray) -> BatchGains:
        """Gains at s = 0 exactly for every sample; arrays ``(n_samples,)``."""
        H0, P, Q, K = self._blocks(self.solver.dc().astype(complex))
        return self._gains(self._combine(H0, P, Q, K, dG.astype(complex)))

    # ------------------------------------------------------------ on a grid
    def _plan(self, s: np.ndarray, polys: tuple | None = None) -> "_GridPlan":
        """The per-frequency coefficients of one grid (cached; a few grids kept);
        ``polys`` default :attr:`all_polys`."""
        polys = self.all_polys if polys is None else tuple(polys)
        key = (s.tobytes(), polys)
        with self._plans_lock:
            plan = self._plans.get(key)
        if plan is None:
            plan = _GridPlan.build(self, s, polys)
            with self._plans_lock:
                if len(self._plans) >= 4:
                    self._plans.pop(next(iter(self._plans)))
                self._plans[key] = plan
        return plan

    def lattice_plans(self, s: np.ndarray, names=("cmrr_se_db",)) -> list:
        """Uncached plans for root refinement, one per row of ``s`` ``(n_plans, n_f)``
        [rad/s]: the numerators of ``names`` only (no determinant), blocks of
        :data:`LATTICE_ROWS` samples, built together (the same bits as one by one).
        Pass them to :meth:`lattice_cmrr_se`; the caller keeps those it reuses."""
        s = np.atleast_2d(np.asarray(s, dtype=complex))
        with single_threaded_blas():
            return _GridPlan.build_lattices(self, s, self._polys_of(names, det=False),
                                            LATTICE_ROWS)

    def _polys_of(self, names, det: bool = True) -> tuple:
        """Polynomial indices needed for ``names`` (and the determinant)."""
        need = {0} if det else set()
        for name in names:
            if name not in _CURVE_POLYS:
                raise DesignError(f"curve = {name!r}: unknown (choose from {', '.join(CURVES)})")
            if name in BALANCED_CURVES and not self.balanced:
                raise DesignError(f"curve = {name!r}: this stage has no balanced output")
            need.update(self._curve_polys[name][:2])
        return tuple(sorted(need))

    def monomials_of(self, dG: np.ndarray, dC: np.ndarray) -> np.ndarray:
        """Per-sample monomials ``(n_samples, n_mono)`` (for :meth:`lattice_cmrr_se`)."""
        return self._monomials(dG, dC)

    def lattice_cmrr_se(self, mono: np.ndarray, plans: list, group: np.ndarray) -> np.ndarray:
        """Single-ended CMRR as a power ratio |A_dm,se/A_cm,se|² ``(n_samples, n_f)``,
        each sample at the frequencies of its own lattice plan (10·log10 of it is
        the CMRR in dB).

        The lean path of root refinement: ``mono`` from :meth:`monomials_of`,
        ``plans`` from :meth:`lattice_plan` (all of one size), ``group[i]`` the plan
        of sample i. The samples of each plan fill blocks of the plan's fixed
        height (zero-padded) and the blocks go through stacked matrix products,
        so a sample's value does not depend on the other samples (the same bits in
        any chunk) and the cost does not grow with the number of plans. The
        plans hold the two numerators only: without the determinant there is no
        zero-to-rounding test, so a vanishing common-mode gain gives a large
        finite CMRR instead of +inf and a singular sample NaN — on which side of
        a level a point lies is the same either way. The caller runs it inside
        :func:`single_threaded_blas`.
        """
        n = mono.shape[0]
        p0 = plans[0]
        rows, n_f, n_poly = p0.rows, p0.n_f, len(p0.polys)
        num, den = (p0.polys.index(p) for p in self._curve_polys["cmrr_se_db"][:2])
        sizes = np.bincount(group, minlength=len(plans))
        n_blocks = -(-sizes // rows)                       # blocks per plan
        first = np.concatenate([[0], np.cumsum(n_blocks)[:-1]])
        order = np.argsort(group, kind="stable")
        starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
        rank = np.arange(n) - starts[group[order]]         # position within its plan
        block = first[group[order]] + rank // rows
        row = rank % rows
        plan_of_block = np.repeat(np.arange(len(plans)), n_blocks)
        y = np.empty((n, p0.weights.shape[1]))
        sorted_mono = mono[order]
        # the blocks in batches of LATTICE_BATCH: bounded temporaries; the samples of a
        # batch are contiguous in ``order`` (blocks follow the plans' order)
        edges = np.searchsorted(block, np.arange(0, plan_of_block.size + LATTICE_BATCH,
                                                 LATTICE_BATCH))
        for k, (lo, hi) in enumerate(zip(edges[:-1], edges[1:])):
            if lo == hi:
                continue
            b0 = k * LATTICE_BATCH
            blocks = plan_of_block[b0:b0 + LATTICE_BATCH]
            mono_b = np.zeros((blocks.size, rows, mono.shape[1]))
            mono_b[block[lo:hi] - b0, row[lo:hi]] = sorted_mono[lo:hi]
            w = np.stack([plans[g].weights for g in blocks])
            y[lo:hi] = np.matmul(mono_b, w)[block[lo:hi] - b0, row[lo:hi]]
        y = y.reshape(n, 2, n_poly, n_f)
        power = np.multiply(y[:, 0], y[:, 0])
        power += y[:, 1] * y[:, 1]
        out = np.empty((n, n_f))
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            out[order] = power[:, num] / power[:, den]
        return out

    def _monomials(self, dG: np.ndarray, dC: np.ndarray) -> np.ndarray:
        """Per-sample monomials ``(n_samples, n_mono)`` in the order of :attr:`monomials`."""
        out = np.ones((dG.shape[0], 1))
        dCs = dC * self.s0                   # s/s0 · (s0·ΔC): both factors of order one
        for j, opts in enumerate(self._options):
            out = np.concatenate([out if o == 0 else out * (dG if o == 1 else dCs)[:, j, None]
                                  for o in opts], axis=1)
        return out

    def _expansions(self, s, dG, dC, plan=None):
        """Yield ``(lo, hi, re, im)``: the polynomials of ``plan`` (default: the
        determinant and all numerators, :attr:`all_polys`) of samples
        ``lo … hi−1`` as real and imaginary parts, each ``(hi−lo, n_poly, n_f)``.

        One real matrix product per block of samples, zero-padded to the plan's
        fixed height, with BLAS single-threaded: every call has the same shapes,
        so a sample's values do not depend on which other samples share its block
        (chunking-independent, bit for bit).
        """
        plan = self._plan(s) if plan is None else plan
        n = dG.shape[0]
        rows = plan.rows
        n_poly = len(plan.polys)
        mono = np.empty((rows, plan.weights.shape[0]))
        with single_threaded_blas():
            for lo in range(0, n, rows):
                hi = min(n, lo + rows)
                mono[hi - lo:] = 0.0
                mono[:hi - lo] = self._monomials(dG[lo:hi], dC[lo:hi])
                out = (mono @ plan.weights)[:hi - lo].reshape(hi - lo, 2, n_poly, s.size)
                yield lo, hi, out[:, 0], out[:, 1]

    def on_grid(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray) -> BatchGains:
        """Gains of every sample at every ``s`` [rad/s]; arrays ``(n_samples, n_f)``."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        n = dG.shape[0]
        plan = self._plan(s)
        H = np.empty((n, len(plan.polys), s.size), dtype=complex)
        for lo, hi, re, im in self._expansions(s, dG, dC, plan):
            poly = re + 1j * im
            with np.errstate(divide="ignore", invalid="ignore"):
                H[lo:hi] = poly / poly[:, :1]
        row = {p: i for i, p in enumerate(plan.polys)}

        def gain(name):
            p = _POLYS.index(name)
            return H[:, row[self.poly_alias.get(p, p)]].copy()
        bal = self.balanced
        return BatchGains(adm=gain("adm") if bal else None, adm_se=gain("adm_se"),
                          acm_se=gain("acm_se"), acm_dm=gain("acm_dm") if bal else None,
                          a_se=gain("a_se"), a_vpos=gain("a_vpos"), a_vneg=gain("a_vneg"))

    def db_on_grid(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray, ref,
                   names=("cmrr_se_db",), plan=None) -> dict:
        """Curves [dB] of every sample at every ``s`` [rad/s].

        Parameters
        ----------
        s : ndarray (n_f,)
            Complex frequencies [rad/s].
        dG, dC : ndarray (n_samples, rank)
            From :meth:`deltas`.
        ref : ndarray (n_samples,) or dict of str → ndarray (n_samples,)
            Each sample's |A_dm(0)|: a common-mode gain below 1e-12 of it is zero
            to rounding (DESIGN.md §2): its CMRR +inf, its own dB value −inf. A
            dict gives each curve its own reference (missing names: ``ref[None]``);
            a PSRR's is |A_se(0)| (A_dm,se or A_total, DESIGN.md §7f): a rail gain
            below 1e-12 of it makes the PSRR +inf.
        names : sequence of str
            From :data:`CURVES`.
        plan : optional
            From :meth:`lattice_plan` (its frequencies must be ``s``).

        Returns
        -------
        dict of str → ndarray (n_samples, n_f)
            NaN where the sample is singular.
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        names = tuple(names)
        polys = self._polys_of(names)
        if plan is None:
            plan = self._plan(s, polys)
        elif not set(polys) <= set(plan.polys):
            raise ValueError(f"plan lacks polynomials for {names}")
        row = {p: i for i, p in enumerate(plan.polys)}
        n = dG.shape[0]
        out = {name: np.empty((n, s.size)) for name in names}
        refs = ref if isinstance(ref, dict) else {None: ref}
        tinies: dict = {}                          # one floor per distinct reference
        for name in names:
            r = refs.get(name, refs.get(None))
            if r is None:
                raise ValueError(f"no zero-to-rounding reference for {name}")
            tinies.setdefault(id(r), (ZERO_GAIN_RATIO * np.asarray(r, dtype=float)) ** 2)
        which = {name: id(refs.get(name, refs.get(None))) for name in names}
        power = tmp = floors = zero = None
        for lo, hi, re, im in self._expansions(s, dG, dC, plan):
            if power is None or power.shape != re.shape:       # buffers, reused per block
                power, tmp = np.empty(re.shape), np.empty(re.shape)
                floors = {k: np.empty(re.shape[::2]) for k in tinies}
                zero = np.empty(re.shape[::2], dtype=bool)
            np.multiply(re, re, out=power)         # |polynomial|², (rows, n_poly, n_f)
            np.multiply(im, im, out=tmp)
            power += tmp
            det = power[:, row[0]]
            for k, tiny in tinies.items():
                np.multiply(tiny[lo:hi, None], det, out=floors[k])
            with np.errstate(invalid="ignore"):
                singular = not (det.min() > 0 and det.max() < np.inf)
            for name in names:
                num, den, test = self._curve_polys[name]
                floor = floors[which[name]]
                val = out[name][lo:hi]
                pn, pd = power[:, row[num]], power[:, row[den]]
                with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                    np.divide(pn, pd, out=val)
                    np.log10(val, out=val)
                val *= 10.0
                np.less_equal(pd if test == "den" else pn, floor, out=zero)
                if zero.any():
                    val[zero] = np.inf if test == "den" else -np.inf
                if singular:
                    val[~(np.isfinite(det) & (det > 0))] = np.nan
        return out

    def cmrr_on_grid(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray,
                     ref: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Single-ended and balanced CMRR [dB] of every sample at every ``s`` [rad/s]
        (:meth:`db_on_grid`); the balanced one is None without a balanced output."""
        names = ("cmrr_se_db", "cmrr_db") if self.balanced else ("cmrr_se_db",)
        out = self.db_on_grid(s, dG, dC, ref, names)
        return out["cmrr_se_db"], out.get("cmrr_db")

    # ------------------------------------------------------------ one s per sample
    def paired(self, s: np.ndarray, dG: np.ndarray, dC: np.ndarray) -> BatchGains:
        """Gains of sample i at its own ``s[i]`` [rad/s]; arrays ``(n_samples,)``.

        Each sample's own network ``G + s·C`` is solved directly (LU), one point at
        a time in a batch, so results never depend on how many points a chunk holds.
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        H = np.zeros((s.size, self.n_out, len(DRIVES)), dtype=complex)
        for lo in range(0, s.size, SOLVE_BLOCK):          # bounds the n × n matrices held
            sl = slice(lo, lo + SOLVE_BLOCK)
            sb = s[sl]
            D = dG[sl] + sb[:, None] * dC[sl]
            A = np.multiply(sb[:, None, None], self._C[None])
            A += self._G
            for j, entries in enumerate(self._stamp_entries):
                for p, q, w in entries:
                    A[:, p, q] += w * D[:, j]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                try:
                    x = np.linalg.solve(A, np.broadcast_to(self._rhs, (sb.size,) + self._rhs.shape))
                except np.linalg.LinAlgError:     # a singular sample: reported by the caller
                    x = np.full((sb.size,) + self._rhs.shape, np.nan, dtype=complex)
            for p, terms in enumerate(self._row_entries):
                for k, w in terms:
                    H[sl, p] += w * x[:, k]
        return self._gains(H)


@dataclass(frozen=True)
class _GridPlan:
    """Per-frequency weights of the grid expansion (see the module notes).

    ``weights`` is real, ``(n_mono, 2·n_poly·n_f)``: columns are (real part,
    imaginary part) × polynomial × frequency; ``rows`` the fixed block height;
    ``polys`` the indices (into :data:`_POLYS`) of the polynomials it holds.
    """

    weights: np.ndarray
    rows: int
    polys: tuple

    @property
    def n_f(self) -> int:
        return self.weights.shape[1] // (2 * len(self.polys))

    @classmethod
    def build(cls, ev: BatchEvaluator, s: np.ndarray, polys=None, rows=None) -> "_GridPlan":
        polys = ev.all_polys if polys is None else tuple(polys)
        n_f = s.size
        w = cls._weights(ev, s, ev.solver.response(s), polys)   # (n_mono, n_poly, n_f)
        weights = np.ascontiguousarray(
            np.stack([w.real, w.imag], axis=1).reshape(len(ev.monomials), -1))
        if rows is None:
            rows = int(min(256, max(8, GEMM_ELEMENTS // max(n_f, 1))))
        return cls(weights, int(rows), polys)

    @classmethod
    def build_lattices(cls, ev: BatchEvaluator, s: np.ndarray, polys, rows) -> list:
        """One plan per row of ``s`` ``(n_plans, n_f)``, all computed together.

        The nominal responses come from one batched direct solve of every
        frequency (``FrequencySolver.response_direct``: one LU per frequency, as
        :meth:`build` gets for a few frequencies) and every minor from one
        determinant call per size: each value is computed from its own frequency
        alone, so a plan is the same bits whichever plans are built with it.
        """
        n_plans, n_f = s.shape
        flat = s.ravel()
        try:
            H = ev.solver.response_direct(flat)
        except np.linalg.LinAlgError:               # a singular point: plan by plan
            H = np.concatenate([ev.solver.response(row) for row in s])
        w = cls._weights(ev, flat, H, tuple(polys))
        n_mono = len(ev.monomials)
        out = []
        for k in range(n_plans):
            wk = w[:, :, k * n_f:(k + 1) * n_f]
            out.append(cls(np.ascontiguousarray(np.stack([wk.real, wk.imag], axis=1)
                                                .reshape(n_mono, -1)), int(rows), tuple(polys)))
        return out

    @staticmethod
    def _weights(ev: BatchEvaluator, s: np.ndarray, H: np.ndarray, polys: tuple) -> np.ndarray:
        """Monomial weights ``(n_mono, n_poly, n_f)`` from the nominal responses ``H``."""
        r, n_f = ev.rank, s.size
        n_o, n_e = ev.n_out, len(DRIVES)     # K's rows and columns follow the outputs, drives
        subsets = list(itertools.product((False, True), repeat=r))
        minors = {sub: np.empty((len(polys), n_f), dtype=complex) for sub in subsets}
        # one determinant call per matrix size: every (subset, polynomial) minor of that size
        by_size: dict[int, list] = {}
        for sub in subsets:
            idx_r = [n_o + k for k in range(r) if sub[k]]
            idx_c = [n_e + k for k in range(r) if sub[k]]
            for i, p in enumerate(polys):
                if p == 0:
                    rows_, cols_ = idx_r, idx_c
                else:
                    a, b = ev._pairs[p]          # (output row, drive column)
                    rows_, cols_ = idx_r + [a], idx_c + [b]
                if not rows_:
                    minors[sub][i] = 1.0
                else:
                    by_size.setdefault(len(rows_), []).append((sub, i, rows_, cols_))
        for size, items in by_size.items():
            R = np.array([it[2] for it in items])              # (n_items, size)
            C = np.array([it[3] for it in items])
            M = H[:, R[:, :, None], C[:, None, :]]              # (n_f, n_items, size, size)
            dets = M[..., 0, 0] if size == 1 else np.linalg.det(M)
            for k, (sub, i, _, _) in enumerate(items):
                minors[sub][i] = dets[:, k]
        sp = s / ev.s0
        w = np.empty((len(ev.monomials), len(polys), n_f), dtype=complex)
        for m, mono in enumerate(ev.monomials):
            subset = tuple(o > 0 for o in mono)
            w[m] = minors[subset] * sp ** sum(o == 2 for o in mono)
        return w
