"""The design schema: validated, immutable design objects and one-line errors.

A design is a tree of immutable sections, one per TOML table (DESIGN.md §3,
§3a and §7). Every validation problem becomes a
:class:`~freqpair.design.errors.DesignError` whose message is one line naming
the dotted key and the value, e.g.::

    pair.beta = -5: must be greater than 0

Numbers may be plain SI values or SI strings (``"2 pF"``, ``"10kΩ"``);
see :func:`freqpair.design.quantities.parse_si`.
"""
from __future__ import annotations

from typing import Any, Optional

from freqpair.design.errors import DesignError
from freqpair.design.fields import (
    KeyedError,
    Section,
    build,
    names,
    num,
    num_list,
    section,
    tagged,
    tagged_list,
    text,
    to_table,
    whole,
)

__all__ = ["Design", "parse_design", "design_to_dict", "COMPLEMENT", "stage_nodes",
           "Npn", "Pnp", "Nmos", "Pmos", "Element"]

def _mismatch(x: float):
    return None if -1.0 < x < 1.0 else "relative mismatch must lie between -1 and 1"


# ---------------------------------------------------------------- devices
class _Device(Section):
    TAG = ""

    @property
    def type(self) -> str:
        return self.TAG
class _Bipolar(_Device):
    beta = num("none")
    early_voltage = num("volt")
    vbe = num("volt", "gt", 0.7)
    base_resistance = num("ohm", "ge", 0.0)
    cje = num("farad", "ge", 0.0)
    transit_time = num("second", "ge", None)
    ft = num("hertz", "gt", None)
    cjc0 = num("farad", "ge", 0.0)
    phi_c = num("volt", "gt", 0.75)
    m_c = num("none", "ge", 0.33)
    ccs = num("farad", "ge", 0.0)
    flicker_corner = num("hertz", "ge", 0.0)

    def _validate(self):
        if self.transit_time is not None and self.ft is not None:
            raise KeyedError("ft", f"give transit_time or ft, not both (transit_time = "
                                   f"{self.transit_time:g} s is also set)", self.ft)

    @property
    def is_bipolar(self) -> bool:
        return True
class _Mos(_Device):
    mobility_cox = num("transconductance_param")
    width = num("metre")
    length = num("metre")
    threshold = num("volt")
    lambda_ = num("per_volt", "ge", alias="lambda")
    cox = num("cap_per_area", "ge", 0.0)
    overlap_cap = num("cap_per_length", "ge", 0.0)
    cdb = num("farad", "ge", 0.0)
    body_effect = num("sqrt_volt", "ge", 0.0)
    surface_potential = num("volt", "gt", 0.7)
    csb = num("farad", "ge", 0.0)
    flicker_corner = num("hertz", "ge", 0.0)
    noise_gamma = num("none", "gt", 2.0 / 3.0)

    @property
    def is_bipolar(self) -> bool:
        return False
class Npn(_Bipolar):
    TAG = "npn"
class Pnp(_Bipolar):
    TAG = "pnp"
class Nmos(_Mos):
    TAG = "nmos"
class Pmos(_Mos):
    TAG = "pmos"


DEVICES = {"npn": Npn, "pnp": Pnp, "nmos": Nmos, "pmos": Pmos}

#: polarity complement used for active loads
COMPLEMENT = {"npn": "pnp", "pnp": "npn", "nmos": "pmos", "pmos": "nmos"}


# cascode devices of a cascoded pair (§7c): device keys plus the bias voltage of
# their bases/gates (absolute, AC ground); ``type`` defaults to the pair's own
def _cascode_class(base):
    class Cascode(base):
        bias = num("volt", None)
    Cascode.__name__ = Cascode.__qualname__ = f"Cascode{base.__name__}"
    Cascode.__module__ = __name__
    return Cascode


CascodeNpn, CascodePnp, CascodeNmos, CascodePmos = (_cascode_class(c)
                                                    for c in (Npn, Pnp, Nmos, Pmos))
CASCODES = {"npn": CascodeNpn, "pnp": CascodePnp, "nmos": CascodeNmos, "pmos": CascodePmos}


