"""A generic linear small-signal network: stamps → G and C, solved on many s at once.

Modified nodal analysis: unknowns are node voltages and the branch currents
of the ideal voltage sources that drive the inputs. The system is

    (G + s·C) · x = B · u,        y = L · x

with ``u`` the input-source voltages and ``y`` the chosen outputs.

Array layout (used everywhere in freqpair): frequency first. A transfer
matrix over ``n_f`` frequencies is ``(n_f, n_out, n_in)``.

Solving uses one QZ (generalized Schur) reduction of the pencil, after
which each frequency costs an O(n²) triangular back-substitution,
vectorised over all frequencies. Poles and zeros come from generalized
eigenvalues of the (frequency-scaled) descriptor pencil.
"""
from __future__ import annotations

import cmath
import math
import threading
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from freqpair.circuit.blas_threads import single_blas_thread
from freqpair.design.errors import NetworkError

__all__ = ["Network", "FrequencySolver", "GROUND"]

GROUND = "gnd"

#: Up to this many frequencies, :meth:`FrequencySolver.response` solves each
#: point directly (batched LU): below ≈ 40 points that is cheaper than the QZ
#: set-up and back-substitution sweep (measured, 11 unknowns), and at least as
#: accurate.
DIRECT_MAX_POINTS = 32

#: A sweep is solved in blocks of at most this many frequencies, each reusing
#: per-thread buffers that stay in cache (measured in benchmarks/bench_core.py).
SWEEP_BLOCK = 1024


