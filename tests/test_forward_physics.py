"""Forward diode law: closed forms against outside references."""

import numpy as np
import pytest
from scipy import constants

from kinset.physics.constants import thermal_voltage
from kinset.physics.forward import (current_from_voltage, forward_voltage_tempco,
                                    saturation_current_at, voltage_from_current,
                                    voltage_from_log_current)


def test_thermal_voltage_codata():
    # scipy.constants (CODATA): kT/q = 25.852 mV at 300 K.
    assert thermal_voltage(300.0) == pytest.approx(25.852e-3, abs=5e-7)
    assert thermal_voltage(300.0) == pytest.approx(constants.k * 300 / constants.e, rel=1e-15)


def test_constants_are_scipys_codata_values():
    # scipy.constants (CODATA 2018; k and e exact since the 2019 SI): the same floats
    from kinset.physics.constants import BOLTZMANN, ELEMENTARY_CHARGE
    assert BOLTZMANN == constants.k and ELEMENTARY_CHARGE == constants.e


def test_banwell_jayakumar_against_ngspice_value():
    # ngspice 39 (Debian): IS = 1e-14 A, N = 1.5, RS = 10 Ohm at 27 °C draws about
    # 1.1592 mA at 1.0 V. Closed form: Banwell & Jayakumar, Electronics Letters 36(4), 2000.
    i = current_from_voltage(1.0, 1e-14, 1.5, 10.0, 300.15)
    assert i == pytest.approx(1.1592e-3, abs=0.00005e-3)


def test_lambert_w_inverts_the_explicit_form_over_decades():
    # Self-consistency across 12 decades of current, and RS = 0 on its explicit branch.
    i = np.logspace(-12, 0, 49)
    for rs in (0.0, 1e-3, 0.7, 50.0):
        v = voltage_from_current(i, 2.5e-9, 1.85, rs, 298.15)
        back = current_from_voltage(v, 2.5e-9, 1.85, rs, 298.15)
        np.testing.assert_allclose(back, i, rtol=1e-9)


def test_no_overflow_at_large_voltage():
    # Wright omega takes the exponent directly: 50 V across 1 Ohm must give ~50 A, not inf.
    i = current_from_voltage(50.0, 1e-14, 1.0, 1.0, 298.15)
    assert np.isfinite(i) and 48 < i < 50


def test_log_form_agrees_with_explicit_form():
    i = np.logspace(-15, -1, 30)
    a = voltage_from_current(i, 1e-14, 1.2, 3.0, 310.0)
    b = voltage_from_log_current(np.log(i), np.log(1e-14), 1.2, 3.0, 310.0)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15)


def test_saturation_current_temperature_law_at_reference_is_identity():
    assert saturation_current_at(3e-9, 298.15, 298.15, 1.9, 1.11, 3) == pytest.approx(3e-9)


def test_saturation_current_rise_silicon():
    # From memory (Sedra & Smith, Microelectronic Circuits): IS of a silicon junction
    # rises about 15 %/K, roughly doubling for every 5 K, near room temperature
    # (N = 1, EG = 1.11 eV, XTI = 3, the SPICE defaults). Over 10 K: about 3–5.5x.
    r = saturation_current_at(1e-14, 308.15, 298.15, 1.0, 1.11, 3) / 1e-14
    assert 3.0 < r < 5.5


def test_tempco_matches_numerical_derivative():
    def v(t):
        return voltage_from_current(1e-3, saturation_current_at(3e-9, t, 298.15, 1.9, 1.11, 3),
                                    1.9, 0.6, t)
    numeric = (v(298.65) - v(297.65)) / 1.0
    analytic = forward_voltage_tempco(1e-3, 3e-9, 1.9, 0.6, 298.15, 298.15, 1.11, 3)
    assert analytic == pytest.approx(numeric, rel=1e-5)


def test_silicon_tempco_common_practice():
    # Common practice: a silicon small-signal diode's forward voltage falls about 2 mV/K
    # near 1 mA. Parameters of a typical switching diode, from memory.
    g = forward_voltage_tempco(1e-3, 2.7e-9, 1.85, 0.6, 298.15, 298.15, 1.11, 3)
    assert -2.5e-3 < g < -1.5e-3
