"""The views layer: what a person reads.

CSV export, Bokeh figures, the standalone HTML report and the comparison
page, the drawn schematic, and the explorer's view model (plain data for the
browser app). Bokeh is imported by the modules that draw, when they are
imported. It imports the studies, analysis, circuit and design layers.
"""
