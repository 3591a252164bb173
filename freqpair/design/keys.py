"""Dotted keys into a design: read one value, or a validated copy with one value replaced.

A key names a table path (``"tail.capacitance"``); inside an array of tables
(the added elements) one item is named by its ``name`` or by its index from 0:
``"element.tail wiring.value"`` or ``"element.0.value"`` (DESIGN.md §7d).
"""
from __future__ import annotations

from typing import Any

from freqpair.design.errors import DesignError
from freqpair.design.schema import Design, design_to_dict, parse_design

__all__ = ["get_value", "replace_value"]


def _item(items: list, part: str, key: str) -> dict:
    """The table of an array named by ``part``: an index from 0, or an item's ``name``."""
    if part.isdigit():
        i = int(part)
        if i < len(items):
            return items[i]
        raise DesignError(f"{key}: index {i} is out of range ({len(items)} items)")
    for item in items:
        if isinstance(item, dict) and item.get("name") == part:
            return item
    names = ", ".join(repr(it.get("name")) for it in items if isinstance(it, dict)
                      and it.get("name") is not None)
    raise DesignError(f"{key}: no item named {part!r}" + (f" (names: {names})" if names else ""))


def get_value(design: Design, key: str):
    """Value at a dotted key, e.g. ``get_value(d, "tail.capacitance")``."""
    node: Any = design_to_dict(design)
    for part in key.split("."):
        if isinstance(node, list):
            node = _item(node, part, key)
            continue
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
        if isinstance(node, list):
            node = _item(node, part, key)
            continue
        node = node.setdefault(part, {})
        if not isinstance(node, (dict, list)):
            raise DesignError(f"{key}: {part} is not a table")
    if isinstance(node, list):
        raise DesignError(f"{key}: name a value inside the item (e.g. {key}.value)")
    node[parts[-1]] = value
    return parse_design(data)
