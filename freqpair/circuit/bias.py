"""Operating point of the pair and headroom checks (DESIGN.md §2, §3a, §7a–§7c).

All voltages are node voltages [V]. For pnp/pmos pairs everything is the
mirror image: the tail hangs from the positive rail and the loads return to
the negative rail; reported V_CE, V_CB (V_DS, V_GS) are magnitudes.

With pair degeneration R_E the device's own emitter/source (node ``e``) sits
one V_BE (V_GS) from the input common mode and the tail node I_E·R_E beyond it
(I_E = I_C/α, or I_D). With a cascoded pair the pair device's collector/drain
(node ``c``) sits one V_BE (V_GS) of the cascode device from the cascode's
``bias`` voltage; the cascode carries the pair device's I_C (I_D).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from freqpair.circuit.devices import (
    SmallSignal,
    bipolar_small_signal,
    mos_overdrive,
    mos_small_signal,
)
from freqpair.design.errors import BiasError

__all__ = ["PairOperatingPoint", "CascodeOperatingPoint", "pair_operating_point",
           "tail_headroom_needed", "polarity", "body_rail_voltage", "SATURATION_VCE",
           "TAIL_COMPLIANCE"]

SATURATION_VCE = 0.2    # V, bipolar active-region limit
TAIL_COMPLIANCE = 0.3   # V, default compliance of a current source


def polarity(dev) -> int:
    """+1 for npn/nmos, −1 for pnp/pmos."""
    return 1 if dev.type in ("npn", "nmos") else -1


def body_rail_voltage(dev, design) -> float:
    """DC voltage of a MOS device's body rail [V]: V_neg for nmos, V_pos for pmos (§7f)."""
    return design.supply.negative if dev.type == "nmos" else design.supply.positive


@dataclass(frozen=True)
class CascodeOperatingPoint:
    """Bias of one cascode device of a cascoded pair (per side, nominal)."""

    small_signal: SmallSignal
    v_control: float       # the ``bias`` voltage of its base/gate [V]
    v_common: float        # its emitter/source = the pair device's collector/drain [V]
    v_output: float        # its collector/drain = the output node [V]
    v_out_common: float    # |V_CE| or |V_DS| [V]
    v_cb: float | None     # collector-base reverse bias [V] (bipolar)
    v_gs: float | None     # |V_GS| [V] (MOS)
    v_ov: float | None     # overdrive [V] (MOS)


@dataclass(frozen=True)
class PairOperatingPoint:
    """Bias of the nominal pair device (per side).

    ``v_common`` is the tail node; ``v_emitter`` the device's own
    emitter/source (equal to the tail node without degeneration);
    ``v_collector`` its own collector/drain (node ``c`` with a cascode, else
    the output ``v_output``).
    """

    kind: str              # "bipolar" | "mos"
    polarity: int          # +1 npn/nmos, -1 pnp/pmos
    small_signal: SmallSignal
    v_control: float       # V_B or V_G [V]
    v_common: float        # the tail node [V]
    v_output: float        # the output node o [V]
    v_out_common: float    # |V_CE| or |V_DS| of the pair device itself [V]
    v_cb: float | None     # collector-base reverse bias [V] (bipolar)
    v_gs: float | None     # |V_GS| [V] (MOS)
    v_ov: float | None     # overdrive [V] (MOS)
    v_emitter: float = math.nan
    v_collector: float = math.nan
    emitter_current: float = math.nan
    cascode: CascodeOperatingPoint | None = None

    def to_json(self) -> dict:
        """The DESIGN.md §4 ``operating_point`` object (SI, null for infinity)."""
        ss = self.small_signal
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        if self.kind == "bipolar":
            return {"ic": fin(ss.current), "gm": fin(ss.gm), "rpi": fin(ss.r_in),
                    "ro": fin(ss.ro), "cpi": fin(ss.c_in), "cmu": fin(ss.c_fb),
                    "vce": fin(self.v_out_common), "vcb": fin(self.v_cb)}
        return {"id": fin(ss.current), "gm": fin(ss.gm), "ro": fin(ss.ro),
                "cgs": fin(ss.c_in), "cgd": fin(ss.c_fb), "vds": fin(self.v_out_common),
                "vgs": fin(self.v_gs)}