# the pair devices: device keys plus degeneration (§7a) and an optional cascode (§7c)
def _pair_class(base):
    class Pair(base):
        degeneration = num("ohm", "ge", 0.0)
        cascode = tagged(CASCODES, None, default_tag="@self")

        def _validate(self):
            super()._validate()
            if self.cascode is not None and self.cascode.type != self.type:
                raise KeyedError("cascode.type", f"a {self.type} pair needs a {self.type} "
                                                 "cascode", self.cascode.type)
    Pair.__name__ = Pair.__qualname__ = f"Pair{base.__name__}"
    Pair.__module__ = __name__
    return Pair


# module-level names, so that pickling finds the classes by reference
PairNpn, PairPnp, PairNmos, PairPmos = (_pair_class(c) for c in (Npn, Pnp, Nmos, Pmos))
PAIRS = {"npn": PairNpn, "pnp": PairPnp, "nmos": PairNmos, "pmos": PairPmos}


# ---------------------------------------------------------------- sections
class Supply(Section):
    positive = num("volt", None)
    negative = num("volt", None)

    def _validate(self):
        if not self.positive > self.negative:
            raise KeyedError("positive", f"must be above negative = {self.negative:g} V",
                             self.positive)
class Bias(Section):
    tail_current = num("ampere")
    input_common_mode = num("volt", None, 0.0)
    temperature = num("kelvin", "gt", 300.0)
class ResistorLoad(Section):
    TAG = "resistor"
    resistance = num("ohm")
    capacitance = num("farad", "ge", 0.0)

    @property
    def type(self):
        return self.TAG
class MirrorLoad(Section):
    TAG = "mirror"
    capacitance = num("farad", "ge", 0.0)
    device = tagged(DEVICES)

    @property
    def type(self):
        return self.TAG


LOADS = {"resistor": ResistorLoad, "mirror": MirrorLoad}
class _Tail(Section):
    @property
    def type(self):
        return self.TAG
class IdealTail(_Tail):
    TAG = "ideal"
class NortonTail(_Tail):
    TAG = "norton"
    resistance = num("ohm")
    capacitance = num("farad", "ge", 0.0)
class MirrorTail(_Tail):
    TAG = "mirror"
    device = tagged(DEVICES)
    extra_capacitance = num("farad", "ge", 0.0)
class DegeneratedTail(_Tail):
    TAG = "degenerated"
    device = tagged(DEVICES)
    degeneration = num("ohm")
    extra_capacitance = num("farad", "ge", 0.0)
class CascodeTail(_Tail):
    TAG = "cascode"
    device = tagged(DEVICES)
    extra_capacitance = num("farad", "ge", 0.0)


TAILS = {"ideal": IdealTail, "norton": NortonTail, "mirror": MirrorTail,
         "degenerated": DegeneratedTail, "cascode": CascodeTail}
class Source(Section):
    resistance = num("ohm", "ge", 0.0)
class Mismatch(Section):
    load = num("none", None, 0.0, check=_mismatch)
    gm = num("none", None, 0.0, check=_mismatch)
class FactorFeedback(Section):
    """A frequency-independent feedback factor β_f (DESIGN.md §2)."""

    TAG = "factor"
    factor = num("none")

    @property
    def type(self):
        return self.TAG
class DividerFeedback(Section):
    """A resistor divider R_f (∥ C_f) over R_g (∥ C_g) (DESIGN.md §7e)."""

    TAG = "divider"
    series_resistance = num("ohm")
    series_capacitance = num("farad", "ge", 0.0)
    shunt_resistance = num("ohm")
    shunt_capacitance = num("farad", "ge", 0.0)

    @property
    def type(self):
        return self.TAG

    @property
    def factor(self) -> float:
        """β at DC: R_g/(R_f + R_g)."""
        return self.shunt_resistance / (self.series_resistance + self.shunt_resistance)


FEEDBACKS = {"factor": FactorFeedback, "divider": DividerFeedback}
class Sweep(Section):
    start = num("hertz", "gt", 1.0)
    stop = num("hertz", "gt", 10e9)
    points_per_decade = whole(50, bounds=(1, 10_000))

    def _validate(self):
        if not self.stop > self.start:
            raise KeyedError("stop", f"must be above start = {self.start:g} Hz", self.stop)
class SecondStage(Section):
    gm = num("siemens")
    output_resistance = num("ohm")
    input_capacitance = num("farad", "ge", 0.0)
    load_capacitance = num("farad", "ge", 0.0)
    miller_capacitance = num("farad", "ge", 0.0)
    nulling_resistance = num("ohm", "ge", 0.0)


