"""The design schema: validated, immutable design objects and one-line errors.

A design is a tree of frozen pydantic models (one per TOML table). Every
validation problem becomes a :class:`~freqpair.errors.DesignError` whose
message is one line naming the dotted key and the value, e.g.::

    pair.beta = -5: must be greater than 0

Numbers may be plain SI values or SI strings (``"2 pF"``, ``"10kΩ"``);
see :func:`freqpair.quantities.parse_si`.
"""
from __future__ import annotations

from functools import partial
from typing import Annotated, Any, Literal, Optional, Union

from pydantic import (BaseModel, BeforeValidator, ConfigDict, Field, ValidationError,
                      model_validator)

from freqpair.design.errors import DesignError
from freqpair.design.quantities import parse_si

__all__ = ["Design", "parse_design", "design_to_dict", "COMPLEMENT"]


def _si(value, unit):
    return parse_si(value, field="", unit=unit)


def _num(unit: str, *, minimum: str | None = "gt"):
    """Annotated float type: SI parsing with a unit kind and a sign rule."""
    constraint = {"gt": Field(gt=0), "ge": Field(ge=0), None: Field()}[minimum]
    return Annotated[float, BeforeValidator(partial(_si, unit=unit)), constraint]


Positive = partial(_num, minimum="gt")
Absentable = partial(_num, minimum="ge")   # zero means "absent"
Signed = partial(_num, minimum=None)


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False,
                              populate_by_name=True)


# ---------------------------------------------------------------- devices
class _Bipolar(_Section):
    beta: Positive("none")
    early_voltage: Positive("volt")
    vbe: Positive("volt") = 0.7
    base_resistance: Absentable("ohm") = 0.0
    cje: Absentable("farad") = 0.0
    transit_time: Optional[Absentable("second")] = None
    ft: Optional[Positive("hertz")] = None
    cjc0: Absentable("farad") = 0.0
    phi_c: Positive("volt") = 0.75
    m_c: Absentable("none") = 0.33
    ccs: Absentable("farad") = 0.0

    @model_validator(mode="after")
    def _one_of_tf_ft(self):
        if self.transit_time is not None and self.ft is not None:
            raise ValueError(f"ft = {self.ft:g} Hz: give transit_time or ft, not both "
                             f"(transit_time = {self.transit_time:g} s is also set)")
        return self

    @property
    def is_bipolar(self) -> bool:
        return True


class Npn(_Bipolar):
    type: Literal["npn"]


class Pnp(_Bipolar):
    type: Literal["pnp"]


class _Mos(_Section):
    mobility_cox: Positive("transconductance_param")
    width: Positive("metre")
    length: Positive("metre")
    threshold: Positive("volt")
    lambda_: Absentable("per_volt") = Field(alias="lambda")
    cox: Absentable("cap_per_area") = 0.0
    overlap_cap: Absentable("cap_per_length") = 0.0
    cdb: Absentable("farad") = 0.0

    @property
    def is_bipolar(self) -> bool:
        return False


class Nmos(_Mos):
    type: Literal["nmos"]


class Pmos(_Mos):
    type: Literal["pmos"]


Device = Annotated[Union[Npn, Pnp, Nmos, Pmos], Field(discriminator="type")]

#: polarity complement used for active loads
COMPLEMENT = {"npn": "pnp", "pnp": "npn", "nmos": "pmos", "pmos": "nmos"}


# ---------------------------------------------------------------- sections
class Supply(_Section):
    positive: Signed("volt")
    negative: Signed("volt")

    @model_validator(mode="after")
    def _ordered(self):
        if not self.positive > self.negative:
            raise ValueError(f"positive = {self.positive:g} V: must be above "
                             f"negative = {self.negative:g} V")
        return self


class Bias(_Section):
    tail_current: Positive("ampere")
    input_common_mode: Signed("volt") = 0.0
    temperature: Positive("kelvin") = 300.0


class ResistorLoad(_Section):
    type: Literal["resistor"]
    resistance: Positive("ohm")
    capacitance: Absentable("farad") = 0.0


class MirrorLoad(_Section):
    type: Literal["mirror"]
    capacitance: Absentable("farad") = 0.0
    device: Device


Load = Annotated[Union[ResistorLoad, MirrorLoad], Field(discriminator="type")]


class IdealTail(_Section):
    type: Literal["ideal"]


class NortonTail(_Section):
    type: Literal["norton"]
    resistance: Positive("ohm")
    capacitance: Absentable("farad") = 0.0


class MirrorTail(_Section):
    type: Literal["mirror"]
    device: Device
    extra_capacitance: Absentable("farad") = 0.0


class DegeneratedTail(_Section):
    type: Literal["degenerated"]
    device: Device
    degeneration: Positive("ohm")
    extra_capacitance: Absentable("farad") = 0.0


class CascodeTail(_Section):
    type: Literal["cascode"]
    device: Device
    extra_capacitance: Absentable("farad") = 0.0


Tail = Annotated[Union[IdealTail, NortonTail, MirrorTail, DegeneratedTail, CascodeTail],
                 Field(discriminator="type")]


class Source(_Section):
    resistance: Absentable("ohm") = 0.0


