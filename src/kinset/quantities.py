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


def column_value(table: pd.DataFrame, column: str, label: str) -> Evaluated:
    """A quantity that is a column of an extraction table (N, RS, trr, Qrr, Irrm).

    Devices whose row is rejected, or whose value is missing, get the table's note
    as the reason.
    """
    values = table[column].to_numpy(dtype=float) if column in table else np.full(len(table), np.nan)
    status = table["status"].to_numpy()
    note = table["note"].fillna("").astype(str).to_numpy()
    reason = np.full(len(table), "", dtype=object)
    for i in np.flatnonzero(~np.isfinite(values) | (status == "rejected")):
        first = note[i].split("; ")[0]
        reason[i] = (f"data rejected: {first}" if status[i] == "rejected"
                     else f"no {label} ({first})" if first else f"no {label}")
    values = np.where(reason == "", values, np.nan)
    return Evaluated(table["device"].astype(str).to_numpy(dtype=object), values, reason)


# --------------------------------------------------------------------------- capacitance
CAPACITANCE_BIAS_SLACK_V = 1e-6   # [V] slack on the measured bias range (rounding of the files)
CAPACITANCE_READING_V = 1e-3      # [V] a measured point serves a request within this bias


def capacitance(devices: pd.DataFrame, reverse_voltage: float,
                points: pd.DataFrame | None = None) -> Evaluated:
    """Junction capacitance of each device at a reverse bias, from its fitted law.

    Parameters
    ----------
    devices : DataFrame
        The capacitance extraction table (``capacitance.csv``).
    reverse_voltage : float
        Reverse bias VR [V], positive in reverse.
    points : DataFrame, optional
        The points table (``capacitance_points.csv``). A device with too few biases for
        a fit then serves the mean of its points used in the fit that were measured
        within 1 mV of ``reverse_voltage``.

    Returns
    -------
    Evaluated
        Capacitance [F] per device: CJO/(1 + VR/VJ)^M, plus CP where the package
        capacitance was fitted. NaN with a reason where refused: no fitted law, or a
        bias outside the device's measured range ``vr_min_V``–``vr_max_V`` (never
        extrapolated).
    """
    from kinset.physics.capacitance import junction_capacitance

    n = len(devices)
    vr = float(reverse_voltage)
    value = np.full(n, np.nan)
    reason = np.full(n, "", dtype=object)
    names = devices["device"].astype(str).to_numpy(dtype=object)
    status = devices["status"].astype(str).to_numpy()
    note = devices["note"].fillna("").astype(str).to_numpy()
    law = devices[["cj0_F", "vj_V", "m"]].to_numpy(dtype=float)
    cp = devices["cp_F"].to_numpy(dtype=float) if "cp_F" in devices else np.zeros(n)
    cp = np.where(np.isfinite(cp), cp, 0.0)
    lo = devices["vr_min_V"].to_numpy(dtype=float)
    hi = devices["vr_max_V"].to_numpy(dtype=float)
    fitted = np.isfinite(law).all(axis=1) & (status != "rejected")
    inside = (vr >= lo - CAPACITANCE_BIAS_SLACK_V) & (vr <= hi + CAPACITANCE_BIAS_SLACK_V)
    ok = fitted & inside
    if ok.any():
        value[ok] = junction_capacitance(vr, law[ok, 0], law[ok, 1], law[ok, 2]) + cp[ok]
    for i in np.flatnonzero(fitted & ~inside):
        reason[i] = (f"{vr:g} V is outside the measured reverse-bias range "
                     f"{lo[i]:g}–{hi[i]:g} V")
    for i in np.flatnonzero(~fitted):
        first = note[i].split("; ")[0]
        reason[i] = (f"capacitance data rejected: {first}" if status[i] == "rejected"
                     else first or "no fitted capacitance law")
    want = ~fitted & (status != "rejected")
    if points is not None and want.any():
        p = points[points["used"].astype(int) == 1]
        p = p[np.abs(p["reverse_voltage_V"].to_numpy(dtype=float) - vr) <= CAPACITANCE_READING_V]
        served = p.groupby(p["device"].astype(str))["capacitance_F"].mean()
        for i in np.flatnonzero(want):
            if names[i] in served.index:
                value[i] = served[names[i]]
                reason[i] = ""
            else:
                reason[i] += f"; no point measured at {vr:g} V"
    return Evaluated(names, value, reason)


