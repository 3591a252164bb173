"""A design → its small-signal network (both halves, no half-circuit shortcut).

Nodes: ``in1``/``in2`` (ideal sources), ``b1``/``b2`` (after R_s), ``o1``/``o2``
(outputs), ``t`` (tail), ``out`` (second-stage output, when present).
Side 1 is the input whose rise lowers o1. Mismatch δ splits ±δ/2: side 1
gets ×(1+δ/2), side 2 ×(1−δ/2).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from freqpair.circuit.bias import PairOperatingPoint, pair_operating_point
from freqpair.circuit.devices import bipolar_small_signal, mos_small_signal
from freqpair.design.errors import DesignError
from freqpair.circuit.network import GROUND, Network
from freqpair.circuit.stamps import series_resistor, stamp_device
from freqpair.circuit.tails import TailNorton

__all__ = ["Stage", "TailNorton", "build_stage", "TAIL_NODE"]

TAIL_NODE = "t"


@dataclass(frozen=True)
class Stage:
    """A design turned into its network, with bias and output bookkeeping.

    Attributes
    ----------
    network : Network
        The full small-signal network; inputs ``in1``, ``in2``.
    operating_point : PairOperatingPoint
    tail : TailNorton or None
        None for an ideal tail.
    balanced : bool
        True when the stage has two outputs (resistor load); a mirror load
        has only the single-ended output o2.
    final_node : str
        Node of the amplifier output ("o2", or "out" with a second stage).
    load_small_signal : SmallSignal or None
        Mirror device values (mirror load).
    """

    design: object
    network: Network
    operating_point: PairOperatingPoint
    tail: TailNorton | None
    balanced: bool
    final_node: str
    load_small_signal: object = None
    tail_detail: dict = field(default_factory=dict)


def _split(value: float, delta: float, side: int) -> float:
    return value * (1.0 + (delta / 2.0 if side == 1 else -delta / 2.0))


def build_stage(design) -> Stage:
    """Build the stage's small-signal network from a validated design.

    Parameters
    ----------
    design : freqpair.design.schema.Design

    Returns
    -------
    Stage

    Raises
    ------
    BiasError
        Infeasible operating point (names device and numbers).
    """
    op = pair_operating_point(design)
    net = Network()
    ss = op.small_signal
    mm = design.mismatch
    for side in (1, 2):
        net.voltage_input(f"in{side}", f"in{side}")
        base = series_resistor(net, f"in{side}", f"b{side}", design.source.resistance,
                               f"Rs{side}")
        stamp_device(net, f"Q{side}", base, f"o{side}", TAIL_NODE,
                     ss.scaled_gm(_split(1.0, mm.gm, side)))

    load_ss = _stamp_load(net, design, op)
    tail, tail_detail = _stamp_tail(net, design, op)
    final = "o2"
    if design.second_stage is not None:
        _stamp_second_stage(net, design.second_stage)
        final = "out"
    return Stage(design, net, op, tail, design.load.type == "resistor", final, load_ss,
                 tail_detail)


def _stamp_load(net: Network, design, op: PairOperatingPoint):
    load = design.load
    mm = design.mismatch
    if load.type == "resistor":
        for side in (1, 2):
            net.resistor(f"o{side}", GROUND, _split(load.resistance, mm.load, side), f"RL{side}")
            net.capacitor(f"o{side}", GROUND, load.capacitance, f"CL{side}")
        return None
    # current-mirror load: diode device on side 1 (node o1), output device on side 2
    dev = load.device
    current = op.small_signal.current
    if dev.is_bipolar:
        lss = bipolar_small_signal(dev, current, 0.0, design.bias.temperature, who="load.device")
    else:
        lss = mos_small_signal(dev, current)
    stamp_device(net, "M3", "o1", "o1", GROUND, lss.scaled_gm(_split(1.0, mm.load, 1)))
    stamp_device(net, "M4", "o1", "o2", GROUND, lss.scaled_gm(_split(1.0, mm.load, 2)))
    net.capacitor("o2", GROUND, load.capacitance, "CL")
    return lss


def _stamp_tail(net: Network, design, op: PairOperatingPoint):
    tail = design.tail
    if tail.type == "ideal":
        return None, {}
    if tail.type == "norton":
        net.resistor(TAIL_NODE, GROUND, tail.resistance, "Rtail")
        net.capacitor(TAIL_NODE, GROUND, tail.capacitance, "Ctail")
        return TailNorton(tail.resistance, tail.capacitance), {}
    from freqpair.circuit import tails  # transistor tails
    return tails.stamp_transistor_tail(net, design, op, TAIL_NODE)


def _stamp_second_stage(net: Network, st) -> None:
    """Inverting transconductor g_m2 from o2 to ``out`` with R_out, C_L at out,
    C_in at o2 and the Miller capacitor (with nulling resistor) o2 → out."""
    net.vccs("out", GROUND, "o2", GROUND, st.gm, "gm2")
    net.resistor("out", GROUND, st.output_resistance, "Rout2")
    net.capacitor("out", GROUND, st.load_capacitance, "CL2")
    net.capacitor("o2", GROUND, st.input_capacitance, "Cin2")
    if st.miller_capacitance > 0:
        mid = series_resistor(net, "o2", "cz", st.nulling_resistance, "Rz")
        net.capacitor(mid, "out", st.miller_capacitance, "Cc")
