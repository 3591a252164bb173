"""freqpair explorer (Bokeh directory app): builds the view, nothing else."""
import os
import sys

from bokeh.io import curdoc

from freqpair.app import DESIGN_ENV
from freqpair.app.view import make_doc

make_doc(curdoc(), sys.argv[1] if len(sys.argv) > 1 else os.environ.get(DESIGN_ENV) or None)