LEAKAGE_VOLTAGE_SLACK = 1e-6   # relative slack on the modelled reverse-voltage range (rounding)


def reverse_current(devices: pd.DataFrame, reverse_voltage: float,
                    temperature: float) -> Evaluated:
    """Reverse (leakage) current of each device at ``reverse_voltage`` [V] and ``temperature`` [K].

    Parameters
    ----------
    devices : DataFrame
        The leakage extraction table (``leakage.csv``).
    reverse_voltage : float
        Reverse bias, a positive magnitude [V].
    temperature : float
        Junction temperature [K].

    Returns
    -------
    Evaluated
        Current [A] per device from its fitted shunt plus generation model
        (:func:`kinset.physics.leakage.reverse_current`), the generation part scaled
        to ``temperature`` with the law the extraction normalised by (columns
        ``law_eg_eV, law_xti, law_n``). NaN with a reason where refused: no model, or a
        voltage outside the range the model was fitted over (``sweep_min_V`` to
        ``model_max_V``; breakdown above it), never extrapolated.
    """
    from kinset.physics.leakage import leakage_temperature_factor
    from kinset.physics.leakage import reverse_current as _reverse_current

    n = len(devices)
    vr = float(reverse_voltage)
    value = np.full(n, np.nan)
    reason = np.full(n, "", dtype=object)
    names = devices["device"].astype(str).to_numpy(dtype=object)
    status = devices["status"].astype(str).to_numpy()
    note = devices["note"].fillna("").astype(str).to_numpy()
    col = lambda c: devices[c].to_numpy(dtype=float)   # noqa: E731
    rsh, igen = col("rsh_ohm"), col("igen_A")
    m = np.where(np.isfinite(col("gen_m")), col("gen_m"), 0.0)   # no generation part: any M
    lo, hi, full = col("sweep_min_V"), col("model_max_V"), col("sweep_max_V")
    fitted = np.isfinite(igen) & ~np.isnan(rsh) & (status != "rejected")
    inside = (vr >= lo * (1 - LEAKAGE_VOLTAGE_SLACK)) & (vr <= hi * (1 + LEAKAGE_VOLTAGE_SLACK))
    ok = fitted & inside
    if ok.any():
        t0 = col("reference_temperature_C")[ok] + ZERO_CELSIUS
        f = leakage_temperature_factor(temperature, t0, col("law_eg_eV")[ok],
                                       col("law_xti")[ok], col("law_n")[ok])
        value[ok] = _reverse_current(vr, rsh[ok], igen[ok] * f, col("gen_vj_V")[ok], m[ok],
                                     temperature, col("gen_n")[ok])
    for i in np.flatnonzero(fitted & ~inside):
        if vr > hi[i] and full[i] > hi[i] * (1 + LEAKAGE_VOLTAGE_SLACK):
            reason[i] = (f"{vr:g} V is above {hi[i]:.4g} V, where the leakage model ends "
                         f"and breakdown begins (readings up to {full[i]:.4g} V)")
        else:
            reason[i] = (f"{vr:g} V is outside the measured reverse-voltage range "
                         f"{lo[i]:.4g}–{hi[i]:.4g} V")
    for i in np.flatnonzero(~fitted):
        first = note[i].split("; ")[0]
        reason[i] = (f"leakage data rejected: {first}" if status[i] == "rejected"
                     else first or "no fitted leakage model")
    return Evaluated(names, value, reason)
