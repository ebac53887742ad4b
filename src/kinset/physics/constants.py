"""Physical constants and the thermal voltage.

The Boltzmann constant and the elementary charge are defining constants of the SI since
2019, exact by definition (BIPM, The International System of Units, 9th ed., 2019, Table
1); CODATA 2018, and so scipy.constants, gives the same numbers (tests/test_forward_physics.py
checks them against scipy.constants). Written here rather than imported: scipy.constants
cost every step that needs kT/q ~0.13 s of start-up (issue 18).
"""

from __future__ import annotations

import numpy as np

from kinset.si import ZERO_CELSIUS  # noqa: F401  [K], re-exported beside the constants

BOLTZMANN = 1.380649e-23            # [J/K], exact
ELEMENTARY_CHARGE = 1.602176634e-19  # [C], exact


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
