"""The generic network: clear errors for unsolvable networks, the matrix cache,
and the QZ solver against direct solves.

Oracles: hand-written nodal equations (Kirchhoff's current law) for small
networks; numpy.linalg.solve on the same G + sC; scipy.signal.freqs on the
first-order RC transfer function; mpmath (40-digit LU) deep in a stop band;
threadpoolctl's own report of the BLAS thread count.
"""
import math
import warnings

import numpy as np
import pytest
import scipy.signal

from freqpair.design.errors import NetworkError
from freqpair.circuit.network import GROUND, FrequencySolver, Network


def rc_divider(r=1e3, c=1e-9):
    net = Network()
    net.voltage_input("vin", "a")
    net.resistor("a", "b", r, "R")
    net.capacitor("b", GROUND, c, "C")
    return net


# ------------------------------------------------------------------ errors
def test_floating_node_is_a_named_network_error():
    # oracle: KCL — nodes x, y joined only to each other have no defined voltage
    net = rc_divider()
    net.resistor("x", "y", 1e3, "Rfloat")
    with pytest.raises(NetworkError, match="node 'x' is floating"):
        net.matrices()


def test_node_fed_only_by_a_current_source_is_network_error_not_linalg_error():
    # oracle: KCL — node x has no conductance of its own: G + sC is singular at every s
    net = rc_divider()
    net.vccs("x", GROUND, "b", GROUND, 1e-3, "gm")
    solver = net.solver(net.selector({"x": 1.0}))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(NetworkError, match="singular"):
            solver.response(np.array([1j, 10j]))
        with pytest.raises(NetworkError, match="no DC solution"):
            solver.dc()


def test_node_reached_only_through_capacitors_has_no_dc_solution():
    # oracle: KCL at s = 0 — a capacitor carries no current, node x is undefined at DC
    net = rc_divider()
    net.capacitor("b", "x", 1e-12)
    net.capacitor("x", GROUND, 1e-12)
    solver = net.solver(net.selector({"x": 1.0}))
    with pytest.raises(NetworkError, match="no DC solution"):
        solver.dc()
    # …but at s ≠ 0 it is a capacitive divider of v_b: 1/2 of v_b (KCL by hand)
    h = solver.response(np.array([2j * np.pi * 1e3]))[0, 0, 0]
    hb = 1 / (1 + 2j * np.pi * 1e3 * 1e3 * (1e-9 + 0.5e-12))
    assert h == pytest.approx(0.5 * hb, rel=1e-12)


def test_negative_or_nonfinite_elements_are_refused():
    # oracle: common practice — passive element values are finite and ≥ 0
    net = Network()
    with pytest.raises(NetworkError, match="R1"):
        net.resistor("a", GROUND, -1.0, "R1")
    with pytest.raises(NetworkError, match="C1"):
        net.capacitor("a", GROUND, math.nan, "C1")
    with pytest.raises(NetworkError, match="gm1"):
        net.vccs("a", GROUND, "b", GROUND, math.inf, "gm1")


def test_missing_output_node_is_named():
    # oracle: common practice — an unknown name is reported by name
    with pytest.raises(NetworkError, match="'zz'"):
        rc_divider().selector({"zz": 1.0})


# ------------------------------------------------------------------ cache
def test_adding_an_element_after_matrices_clears_the_cache():
    # oracle: KCL — after adding R2 = 1 kΩ from b to ground, G[b, b] = 1/R + 1/R2
    net = rc_divider()
    G1, _, _ = net.matrices()
    assert net.matrices()[0] is G1                      # cached while unchanged
    b = net.node_names.index("b")
    assert G1[b, b] == pytest.approx(1e-3, rel=1e-15)
    net.resistor("b", GROUND, 1e3, "R2")
    G2, _, _ = net.matrices()
    assert G2 is not G1
    assert G2[b, b] == pytest.approx(2e-3, rel=1e-15)
    net.capacitor("a", "b", 1e-12, "Cab")
    assert net.matrices()[1][b, b] == pytest.approx(1e-9 + 1e-12, rel=1e-15)


def test_new_node_after_matrices_grows_the_system():
    # oracle: modified nodal analysis — one unknown per node plus one per voltage source
    net = rc_divider()
    assert net.matrices()[0].shape == (3, 3)
    net.resistor("b", "c", 1e3)
    net.resistor("c", GROUND, 1e3)
    assert net.matrices()[0].shape == (4, 4)