class Network:
    """Nodes and elements of a linear small-signal circuit.

    Elements are stamped as they are added; :meth:`matrices` returns the
    cached ``(G, C, B)`` and any later change clears that cache.
    """

    def __init__(self):
        self._nodes: dict[str, int] = {}
        self._g: list[tuple[int, int, float]] = []
        self._c: list[tuple[int, int, float]] = []
        self._vccs: list[tuple[int, int, int, int, float]] = []
        self._sources: list[tuple[str, int, int]] = []
        self.elements: list[tuple[str, str, tuple[str, ...], float]] = []
        self._cache = None

    # ------------------------------------------------------------ nodes
    def node(self, name: str) -> int:
        """Index of node ``name`` (created on first use); ground is -1."""
        if name == GROUND:
            return -1
        if name not in self._nodes:
            self._nodes[name] = len(self._nodes)
            self._cache = None
        return self._nodes[name]

    @property
    def node_names(self) -> list[str]:
        """Node names in matrix order (ground excluded)."""
        return list(self._nodes)

    @property
    def input_names(self) -> list[str]:
        """Names of the input voltage sources, in column order of B."""
        return [name for name, _, _ in self._sources]

    @property
    def size(self) -> int:
        """Number of unknowns (nodes + source branch currents)."""
        return len(self._nodes) + len(self._sources)

    # ------------------------------------------------------------ stamps
    def conductance(self, a: str, b: str, siemens: float, label: str = "") -> None:
        """Conductance [S] between nodes a and b (0 is allowed: absent)."""
        if not math.isfinite(siemens) or siemens < 0:
            raise NetworkError(f"{label or 'conductance'}: {siemens!r} S is not a finite "
                               "value ≥ 0")
        if siemens == 0:
            return
        self._g.append((self.node(a), self.node(b), siemens))
        self.elements.append(("G", label, (a, b), siemens))
        self._cache = None

    def resistor(self, a: str, b: str, ohms: float, label: str = "") -> None:
        """Resistor [Ω]; infinite means open. A zero resistor must be merged by the caller."""
        if ohms == math.inf:
            return
        if not ohms > 0:
            raise NetworkError(f"{label or 'resistor'}: {ohms!r} Ω is not a positive value "
                               "(merge the nodes instead)")
        self.conductance(a, b, 1.0 / ohms, label)

    def capacitor(self, a: str, b: str, farads: float, label: str = "") -> None:
        """Capacitor [F] between nodes a and b (0 means absent)."""
        if not math.isfinite(farads) or farads < 0:
            raise NetworkError(f"{label or 'capacitor'}: {farads!r} F is not a finite value ≥ 0")
        if farads == 0:
            return
        self._c.append((self.node(a), self.node(b), farads))
        self.elements.append(("C", label, (a, b), farads))
        self._cache = None

    def vccs(self, out_from: str, out_to: str, ctrl_p: str, ctrl_n: str, gm: float,
             label: str = "") -> None:
        """Current g_m·(v(ctrl_p) − v(ctrl_n)) flowing from node ``out_from`` through
        the source into node ``out_to`` (e.g. collector → emitter)."""
        if not math.isfinite(gm):
            raise NetworkError(f"{label or 'vccs'}: g_m = {gm!r} is not finite")
        if gm == 0:
            return
        self._vccs.append((self.node(out_from), self.node(out_to), self.node(ctrl_p),
                           self.node(ctrl_n), gm))
        self.elements.append(("VCCS", label, (out_from, out_to, ctrl_p, ctrl_n), gm))
        self._cache = None

    def voltage_input(self, name: str, pos: str, neg: str = GROUND) -> None:
        """An ideal input voltage source between ``pos`` and ``neg``."""
        if name in self.input_names:
            raise NetworkError(f"input {name!r} defined twice")
        self._sources.append((name, self.node(pos), self.node(neg)))
        self._cache = None

    # ------------------------------------------------------------ matrices
    def matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(G, C, B)``: conductance, capacitance and input matrices (cached)."""
        if self._cache is None:
            self._cache = self._build()
        return self._cache

    def _build(self):
        n_nodes = len(self._nodes)
        n = n_nodes + len(self._sources)
        G = np.zeros((n, n))
        C = np.zeros((n, n))
        B = np.zeros((n, len(self._sources)))

        def two_terminal(M, a, b, v):
            if a >= 0:
                M[a, a] += v
            if b >= 0:
                M[b, b] += v
            if a >= 0 and b >= 0:
                M[a, b] -= v
                M[b, a] -= v

        for a, b, v in self._g:
            two_terminal(G, a, b, v)
        for a, b, v in self._c:
            two_terminal(C, a, b, v)
        for o1, o2, cp, cn, gm in self._vccs:
            for row, sign_r in ((o1, 1.0), (o2, -1.0)):
                if row < 0:
                    continue
                if cp >= 0:
                    G[row, cp] += sign_r * gm
                if cn >= 0:
                    G[row, cn] -= sign_r * gm
        for k, (_, p, m) in enumerate(self._sources):
            row = n_nodes + k
            if p >= 0:
                G[p, row] += 1.0
                G[row, p] += 1.0
            if m >= 0:
                G[m, row] -= 1.0
                G[row, m] -= 1.0
            B[row, k] = 1.0
        self._check_connected(G, C)
        return G, C, B

    def _check_connected(self, G, C):
        """Every node must reach ground through elements; else a named error."""
        n_nodes = len(self._nodes)
        names = self.node_names
        # graph over nodes + ground (index n_nodes); sources connect their terminals
        adj = [set() for _ in range(n_nodes + 1)]

        def link(a, b):
            a = n_nodes if a < 0 else a
            b = n_nodes if b < 0 else b
            adj[a].add(b)
            adj[b].add(a)

        for a, b, _ in self._g:
            link(a, b)
        for a, b, _ in self._c:
            link(a, b)
        for o1, o2, cp, cn, _ in self._vccs:
            link(o1, o2)
        for _, p, m in self._sources:
            link(p, m)
        seen = {n_nodes}
        stack = [n_nodes]
        while stack:
            for nb in adj[stack.pop()]:
                if nb not in seen:
                    seen.add(nb)
                    stack.append(nb)
        floating = [names[i] for i in range(n_nodes) if i not in seen]
        if floating:
            raise NetworkError(f"node {floating[0]!r} is floating (no element connects it "
                               "to the rest of the circuit)")

    # ------------------------------------------------------------ outputs
    def selector(self, combo: dict[str, float]) -> np.ndarray:
        """Row vector picking a linear combination of node voltages,
        e.g. ``{"o1": 1, "o2": -1}`` for a balanced output."""
        row = np.zeros(self.size)
        for name, weight in combo.items():
            if name not in self._nodes:
                raise NetworkError(f"output node {name!r} does not exist")
            row[self._nodes[name]] += weight
        return row

    def solver(self, outputs: np.ndarray) -> "FrequencySolver":
        """A :class:`FrequencySolver` for the outputs given as rows of ``outputs``."""
        G, C, B = self.matrices()
        solver = FrequencySolver(G, C, B, np.atleast_2d(outputs))
        solver.names = self.node_names + [f"i({n})" for n in self.input_names]
        return solver


@dataclass(frozen=True)
class _Reduced:
    """The pencil after one QZ reduction, with what every sweep reuses.

    ``rows[i]`` interleaves row i of AA and BB right of the diagonal,
    ``[AA[i,i+1], BB[i,i+1], AA[i,i+2], …]``, so that one product with the
    stacked unknowns ``[y_j, sp·y_j]`` (j > i) gives Σ_j (AA_ij + sp·BB_ij)·y_j.
    """

    AA: np.ndarray
    BB: np.ndarray
    Bt: np.ndarray
    Lt: np.ndarray
    s0: float
    Qh: np.ndarray
    Z: np.ndarray
    diag_a: np.ndarray
    diag_b: np.ndarray
    norm_a: float
    norm_b: float
    rows: tuple


_buffers = threading.local()


def _sweep_workspace(n: int, m: int, p: int, n_f: int) -> dict:
    """Work buffers for one sweep block, kept per thread and reused across solvers
    of the same size: freshly allocated blocks this large (hundreds of kB) cost
    page faults on every call. One set per thread, at most ``SWEEP_BLOCK`` wide."""
    key = (n, m, p, n_f)
    ws = getattr(_buffers, "ws", None)
    if ws is None or ws["key"] != key:
        ws = {"key": key,
              "work": np.empty((n, 2, m, n_f), dtype=complex),
              "acc": np.empty(m * n_f, dtype=complex),
              "x": np.empty((n, m * n_f), dtype=complex),
              "gx": np.empty((n, m * n_f), dtype=complex),
              "cx": np.empty((n, m * n_f), dtype=complex),
              "rhs": np.empty((n, m * n_f), dtype=complex),
              "out": np.empty((p, m * n_f), dtype=complex),
              "out2": np.empty((p, m * n_f), dtype=complex)}
        _buffers.ws = ws
    return ws


def _times(M: np.ndarray, x: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``M @ x`` into ``out`` for a complex C-contiguous ``x``; a real ``M`` multiplies
    x seen as interleaved real numbers (one real GEMM, half a complex one's work)."""
    if np.iscomplexobj(M):
        return np.matmul(M, x, out=out)
    np.matmul(M, x.view(float), out=out.view(float))
    return out


