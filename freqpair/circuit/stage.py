"""A design → its small-signal network (both halves, no half-circuit shortcut).

Nodes: ``in1``/``in2`` (ideal input sources), ``b1``/``b2`` (after R_s; the
same node as ``in`` when R_s = 0), ``o1``/``o2`` (outputs), ``t`` (tail),
``e1``/``e2`` (the pair's emitters/sources, with degeneration), ``c1``/``c2``
(the pair's collectors/drains, with a cascode), ``out`` (second-stage output)
and the rails ``vpos``/``vneg``: driven nodes, AC ground for every gain
(their sources are 0) and the excitation of the supply rejection
(DESIGN.md §7f). Side 1 is the input whose rise lowers o1. Mismatch δ splits
±δ/2: side 1 gets ×(1+δ/2), side 2 ×(1−δ/2).

What ties to which rail, for an npn/nmos pair (pnp/pmos: the first four
swapped): resistor loads and mirror emitters/sources → vpos; the Norton
tail, transistor-tail emitters/sources, bases/gates, R_degeneration and
extra capacitance → vneg; the second stage's emitter/source side → vpos;
MOS bodies (C_db, C_sb, g_mb) → vneg for nmos, vpos for pmos; bipolar C_cs →
vneg always; cascode bases/gates, the load capacitance and the input
sources → ground.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from freqpair.circuit.bias import PairOperatingPoint, pair_operating_point
from freqpair.circuit.devices import bipolar_small_signal, mos_small_signal
from freqpair.circuit.network import GROUND, Network
from freqpair.circuit.noise_sources import NoiseSource, device_noise, resistor_noise
from freqpair.circuit.stamps import series_resistor, stamp_device
from freqpair.circuit.tails import TailNorton

__all__ = ["Stage", "TailNorton", "build_stage", "TAIL_NODE", "RAILS"]

TAIL_NODE = "t"
#: the rails' node names, in the order of their sources after in1, in2
RAILS = ("vpos", "vneg")


@dataclass(frozen=True)
class Stage:
    """A design turned into its network, with bias and output bookkeeping.

    Attributes
    ----------
    network : Network
        The full small-signal network; inputs ``in1``, ``in2``, ``vpos``, ``vneg``.
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
    tail_detail : dict
        Transistor tail: kind, devices, summary lines.
    nodes : dict
        The stage's node names (DESIGN.md §7d) → network nodes.
    noise_sources : tuple of NoiseSource
        Every noise current of the stage (DESIGN.md §7h), each by its name.
    """

    design: object
    network: Network
    operating_point: PairOperatingPoint
    tail: TailNorton | None
    balanced: bool
    final_node: str
    load_small_signal: object = None
    tail_detail: dict = field(default_factory=dict)
    nodes: dict = field(default_factory=dict)
    noise_sources: tuple = ()


def _split(value: float, delta: float, side: int) -> float:
    return value * (1.0 + (delta / 2.0 if side == 1 else -delta / 2.0))


class _Builder:
    """Collects the network and its noise sources while the stage is stamped."""

    def __init__(self, design, op: PairOperatingPoint):
        self.design, self.op = design, op
        self.net = Network()
        self.noise: list[NoiseSource] = []
        self.temperature = design.bias.temperature
        npn_like = op.polarity > 0
        #: the load's rail (loads, mirror, second stage) and the tail's rail
        self.load_rail = "vpos" if npn_like else "vneg"
        self.tail_rail = "vneg" if npn_like else "vpos"

    def resistor(self, a, b, ohms, label, physical=True):
        self.net.resistor(a, b, ohms, label)
        if physical and ohms != math.inf:
            self.noise.append(resistor_noise(label, a, b, ohms, self.temperature))

    def body_rail(self, dev) -> str:
        """Body rail of a MOS device (vneg for nmos, vpos for pmos); bipolar: substrate."""
        if dev.is_bipolar:
            return "vneg"
        return "vneg" if dev.type == "nmos" else "vpos"

    def device(self, name, dev, control, output, common, ss):
        inner = stamp_device(self.net, name, control, output, common, ss, self.body_rail(dev))
        if ss.rb > 0:
            self.noise.append(resistor_noise(f"{name}.rb", control, inner, ss.rb,
                                             self.temperature))
        self.noise.extend(device_noise(name, dev, ss, inner, output, common, self.temperature))
        return inner


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
    bld = _Builder(design, op)
    net = bld.net
    ss = op.small_signal
    mm = design.mismatch
    pair = design.pair
    nodes = {"ground": GROUND, "t": TAIL_NODE}
    for side in (1, 2):
        net.voltage_input(f"in{side}", f"in{side}")
        nodes[f"in{side}"] = f"in{side}"
    for rail in RAILS:
        net.voltage_input(rail, rail)
        nodes[rail] = rail
    for side in (1, 2):
        base = f"in{side}"
        if design.source.resistance > 0:
            base = f"b{side}"
            bld.resistor(f"in{side}", base, design.source.resistance, f"Rs{side}")
        nodes[f"b{side}"] = base
        emitter = TAIL_NODE
        if pair.degeneration > 0:
            emitter = f"e{side}"
            bld.resistor(emitter, TAIL_NODE, pair.degeneration, f"RE{side}")
            nodes[emitter] = emitter
        out = f"o{side}"
        nodes[out] = out
        collector = out
        if pair.cascode is not None:
            collector = f"c{side}"
            nodes[collector] = collector
            bld.device(f"QC{side}", pair.cascode, GROUND, out, collector,
                       op.cascode.small_signal)
        bld.device(f"Q{side}", pair, base, collector, emitter,
                   ss.scaled_gm(_split(1.0, mm.gm, side)))

    load_ss = _stamp_load(bld, design, op)
    tail, tail_detail = _stamp_tail(bld, design, op)
    final = "o2"
    if design.second_stage is not None:
        _stamp_second_stage(bld, design.second_stage)
        final = "out"
        nodes["out"] = "out"
    _stamp_elements(bld, design, nodes)
    return Stage(design, net, op, tail, design.load.type == "resistor", final, load_ss,
                 tail_detail, nodes, tuple(bld.noise))


def _stamp_load(bld: _Builder, design, op: PairOperatingPoint):
    load = design.load
    mm = design.mismatch
    net = bld.net
    rail = bld.load_rail
    if load.type == "resistor":
        for side in (1, 2):
            bld.resistor(f"o{side}", rail, _split(load.resistance, mm.load, side), f"RL{side}")
            net.capacitor(f"o{side}", GROUND, load.capacitance, f"CL{side}")
        return None
    # current-mirror load: diode device on side 1 (node o1), output device on side 2
    dev = load.device
    current = op.small_signal.current
    if dev.is_bipolar:
        lss = bipolar_small_signal(dev, current, 0.0, design.bias.temperature, who="load.device")
    else:
        lss = mos_small_signal(dev, current)
    bld.device("M3", dev, "o1", "o1", rail, lss.scaled_gm(_split(1.0, mm.load, 1)))
    bld.device("M4", dev, "o1", "o2", rail, lss.scaled_gm(_split(1.0, mm.load, 2)))
    net.capacitor("o2", GROUND, load.capacitance, "CL")
    return lss


def _pair_tail_capacitance(design, op) -> float:
    """The pair's own capacitance at the tail node [F]: 2·C_pi (C_gs) feed-through,
    plus 2·C_sb when the sources sit on the tail node (no degeneration)."""
    ss = op.small_signal
    if design.pair.degeneration > 0:
        return 0.0
    return 2.0 * ss.c_in + 2.0 * ss.c_sb


def _stamp_tail(bld: _Builder, design, op: PairOperatingPoint):
    tail = design.tail
    rail = bld.tail_rail
    if tail.type == "ideal":
        return None, {}
    if tail.type == "norton":
        bld.resistor(TAIL_NODE, rail, tail.resistance, "Rtail")
        bld.net.capacitor(TAIL_NODE, rail, tail.capacitance, "Ctail")
        return TailNorton(tail.resistance, tail.capacitance,
                          _pair_tail_capacitance(design, op)), {}
    from freqpair.circuit import tails  # transistor tails
    norton, detail = tails.stamp_transistor_tail(
        bld.net, design, op, TAIL_NODE, rail=rail, substrate="vneg",
        pair_capacitance=_pair_tail_capacitance(design, op))
    for d in detail["devices"]:
        bld.noise.extend(device_noise(d.name, tail.device, d.small_signal,
                                      d.name + ".bi" if d.small_signal.rb > 0 else rail,
                                      d.output, rail if d.common == GROUND else d.common,
                                      bld.temperature))
        if d.small_signal.rb > 0:
            bld.noise.append(resistor_noise(f"{d.name}.rb", rail, d.name + ".bi",
                                            d.small_signal.rb, bld.temperature))
    if tail.type == "degenerated":
        bld.noise.append(resistor_noise("tail.Rdeg", tails.INTERNAL_EMITTER, rail,
                                        tail.degeneration, bld.temperature))
    return norton, detail


def _stamp_second_stage(bld: _Builder, st) -> None:
    """Inverting transconductor g_m2 from o2 to ``out`` with R_out, C_L at out,
    C_in at o2 and the Miller capacitor (with nulling resistor) o2 → out; its
    emitter/source side sits on the load rail (DESIGN.md §3a, §7f)."""
    net = bld.net
    rail = bld.load_rail
    net.vccs("out", rail, "o2", rail, st.gm, "gm2")
    bld.resistor("out", rail, st.output_resistance, "Rout2", physical=False)
    net.capacitor("out", GROUND, st.load_capacitance, "CL2")
    net.capacitor("o2", rail, st.input_capacitance, "Cin2")
    if st.miller_capacitance > 0:
        if st.nulling_resistance > 0:
            bld.resistor("o2", "cz", st.nulling_resistance, "Rz")
            mid = "cz"
        else:
            mid = "o2"
        net.capacitor(mid, "out", st.miller_capacitance, "Cc")


def element_label(element, index: int) -> str:
    """The name an added element goes by (its ``name``, else ``element.N``)."""
    return element.name if element.name is not None else f"element.{index}"


def _stamp_elements(bld: _Builder, design, nodes: dict) -> None:
    """Added elements (DESIGN.md §7d) between the stage's named nodes."""
    for i, el in enumerate(design.element):
        a, b = (nodes[n] for n in el.nodes)
        label = element_label(el, i)
        if el.kind == "resistor":
            bld.resistor(a, b, el.value, label)
        elif el.kind == "capacitor":
            bld.net.capacitor(a, b, el.value, label)
        else:
            cp, cn = (nodes[n] for n in el.control)
            bld.net.vccs(a, b, cp, cn, el.value, label)
