"""Quantities at a condition, evaluated per device from the extraction tables.

These are what the matcher compares: forward voltage at a current and temperature,
and its temperature coefficient, from each device's fitted model. A condition
outside what was measured is refused with a reason, never extrapolated.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from kinset.format import si
from kinset.physics.constants import ZERO_CELSIUS
from kinset.physics.forward import (forward_voltage_tempco as _tempco,
                                    saturation_current_at, voltage_from_current)

# A reading serves a requested current within this relative difference (1 % of
# current moves a silicon junction's voltage by about N·Vt·0.01 ≈ 0.5 mV).
READING_CURRENT_REL = 0.01
READING_TEMPERATURE_K = 0.5   # [K] a reading serves only at its own temperature
RANGE_SLACK = 1e-6            # relative slack on the measured current range (rounding)


@dataclass
class Evaluated:
    """Values per device (NaN where refused) and the reason for each refusal ('' if none)."""

    device: np.ndarray
    value: np.ndarray
    reason: np.ndarray

    def frame(self, name: str) -> pd.DataFrame:
        return pd.DataFrame({"device": self.device, name: self.value, f"{name}_reason": self.reason})


def _fitted(devices: pd.DataFrame) -> np.ndarray:
    cols = devices[["is_A", "n", "rs_ohm"]].to_numpy(dtype=float)
    return np.isfinite(cols).all(axis=1) & (devices["status"].to_numpy() != "rejected")


def _range_reasons(devices: pd.DataFrame, current: float) -> np.ndarray:
    lo = devices["i_min_A"].to_numpy(dtype=float)
    hi = devices["i_max_A"].to_numpy(dtype=float)
    inside = (current >= lo * (1 - RANGE_SLACK)) & (current <= hi * (1 + RANGE_SLACK))
    out = np.full(len(devices), "", dtype=object)
    for i in np.flatnonzero(~inside):
        out[i] = (f"{si(current, 'A')} is outside the measured forward range "
                  f"{si(lo[i], 'A')}–{si(hi[i], 'A')}")
    return out


def _no_model_reason(devices: pd.DataFrame, i: int) -> str:
    status = devices["status"].iloc[i]
    note = str(devices["note"].iloc[i] or "")
    if status == "rejected":
        return f"forward data rejected: {note}"
    return note.split("; ")[0] or "no fitted forward model"


def forward_voltage(devices: pd.DataFrame, current: float, temperature: float,
                    readings: pd.DataFrame | None = None) -> Evaluated:
    """Forward voltage of each device at ``current`` [A] and junction ``temperature`` [K].

    Parameters
    ----------
    devices : DataFrame
        The forward extraction table (``forward.csv``).
    current : float
        Forward current [A].
    temperature : float
        Junction temperature [K].
    readings : DataFrame, optional
        The readings table (``forward_readings.csv``). Devices with one or two
        readings have no fitted model; a reading serves when it was taken within
        1 % of ``current`` and 0.5 K of ``temperature``.

    Returns
    -------
    Evaluated
        Voltage [V] per device, NaN with a reason where refused.
    """
    n_dev = len(devices)
    value = np.full(n_dev, np.nan)
    fitted = _fitted(devices)
    reason = _range_reasons(devices, current)
    if fitted.any():
        d = devices[fitted]
        t0 = d["reference_temperature_C"].to_numpy(float) + ZERO_CELSIUS
        n = d["n"].to_numpy(float)
        i_s = saturation_current_at(d["is_A"].to_numpy(float), temperature, t0, n,
                                    d["eg_eV"].to_numpy(float), d["xti"].to_numpy(float))
        v = voltage_from_current(current, i_s, n, d["rs_ohm"].to_numpy(float), temperature)
        value[fitted] = np.where(reason[fitted] == "", v, np.nan)
    for i in np.flatnonzero(~fitted):
        reason[i] = _no_model_reason(devices, i)
    if readings is not None and (~fitted).any():
        _serve_readings(devices, readings, current, temperature, fitted, value, reason)
    return Evaluated(devices["device"].to_numpy(dtype=object), value, reason)


def _serve_readings(devices, readings, current, temperature, fitted, value, reason):
    """Fill unfitted devices from readings taken at the requested condition."""
    want = set(devices["device"].to_numpy()[~fitted & (devices["status"] != "rejected").to_numpy()])
    r = readings[readings["device"].isin(want) & (readings["used"] == 1)]
    close = (np.abs(np.log(r["current_A"].to_numpy(float) / current)) <= READING_CURRENT_REL) & \
            (np.abs(r["temperature_C"].to_numpy(float) + ZERO_CELSIUS - temperature)
             <= READING_TEMPERATURE_K)
    served = r[close].groupby("device")["voltage_V"].mean()
    index = {d: i for i, d in enumerate(devices["device"].to_numpy())}
    for dev, v in served.items():
        i = index[dev]
        value[i] = v
        reason[i] = ""
    for dev in want - set(served.index):
        i = index[dev]
        reason[i] = (f"{_no_model_reason(devices, i)}; no reading at {si(current, 'A')} and "
                     f"{temperature - ZERO_CELSIUS:.3g} °C")


def forward_voltage_tempco(devices: pd.DataFrame, current: float,
                           temperature: float) -> Evaluated:
    """dV/dT of each device's forward voltage at ``current`` [A] and ``temperature`` [K].

    Needs a fitted model; a single reading cannot give a slope.

    Returns
    -------
    Evaluated
        dV/dT [V/K] per device, NaN with a reason where refused.
    """
    n_dev = len(devices)
    value = np.full(n_dev, np.nan)
    fitted = _fitted(devices)
    reason = _range_reasons(devices, current)
    if fitted.any():
        d = devices[fitted]
        t0 = d["reference_temperature_C"].to_numpy(float) + ZERO_CELSIUS
        g = _tempco(current, d["is_A"].to_numpy(float), d["n"].to_numpy(float),
                    d["rs_ohm"].to_numpy(float), temperature, t0,
                    d["eg_eV"].to_numpy(float), d["xti"].to_numpy(float))
        value[fitted] = np.where(reason[fitted] == "", g, np.nan)
    for i in np.flatnonzero(~fitted):
        reason[i] = _no_model_reason(devices, i) + "; a temperature coefficient needs a fitted curve"
    return Evaluated(devices["device"].to_numpy(dtype=object), value, reason)
