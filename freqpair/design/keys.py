"""Dotted keys into a design: read one value, or a validated copy with one value replaced."""
from __future__ import annotations

from typing import Any

from freqpair.design.errors import DesignError
from freqpair.design.schema import Design, design_to_dict, parse_design

__all__ = ["get_value", "replace_value"]


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