# ------------------------------------------------------------------ solver
def test_rc_lowpass_matches_scipy_freqs():
    # oracle: scipy.signal.freqs on H(s) = 1/(1 + sRC)
    r, c = 1e3, 1e-9
    net = rc_divider(r, c)
    f = np.logspace(0, 9, 37)
    h = net.solver(net.selector({"b": 1.0})).response(2j * np.pi * f)[:, 0, 0]
    _, ref = scipy.signal.freqs([1.0], [r * c, 1.0], worN=2 * np.pi * f)
    np.testing.assert_allclose(h, ref, rtol=1e-12)


def test_qz_solver_agrees_with_batched_direct_solve_on_a_random_network():
    # oracle: numpy.linalg.solve on the same G + sC at every frequency
    rng = np.random.default_rng(7)
    n = 8
    net = Network()
    net.voltage_input("u", "n0")
    for k in range(n):
        net.resistor(f"n{k}", GROUND, float(rng.uniform(1e2, 1e5)))
        net.capacitor(f"n{k}", GROUND, float(rng.uniform(1e-13, 1e-10)))
        if k:
            net.resistor(f"n{k-1}", f"n{k}", float(rng.uniform(1e2, 1e4)))
            net.vccs(f"n{k}", GROUND, f"n{k-1}", GROUND, float(rng.uniform(1e-4, 1e-2)))
            net.capacitor(f"n{k-1}", f"n{k}", float(rng.uniform(1e-14, 1e-12)))
    solver = net.solver(np.array([net.selector({f"n{n-1}": 1.0}), net.selector({"n3": 1.0})]))
    s = 2j * np.pi * np.logspace(-3, 11, 200)
    G, C, B = net.matrices()
    L = solver.L
    ref = np.array([L @ np.linalg.solve(G + sk * C, B) for sk in s])
    np.testing.assert_allclose(solver.response(s), ref, rtol=1e-9, atol=0)


def test_dc_is_the_exact_solve_at_s_zero():
    # oracle: KCL at s = 0 — the capacitor is open, v_b = v_in
    net = rc_divider()
    assert net.solver(net.selector({"b": 1.0})).dc()[0, 0] == 1.0


def test_poles_and_zeros_of_a_known_network():
    # oracle: hand analysis — R1 from a to b, C1 b–gnd, R2 b–c, C2 c–gnd with
    # R1 = R2 = 1 k, C1 = C2 = 1 nF: det = s²R²C² + 3sRC + 1 → s = (−3 ± √5)/(2RC)
    net = Network()
    net.voltage_input("u", "a")
    net.resistor("a", "b", 1e3)
    net.capacitor("b", GROUND, 1e-9)
    net.resistor("b", "c", 1e3)
    net.capacitor("c", GROUND, 1e-9)
    solver = net.solver(net.selector({"c": 1.0}))
    tau = 1e3 * 1e-9
    want = np.sort(np.array([(-3 - math.sqrt(5)) / (2 * tau), (-3 + math.sqrt(5)) / (2 * tau)]))
    np.testing.assert_allclose(np.sort(solver.poles().real), want, rtol=1e-10)
    G, C, B = net.matrices()
    # v_c/v_u has no finite zeros; v_b/v_u has one at s = −1/(RC) (from KCL at c)
    assert solver.zeros(B[:, 0], net.selector({"c": 1.0})).size == 0
    z = solver.zeros(B[:, 0], net.selector({"b": 1.0}))
    np.testing.assert_allclose(z.real, [-1 / tau], rtol=1e-10)


def test_frequency_solver_accepts_plain_matrices():
    # oracle: scalar algebra — H = l·b/(g + s·c) for a 1×1 system
    solver = FrequencySolver(np.array([[2.0]]), np.array([[1e-3]]), np.array([[1.0]]),
                             np.array([[1.0]]))
    s = np.array([0.0, 1e3j])
    np.testing.assert_allclose(solver.response(s)[:, 0, 0], 1 / (2 + s * 1e-3), rtol=1e-13)


# ------------------------------------------------------------------ sweep accuracy and speed path
def _gain_ladder():
    """8 nodes: an RC ladder with a transconductance per rung (≈ 1e-19 of its DC gain
    at 100 GHz, so the sweep must resolve a response 20 decades below the largest)."""
    net = Network()
    net.voltage_input("u", "n0")
    for k in range(1, 8):
        net.resistor(f"n{k-1}", f"n{k}", 1e3 * (1 + 0.3 * k))
        net.capacitor(f"n{k}", GROUND, 1e-12 * (1 + 0.5 * k))
        net.capacitor(f"n{k-1}", f"n{k}", 1e-15 * k)
        net.vccs(f"n{k}", GROUND, f"n{k-1}", GROUND, 1e-3 * k)
        net.resistor(f"n{k}", GROUND, 1e4)
    return net


