"""The generic network: clear errors for unsolvable networks, the matrix cache,
and the QZ solver against direct solves.

Oracles: hand-written nodal equations (Kirchhoff's current law) for small
networks; numpy.linalg.solve on the same G + sC; scipy.signal.freqs on the
first-order RC transfer function.
"""
import math
import warnings

import numpy as np
import pytest
import scipy.signal

from freqpair.errors import NetworkError
from freqpair.network import GROUND, FrequencySolver, Network


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
