"""Physical constants [SI].

Both are exact by definition in the SI since 2019 (and so in CODATA 2018 and
later); ``tests/test_constants.py`` checks them against :mod:`scipy.constants`.
They are written out here so that the analysis need not import
:mod:`scipy.constants` (its CODATA table costs more start-up than it saves).
"""
from __future__ import annotations

__all__ = ["BOLTZMANN_J_PER_K", "ELEMENTARY_CHARGE_C"]

#: Boltzmann constant k [J/K] (exact)
BOLTZMANN_J_PER_K = 1.380649e-23
#: elementary charge q [C] (exact)
ELEMENTARY_CHARGE_C = 1.602176634e-19
