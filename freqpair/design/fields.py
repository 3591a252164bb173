"""A small declarative schema for design tables: frozen classes whose fields say
what they accept, and one builder that turns a plain TOML table into them.

Each field carries a :class:`Spec` in its metadata: an SI number with a unit kind
and a sign rule, a whole number, a string, a nested section, a table chosen by
its ``type`` key, a list of such tables, or a list of numbers. The builder
walks a table against its class and stops at the first problem with one line
that names the dotted key and the value the user wrote, e.g.::

    pair.beta = -5: must be greater than 0
    tail.resistance = '1 M': unknown key
    bias.tail_current: missing required key

Why not a general validation library: this layer is imported by every
command, and the one we used cost a fifth of a second of start-up (more than
the analysis it validates); the rules here are few and fixed by DESIGN.md §3.
"""
from __future__ import annotations

from typing import Any, Callable

from freqpair.design.quantities import parse_si

__all__ = ["Spec", "Section", "KeyedError", "REQUIRED", "num", "whole", "text", "section",
           "tagged", "tagged_list", "num_list", "names", "build", "to_table", "value_repr"]


class _Missing:
    def __repr__(self):
        return "MISSING"

    def __reduce__(self):          # a singleton, also through pickling
        return "_MISSING"


_MISSING = _Missing()


class _Required:
    def __repr__(self):
        return "REQUIRED"

    def __reduce__(self):          # a singleton, also through pickling
        return "REQUIRED"


#: Marks a field without a default.
REQUIRED = _Required()


class KeyedError(ValueError):
    """A problem at a dotted key; ``str()`` is the one-line message."""

    def __init__(self, key: str, why: str, value: Any = _MISSING):
        self.key, self.why, self.value = key, why, value
        if value is _MISSING:
            super().__init__(f"{key}: {why}" if key else why)
        else:
            super().__init__(f"{key} = {value_repr(value)}: {why}")


def value_repr(value) -> str:
    """The value as the user wrote it, shortened for a one-line message."""
    if isinstance(value, dict):
        return "{…}"
    shown = f"{value:g}" if isinstance(value, float) else repr(value)
    return shown if len(shown) <= 60 else shown[:57] + "..."


_SIGN_WHY = {"gt": "must be greater than 0", "ge": "must be 0 or more (0 means absent)"}


class Spec:
    """What one field accepts.

    kind : "num" | "int" | "str" | "section" | "tagged" | "tagged_list" | "num_list"
    unit : unit kind for SI strings (a key of ``quantities.UNIT_ALIASES``)
    sign : "gt" (> 0), "ge" (≥ 0, 0 means absent) or None (any finite value)
    choices : for "tagged"/"tagged_list", ``type`` value → Section class
    default_tag : the ``type`` assumed when a tagged table omits it (None: required)
    check : extra rule on the parsed value, returning an error text or None
    """

    __slots__ = ("kind", "unit", "sign", "cls", "choices", "default_tag", "bounds", "check",
                 "alias")

    def __init__(self, kind: str, unit: str = "none", sign: str | None = None,
                 cls: type | None = None, choices: dict | None = None,
                 default_tag: str | None = None, bounds: tuple | None = None,
                 check: Callable | None = None, alias: str | None = None):
        self.kind, self.unit, self.sign, self.cls = kind, unit, sign, cls
        self.choices, self.default_tag, self.bounds = choices, default_tag, bounds
        self.check, self.alias = check, alias

    def replace(self, **changes) -> "Spec":
        """A copy with ``changes`` applied."""
        values = {k: getattr(self, k) for k in self.__slots__}
        values.update(changes)
        return Spec(**values)


class Field:
    """A declared field of a Section: its spec and default (REQUIRED: none)."""

    __slots__ = ("spec", "default")

    def __init__(self, spec: Spec, default: Any):
        self.spec, self.default = spec, default


def _field(spec: Spec, default):
    if isinstance(default, (list, dict)):
        raise TypeError("mutable default")
    return Field(spec, default)


def num(unit: str, sign: str | None = "gt", default=REQUIRED, *, alias=None, check=None):
    """An SI number field (plain value or string such as ``"2 pF"``)."""
    return _field(Spec("num", unit=unit, sign=sign, alias=alias, check=check), default)


def whole(default=REQUIRED, *, bounds=(1, None)):
    """A whole-number field within ``bounds`` (inclusive; None = open)."""
    return _field(Spec("int", bounds=bounds), default)


