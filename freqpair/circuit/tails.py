"""Tails built from transistors: simple mirror output, degenerated, cascode.

The tail devices enter the stage's network as devices (DESIGN.md §3a); this
module also derives the Norton view of the tail at the tail node from the
tail sub-network alone, which the tool shows to the user.

Bias (npn/nmos tail hanging from the negative rail; pnp/pmos is the mirror
image from the positive rail). Heights are measured from the tail's rail:

- every tail device carries I_C = I_D = I_tail; base/gate at AC ground on
  the tail's rail (DESIGN.md §7f); a MOS device's body sits on that rail, so
  g_mb acts where its source is above the rail (degenerated, cascode upper);
- simple mirror: emitter/source on the rail, base/gate at V_BE (V_GS);
- degenerated: emitter/source at I_tail·R_degeneration, base/gate one
  V_BE (V_GS) above that;
- cascode: the lower device's collector/drain (node ``tail.x``) sits at
  V_BE (V_GS) — the cascode base/gate is biased at 2·V_BE (2·V_GS), as from a
  stacked diode pair — so the lower device has V_CB = 0 and the upper one
  needs the rest of the headroom (V_BE + 0.3 V, or V_th + 2·V_ov, in all).

C_mu (C_gd) of each device is taken at its own V_CB from these voltages.

Norton view at the tail node: ``resistance`` is the tail sub-network's
driving-point resistance at DC (the Schur complement of its conductance
matrix onto the tail node); ``capacitance`` is the sum of the tail devices'
capacitances with one terminal on the tail node (C_mu/C_gd to the AC-grounded
base/gate and C_cs/C_db of the device whose collector/drain is the tail node)
plus ``extra_capacitance`` — i.e. the high-frequency slope of the tail's
admittance, Im Y/ω as ω → ∞. For the cascode, capacitance at the internal
node ``tail.x`` is not part of it (the cascode device isolates it).

References
----------
Gray, Hurst, Lewis, Meyer, *Analysis and Design of Analog Integrated
Circuits*, ch. 3-4 (output resistance of degenerated and cascode current
sources) — from memory.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from freqpair.circuit.devices import (
    SmallSignal,
    bipolar_small_signal,
    mos_overdrive,
    mos_small_signal,
)
from freqpair.design.errors import BiasError
from freqpair.circuit.network import GROUND, Network
from freqpair.circuit.stamps import stamp_device

__all__ = ["TailDevice", "tail_devices", "stamp_transistor_tail", "tail_norton",
           "stamp_tail_devices", "INTERNAL_EMITTER", "INTERNAL_CASCODE"]

#: internal node names of the tail sub-network
INTERNAL_EMITTER = "tail.e"
INTERNAL_CASCODE = "tail.x"

_KIND_WORD = {"mirror": "simple mirror", "degenerated": "degenerated", "cascode": "cascode"}


@dataclass(frozen=True)
class TailNorton:
    """Norton view of the tail at the tail node: resistance [Ω] at DC, capacitance [F].

    ``pair_capacitance`` is the pair's own contribution at that node (shown
    separately, not included in ``capacitance``).
    """

    resistance: float
    capacitance: float
    pair_capacitance: float = 0.0

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"resistance": fin(self.resistance), "capacitance": fin(self.capacitance)}


@dataclass(frozen=True)
class TailDevice:
    """One tail transistor at its bias point.

    Attributes
    ----------
    name : str
        Label prefix in the network ("tail.q1" lower/only, "tail.q2" cascode).
    role : str
        "current source" or "cascode".
    small_signal : SmallSignal
    control, output, common : str
        Network nodes of base/gate, collector/drain and emitter/source.
    v_output_common : float
        |V_CE| or |V_DS| [V].
    v_cb : float or None
        Collector-base reverse bias [V] (bipolar), at which C_mu is taken.
    """

    name: str
    role: str
    small_signal: SmallSignal
    control: str
    output: str
    common: str
    v_output_common: float
    v_cb: float | None


def _who(design, role: str) -> str:
    tail = design.tail
    word = _KIND_WORD[tail.type]
    extra = ", upper device" if role == "cascode" else (
        ", lower device" if tail.type == "cascode" else "")
    return f"tail.device ({tail.device.type} {word}{extra})"


def _device(design, name, role, control, output, common, v_ce, v_cb,
            v_sb: float = 0.0) -> TailDevice:
    dev = design.tail.device
    i_tail = design.bias.tail_current
    who = _who(design, role)
    if v_ce <= 0:
        raise BiasError(f"{who}: no headroom: V_CE = {v_ce:.3g} V at I = {i_tail:.3g} A")
    if dev.is_bipolar:
        ss = bipolar_small_signal(dev, i_tail, v_cb, design.bias.temperature, who=who)
    else:
        ss = mos_small_signal(dev, i_tail, v_sb)
        v_cb = None
    return TailDevice(name, role, ss, control, output, common, v_ce, v_cb)


def tail_devices(design, v_tail_node: float, tail_node: str = "t") -> list[TailDevice]:
    """Bias and small-signal values of the tail's transistors.

    Parameters
    ----------
    design : freqpair.design.schema.Design
        With a transistor tail ("mirror", "degenerated" or "cascode").
    v_tail_node : float
        DC voltage of the tail node [V] (the pair's common emitter/source).
    tail_node : str
        Network name of the tail node.

    Returns
    -------
    list of TailDevice
        One device (mirror, degenerated) or two (cascode: lower, upper).
    """
    tail = design.tail
    dev = tail.device
    i_tail = design.bias.tail_current
    pol = 1 if dev.type in ("npn", "nmos") else -1
    rail = design.supply.negative if pol > 0 else design.supply.positive
    h_t = pol * (v_tail_node - rail)          # tail node height above its rail [V]
    drop = dev.vbe if dev.is_bipolar else dev.threshold + mos_overdrive(dev, i_tail)
    if tail.type == "mirror":
        return [_device(design, "tail.q1", "current source", GROUND, tail_node, GROUND,
                        h_t, h_t - drop)]
    if tail.type == "degenerated":
        h_e = i_tail * tail.degeneration
        return [_device(design, "tail.q1", "current source", GROUND, tail_node,
                        INTERNAL_EMITTER, h_t - h_e, h_t - h_e - drop, v_sb=h_e)]
    if tail.type == "cascode":
        h_x = drop
        lower = _device(design, "tail.q1", "current source", GROUND, INTERNAL_CASCODE,
                        GROUND, h_x, 0.0)
        upper = _device(design, "tail.q2", "cascode", GROUND, tail_node, INTERNAL_CASCODE,
                        h_t - h_x, h_t - h_x - drop, v_sb=h_x)
        return [lower, upper]
    raise BiasError(f"tail.type = {tail.type!r}: not a transistor tail")


def stamp_tail_devices(net: Network, design, devices: list[TailDevice],
                       tail_node: str = "t", extra: bool = True, rail: str = GROUND,
                       substrate: str = GROUND) -> None:
    """Stamp the tail transistors (and R_degeneration, extra capacitance) into ``net``.

    ``rail`` is the node of the tail's supply rail (emitters/sources, bases/gates
    held by their reference, R_degeneration, the extra capacitance and MOS
    bodies); ``substrate`` where a bipolar device's C_cs returns (DESIGN.md §7f).
    A node named :data:`GROUND` in a device's terminals stands for ``rail``.
    """
    on_rail = (lambda node: rail if node == GROUND else node)
    for d in devices:
        sub = substrate if d.small_signal.kind == "bipolar" else rail
        stamp_device(net, d.name, on_rail(d.control), d.output, on_rail(d.common),
                     d.small_signal, sub)
    if design.tail.type == "degenerated":
        net.resistor(INTERNAL_EMITTER, rail, design.tail.degeneration, "tail.Rdeg")
    if extra:
        net.capacitor(tail_node, rail, design.tail.extra_capacitance, "tail.Cextra")


def tail_norton(design, devices: list[TailDevice], pair_capacitance: float = 0.0):
    """Norton equivalent of the tail alone, seen at the tail node.

    Returns
    -------
    freqpair.circuit.tails.TailNorton
        ``resistance`` [Ω] at DC (infinite when the sub-network draws no DC
        current, e.g. λ = 0), ``capacitance`` [F] (see the module notes),
        ``pair_capacitance`` [F] as given.
    """
    node = "t"
    sub = Network()
    sub.node(node)
    stamp_tail_devices(sub, design, devices, node)
    G, C, _ = sub.matrices()
    k = sub.node_names.index(node)
    rest = [i for i in range(G.shape[0]) if i != k]
    y = G[k, k]
    if rest:
        g_ri = G[np.ix_(rest, rest)]
        y = y - G[k, rest] @ np.linalg.solve(g_ri, G[rest, k])
    scale = max(np.abs(G).max(), 1e-300)
    resistance = math.inf if y <= 1e-15 * scale else 1.0 / y
    return TailNorton(float(resistance), float(C[k, k]), float(pair_capacitance))


def stamp_transistor_tail(net: Network, design, op, tail_node: str, rail: str = GROUND,
                          substrate: str = GROUND, pair_capacitance: float | None = None):
    """Stamp a transistor tail into the stage network.

    Parameters
    ----------
    net : Network
        The stage's network (pair already stamped).
    design : freqpair.design.schema.Design
    op : freqpair.circuit.bias.PairOperatingPoint
        The pair's bias (gives the tail node voltage and the pair's C_pi/C_gs).
    tail_node : str
    rail, substrate : str
        Nodes of the tail's rail and of the bipolar substrate (DESIGN.md §7f).
    pair_capacitance : float, optional
        The pair's own capacitance at the tail node [F], shown beside the
        tail's (default 2·C_pi / 2·C_gs).

    Returns
    -------
    (TailNorton, dict)
        The derived Norton view and a detail dict: ``kind``, ``devices``
        (list of :class:`TailDevice`), ``summary`` (text lines).
    """
    devices = tail_devices(design, op.v_common, tail_node)
    stamp_tail_devices(net, design, devices, tail_node, rail=rail, substrate=substrate)
    if pair_capacitance is None:
        pair_capacitance = 2.0 * op.small_signal.c_in
    norton = tail_norton(design, devices, pair_capacitance=pair_capacitance)
    return norton, {"kind": design.tail.type, "devices": devices,
                    "summary": _summary_lines(design, devices)}


def _summary_lines(design, devices) -> list[str]:
    from freqpair.design.quantities import format_si
    lines = []
    for d in devices:
        ss = d.small_signal
        vname = "V_CE" if ss.kind == "bipolar" else "V_DS"
        lines.append(f"{_who(design, d.role)}: I = {format_si(ss.current, 'A')}, "
                     f"g_m = {format_si(ss.gm, 'S')}, r_o = {format_si(ss.ro, 'Ω')}, "
                     f"{vname} = {format_si(d.v_output_common, 'V')}")
    return lines