def test_sweep_is_accurate_deep_in_the_stop_band_of_an_8_node_network():
    # oracle: mpmath, a 40-digit LU solve of the same G + sC at each frequency.
    # (A plain QZ back-substitution, without the refinement step, was measured
    # 8e-7 and 0.18 relative off at the two highest frequencies here.)
    mpmath = pytest.importorskip("mpmath")
    from freqpair.circuit.network import DIRECT_MAX_POINTS
    net = _gain_ladder()
    G, C, B = net.matrices()
    out = net.selector({"n7": 1.0})
    f = np.logspace(3, 11, 33)
    assert f.size > DIRECT_MAX_POINTS          # the vectorised sweep, not direct LU
    h = net.solver(out).response(2j * np.pi * f)[:, 0, 0]
    mpmath.mp.dps = 40
    exact = []
    for fk in f:
        A = (mpmath.matrix(G.tolist())
             + mpmath.mpc(0, 2 * mpmath.pi * fk) * mpmath.matrix(C.tolist()))
        x = mpmath.lu_solve(A, mpmath.matrix(B[:, 0].tolist()))
        exact.append(complex(mpmath.fsum(out[i] * x[i] for i in range(len(out)))))
    exact = np.array(exact)
    assert abs(exact[-1]) < 1e-17 * abs(exact[0])   # really deep in the stop band
    np.testing.assert_allclose(h, exact, rtol=1e-9, atol=0)


def test_sweep_with_several_dense_inputs_and_outputs_matches_per_frequency_solves():
    # oracle: numpy.linalg.solve on the same G + sC at every frequency (right-hand
    # sides that are not source columns, as a perturbation update uses them)
    net = _gain_ladder()
    G, C, _ = net.matrices()
    rng = np.random.default_rng(3)
    B = rng.normal(size=(G.shape[0], 3))
    L = rng.normal(size=(4, G.shape[0]))
    s = 2j * np.pi * np.logspace(0, 10, 41)
    ref = np.array([L @ np.linalg.solve(G + sk * C, B) for sk in s])
    got = FrequencySolver(G, C, B, L).response(s)
    assert got.shape == (s.size, 4, 3)
    np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())


def test_sweep_singular_at_one_frequency_is_a_named_error():
    # oracle: KCL — a node tied to ground only by a capacitor has no voltage at s = 0,
    # so a sweep that includes DC is singular there (and nowhere else); 61 points:
    # the vectorised sweep, not the direct per-point path
    net = rc_divider()
    net.capacitor("b", "x", 1e-12)
    net.capacitor("x", GROUND, 1e-12)
    solver = net.solver(net.selector({"x": 1.0}))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(NetworkError, match="singular at f = 0 Hz"):
            solver.response(2j * np.pi * np.concatenate([[0.0], np.logspace(0, 6, 60)]))


def _blas_threads():
    from threadpoolctl import threadpool_info
    return [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]


def test_solver_runs_blas_single_threaded_and_restores_the_setting():
    # oracle: threadpoolctl's own report of the BLAS thread count (common practice:
    # a library call must not leave global state changed)
    from freqpair.circuit.blas_threads import single_blas_thread
    pytest.importorskip("threadpoolctl")
    before = _blas_threads()
    net = _gain_ladder()
    net.solver(net.selector({"n7": 1.0})).response(2j * np.pi * np.logspace(0, 9, 50))
    assert _blas_threads() == before
    with single_blas_thread():
        assert all(t == 1 for t in _blas_threads())
        with single_blas_thread():          # nested: the inner exit keeps the limit
            pass
        assert all(t == 1 for t in _blas_threads())
    assert _blas_threads() == before