class FrequencySolver:
    """Evaluates ``H(s) = L (G + sC)^-1 B`` on many frequencies at once.

    Parameters
    ----------
    G, C : ndarray, shape (n, n)
        Conductance and capacitance matrices.
    B : ndarray, shape (n, m)
        Input matrix.
    L : ndarray, shape (p, n)
        Output matrix.

    Notes
    -----
    The pencil is frequency-scaled by ``s0 = ‖G‖/‖C‖`` and reduced once to
    generalized Schur form ``G = Q·AA·Zᴴ``, ``s0⁻¹·C``-scaled likewise;
    each frequency is then an upper-triangular solve, vectorised over all
    frequencies (n Python steps, not n_f), followed by one step of iterative
    refinement against the original ``G + sC``. Every method runs BLAS on one
    thread (:func:`freqpair.circuit.blas_threads.single_blas_thread`).
    """

    def __init__(self, G, C, B, L):
        self.G, self.C, self.B, self.L = G, C, B, L
        self.n = G.shape[0]
        self._red: _Reduced | None = None
        #: names of the unknowns (set by :meth:`Network.solver`), for messages
        self.names: list[str] | None = None

    def with_inputs(self, columns) -> "FrequencySolver":
        """The same network for a subset of the inputs (columns of B), sharing this
        solver's QZ reduction: a sweep then solves only those right-hand sides."""
        import dataclasses
        cols = list(columns)
        sub = FrequencySolver(self.G, self.C, self.B[:, cols], self.L)
        sub.names = self.names
        sub._s0 = self.s0
        red = self._reduce()
        sub._red = dataclasses.replace(red, Bt=red.Bt[:, cols])
        return sub

    @property
    def s0(self) -> float:
        """Frequency scale [rad/s] used to balance the pencil (computed once)."""
        s0 = self.__dict__.get("_s0")
        if s0 is None:
            nc = np.linalg.norm(self.C, 1)
            s0 = float(np.linalg.norm(self.G, 1) / nc) if nc > 0 else 1.0
            self._s0 = s0
        return s0

    def _reduce(self) -> _Reduced:
        if self._red is None:
            s0 = self.s0
            AA, BB, Q, Z = sla.qz(self.G, self.C * s0, output="complex")
            diag_a = np.diag(AA).copy()
            diag_b = np.diag(BB).copy()
            scale = max(np.abs(AA).max(), np.abs(BB).max(), 1e-300)
            if np.any((np.abs(diag_a) <= 1e-14 * scale) & (np.abs(diag_b) <= 1e-14 * scale)):
                raise NetworkError("the network is singular at every frequency "
                                   "(a node has no defined voltage)")
            rows = []
            for i in range(self.n):
                row = np.empty(2 * (self.n - i - 1), dtype=complex)
                row[0::2] = AA[i, i + 1:]
                row[1::2] = BB[i, i + 1:]
                rows.append(row)
            Qh = np.ascontiguousarray(Q.conj().T)
            self._red = _Reduced(AA, BB, Qh @ self.B, self.L @ Z, s0, Qh, Z, diag_a, diag_b,
                                 float(np.abs(AA).max()), float(np.abs(BB).max()), tuple(rows))
        return self._red

    @single_blas_thread()
    def dc(self) -> np.ndarray:
        """``H(0) = L G⁻¹ B`` by a direct solve, shape (p, m)."""
        try:
            with warnings.catch_warnings():   # singular G is reported below, by name
                warnings.simplefilter("ignore", sla.LinAlgWarning)
                lu = sla.lu_factor(self.G, check_finite=True)
        except (ValueError, np.linalg.LinAlgError) as exc:
            raise NetworkError(f"cannot solve the network at DC ({exc})") from None
        if np.any(np.abs(np.diag(lu[0])) <= 1e-14 * np.abs(self.G).max()):
            raise NetworkError("the network has no DC solution: "
                               f"{self._floating_at_dc()} has no DC path (e.g. a node "
                               "connected only through capacitors, or an infinite r_o "
                               "from lambda = 0 as its only load)")
        # np.linalg.solve, not lu_solve: the same LU, but scipy's lu_solve was measured
        # at 5–9 ms (vs 0.03 ms) for an 11-node G when BLAS threads compete for cores
        return self.L @ np.linalg.solve(self.G, self.B)

    @single_blas_thread()
    def response(self, s: np.ndarray, refine: bool = True) -> np.ndarray:
        """Transfer matrix at complex frequencies ``s`` [rad/s].

        Parameters
        ----------
        s : array_like of complex, shape (n_f,)
        refine : bool
            One step of iterative refinement after the QZ solve (default). A
            bracketing scan, whose values only have to fall on the right side of
            a level, may skip it (half the work; accurate to ≈ 1e-6 of the
            response's scale instead of LU's accuracy).

        Returns
        -------
        ndarray of complex, shape (n_f, p, m)
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        if s.size <= DIRECT_MAX_POINTS:
            return self._response_few(s)
        red = self._reduce()
        sp = s / red.s0
        pivots = red.diag_a[:, None] + red.diag_b[:, None] * sp[None, :]       # (n, n_f)
        # singular to working precision where a pivot vanishes against the pencil
        # (e.g. s = 0 with a node reached only through capacitors)
        small = np.abs(pivots) <= 1e-14 * (red.norm_a + np.abs(sp) * red.norm_b)
        if small.any():
            bad = s[small.any(axis=0)][0]
            raise NetworkError(f"the network is singular at f = {bad.imag / 2 / np.pi:.6g} Hz")
        inv_diag = 1.0 / pivots
        out = np.empty((s.size, self.L.shape[0], self.B.shape[1]), dtype=complex)
        with np.errstate(over="ignore", invalid="ignore"):   # non-finite → error below
            for lo in range(0, s.size, SWEEP_BLOCK):
                hi = min(lo + SWEEP_BLOCK, s.size)
                self._sweep_block(red, s[lo:hi], sp[lo:hi], inv_diag[:, lo:hi], out[lo:hi],
                                  refine)
        if not np.all(np.isfinite(out)):
            bad = s[~np.all(np.isfinite(out), axis=(1, 2))][0]
            raise NetworkError(f"the network is singular at f = {bad.imag / 2 / np.pi:.6g} Hz")
        return out

    def _workspace(self, n_f: int) -> dict:
        """Buffers for one block of ``n_f`` frequencies (see :func:`_sweep_workspace`)."""
        return _sweep_workspace(self.n, self.B.shape[1], self.L.shape[0], n_f)

    def _sweep_block(self, red: _Reduced, s, sp, inv_diag, out, refine: bool = True) -> None:
        """One block of frequencies into ``out`` (n_f, p, m): QZ solve + one refinement."""
        n, m, n_f = self.n, self.B.shape[1], s.size
        ws = self._workspace(n_f)
        work = ws["work"]
        # internal layout: unknown first, (n, m, n_f), so that every product with a
        # matrix of the pencil is one BLAS call on an (n, m·n_f) block; y_i sits in
        # work[i, 0] and is read in place as the 2-D strided view work2[:, :m·n_f]
        work2 = work.reshape(n, 2 * m * n_f)
        self._back_substitute(red, sp, inv_diag, red.Bt[:, :, None], work, ws["acc"])
        if not refine:
            res = np.matmul(red.Lt, work2[:, :m * n_f], out=ws["out"])
            out[...] = res.reshape(-1, m, n_f).transpose(2, 0, 1)
            return
        x = np.matmul(red.Z, work2[:, :m * n_f], out=ws["x"])
        # one step of iterative refinement against the original G + sC: the QZ
        # solve is accurate relative to the whole pencil, and a response far below
        # the network's largest gains (deep in the stop band, or a common-mode
        # gain) lost up to 1e-4 relative without it; with it, it matches LU.
        # G and C are real: multiply them with the complex x seen as interleaved
        # real numbers (one real GEMM each, half the work of a complex one)
        gx = _times(self.G, x, ws["gx"])
        cx = _times(self.C, x, ws["cx"])
        cx3 = cx.reshape(n, m, n_f)
        cx3 *= s
        gx += cx
        gx3 = gx.reshape(n, m, n_f)
        np.subtract(self.B[:, :, None], gx3, out=gx3)          # residual B − (G + sC)x
        rhs = np.matmul(red.Qh, gx, out=ws["rhs"])
        self._back_substitute(red, sp, inv_diag, rhs.reshape(n, m, n_f), work, ws["acc"])
        res = _times(self.L, x, ws["out"])
        res += np.matmul(red.Lt, work2[:, :m * n_f], out=ws["out2"])
        out[...] = res.reshape(-1, m, n_f).transpose(2, 0, 1)

    def _floating_at_dc(self) -> str:
        """Name of the unknown that dominates the null vector of G (for messages)."""
        _, _, vh = np.linalg.svd(self.G)
        k = int(np.argmax(np.abs(vh[-1])))
        if self.names is not None and k < len(self.names):
            return f"node {self.names[k]!r}"
        return f"unknown {k}"

    @staticmethod
    def _back_substitute(red: _Reduced, sp: np.ndarray, inv_diag: np.ndarray,
                         rhs: np.ndarray, work: np.ndarray, acc: np.ndarray) -> None:
        """Solve (AA + sp·BB)·y = rhs for every frequency: n vectorised steps.

        ``rhs`` is (n, m, n_f) or (n, m, 1); ``work`` an (n, 2, m, n_f) buffer that
        receives ``[y_i, sp·y_i]`` per unknown (y in ``work[:, 0]``); ``acc`` an
        (m·n_f,) buffer. ``rhs`` must not share memory with ``work``.
        """
        n, _, m, n_f = work.shape
        stacked = work.reshape(2 * n, m * n_f)
        acc2 = acc.reshape(m, n_f)
        for i in range(n - 1, -1, -1):
            y_i = work[i, 0]
            if i < n - 1:
                np.matmul(red.rows[i], stacked[2 * i + 2:], out=acc)
                np.subtract(rhs[i], acc2, out=acc2)
                np.multiply(acc2, inv_diag[i], out=y_i)
            else:
                np.multiply(rhs[i], inv_diag[i], out=y_i)
            if i:
                np.multiply(y_i, sp, out=work[i, 1])

    def _response_few(self, s: np.ndarray) -> np.ndarray:
        """A few frequencies (root-finding steps, short lists): a batched direct LU
        is cheaper than setting up the back-substitution sweep, and at least as
        accurate."""
        try:
            out = self.response_direct(s)
        except np.linalg.LinAlgError:        # one singular point fails the whole stack
            out = np.full((s.size, self.L.shape[0], self.B.shape[1]), np.nan, dtype=complex)
            for k in range(s.size):
                try:
                    out[k] = self.response_direct(s[k:k + 1])[0]
                except np.linalg.LinAlgError:
                    break
        if not np.all(np.isfinite(out)):
            bad = s[~np.all(np.isfinite(out), axis=(1, 2))][0]
            raise NetworkError(f"the network is singular at f = {bad.imag / 2 / np.pi:.6g} Hz")
        return out

    def transfer_at(self, s: complex, b: np.ndarray, l: np.ndarray) -> np.ndarray:
        """``l·(G + sC)⁻¹·b`` at one complex frequency ``s`` [rad/s], by a direct solve.

        The lean path for root-finding steps (one LU of an n×n matrix by
        LAPACK's gesv, no sweep set-up, no other gains). A singular matrix (a zero
        pivot or non-finite values) is reported as a NetworkError.

        Parameters
        ----------
        s : complex
            Complex frequency [rad/s].
        b : ndarray, shape (n,) or (n, k)
            Right-hand side(s).
        l : ndarray, shape (n,) or (q, n)
            Output row(s).
        """
        gesv = self.__dict__.get("_gesv")
        if gesv is None:                       # LAPACK's complex solve, looked up once
            gesv = self._gesv = sla.lapack.get_lapack_funcs("gesv", (np.zeros(1, complex),))
            self._Gc = self.G.astype(complex)
        _, _, x, info = gesv(self._Gc + s * self.C, b)
        out = l @ x
        finite = cmath.isfinite(out) if out.ndim == 0 else np.isfinite(out).all()
        if info != 0 or not finite:      # info > 0: an exactly zero pivot
            raise NetworkError(f"the network is singular at f = {s.imag / 2 / np.pi:.6g} Hz")
        return out

    @single_blas_thread()
    def response_direct(self, s: np.ndarray) -> np.ndarray:
        """Reference: a batched dense solve of (G + sC) at each s (slower)."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        A = self.G[None, :, :] + s[:, None, None] * self.C[None, :, :]
        x = np.linalg.solve(A, np.broadcast_to(self.B, (s.size,) + self.B.shape))
        return self.L @ x

    # ------------------------------------------------------------ adjoint
    @single_blas_thread()
    def adjoint(self, s: np.ndarray, l: np.ndarray) -> np.ndarray:
        """Solutions y of the transposed system ``(G + sC)ᵀ·y = lᵀ`` at each ``s``.

        ``y[k]`` holds, for every unknown j, the transfer from a unit current
        injected at node j to the output ``l·x`` at ``s[k]``: one solve gives
        the transfer of every current source in the network (noise analysis).
        Uses the same QZ reduction as :meth:`response` (a forward substitution
        with the transposed triangular pencil, then one refinement step);
        a few frequencies are solved directly.

        Parameters
        ----------
        s : array_like of complex, shape (n_f,)
            Complex frequencies [rad/s].
        l : ndarray, shape (n,)
            The output row.

        Returns
        -------
        ndarray of complex, shape (n_f, n)
        """
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        l = np.asarray(l, dtype=float)
        if s.size <= DIRECT_MAX_POINTS:
            A = self.G.T[None, :, :] + s[:, None, None] * self.C.T[None, :, :]
            try:
                y = np.linalg.solve(A, np.broadcast_to(l[:, None], (s.size, self.n, 1)))[..., 0]
            except np.linalg.LinAlgError:
                raise NetworkError("the network is singular at one of the frequencies") \
                    from None
        else:
            red = self._reduce()
            sp = s / red.s0
            pivots = red.diag_a[:, None] + red.diag_b[:, None] * sp[None, :]
            y = self._adjoint_sweep(red, sp, pivots, l[:, None] * np.ones(s.size))
            # one refinement step against the original pencil
            res = l[:, None] - (self.G.T @ y + (self.C.T @ y) * s[None, :])
            y = y + self._adjoint_sweep(red, sp, pivots, res)
            y = y.T
        if not np.all(np.isfinite(y)):
            raise NetworkError("the network is singular at one of the frequencies")
        return y

    @staticmethod
    def _adjoint_sweep(red: _Reduced, sp, pivots, rhs) -> np.ndarray:
        """y with (G + sC)ᵀ y = rhs per column (rhs (n, n_f)), through the QZ form:
        G + sC = Q·(AA + sp·BB)·Zᴴ, so (AA + sp·BB)ᵀ·w = Zᵀ·rhs and y = conj(Q)·w."""
        n = red.AA.shape[0]
        r = red.Z.T @ rhs
        w = np.empty_like(r)
        AA, BB = red.AA, red.BB
        for i in range(n):
            acc = r[i]
            if i:
                acc = acc - AA[:i, i] @ w[:i] - (BB[:i, i] @ w[:i]) * sp
            w[i] = acc / pivots[i]
        return red.Qh.T @ w

    # ------------------------------------------------------------ poles / zeros
    @single_blas_thread()
    def poles(self) -> np.ndarray:
        """Finite natural frequencies of the network [rad/s] (all modes)."""
        return finite_generalized_eigenvalues(self.G, self.C, self.s0)

    @single_blas_thread()
    def zeros(self, b: np.ndarray, l: np.ndarray) -> np.ndarray:
        """Finite transmission zeros [rad/s] of the SISO response ``l·(G+sC)⁻¹·b``.

        Parameters
        ----------
        b : ndarray, shape (n,)
            Input vector (a combination of the columns of B).
        l : ndarray, shape (n,)
            Output row.
        """
        n = self.n
        Ga = np.zeros((n + 1, n + 1))
        Ca = np.zeros((n + 1, n + 1))
        Ga[:n, :n] = self.G
        Ga[:n, n] = b
        Ga[n, :n] = l
        Ca[:n, :n] = self.C
        return finite_generalized_eigenvalues(Ga, Ca, self.s0)