def text(default=REQUIRED, *, check=None):
    """A string field."""
    return _field(Spec("str", check=check), default)


def names(length=None, default=REQUIRED):
    """A list of strings (``length`` exact when given), e.g. two node names."""
    return _field(Spec("str_list", bounds=(length, length)), default)


def section(cls, default=REQUIRED):
    """A nested table of class ``cls`` (None default: the table is optional)."""
    return _field(Spec("section", cls=cls), default)


def tagged(choices: dict, default=REQUIRED, *, default_tag=None):
    """A table whose ``type`` key picks its class from ``choices``."""
    return _field(Spec("tagged", choices=choices, default_tag=default_tag), default)


def tagged_list(choices: dict, tag_key: str = "kind", default=()):
    """An array of tables, each picking its class by ``tag_key``."""
    return _field(Spec("tagged_list", choices=choices, alias=tag_key), default)


def num_list(unit: str, sign: str | None = "gt", default=REQUIRED, *, length=None, check=None):
    """A list of SI numbers (``length`` exact when given)."""
    return _field(Spec("num_list", unit=unit, sign=sign, bounds=(length, length),
                       check=check), default)


class Section:
    """Base of every design table: an immutable object built from keyword values.

    Fields are declared as class attributes (``beta = num("none")``), base
    classes' first; equality, hashing and ``repr`` follow the fields.
    Subclasses may define ``_validate(self)`` raising :class:`KeyedError`
    (keys relative to the table) for rules between fields.
    """

    _fields: tuple = ()

    def __init_subclass__(cls, **kw):
        super().__init_subclass__(**kw)
        own = [(name, v) for name, v in vars(cls).items() if isinstance(v, Field)]
        names = {n for n, _ in own}
        cls._fields = tuple((n, f) for n, f in cls._fields if n not in names) + tuple(own)

    def __init__(self, **values):
        for name, f in self._fields:
            if name in values:
                value = values.pop(name)
            elif f.default is REQUIRED:
                raise TypeError(f"{type(self).__name__}: missing {name}")
            else:
                value = f.default
            object.__setattr__(self, name, value)
        if values:
            raise TypeError(f"{type(self).__name__}: unknown {', '.join(values)}")

    def __setattr__(self, name, value):
        raise AttributeError(f"{type(self).__name__} is immutable; use replace_value")

    def _values(self) -> tuple:
        return tuple(getattr(self, n) for n, _ in self._fields)

    def __eq__(self, other):
        if type(other) is not type(self):
            return NotImplemented
        return self._values() == other._values()

    def __hash__(self):
        return hash((type(self), self._values()))

    def __repr__(self):
        inner = ", ".join(f"{n}={getattr(self, n)!r}" for n, _ in self._fields)
        return f"{type(self).__name__}({inner})"

    def _validate(self) -> None:
        return None


class _Declared:
    """What ``_specs`` yields: a field's attribute name and default."""

    __slots__ = ("name", "default")

    def __init__(self, name, default):
        self.name = name
        self.default = _MISSING if default is REQUIRED else default


def _specs(cls):
    return [(_Declared(n, f.default), f.spec) for n, f in cls._fields]


def _table_keys(cls) -> dict:
    """TOML key → (field, spec) of a Section class, computed once per class."""
    cached = cls.__dict__.get("_by_key")
    if cached is None:
        cached = {(s.alias or f.name) if s.kind != "tagged_list" else f.name: (f, s)
                  for f, s in _specs(cls)}
        cls._by_key = cached
    return cached


def _key(path: str, name: str) -> str:
    return f"{path}.{name}" if path else name


def _number(value, key: str, spec: Spec) -> float:
    try:
        x = parse_si(value, field="", unit=spec.unit)
    except ValueError as exc:
        raise KeyedError(key, str(exc), value) from None
    if spec.sign == "gt" and not x > 0:
        raise KeyedError(key, _SIGN_WHY["gt"], value)
    if spec.sign == "ge" and not x >= 0:
        raise KeyedError(key, _SIGN_WHY["ge"], value)
    if spec.check is not None:
        why = spec.check(x)
        if why:
            raise KeyedError(key, why, value)
    return x