def _device_current(dev, tail_current: float) -> float:
    if dev.is_bipolar:
        alpha = dev.beta / (dev.beta + 1.0)
        return alpha * tail_current / 2.0
    return tail_current / 2.0


def _diode_drop(dev, current: float) -> float:
    """|V_BE| or |V_GS| of a device at ``current``."""
    if dev.is_bipolar:
        return dev.vbe
    return dev.threshold + mos_overdrive(dev, current)


def tail_headroom_needed(design) -> tuple[float, str]:
    """Voltage the tail needs between the tail node and its rail [V], and why."""
    tail = design.tail
    kind = tail.type
    i_tail = design.bias.tail_current
    if kind in ("ideal", "norton"):
        return TAIL_COMPLIANCE, f"{kind} tail source compliance"
    dev = tail.device
    vov = None if dev.is_bipolar else mos_overdrive(dev, i_tail)
    if kind == "mirror":
        need = TAIL_COMPLIANCE if dev.is_bipolar else vov
        return need, "simple-mirror tail"
    if kind == "degenerated":
        base = TAIL_COMPLIANCE if dev.is_bipolar else vov
        return base + i_tail * tail.degeneration, "degenerated tail (incl. I_tail·R_degeneration)"
    if kind == "cascode":
        if dev.is_bipolar:
            return dev.vbe + TAIL_COMPLIANCE, "cascode tail (V_BE + 0.3 V)"
        return dev.threshold + 2 * vov, "cascode tail (V_th + 2·V_ov)"
    raise BiasError(f"tail.type = {kind!r}: unknown")


_TAIL_WORDS = {"mirror": "simple mirror", "degenerated": "degenerated", "cascode": "cascode"}


def _check_mirror(dev, current: float) -> None:
    """Mirror load devices in the active region / saturation (in balance both
    sit at |V_CE| = |V_BE|, |V_DS| = |V_GS|)."""
    v_ce = _diode_drop(dev, current)
    if dev.is_bipolar and v_ce < SATURATION_VCE:
        raise BiasError(f"load.device ({dev.type} mirror): saturated: V_CE = V_BE = "
                        f"{v_ce:.3g} V < {SATURATION_VCE} V (I_C = {current:.3g} A)")
    if not dev.is_bipolar:
        vov = mos_overdrive(dev, current)
        if v_ce < vov:   # cannot happen for V_th > 0; kept as a guard
            raise BiasError(f"load.device ({dev.type} mirror): out of saturation: V_DS = "
                            f"{v_ce:.3g} V < V_ov = {vov:.3g} V (I_D = {current:.3g} A)")


def _check_headroom(who: str, dev, v_ce: float, v_ov: float | None, nodes: str,
                    current: float) -> None:
    if dev.is_bipolar and v_ce < SATURATION_VCE:
        raise BiasError(f"{who} ({dev.type}): saturated: V_CE = {v_ce:.3g} V < "
                        f"{SATURATION_VCE} V ({nodes}, I_C = {current:.3g} A)")
    if not dev.is_bipolar and v_ce < v_ov:
        raise BiasError(f"{who} ({dev.type}): out of saturation: V_DS = {v_ce:.3g} V < "
                        f"V_ov = {v_ov:.3g} V ({nodes}, I_D = {current:.3g} A)")