@single_blas_thread()
def finite_generalized_eigenvalues(G, C, s0: float, tol: float = 1e-12) -> np.ndarray:
    """Finite roots s of det(G + s·C) = 0 [rad/s].

    The pencil is scaled (C·s0) for conditioning; eigenvalues come in
    homogeneous form (α, β) and a pair counts as infinite when |β| ≤ tol·|α|
    (after normalising α, β to unit length).
    """
    w = sla.eig(G, -C * s0, left=False, right=False, homogeneous_eigvals=True)
    alpha, beta = w[0], w[1]
    norm = np.hypot(np.abs(alpha), np.abs(beta))
    ok = norm > 0
    alpha = np.where(ok, alpha / np.where(ok, norm, 1), 0)
    beta = np.where(ok, beta / np.where(ok, norm, 1), 0)
    finite = ok & (np.abs(beta) > tol * np.abs(alpha))
    lam = alpha[finite] / beta[finite]
    return np.sort_complex(lam * s0)


# ------------------------------------------------------------------ per-element stamps
# (additive: used by sensitivity analysis; the stamping above is unchanged)

def _element_slot(net: Network, index: int) -> tuple[str, int]:
    """Which stamp list holds element ``index`` of ``net.elements``, and where."""
    if not 0 <= index < len(net.elements):
        raise NetworkError(f"element index {index!r} is out of range "
                           f"(0 … {len(net.elements) - 1})")
    kind = net.elements[index][0]
    pos = sum(1 for e in net.elements[:index] if e[0] == kind)
    return {"G": "_g", "C": "_c", "VCCS": "_vccs"}[kind], pos


