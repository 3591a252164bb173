"""freqpair: exact small-signal frequency analysis of differential input stages.

Quick use::

    import freqpair
    design = freqpair.load_design("examples/npn_resistor_rc_tail.toml")
    result = freqpair.analyze(design)
    print(result.f3db_hz, result.cmrr_corner_hz)

Results are small-signal models of a stage; a design that goes into hardware
is verified by full simulation and on the bench.
"""
from .analysis import Analysis, analyze
from .design import Design, design_from_text, load_design, parse_design, replace_value, save_design
from .errors import BiasError, DesignError, FreqpairError, NetworkError
from .frequency import FrequencyGrid
from .quantities import format_si, parse_si
from .stage import build_stage

__all__ = ["Analysis", "analyze", "Design", "design_from_text", "load_design", "parse_design",
           "replace_value", "save_design", "BiasError", "DesignError", "FreqpairError",
           "NetworkError", "FrequencyGrid", "format_si", "parse_si", "build_stage"]
__version__ = "0.1.0"
