"""The explorer's views that are computed only while shown (loop, supply, noise, ...).

Each panel is an object with ``title``, ``layout()`` and ``show(explorer)``
(see :meth:`freqpair.app.view.Explorer.add_panel`). :func:`make_panels` lists
them in tab order, after the fixed views (Gains, CMRR, Poles & zeros, Numbers,
Hand estimates).
"""
from __future__ import annotations

__all__ = ["make_panels"]


def make_panels() -> list:
    """New panel objects for one session, in tab order."""
    from freqpair.app.loop_panel import LoopPanel
    from freqpair.app.noise_panel import NoisePanel
    from freqpair.app.supply_panel import SupplyPanel
    return [LoopPanel(), SupplyPanel(), NoisePanel()]