def element_stamp(net: Network, index: int) -> tuple[np.ndarray, np.ndarray]:
    """Derivatives ``(∂G/∂x, ∂C/∂x)`` of the network matrices with respect to the
    value x of element ``index`` (x in S for conductances and g_m, F for capacitors).

    Parameters
    ----------
    net : Network
    index : int
        Position in ``net.elements``.

    Returns
    -------
    dG, dC : ndarray, shape (n, n)
    """
    name, pos = _element_slot(net, index)
    n = net.size
    dG = np.zeros((n, n))
    dC = np.zeros((n, n))
    if name == "_vccs":
        o1, o2, cp, cn, _ = net._vccs[pos]
        for row, sign_r in ((o1, 1.0), (o2, -1.0)):
            if row < 0:
                continue
            if cp >= 0:
                dG[row, cp] += sign_r
            if cn >= 0:
                dG[row, cn] -= sign_r
        return dG, dC
    a, b, _ = getattr(net, name)[pos]
    M = dG if name == "_g" else dC
    if a >= 0:
        M[a, a] += 1.0
    if b >= 0:
        M[b, b] += 1.0
    if a >= 0 and b >= 0:
        M[a, b] -= 1.0
        M[b, a] -= 1.0
    return dG, dC


def with_element_scaled(net: Network, index: int, factor: float) -> Network:
    """A copy of ``net`` with the value of element ``index`` multiplied by ``factor``
    (e.g. for finite-difference checks and what-if studies)."""
    if not (math.isfinite(factor) and factor > 0):
        raise NetworkError(f"scale factor {factor!r} is not a positive finite number")
    name, pos = _element_slot(net, index)
    out = Network()
    out._nodes = dict(net._nodes)
    out._g = list(net._g)
    out._c = list(net._c)
    out._vccs = list(net._vccs)
    out._sources = list(net._sources)
    out.elements = list(net.elements)
    entries = getattr(out, name)
    entry = entries[pos]
    entries[pos] = entry[:-1] + (entry[-1] * factor,)
    kind, label, nodes, value = out.elements[index]
    out.elements[index] = (kind, label, nodes, value * factor)
    return out
