"""Stamp a device's small-signal model into a :class:`~freqpair.circuit.network.Network`."""
from __future__ import annotations

from freqpair.circuit.devices import SmallSignal
from freqpair.circuit.network import GROUND, Network

__all__ = ["stamp_device", "series_resistor"]


def series_resistor(net: Network, node: str, new_node: str, ohms: float, label: str) -> str:
    """Add ``ohms`` from ``node`` to a new node and return the new node's name;
    a zero resistance adds nothing and returns ``node`` (the nodes are one)."""
    if ohms == 0:
        return node
    net.resistor(node, new_node, ohms, label)
    return new_node


def stamp_device(net: Network, name: str, control: str, output: str, common: str,
                 ss: SmallSignal, substrate: str = GROUND) -> str:
    """Stamp one transistor.

    Parameters
    ----------
    net : Network
    name : str
        Prefix for element labels and internal nodes, e.g. ``"Q1"``.
    control, output, common : str
        Base/gate, collector/drain and emitter/source nodes.
    ss : SmallSignal
        The device's small-signal values (g_m already mismatch-scaled).
    substrate : str
        The substrate (bipolar: C_cs returns there) or the body rail (MOS: C_db
        and C_sb return there, and g_mb is controlled by v_body − v_source).

    Returns
    -------
    str
        The internal control node (after r_b), where r_pi, C_pi, C_mu attach.
    """
    bip = ss.kind == "bipolar"
    inner = series_resistor(net, control, f"{name}.bi", ss.rb, f"{name}.rb")
    net.resistor(inner, common, ss.r_in, f"{name}.rpi")
    net.capacitor(inner, common, ss.c_in, f"{name}.cpi" if bip else f"{name}.cgs")
    net.capacitor(inner, output, ss.c_fb, f"{name}.cmu" if bip else f"{name}.cgd")
    net.resistor(output, common, ss.ro, f"{name}.ro")
    net.vccs(output, common, inner, common, ss.gm, f"{name}.gm")
    net.capacitor(output, substrate, ss.c_out, f"{name}.ccs" if bip else f"{name}.cdb")
    if not bip and substrate != common:
        net.capacitor(common, substrate, ss.c_sb, f"{name}.csb")
        net.vccs(output, common, substrate, common, ss.gmb, f"{name}.gmb")
    return inner
