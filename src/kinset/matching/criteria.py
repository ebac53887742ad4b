"""From extraction tables to the numbers a profile matches on.

Each profile dimension becomes one value per device, evaluated from the fitted
models at the profile's temperature; a device that lacks the data, or is asked
outside what was measured, gets a reason instead. Screening limits are checked
here too, and the guard band of each tolerance is derived from the instruments'
accuracy.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data — Guide to the expression of
   uncertainty in measurement, §4.3.7 (rectangular distribution: u = a/√3).
.. [2] JCGM 106:2012, Evaluation of measurement data — The role of measurement
   uncertainty in conformity assessment, §8 (guarded acceptance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from kinset import quantities as qty
from kinset.format import si
from kinset.matching.profile import QUANTITIES, Dimension, Profile, Screen

SQRT3 = math.sqrt(3.0)


@dataclass
class Evaluation:
    """Values of every dimension per device, and why a device cannot be matched."""

    devices: np.ndarray          # all devices seen, sorted
    values: pd.DataFrame         # device index, one column per dimension (NaN = missing)
    reasons: dict[str, list[str]]  # device -> reasons it cannot take part
    guards: dict[str, float]     # dimension -> guard band (SI, or fraction when relative)
    typical: dict[str, float]    # dimension -> median value over the reel


def _evaluate(quantity: str, condition: float | None, tables: dict[str, pd.DataFrame],
              temperature: float) -> qty.Evaluated | None:
    """One quantity at one condition for every device of its table (None: no table)."""
    q = QUANTITIES[quantity]
    table = tables.get(q.dataset)
    if table is None:
        return None
    if quantity == "forward_voltage":
        return qty.forward_voltage(table, condition, temperature, tables.get("forward_readings"))
    if quantity == "forward_voltage_tempco":
        return qty.forward_voltage_tempco(table, condition, temperature)
    if quantity == "reverse_current":
        return qty.reverse_current(table, condition, temperature)
    if quantity == "capacitance":
        return qty.capacitance(table, condition)
    return qty.column_value(table, q.column, q.label)


def _accuracy_bound(profile: Profile, dim: Dimension | Screen, typical: float,
                    accuracy: dict) -> float:
    """Guard band of a tolerance: twice the standard uncertainty of a difference.

    The instrument's specification ±(gain·reading + offset) is read as the half-width
    ``a`` of a rectangular distribution, u = a/√3 [1]; the difference of two readings
    (independent errors) has u·√2, and acceptance with coverage factor 2 needs
    spread ≤ T − 2·√2·u [2].
    """
    kind = QUANTITIES[dim.quantity].accuracy
    if profile.settings["guard_band"] != "accuracy" or kind is None:
        return 0.0
    spec = accuracy.get(kind, {})
    offset_key = next((k for k in spec if k.startswith("offset")), None)
    a = spec.get("gain", 0.0) * abs(typical) + (spec.get(offset_key, 0.0) if offset_key else 0.0)
    return 2.0 * math.sqrt(2.0) * a / SQRT3


def evaluate(profile: Profile, tables: dict[str, pd.DataFrame], all_devices,
             accuracy: dict) -> Evaluation:
    """Evaluate every dimension and screen of ``profile`` for ``all_devices``."""
    devices = np.asarray(sorted(set(map(str, all_devices))), dtype=object)
    index = pd.Index(devices, name="device")
    reasons: dict[str, list[str]] = {d: [] for d in devices}
    values = pd.DataFrame(index=index)
    guards, typical = {}, {}
    t = profile.temperature

    def collect(quantity, condition):
        ev = _evaluate(quantity, condition, tables, t)
        col = pd.Series(np.nan, index=index)
        why = pd.Series("", index=index, dtype=object)
        dataset = QUANTITIES[quantity].dataset
        if ev is None:
            why[:] = f"no {dataset} data in this reel"
            return col, why
        ev_index = pd.Index(ev.device.astype(str))      # device ids are unique per table
        got = pd.Series(ev.value, index=ev_index)
        present = index.isin(ev_index)
        col[present] = got.reindex(index[present]).to_numpy()
        why[present] = pd.Series(ev.reason, index=ev_index).reindex(index[present]).to_numpy()
        why[~present] = f"no {dataset} data"
        return col, why

    for dim in profile.dimensions:
        col, why = collect(dim.quantity, dim.condition)
        if dim.relative:
            bad = col.notna() & ~(col > 0)
            why[bad] = f"{dim.describe()} is not positive, cannot be matched in percent"
            col[bad] = np.nan
        values[dim.name] = col
        for dev in index[why.to_numpy() != ""]:
            reasons[dev].append(f"{dim.describe()}: {why[dev]}")
        finite = col[np.isfinite(col)]
        typical[dim.name] = float(finite.median()) if len(finite) else math.nan
        guards[dim.name] = _accuracy_bound(profile, dim, typical[dim.name], accuracy)

    for screen in profile.screens:
        col, why = collect(screen.quantity, screen.condition)
        for dev in index:
            if why[dev]:
                reasons[dev].append(f"screen on {screen.describe()}: {why[dev]}")
                continue
            v = col[dev]
            if screen.maximum is not None and v > screen.maximum:
                reasons[dev].append(f"screen: {screen.describe()} {si(v, screen.unit)} is above "
                                    f"the limit {si(screen.maximum, screen.unit)}")
            if screen.minimum is not None and v < screen.minimum:
                reasons[dev].append(f"screen: {screen.describe()} {si(v, screen.unit)} is below "
                                    f"the limit {si(screen.minimum, screen.unit)}")
    return Evaluation(devices, values, reasons, guards, typical)


def effective_tolerance(dim: Dimension, guard: float, typical: float) -> float:
    """Tolerance left after the guard band: SI for absolute, a fraction for percent."""
    if dim.relative:
        return dim.tolerance - (guard / abs(typical) if typical else 0.0)
    return dim.tolerance - guard


def normalise(values: np.ndarray, dim: Dimension, effective: float) -> np.ndarray:
    """Coordinates in which a set is valid when its spread is at most 1."""
    if dim.relative:
        return np.log(values) / math.log1p(effective)
    return values / effective


def spread(values: np.ndarray, dim: Dimension) -> float:
    """Spread of one set in one dimension: max − min, or max/min − 1 in percent mode."""
    if dim.relative:
        return float(values.max() / values.min() - 1.0)
    return float(values.max() - values.min())
