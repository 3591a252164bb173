"""Core results against textbook formulas, CODATA, and DESIGN.md's stated conventions.

Textbook: Gray, Hurst, Lewis & Meyer, *Analysis and Design of Analog Integrated
Circuits*, 5th ed., §3.5 (emitter-coupled pair: differential and common-mode
gain, CMRR) and §7.3 (frequency response of the differential pair, the tail
node zero) — section numbers from memory. Where a formula is derived here by
hand from KCL on the §2 model, the comment says so.
"""
import math

import numpy as np
import pytest
import scipy.constants as sc

import freqpair
from freqpair.analysis.result import analyze
from freqpair.design.keys import replace_value
from freqpair.circuit.devices import thermal_voltage
from helpers import design_with
from freqpair.analysis.crossings import DB_3

# A bipolar pair made "ideal" where a textbook formula assumes so:
# β = 1e6 and V_A = 1e6 V (r_o ≈ 2 GΩ), no capacitances, R_s = r_b = 0.
IDEALISH = design_with(supply__positive=15, supply__negative=-15, pair__beta=1e6,
                       pair__early_voltage=1e6)


def design(base=IDEALISH, **changes):
    return design_with(base, **changes)


def gm_ro_rl(result):
    ss = result.operating_point.small_signal
    return ss.gm, ss.ro, result.design.load.resistance


# ------------------------------------------------------------------ thermal voltage
def test_thermal_voltage_is_codata_kT_over_q():
    # oracle: scipy.constants (CODATA) — V_T = k·T/q
    assert thermal_voltage(300.0) == pytest.approx(sc.k * 300.0 / sc.e, rel=1e-15)
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, rel=1e-4)


def test_gm_is_ic_over_26mV_near_room_temperature():
    # oracle: common practice — g_m ≈ I_C / 26 mV at room temperature (to ~1 %)
    r = analyze(design(bias__temperature=300))
    ss = r.operating_point.small_signal
    assert ss.gm == pytest.approx(ss.current / 26e-3, rel=0.01)


# ------------------------------------------------------------------ low-frequency gains
@pytest.mark.parametrize("tail", ["ideal", "norton"])
def test_differential_gain_is_minus_gm_times_rl_parallel_ro(tail):
    # oracle: Gray et al. §3.5 (from memory) — A_dm = −g_m (R_L ∥ r_o) for
    # R_s = r_b = 0; with a matched pair the tail is an AC ground in pure DM,
    # so this holds exactly, whatever β and r_o
    d = design(pair__early_voltage=40, pair__beta=80)
    if tail == "ideal":
        d = replace_value(d, "tail", {"type": "ideal"})
    r = analyze(d)
    gm, ro, rl = gm_ro_rl(r)
    expected = -gm * (rl * ro / (rl + ro))
    assert complex(r.dc.adm[0]).real == pytest.approx(expected, rel=1e-12)
    assert r.adm_db == pytest.approx(20 * math.log10(abs(expected)), abs=1e-10)


def test_single_ended_common_mode_gain_is_minus_rl_over_2_rtail():
    # oracle: Gray et al. §3.5 (from memory) — A_cm = −g_m R_L/(1 + 2 g_m R_tail)
    # ≈ −R_L/(2 R_tail) for large β and r_o; CMRR_se = (1 + 2 g_m R_tail)/2 (DESIGN.md §2)
    r = analyze(design())
    gm, _, rl = gm_ro_rl(r)
    rt = 1e6
    acm = complex(r.dc.acm_se[0]).real
    assert acm == pytest.approx(-gm * rl / (1 + 2 * gm * rt), rel=1e-4)   # β, r_o finite
    assert acm == pytest.approx(-rl / (2 * rt), rel=1e-3)                 # 1/(2 g_m R_t) ≈ 1e-4
    assert r.cmrr_se_db == pytest.approx(20 * math.log10((1 + 2 * gm * rt) / 2), abs=1e-3)
    assert r.cmrr_textbook_db == pytest.approx(20 * math.log10(1 + 2 * gm * rt), abs=1e-3)