def _value(value, key: str, spec: Spec, context: dict):
    kind = spec.kind
    if kind == "num":
        return _number(value, key, spec)
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise KeyedError(key, "must be a whole number", value)
        lo, hi = spec.bounds or (None, None)
        if lo is not None and value < lo:
            raise KeyedError(key, f"must be {lo} or more", value)
        if hi is not None and value > hi:
            raise KeyedError(key, "too large", value)
        return value
    if kind == "str":
        if not isinstance(value, str):
            raise KeyedError(key, "must be a string", value)
        if spec.check is not None:
            why = spec.check(value)
            if why:
                raise KeyedError(key, why, value)
        return value
    if kind == "str_list":
        n = (spec.bounds or (None, None))[0]
        if (not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value)
                or (n is not None and len(value) != n)):
            count = f"{n} " if n is not None else ""
            raise KeyedError(key, f"must be a list of {count}names", value)
        return tuple(value)
    if kind == "section":
        return build(spec.cls, value, key, context)
    if kind == "tagged":
        return _tagged(value, key, spec.choices, "type", spec.default_tag, context)
    if kind == "tagged_list":
        if not isinstance(value, (list, tuple)):
            raise KeyedError(key, "must be an array of tables ([[" + key + "]])", value)
        return tuple(_tagged(item, f"{key}.{i}", spec.choices, spec.alias, None, context)
                     for i, item in enumerate(value))
    if kind == "num_list":
        if isinstance(value, (str, int, float)) and not isinstance(value, bool):
            value = [value]
        if not isinstance(value, (list, tuple)):
            raise KeyedError(key, "must be a list of values", value)
        n = (spec.bounds or (None, None))[0]
        if n is not None and len(value) != n:
            raise KeyedError(key, f"must be a list of {n} values", value)
        if not value:
            raise KeyedError(key, "must hold at least one value", value)
        item = spec.replace(kind="num", check=None)
        out = tuple(_number(v, key, item) for v in value)
        if spec.check is not None:
            why = spec.check(out)
            if why:
                raise KeyedError(key, why, value)
        return out
    raise TypeError(kind)   # pragma: no cover


def _tagged(value, key: str, choices: dict, tag_key: str, default_tag, context: dict):
    if not isinstance(value, dict):
        raise KeyedError(key, "must be a table", value)
    tag = value.get(tag_key, default_tag)
    if tag is None:
        raise KeyedError(f"{key}.{tag_key}", "missing required key")
    if tag not in choices:
        allowed = ", ".join(repr(c) for c in choices)
        raise KeyedError(f"{key}.{tag_key}", f"must be one of {allowed}", tag)
    return build(choices[tag], value, key, context)


def build(cls, data, path: str = "", context: dict | None = None):
    """Build a Section of class ``cls`` from a plain table.

    Parameters
    ----------
    cls : type
        A Section subclass.
    data : dict
        The table as read from TOML (values may be SI strings).
    path : str
        Dotted key of the table, for messages.
    context : dict, optional
        Shared with nested builds (e.g. the pair's type for its cascode).

    Raises
    ------
    KeyedError
        One line naming the dotted key and the value.
    """
    context = {} if context is None else context
    if not isinstance(data, dict):
        raise KeyedError(path or "design", "must be a table", data)
    by_key = _table_keys(cls)
    tag_key = getattr(cls, "TAG_KEY", "type") if getattr(cls, "TAG", None) else None
    for k, v in data.items():
        if k not in by_key and k != tag_key:
            raise KeyedError(_key(path, k), "unknown key", v)
    values = {}
    for name, (f, spec) in by_key.items():
        key = _key(path, name)
        if name in data:
            if spec.kind == "tagged" and spec.default_tag == "@self":
                spec = spec.replace(default_tag=cls.TAG)
            values[f.name] = _value(data[name], key, spec, context)
        elif f.default is _MISSING:
            raise KeyedError(key, "missing required key")
    obj = cls(**values)
    try:
        obj._validate()
    except KeyedError as exc:
        raise KeyedError(_key(path, exc.key), exc.why, exc.value) from None
    return obj


def to_table(obj) -> Any:
    """The plain-table form of a Section (SI floats, TOML key names, None left out)."""
    if isinstance(obj, Section):
        out = {}
        tag = getattr(type(obj), "TAG", None)
        if tag is not None:
            out[getattr(type(obj), "TAG_KEY", "type")] = tag
        for f, spec in _specs(type(obj)):
            v = getattr(obj, f.name)
            if v is None:
                continue
            name = spec.alias if (spec.alias and spec.kind != "tagged_list") else f.name
            out[name] = to_table(v)
        return out
    if isinstance(obj, tuple):
        return [to_table(v) for v in obj]
    return obj
