"""Physical constants (CODATA, through scipy.constants) and the thermal voltage."""

from __future__ import annotations

import numpy as np
from scipy import constants as _c

from kinset.si import ZERO_CELSIUS  # noqa: F401  [K], re-exported beside the CODATA constants

BOLTZMANN = _c.k            # [J/K]
ELEMENTARY_CHARGE = _c.e    # [C]


def thermal_voltage(temperature):
    """Thermal voltage kT/q.

    Parameters
    ----------
    temperature : array_like
        Junction temperature [K].

    Returns
    -------
    numpy.ndarray or float
        kT/q [V].
    """
    return BOLTZMANN * np.asarray(temperature, dtype=float) / ELEMENTARY_CHARGE