def test_bipolar_pair_with_ideal_tail_has_finite_common_mode_gain():
    # oracle: hand KCL on the §2 model, symmetric CM drive, ideal tail (no tail current
    # change): A_cm,se = R_L / (r_o + r_pi + β r_o + R_L)  — finite, not zero
    d = design(pair__beta=100, pair__early_voltage=50)
    d = replace_value(d, "tail", {"type": "ideal"})
    r = analyze(d)
    ss = r.operating_point.small_signal
    rl, beta = 10e3, 100
    expected = rl / (ss.ro + ss.r_in + beta * ss.ro + rl)
    assert complex(r.dc.acm_se[0]).real == pytest.approx(expected, rel=1e-10)
    assert r.acm_se_db is not None and math.isfinite(r.acm_se_db)
    assert r.cmrr_se_db is not None


def test_matched_mos_pair_with_ideal_tail_reports_null_not_minus_300_db():
    # oracle: DESIGN.md §2 — a gain zero to rounding is exactly zero: dB and CMRR null
    r = analyze(freqpair.load_design("examples/nmos_resistor_ideal_tail.toml"))
    for key in ("acm_se_db", "cmrr_se_db", "cmrr_db", "cmrr_corner_hz"):
        assert r.to_json()[key] is None, key


# ------------------------------------------------------------------ mismatch
def test_perfectly_matched_pair_has_null_balanced_cmrr():
    # oracle: symmetry — a matched pair gives v_o1 = v_o2 under common mode
    r = analyze(design())
    assert r.cmrr_db is None
    assert abs(complex(r.dc.acm_dm[0])) <= 1e-12 * abs(complex(r.dc.adm[0]))


@pytest.mark.parametrize("delta", [1e-3, 1e-2, -2e-2])
def test_load_mismatch_gives_balanced_cmrr_2_gm_rtail_over_delta(delta):
    # oracle: Gray et al. §3.5 (from memory) — CMRR ≈ 2 g_m R_tail / δ for a
    # load mismatch δ (exactly (1 + 2 g_m R_tail)/|δ| for β, r_o → ∞: hand KCL)
    r = analyze(design(mismatch__load=delta))
    gm = r.operating_point.small_signal.gm
    rt = 1e6
    assert r.cmrr_db == pytest.approx(20 * math.log10((1 + 2 * gm * rt) / abs(delta)), abs=0.01)
    assert r.cmrr_db == pytest.approx(20 * math.log10(2 * gm * rt / abs(delta)), abs=0.02)


@pytest.mark.parametrize("eps", [1e-3, 2e-2])
def test_gm_mismatch_gives_balanced_cmrr_1_plus_2_gm_rtail_over_eps(eps):
    # oracle: hand KCL with β, r_o → ∞ (derived here): g_m1,2 = g_m(1 ± ε/2),
    # CM drive: i_1 − i_2 = g_m ε v_ic/(1 + 2 g_m R_t), DM: i_1 − i_2 = g_m v_id (1 + O(ε²))
    # → CMRR = (1 + 2 g_m R_tail)/|ε| (1 + O(ε²)); the same form as a load mismatch
    r = analyze(design(mismatch__gm=eps))
    gm = r.operating_point.small_signal.gm
    assert r.cmrr_db == pytest.approx(20 * math.log10((1 + 2 * gm * 1e6) / eps), abs=0.01)


def test_mismatch_split_is_plus_minus_half_delta_and_gm_only():
    # oracle: DESIGN.md §2 — side 1 gets R(1+δ/2), g_m(1+δ/2); r_pi, C_pi, r_o nominal
    d = design(mismatch__load=0.1, mismatch__gm=0.06, pair__cje="1 pF")
    r = analyze(d)
    ss = r.operating_point.small_signal
    el = {label: value for _, label, _, value in r.stage.network.elements}
    assert 1 / el["RL1"] == pytest.approx(10e3 * 1.05, rel=1e-15)
    assert 1 / el["RL2"] == pytest.approx(10e3 * 0.95, rel=1e-15)
    assert el["Q1.gm"] == pytest.approx(ss.gm * 1.03, rel=1e-15)
    assert el["Q2.gm"] == pytest.approx(ss.gm * 0.97, rel=1e-15)
    for part in ("rpi", "ro"):
        assert el[f"Q1.{part}"] == el[f"Q2.{part}"] == pytest.approx(1 / getattr(
            ss, {"rpi": "r_in", "ro": "ro"}[part]), rel=1e-15)
    assert el["Q1.cpi"] == el["Q2.cpi"] == ss.c_in