def _cascode_point(design, pol: int, current: float, v_out: float):
    """(CascodeOperatingPoint without small signal pieces checked, v_c) for a cascoded pair."""
    casc = design.pair.cascode
    drop = _diode_drop(casc, current)
    v_c = casc.bias - pol * drop
    v_ce = pol * (v_out - v_c)
    v_ov = None if casc.is_bipolar else mos_overdrive(casc, current)
    names = "V_C = {:.3g} V, V_E = {:.3g} V" if casc.is_bipolar else "V_D = {:.3g} V, V_S = {:.3g} V"
    _check_headroom("pair.cascode", casc, v_ce, v_ov, names.format(v_out, v_c), current)
    if casc.is_bipolar:
        v_cb = pol * (v_out - casc.bias)
        ss = bipolar_small_signal(casc, current, v_cb, design.bias.temperature,
                                  who="pair.cascode")
        return CascodeOperatingPoint(ss, casc.bias, v_c, v_out, v_ce, v_cb, None, None), v_c
    v_sb = abs(v_c - body_rail_voltage(casc, design))
    ss = mos_small_signal(casc, current, v_sb)
    return CascodeOperatingPoint(ss, casc.bias, v_c, v_out, v_ce, None, drop, v_ov), v_c


def pair_operating_point(design) -> PairOperatingPoint:
    """Operating point of the (nominal) pair device, with headroom checks.

    Raises
    ------
    BiasError
        Pair or cascode saturated / out of saturation, or tail starved; the
        message names the device and the numbers.
    """
    dev = design.pair
    pol = polarity(dev)
    v_pos, v_neg = design.supply.positive, design.supply.negative
    i_dev = _device_current(dev, design.bias.tail_current)
    vg = design.bias.input_common_mode
    load = design.load
    # output node voltage (the pair's, or the cascode's, collector/drain)
    rail_out = v_pos if pol > 0 else v_neg
    if load.type == "resistor":
        drop = i_dev * load.resistance
    else:
        drop = _diode_drop(load.device, i_dev)
    v_out = rail_out - pol * drop

    cascode = None
    v_coll = v_out
    if dev.cascode is not None:
        cascode, v_coll = _cascode_point(design, pol, i_dev, v_out)

    if dev.is_bipolar:
        alpha = dev.beta / (dev.beta + 1.0)
        i_emitter = i_dev / alpha
        v_e = vg - pol * dev.vbe
        vce = pol * (v_coll - v_e)
        vcb = pol * (v_coll - vg)
        _check_headroom("pair", dev, vce, None,
                        f"V_C = {v_coll:.3g} V, V_E = {v_e:.3g} V", i_dev)
        ss = bipolar_small_signal(dev, i_dev, vcb, design.bias.temperature, who="pair")
        vgs = vov = None
    else:
        i_emitter = i_dev
        vov = mos_overdrive(dev, i_dev)
        vgs = dev.threshold + vov
        v_e = vg - pol * vgs
        vce = pol * (v_coll - v_e)
        vcb = None
        _check_headroom("pair", dev, vce, vov,
                        f"V_D = {v_coll:.3g} V, V_S = {v_e:.3g} V", i_dev)
        ss = mos_small_signal(dev, i_dev, abs(v_e - body_rail_voltage(dev, design)))
    v_tail = v_e - pol * i_emitter * dev.degeneration

    need, why = tail_headroom_needed(design)
    rail_tail = v_neg if pol > 0 else v_pos
    have = pol * (v_tail - rail_tail)
    if have < need:
        node = "V_E" if dev.is_bipolar else "V_S"
        if dev.degeneration > 0:
            node = "V_tail"
        who = "tail"
        if design.tail.type in _TAIL_WORDS:
            who = f"tail.device ({design.tail.device.type} {_TAIL_WORDS[design.tail.type]})"
        raise BiasError(f"{who}: starved: {node} − rail = {have:.3g} V < {need:.3g} V needed "
                        f"({why}; tail node at {v_tail:.3g} V, rail {rail_tail:.3g} V)")
    if load.type == "mirror":
        _check_mirror(load.device, i_dev)
    return PairOperatingPoint(dev.is_bipolar and "bipolar" or "mos", pol, ss, vg, v_tail,
                              v_out, vce, vcb, vgs, vov, v_e, v_coll, i_emitter, cascode)
