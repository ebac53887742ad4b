"""Quantities at a condition: from the fitted model, refused outside the measured range."""

import numpy as np
import pandas as pd
import pytest

from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.physics.forward import voltage_from_current, saturation_current_at
from kinset.quantities import forward_voltage, forward_voltage_tempco

T25 = 298.15
SI = ForwardSettings(T25, T25, 1.11, 3.0, 0.0)


def table():
    rows = []
    for dev, currents in {"A": np.logspace(-5, -2, 20), "B": np.logspace(-5, -3, 15),
                          "S": [0.63e-3]}.items():
        v = voltage_from_current(np.asarray(currents), 2.7e-9, 1.85, 0.6, T25)
        rows.append(pd.DataFrame({"device": dev, "voltage": v, "current": currents,
                                  "temperature": T25, "position": np.nan, "source": "m",
                                  "line": 0}))
    return fit_forward(pd.concat(rows), SI)


def test_voltage_at_current_and_temperature_from_model():
    devices, readings = table()
    ev = forward_voltage(devices, 1e-3, 308.15, readings)
    got = dict(zip(ev.device, ev.value))
    expect = voltage_from_current(1e-3, saturation_current_at(2.7e-9, 308.15, T25, 1.85, 1.11, 3),
                                  1.85, 0.6, 308.15)
    assert got["A"] == pytest.approx(expect, abs=1e-9)
    assert got["B"] == pytest.approx(expect, abs=1e-9)


def test_outside_measured_range_is_refused_with_reason():
    devices, readings = table()
    ev = forward_voltage(devices, 1e-2, T25, readings)
    r = dict(zip(ev.device, ev.reason))
    v = dict(zip(ev.device, ev.value))
    assert np.isnan(v["B"]) and "outside the measured forward range" in r["B"]
    assert np.isfinite(v["A"]) and r["A"] == ""


def test_single_point_serves_only_its_own_current():
    devices, readings = table()
    at_own = forward_voltage(devices, 0.63e-3, T25, readings)
    i = list(at_own.device).index("S")
    assert at_own.value[i] == pytest.approx(voltage_from_current(0.63e-3, 2.7e-9, 1.85, 0.6, T25))
    elsewhere = forward_voltage(devices, 1e-3, T25, readings)
    assert np.isnan(elsewhere.value[i])
    assert "cannot see crossing curves" in elsewhere.reason[i]


def test_tempco_needs_a_fit():
    devices, _ = table()
    ev = forward_voltage_tempco(devices, 1e-3, T25)
    g = dict(zip(ev.device, ev.value))
    # Common practice: about −2 mV/K for a silicon small-signal diode near 1 mA.
    assert -2.5e-3 < g["A"] < -1.5e-3
    assert np.isnan(g["S"])