# ------------------------------------------------------------------ device details
def test_cpi_from_ft_ignores_cje_and_subtracts_cmu():
    # oracle: DESIGN.md §2 — C_pi = g_m/(2π f_T) − C_mu; C_je not added when f_T given
    d = design(pair__ft="400 MHz", pair__cje="5 pF", pair__cjc0="1 pF")
    ss = analyze(d).operating_point.small_signal
    assert ss.c_in == pytest.approx(ss.gm / (2 * math.pi * 400e6) - ss.c_fb, rel=1e-14)


def test_cmu_follows_the_junction_formula_at_the_operating_point():
    # oracle: DESIGN.md §2 — C_mu = C_jc0/(1 + V_CB/φ_c)^m_c, V_CB = V_C − V_B,
    # V_C = V_pos − I_C R_L with I_C = α I_tail/2
    d = design(pair__cjc0="2 pF", pair__phi_c=0.8, pair__m_c=0.5, bias__input_common_mode=1.0)
    r = analyze(d)
    ic = 1e6 / (1e6 + 1) * 0.5e-3
    vcb = 15 - ic * 10e3 - 1.0
    assert r.operating_point.v_cb == pytest.approx(vcb, rel=1e-14)
    assert r.operating_point.small_signal.c_fb == pytest.approx(
        2e-12 / (1 + vcb / 0.8) ** 0.5, rel=1e-14)


def test_dc_values_are_at_s_zero_not_at_the_first_sweep_point():
    # oracle: Gray et al. §3.5 (from memory) — DC A_cm = −g_m R_L/(1 + 2 g_m R_t);
    # at the sweep start (1 MHz, 10 × the tail corner) |A_cm| is ≈ 10× larger
    d = design(tail__capacitance="159 pF", sweep__start="1 MHz", sweep__stop="1 GHz")
    r = analyze(d)
    gm = r.operating_point.small_signal.gm
    assert r.acm_se_db == pytest.approx(20 * math.log10(gm * 10e3 / (1 + 2 * gm * 1e6)),
                                        abs=1e-3)


# ------------------------------------------------------------------ crossings
TAIL_CORNER = design_with(supply__positive=15, supply__negative=-15, pair__early_voltage=1e6,
                          pair__cje="0.5 pF", pair__transit_time="20 ps", pair__cjc0="10 fF",
                          load__resistance="5 k", load__capacitance="0.2 pF",
                          tail__capacitance="10 pF")


def test_cmrr_corner_is_the_tail_rc_zero_when_it_lies_well_below_other_poles():
    # oracle: Gray et al. §7.3 (from memory) — Z_tail = R_t ∥ C_t puts a zero in A_cm at
    # 1/(2π R_t C_t) = 15.9 kHz; the next pole is ≈ 2 g_m R_t/(2π R_t C_t) (≈ 600 MHz)
    # and f_3dB is tens of MHz, so the CMRR falls 3 dB at the zero to well under 1 %.
    # V_A = 1e6 V: with V_A = 100 V the r_o path (A_cm ≈ +R_L/r_o, flat, 10× the
    # R_tail path here — hand KCL) hides the zero and the corner moved 3.5 %; C_mu is
    # kept small (10 fF) because its feed-through s·C_mu·R_L adds to A_cm as well
    # (0.2 pF moved the corner 1.6 %)
    r = analyze(design(TAIL_CORNER))
    f_zero = 1 / (2 * math.pi * 1e6 * 10e-12)
    assert r.f3db_hz > 1000 * f_zero
    assert r.cmrr_corner_hz == pytest.approx(f_zero, rel=0.01)


def crossing_designs():
    return [design(TAIL_CORNER), freqpair.load_design("examples/npn_mismatched_pair.toml"),
            freqpair.load_design("examples/nmos_resistor_ideal_tail.toml")]