def _mismatch_range(value):
    value = parse_si(value, field="", unit="none")
    if not -1.0 < value < 1.0:
        raise ValueError("relative mismatch must lie between -1 and 1")
    return value


Mismatch_ = Annotated[float, BeforeValidator(_mismatch_range)]


class Mismatch(_Section):
    load: Mismatch_ = 0.0
    gm: Mismatch_ = 0.0


class Feedback(_Section):
    factor: Positive("none")


class Sweep(_Section):
    start: Positive("hertz") = 1.0
    stop: Positive("hertz") = 10e9
    points_per_decade: Annotated[int, Field(gt=0, le=10_000)] = 50

    @model_validator(mode="after")
    def _ordered(self):
        if not self.stop > self.start:
            raise ValueError(f"stop = {self.stop:g} Hz: must be above start = {self.start:g} Hz")
        return self


class SecondStage(_Section):
    gm: Positive("siemens")
    output_resistance: Positive("ohm")
    input_capacitance: Absentable("farad") = 0.0
    load_capacitance: Absentable("farad") = 0.0
    miller_capacitance: Absentable("farad") = 0.0
    nulling_resistance: Absentable("ohm") = 0.0


class Design(_Section):
    """A whole differential stage design (see DESIGN.md §3 for the keys)."""

    name: str = ""
    supply: Supply
    bias: Bias
    pair: Device
    load: Load
    tail: Tail
    source: Source = Source()
    mismatch: Mismatch = Mismatch()
    feedback: Optional[Feedback] = None
    sweep: Sweep = Sweep()
    second_stage: Optional[SecondStage] = None

    @model_validator(mode="after")
    def _polarities(self):
        if isinstance(self.load, MirrorLoad):
            want = COMPLEMENT[self.pair.type]
            if self.load.device.type != want:
                raise _KeyedError("load.device.type", self.load.device.type,
                                  f"a {self.pair.type} pair needs a {want} mirror load")
        if isinstance(self.tail, (MirrorTail, DegeneratedTail, CascodeTail)):
            if self.tail.device.type != self.pair.type:
                raise _KeyedError("tail.device.type", self.tail.device.type,
                                  f"a {self.pair.type} pair needs a {self.pair.type} tail device")
        return self


class _KeyedError(ValueError):
    def __init__(self, key, value, why):
        super().__init__(f"{key} = {value!r}: {why}")


# ---------------------------------------------------------------- errors
_TAGS = {"npn", "pnp", "nmos", "pmos", "resistor", "mirror", "ideal", "norton",
         "degenerated", "cascode"}

_MESSAGES = {
    "missing": "missing required key",
    "extra_forbidden": "unknown key",
    "greater_than": "must be greater than 0",
    "greater_than_equal": "must be 0 or more (0 means absent)",
    "less_than_equal": "too large",
    "finite_number": "must be finite",
    "int_type": "must be a whole number",
    "int_parsing": "must be a whole number",
    "int_from_float": "must be a whole number",
    "string_type": "must be a string",
    "model_type": "must be a table",
    "model_attributes_type": "must be a table",
}


def _input_repr(value) -> str:
    if isinstance(value, dict):
        return "{…}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _one_line(exc: ValidationError) -> str:
    errs = exc.errors(include_url=False)
    # an unknown key (often a misspelt one) explains a "missing" one: report it first
    err = next((e for e in errs if e["type"] == "extra_forbidden"), errs[0])
    loc = [str(p) for p in err["loc"] if not (isinstance(p, str) and p in _TAGS)]
    key = ".".join(loc)
    kind = err["type"]
    msg = err.get("msg", "")
    if kind == "value_error":
        msg = msg.removeprefix("Value error, ")
        if msg.startswith(("load.", "tail.")) and " = " in msg:   # already keyed
            return msg
    elif kind == "union_tag_invalid":
        tags = err.get("ctx", {}).get("expected_tags", "")
        return f"{key}.type = {err['input'].get('type')!r}: must be one of {tags}"
    elif kind == "union_tag_not_found":
        return f"{key}.type: missing required key"
    else:
        msg = _MESSAGES.get(kind, msg)
    if kind in ("missing",):
        return f"{key}: {msg}"
    if kind == "value_error" and isinstance(err["input"], dict):
        head = msg.split(" = ", 1)[0]
        if " = " in msg and head.isidentifier() and head in err["input"]:   # "ft = 1e9: …"
            return f"{key}.{msg}" if key else msg
        return f"{key or 'design'}: {msg}"
    return f"{key} = {_input_repr(err['input'])}: {msg}"


# ---------------------------------------------------------------- parsing
def parse_design(data: dict[str, Any]) -> Design:
    """Validate a design given as a plain dict (as read from TOML).

    Raises
    ------
    DesignError
        One line naming the key and the value.
    """
    try:
        return Design.model_validate(data)
    except ValidationError as exc:
        raise DesignError(_one_line(exc)) from None


def design_to_dict(design: Design) -> dict[str, Any]:
    """Plain-dict form of a design (SI floats), suitable for TOML or JSON."""
    return design.model_dump(mode="json", by_alias=True, exclude_none=True)