def _element_name(name: str):
    if not name.strip():
        return "must not be empty"
    if name.strip().isdigit():
        return "must not be a number (element.N means the N-th element)"
    if "." in name:
        return "must not contain '.' (it names the element in dotted keys)"
    return None
class _Element(Section):
    TAG_KEY = "kind"
    nodes = names(2)
    name = text(None, check=_element_name)

    @property
    def kind(self) -> str:
        return self.TAG
class ResistorElement(_Element):
    TAG = "resistor"
    value = num("ohm")
class CapacitorElement(_Element):
    TAG = "capacitor"
    value = num("farad", "ge")
class TransconductanceElement(_Element):
    TAG = "transconductance"
    value = num("siemens", None)
    control = names(2)


ELEMENTS = {"resistor": ResistorElement, "capacitor": CapacitorElement,
            "transconductance": TransconductanceElement}
Element = _Element


def _band(values):
    a, b = values
    return None if b > a else f"start {a:g} Hz must be below stop {b:g} Hz"
class Noise(Section):
    """Spot frequencies [Hz] and the integration band [Hz] of the noise (DESIGN.md §7h)."""

    spot_frequencies = num_list("hertz", "gt", (1e3,))
    band = num_list("hertz", "gt", (10.0, 100e3), length=2, check=_band)


# ---------------------------------------------------------------- the design
def stage_nodes(design) -> list[str]:
    """The stage's node names, as added elements may name them (DESIGN.md §7d)."""
    out = ["in1", "in2", "b1", "b2", "o1", "o2", "t", "ground", "vpos", "vneg"]
    if design.pair.degeneration > 0:
        out += ["e1", "e2"]
    if design.pair.cascode is not None:
        out += ["c1", "c2"]
    if design.second_stage is not None:
        out.append("out")
    return out
class Design(Section):
    """A whole differential stage design (see DESIGN.md §3, §3a and §7 for the keys)."""

    name = text("")
    supply = section(Supply)
    bias = section(Bias)
    pair = tagged(PAIRS)
    load = tagged(LOADS)
    tail = tagged(TAILS)
    source = section(Source, Source())
    mismatch = section(Mismatch, Mismatch())
    feedback = tagged(FEEDBACKS, None, default_tag="factor")
    sweep = section(Sweep, Sweep())
    second_stage = section(SecondStage, None)
    element = tagged_list(ELEMENTS, "kind", ())
    noise = section(Noise, Noise())

    def _validate(self):
        if isinstance(self.load, MirrorLoad):
            want = COMPLEMENT[self.pair.type]
            if self.load.device.type != want:
                raise KeyedError("load.device.type", f"a {self.pair.type} pair needs a "
                                                     f"{want} mirror load", self.load.device.type)
        if isinstance(self.tail, (MirrorTail, DegeneratedTail, CascodeTail)):
            if self.tail.device.type != self.pair.type:
                raise KeyedError("tail.device.type", f"a {self.pair.type} pair needs a "
                                                     f"{self.pair.type} tail device",
                                 self.tail.device.type)
        nodes = stage_nodes(self)
        seen = set()
        for i, el in enumerate(self.element):
            for role in ("nodes", "control") if isinstance(el, TransconductanceElement) \
                    else ("nodes",):
                pair = getattr(el, role)
                for node in pair:
                    if node not in nodes:
                        raise KeyedError(f"element.{i}.{role}", f"unknown node {node!r}; this "
                                         f"stage's nodes are {', '.join(nodes)}", list(pair))
                if role == "nodes" and pair[0] == pair[1]:
                    raise KeyedError(f"element.{i}.nodes", "the two nodes must differ",
                                     list(pair))
            if el.name is not None:
                if el.name in seen:
                    raise KeyedError(f"element.{i}.name", "another element has this name",
                                     el.name)
                seen.add(el.name)


# ---------------------------------------------------------------- parsing
def parse_design(data: dict[str, Any]) -> Design:
    """Validate a design given as a plain dict (as read from TOML).

    Raises
    ------
    DesignError
        One line naming the key and the value.
    """
    try:
        return build(Design, data)
    except KeyedError as exc:
        raise DesignError(str(exc)) from None


def design_to_dict(design: Design) -> dict[str, Any]:
    """Plain-dict form of a design (SI floats), suitable for TOML or JSON."""
    return to_table(design)