@pytest.mark.parametrize("k", [0, 1, 2])
def test_reported_crossings_sit_exactly_on_their_levels(k):
    # oracle: the definitions in DESIGN.md §2 — |A(f_3dB)| = |A(0)|/√2, |A(UGF)| = 1,
    # CMRR_se(corner) = CMRR_se(0)/√2 — evaluated on a fresh direct solve
    r = analyze(crossing_designs()[k])
    sol = r.responses.solver

    def gains(f):
        H = sol.response_direct(2j * np.pi * np.array([f]))[0]   # (p, inputs)
        H = H[:, :2]                                             # in1, in2 (rails at 0)
        dm = H @ np.array([0.5, -0.5])
        cm = H @ np.array([1.0, 1.0])
        return dm[0] - dm[1], dm[1], cm[1]

    a0 = abs(complex(r.dc.adm[0]))
    assert abs(gains(r.f3db_hz)[0]) == pytest.approx(a0 / math.sqrt(2), rel=1e-9)
    assert abs(gains(r.ugf_hz)[0]) == pytest.approx(1.0, rel=1e-9)
    if r.cmrr_corner_hz is not None:
        _, adm_se, acm_se = gains(r.cmrr_corner_hz)
        level = 10 ** ((r.cmrr_se_db - DB_3) / 20)
        assert abs(adm_se / acm_se) == pytest.approx(level, rel=1e-9)


@pytest.mark.parametrize("k", [0, 1])
def test_crossings_do_not_depend_on_the_sweep_grid(k):
    # oracle: DESIGN.md §2 — crossings are root-found on the exact response,
    # so the plotting grid (density and range) cannot move them
    base = crossing_designs()[k]
    ref = analyze(base)
    for changes in ({"sweep.points_per_decade": 3}, {"sweep.points_per_decade": 997},
                    {"sweep.start": "1 mHz", "sweep.stop": "100 GHz"},
                    {"sweep.start": "10 kHz", "sweep.stop": "20 kHz"}):
        d = base
        for key, value in changes.items():
            d = replace_value(d, key, value)
        other = analyze(d)
        for name in ("f3db_hz", "ugf_hz", "cmrr_corner_hz"):
            assert getattr(other, name) == pytest.approx(getattr(ref, name), rel=1e-10), \
                (name, changes)


# ------------------------------------------------------------------ examples
def test_every_example_analyses_and_qz_matches_direct_solve(example_path):
    # oracle: numpy.linalg.solve (LU) on the same G + sC, 1 mHz … 100 GHz;
    # every transfer-matrix entry (input k → output j) to 1e-9 relative
    r = analyze(freqpair.load_design(example_path))
    assert r.adm_db is not None and r.f3db_hz is not None
    sol = r.responses.solver
    s = 2j * np.pi * np.logspace(-3, 11, 1400)
    qz, lu = sol.response(s), sol.response_direct(s)
    # the gains' output rows (o1, o2, out) entry by entry; the input-port rows (v_b,
    # i_in: DESIGN.md §7g) to 1e-9 of each row's largest entry (a gate current is
    # j·ω·C: its real part is rounding)
    gains = [r.responses.rows[k] for k in ("o1", "o2", "out") if k in r.responses.rows]
    ports = [i for i in range(qz.shape[1]) if i not in gains]
    floor = 1e-9 * np.abs(lu[:, ports, :2]).max(axis=(0, 2))
    np.testing.assert_array_less(np.abs(qz[:, ports, :2] - lu[:, ports, :2]).max(axis=(0, 2)),
                                 floor + 1e-300)
    qz, lu = qz[:, gains], lu[:, gains]
    np.testing.assert_allclose(qz[:, :, :2], lu[:, :, :2], rtol=1e-9, atol=0)   # in1, in2
    # the rails' columns (DESIGN.md §7f): a rail's gain to an output can sit 1e-5
    # below the rail's own node voltage, and there LU itself loses digits; check
    # against LU loosely and, where the two differ most, against mpmath at 40 digits
    np.testing.assert_allclose(qz[:, :, 2:], lu[:, :, 2:], rtol=1e-7, atol=0)
    import mpmath as mp
    rel = np.abs(qz[:, :, 2:] - lu[:, :, 2:]) / np.abs(lu[:, :, 2:])
    k, j, col = np.unravel_index(np.argmax(rel), rel.shape)
    with mp.workdps(40):
        A = mp.matrix(sol.G.tolist()) + mp.mpc(0, s[k].imag) * mp.matrix(sol.C.tolist())
        x = mp.lu_solve(A, mp.matrix(sol.B[:, 2 + col].tolist()))
        exact = complex(sum(mp.mpf(sol.L[j, i]) * x[i] for i in range(sol.n)))
    assert abs(qz[k, j, 2 + col] - exact) <= 1e-9 * abs(exact)
