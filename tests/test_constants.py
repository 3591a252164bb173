"""The physical constants freqpair uses, against CODATA.

Oracle: scipy.constants (CODATA; k and q exact in the SI since 2019).
"""
import scipy.constants as sc

from freqpair.circuit.constants import BOLTZMANN_J_PER_K, ELEMENTARY_CHARGE_C
from freqpair.circuit.devices import thermal_voltage


def test_boltzmann_and_elementary_charge_are_the_codata_values():
    assert BOLTZMANN_J_PER_K == sc.k
    assert ELEMENTARY_CHARGE_C == sc.e


def test_thermal_voltage_at_300_k_is_kt_over_q():
    assert thermal_voltage(300.0) == sc.k * 300.0 / sc.e
    assert abs(thermal_voltage(300.0) - 25.852e-3) < 1e-6      # ≈ 25.85 mV (DESIGN.md §2)
