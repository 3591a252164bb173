"""freqpair: exact small-signal frequency analysis of differential input stages.

Quick use::

    import freqpair
    design = freqpair.load_design("examples/npn_resistor_rc_tail.toml")
    result = freqpair.analyze(design)
    print(result.f3db_hz, result.cmrr_corner_hz)

The package is built in layers, each a subpackage that imports only the ones
below it: ``design`` → ``circuit`` → ``analysis`` → ``studies`` → ``views`` →
``cli`` and ``app`` (see DEVELOPERS.md). The names below are the public face;
each is imported from its layer the first time it is used, so ``import
freqpair`` itself costs nothing.

Results are small-signal models of a stage; a design that goes into hardware
is verified by full simulation and on the bench.
"""
from __future__ import annotations

import importlib

__version__ = "0.2.0"

#: public name -> module that defines it
_PUBLIC = {
    "Analysis": "freqpair.analysis.result",
    "analyze": "freqpair.analysis.result",
    "Design": "freqpair.design.schema",
    "parse_design": "freqpair.design.schema",
    "design_from_text": "freqpair.design.files",
    "load_design": "freqpair.design.files",
    "save_design": "freqpair.design.files",
    "replace_value": "freqpair.design.keys",
    "get_value": "freqpair.design.keys",
    "BiasError": "freqpair.design.errors",
    "DesignError": "freqpair.design.errors",
    "FreqpairError": "freqpair.design.errors",
    "NetworkError": "freqpair.design.errors",
    "FrequencyGrid": "freqpair.circuit.frequency",
    "format_si": "freqpair.design.quantities",
    "parse_si": "freqpair.design.quantities",
    "build_stage": "freqpair.circuit.stage",
    "locus": "freqpair.studies.locus",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'freqpair' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value          # later look-ups skip this function
    return value


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC))
