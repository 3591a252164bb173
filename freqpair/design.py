"""Design files: TOML ↔ validated, immutable design objects.

A design is a tree of frozen pydantic models (one per TOML table). Every
validation problem becomes a :class:`~freqpair.errors.DesignError` whose
message is one line naming the dotted key and the value, e.g.::

    pair.beta = -5: must be greater than 0

Numbers may be plain SI values or SI strings (``"2 pF"``, ``"10kΩ"``);
see :func:`freqpair.quantities.parse_si`.
"""
from __future__ import annotations

import os
import tempfile
import tomllib
from functools import partial
from pathlib import Path
from typing import Annotated, Any, Literal, Optional, Union

import tomli_w
from pydantic import (BaseModel, BeforeValidator, ConfigDict, Field, ValidationError,
                      model_validator)

from .errors import DesignError
from .quantities import parse_si

__all__ = ["Design", "load_design", "parse_design", "design_from_text", "design_to_dict",
           "save_design", "replace_value", "get_value", "BUILTIN_EXAMPLE",
           "load_design_table", "save_design_table", "atomic_write_text", "atomic_write_bytes"]


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


# ---------------------------------------------------------------- I/O
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


def design_from_text(text: str, origin: str = "<text>") -> Design:
    """Parse TOML text into a validated :class:`Design`."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DesignError(f"{origin}: not valid TOML: {exc}") from None
    return parse_design(data)


def load_design(path: str | os.PathLike) -> Design:
    """Read and validate a design file.

    Parameters
    ----------
    path : str or path-like
        A TOML design file (DESIGN.md §3).

    Returns
    -------
    Design
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignError(f"{path}: cannot read design file ({exc.__class__.__name__}: "
                          f"{getattr(exc, 'strerror', None) or exc})") from None
    return design_from_text(text, origin=str(path))


def design_to_dict(design: Design) -> dict[str, Any]:
    """Plain-dict form of a design (SI floats), suitable for TOML or JSON."""
    return design.model_dump(mode="json", by_alias=True, exclude_none=True)


def save_design(design: Design, path: str | os.PathLike) -> None:
    """Write a design as TOML, atomically (temporary file, then rename)."""
    atomic_write_text(path, tomli_w.dumps(design_to_dict(design)))


def load_design_table(path: str | os.PathLike) -> dict[str, Any]:
    """Read a design file as the plain TOML table the user wrote (strings such as
    ``"2.2 pF"`` kept), after checking that it is a valid design."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignError(f"{path}: cannot read design file ({exc.__class__.__name__})") from None
    except tomllib.TOMLDecodeError as exc:
        raise DesignError(f"{path}: not valid TOML: {exc}") from None
    parse_design(data)
    return data


def save_design_table(data: dict[str, Any], path: str | os.PathLike) -> Design:
    """Validate a design table and write it as TOML, atomically, exactly as given.

    Use this (with :func:`load_design_table`) to save a design the user edited:
    the values keep the user's own spelling (``"10 k"`` stays ``"10 k"``);
    :func:`save_design` writes SI floats instead. Nothing is written when the
    table is not a valid design.

    Returns
    -------
    Design
        The validated design.
    """
    design = parse_design(data)
    atomic_write_text(path, tomli_w.dumps(data))
    return design


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write text to ``path`` via a temporary file in the same folder and a rename.

    An interrupted write leaves either the old file or none, never half a file.
    """
    atomic_write_bytes(path, text.encode("utf-8"))


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Bytes version of :func:`atomic_write_text`."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent or ".")
    try:
        # mkstemp creates 0600; give the file the mode a plain open() would
        # (the old file's mode, else 0666 less the umask)
        try:
            mode = os.stat(path).st_mode & 0o777
        except OSError:
            umask = os.umask(0o022)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def get_value(design: Design, key: str):
    """Value at a dotted key, e.g. ``get_value(d, "tail.capacitance")``."""
    node: Any = design_to_dict(design)
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node:
            raise DesignError(f"{key}: no such value in this design")
        node = node[part]
    return node


def replace_value(design: Design, key: str, value) -> Design:
    """A copy of ``design`` with the dotted ``key`` set to ``value`` (validated).

    Sections that are absent (e.g. ``feedback``) are created.
    """
    data = design_to_dict(design)
    node = data
    parts = key.split(".")
    for part in parts[:-1]:
        node = node.setdefault(part, {})
        if not isinstance(node, dict):
            raise DesignError(f"{key}: {part} is not a table")
    node[parts[-1]] = value
    return parse_design(data)


#: A built-in example, used by ``freqpair analyze --example`` and the app.
BUILTIN_EXAMPLE = """\
name = "Built-in example: bipolar pair, 10 k loads, 1 M || 2 pF tail"

[supply]
positive = 12
negative = -12

[bias]
tail_current = "1 mA"
input_common_mode = 0
temperature = 300

[pair]
type = "npn"
beta = 200
early_voltage = 80
vbe = 0.7
base_resistance = 100
cje = "2 pF"
transit_time = "0.3 ns"
cjc0 = "1 pF"
phi_c = 0.75
m_c = 0.33
ccs = "0.5 pF"

[load]
type = "resistor"
resistance = "10 k"
capacitance = "1 pF"

[tail]
type = "norton"
resistance = "1 M"
capacitance = "2 pF"

[source]
resistance = "1 k"

[mismatch]
load = 0.01
gm = 0.0

[sweep]
start = "1 Hz"
stop = "10 GHz"
points_per_decade = 50
"""
