"""freqpair explorer for ``bokeh serve apps/explorer`` from a checkout.

The app itself ships inside the package (freqpair/app/); ``freqpair app``
serves that copy. This directory only builds the same view.
"""
import os
import sys

from bokeh.io import curdoc

from freqpair.app import DESIGN_ENV
from freqpair.app.view import make_doc

make_doc(curdoc(), sys.argv[1] if len(sys.argv) > 1 else os.environ.get(DESIGN_ENV) or None)
