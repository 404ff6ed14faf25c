"""Physical constants and the few formulas every layer shares (SI units)."""

from __future__ import annotations

import numpy as np

__all__ = ["BOLTZMANN", "CHARGE", "T_REF", "celsius", "thermal_voltage"]

#: Boltzmann constant, J/K (exact in the 2019 SI).
BOLTZMANN = 1.380649e-23
#: Elementary charge, C (exact in the 2019 SI).
CHARGE = 1.602176634e-19
#: Reference temperature of datasheets and models, 25 °C in kelvin.
T_REF = 298.15


def thermal_voltage(temperature):
    """kT/q in volts at a temperature in kelvin (25.852 mV at 300 K)."""
    return BOLTZMANN * np.asarray(temperature, dtype=float) / CHARGE if np.ndim(temperature) else BOLTZMANN * float(temperature) / CHARGE


def celsius(kelvin):
    """Kelvin to degrees Celsius, for display."""
    return kelvin - 273.15
