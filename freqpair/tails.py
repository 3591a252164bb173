"""Tails built from transistors (simple mirror, degenerated, cascode)."""
from __future__ import annotations

from .errors import DesignError


def stamp_transistor_tail(net, design, op, tail_node):
    """Stamp a transistor tail; returns ``(TailNorton, detail)``."""
    raise DesignError(f"tail.type = {design.tail.type!r}: transistor tails are not available yet")