def test_sweeps_in_concurrent_threads_equal_the_same_sweeps_run_alone():
    # oracle: numpy.linalg.solve per frequency, and the sweep run alone in one
    # thread (work buffers are per thread; a shared buffer would mix answers —
    # rounding-level differences are allowed: a thread that does not control the
    # BLAS thread count may run with more than one)
    import threading
    nets = [_gain_ladder(), rc_divider()]
    solvers = [nets[0].solver(nets[0].selector({"n7": 1.0})),
               nets[1].solver(nets[1].selector({"b": 1.0}))]
    grids = [2j * np.pi * np.logspace(0, 10, 700), 2j * np.pi * np.logspace(2, 8, 1500)]
    alone = [sol.response(s) for sol, s in zip(solvers, grids)]
    for sol, s, h in zip(solvers, grids, alone):
        G, C, B = sol.G, sol.C, sol.B
        ref = np.array([sol.L @ np.linalg.solve(G + sk * C, B) for sk in s])
        np.testing.assert_allclose(h, ref, rtol=1e-9, atol=0)
    results = {}

    def run(k):
        results[k] = [solvers[k % 2].response(grids[k % 2]) for _ in range(5)]

    threads = [threading.Thread(target=run, args=(k,)) for k in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for k, hs in results.items():
        for h in hs:
            np.testing.assert_allclose(h, alone[k % 2], rtol=1e-12, atol=0)
    assert len(results) == 4


def test_transfer_at_one_frequency_matches_the_rc_lowpass_formula():
    # oracle: hand KCL — v_b/v_in = 1/(1 + sRC) for the RC divider; 1 − that at the
    # resistor's far end seen as v_a − v_b (two output rows at once)
    r, c = 1e3, 1e-9
    net = rc_divider(r, c)
    G, C, B = net.matrices()
    solver = net.solver(net.selector({"b": 1.0}))
    s = 2j * np.pi * 2.5e5
    rows = np.array([net.selector({"b": 1.0}), net.selector({"a": 1.0, "b": -1.0})])
    h = solver.transfer_at(s, B[:, 0], rows)
    lowpass = 1 / (1 + s * r * c)
    np.testing.assert_allclose(h, [lowpass, 1 - lowpass], rtol=1e-13)


def test_transfer_at_a_singular_frequency_is_a_named_error():
    # oracle: KCL at s = 0 — a node reached only through capacitors has no voltage
    net = rc_divider()
    net.capacitor("b", "x", 1e-12)
    net.capacitor("x", GROUND, 1e-12)
    G, C, B = net.matrices()
    solver = net.solver(net.selector({"x": 1.0}))
    with pytest.raises(NetworkError, match="singular at f = 0 Hz"):
        solver.transfer_at(0j, B[:, 0], net.selector({"x": 1.0}))


def test_short_frequency_list_names_the_singular_frequency_not_the_first():
    # oracle: KCL at s = 0 — the capacitor-only node x has no voltage at DC alone
    net = rc_divider()
    net.capacitor("b", "x", 1e-12)
    net.capacitor("x", GROUND, 1e-12)
    solver = net.solver(net.selector({"x": 1.0}))
    with pytest.raises(NetworkError, match="singular at f = 0 Hz"):
        solver.response(2j * np.pi * np.array([10.0, 100.0, 0.0]))


def test_a_new_thread_can_limit_blas_after_overlapping_blocks_in_other_threads():
    # oracle: threadpoolctl's own report of the BLAS thread count inside the block
    pytest.importorskip("threadpoolctl")
    import threading
    from freqpair.circuit.blas_threads import single_blas_thread
    before = _blas_threads()
    a_in, b_in, a_out = threading.Event(), threading.Event(), threading.Event()

    def first():
        with single_blas_thread():
            a_in.set()
            b_in.wait(5)
        a_out.set()

    def second():
        a_in.wait(5)
        with single_blas_thread():
            b_in.set()
            a_out.wait(5)          # the first thread leaves while this block is open

    seen = {}

    def third():
        with single_blas_thread():
            seen["inside"] = _blas_threads()

    threads = [threading.Thread(target=first), threading.Thread(target=second)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    t = threading.Thread(target=third)
    t.start()
    t.join()
    assert seen["inside"] and all(n == 1 for n in seen["inside"])
    assert _blas_threads() == before


def test_sweep_accepts_complex_matrices():
    # oracle: numpy.linalg.solve on the same (complex) G + sC at every frequency
    net = _gain_ladder()
    G, C, B = net.matrices()
    rng = np.random.default_rng(5)
    Gc = G + 1j * 1e-4 * np.diag(rng.uniform(size=G.shape[0]))
    L = rng.normal(size=(2, G.shape[0])) + 1j * rng.normal(size=(2, G.shape[0]))
    s = 2j * np.pi * np.logspace(0, 10, 64)
    ref = np.array([L @ np.linalg.solve(Gc + sk * C, B) for sk in s])
    np.testing.assert_allclose(FrequencySolver(Gc, C, B, L).response(s), ref, rtol=1e-9,
                               atol=1e-13 * np.abs(ref).max())
