"""The app layer: the browser explorer (a Bokeh server directory app) shipped inside the package.

It sits on top with the command line and may import every layer below; its
widgets call the explorer's view model (:mod:`freqpair.views.explore`) and
the plot builders, and nothing in freqpair imports it but ``freqpair app``.
``app_dir()`` is the directory app served by ``freqpair app``; its ``main.py``
only calls :func:`freqpair.app.view.make_doc`. Keeping it inside the package
means a normal (non-editable) install serves it too.
"""
from __future__ import annotations

from pathlib import Path

__all__ = ["app_dir", "DESIGN_ENV"]

#: Environment variable the app reads the design path from (when no argument is given).
DESIGN_ENV = "FREQPAIR_APP_DESIGN"


def app_dir() -> Path:
    """Folder of the explorer directory app (contains ``main.py``)."""
    return Path(__file__).resolve().parent / "explorer"
