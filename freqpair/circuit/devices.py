"""Device models: bias current (and terminal voltages) → small-signal values.

Bipolar: hybrid-pi. MOS: square law in saturation. Both return a
:class:`SmallSignal` of one common shape, which :mod:`freqpair.circuit.stamps` turns
into network elements. pnp/pmos devices use the same small-signal model as
npn/nmos (the hybrid-pi and the saturated-MOS model are polarity-free); their
keys are magnitudes (V_EB, |V_th|).

References
----------
Gray, Hurst, Lewis, Meyer, *Analysis and Design of Analog Integrated
Circuits*, ch. 1 (device models) — from memory.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from freqpair.circuit.constants import BOLTZMANN_J_PER_K, ELEMENTARY_CHARGE_C
from freqpair.design.errors import BiasError

__all__ = ["thermal_voltage", "SmallSignal", "bipolar_small_signal", "mos_small_signal",
           "mos_overdrive", "junction_capacitance", "body_transconductance"]


def thermal_voltage(temperature_k: float) -> float:
    """Thermal voltage V_T = k·T/q [V] (k, q: the exact SI values, as CODATA gives them)."""
    return BOLTZMANN_J_PER_K * temperature_k / ELEMENTARY_CHARGE_C


@dataclass(frozen=True)
class SmallSignal:
    """Small-signal values of one device at its bias point (SI units).

    ``r_in`` is r_pi (infinite for MOS), ``c_in`` C_pi / C_gs (control to
    common terminal), ``c_fb`` C_mu / C_gd (control to output), ``c_out``
    C_cs / C_db (output to AC ground), ``rb`` the series base resistance.
    ``ro`` may be infinite (λ = 0). ``gmb`` is the MOS body transconductance
    (0: body effect off) and ``c_sb`` the source–body capacitance.
    """

    kind: str          # "bipolar" | "mos"
    current: float     # I_C or I_D [A]
    gm: float          # [S]
    r_in: float        # [Ω]
    ro: float          # [Ω]
    c_in: float        # [F]
    c_fb: float        # [F]
    c_out: float       # [F]
    rb: float = 0.0    # [Ω]
    gmb: float = 0.0   # [S]
    c_sb: float = 0.0  # [F]

    def scaled_gm(self, factor: float) -> "SmallSignal":
        """Copy with g_m (and g_mb) scaled (mismatch: transconductance only)."""
        return SmallSignal(self.kind, self.current, self.gm * factor, self.r_in, self.ro,
                           self.c_in, self.c_fb, self.c_out, self.rb, self.gmb * factor,
                           self.c_sb)


def junction_capacitance(c0: float, v_reverse: float, phi: float, m: float, who: str) -> float:
    """Depletion capacitance C0/(1 + V_R/φ)^m [F] at reverse bias V_R [V]."""
    if c0 == 0.0:
        return 0.0
    if v_reverse <= -phi:
        raise BiasError(f"{who}: collector-base junction forward biased beyond phi_c "
                        f"(V_CB = {v_reverse:.3g} V, phi_c = {phi:.3g} V)")
    return c0 / (1.0 + v_reverse / phi) ** m


def bipolar_small_signal(dev, ic: float, vcb: float, temperature_k: float,
                         who: str = "pair") -> SmallSignal:
    """Hybrid-pi values of a bipolar device.

    Parameters
    ----------
    dev : freqpair.design.schema.Npn or Pnp
        Device keys.
    ic : float
        Collector current [A].
    vcb : float
        Collector-base reverse bias [V] (> 0 in the active region).
    temperature_k : float
        Temperature [K].
    who : str
        Name of the device for error messages ("pair", "load.device", ...).

    Returns
    -------
    SmallSignal
        g_m = I_C/V_T, r_pi = β/g_m, r_o = V_A/I_C, C_mu = C_jc0/(1+V_CB/φ_c)^m_c,
        C_pi = C_je + τ_F·g_m, or g_m/(2π f_T) − C_mu when f_T is given.
    """
    vt = thermal_voltage(temperature_k)
    gm = ic / vt
    cmu = junction_capacitance(dev.cjc0, vcb, dev.phi_c, dev.m_c, who)
    if dev.ft is not None:
        cpi = gm / (2.0 * math.pi * dev.ft) - cmu
        if cpi < 0:
            raise BiasError(f"{who}.ft = {dev.ft:.4g} Hz: too high for C_mu = {cmu:.4g} F at "
                            f"g_m = {gm:.4g} S (C_pi = g_m/(2π f_T) − C_mu would be negative)")
    else:
        cpi = dev.cje + (dev.transit_time or 0.0) * gm
    return SmallSignal("bipolar", ic, gm, dev.beta / gm, dev.early_voltage / ic,
                       cpi, cmu, dev.ccs, dev.base_resistance)


def mos_overdrive(dev, id_: float) -> float:
    """Overdrive V_ov = V_GS − V_th = sqrt(2·I_D/(μC_ox·W/L)) [V]."""
    return math.sqrt(2.0 * id_ / (dev.mobility_cox * dev.width / dev.length))


def body_transconductance(dev, gm: float, v_sb: float) -> float:
    """g_mb = g_m·γ/(2·√(2φ_F + V_SB)) [S] (0 when ``body_effect`` γ is 0).

    ``v_sb`` [V] is the source–body reverse bias |V_S − V_body rail|; the
    threshold key already holds the body effect at the operating point
    (DESIGN.md §7b), so only the small-signal g_mb follows from γ here.
    """
    gamma = getattr(dev, "body_effect", 0.0)
    if not gamma:
        return 0.0
    return gm * gamma / (2.0 * math.sqrt(dev.surface_potential + abs(v_sb)))


def mos_small_signal(dev, id_: float, v_sb: float = 0.0) -> SmallSignal:
    """Square-law saturation values of a MOS device.

    Parameters
    ----------
    dev : device keys (nmos/pmos)
    id_ : float
        Drain current [A].
    v_sb : float
        Source–body reverse bias [V] (for g_mb; DESIGN.md §7b).

    Returns
    -------
    SmallSignal
        g_m = sqrt(2·μC_ox·(W/L)·I_D), r_o = 1/(λ·I_D) (∞ for λ = 0),
        C_gs = (2/3)·W·L·C_ox + W·C_ov, C_gd = W·C_ov, C_db and C_sb as given,
        g_mb from :func:`body_transconductance`.
    """
    gm = math.sqrt(2.0 * dev.mobility_cox * dev.width / dev.length * id_)
    ro = math.inf if dev.lambda_ == 0 else 1.0 / (dev.lambda_ * id_)
    cgs = 2.0 / 3.0 * dev.width * dev.length * dev.cox + dev.width * dev.overlap_cap
    cgd = dev.width * dev.overlap_cap
    return SmallSignal("mos", id_, gm, math.inf, ro, cgs, cgd, dev.cdb, 0.0,
                       body_transconductance(dev, gm, v_sb), getattr(dev, "csb", 0.0))
