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

from kinset.format import si
from kinset.matching.profile import Dimension, Profile, Screen
from kinset.matching.reasons import REASONS, Reason
from kinset.quantities import QUANTITIES
from kinset.quantities import evaluate as evaluate_quantity

SQRT3 = math.sqrt(3.0)


@dataclass
class Evaluation:
    """Values of every dimension per device, and why a device cannot be matched."""

    devices: np.ndarray          # all devices seen, sorted
    values: pd.DataFrame         # device index, one column per dimension (NaN = missing)
    reasons: dict[str, list[Reason]]  # device -> reasons it cannot take part
    guards: dict[str, float]     # dimension -> guard band (SI, or fraction when relative)
    typical: dict[str, float]    # dimension -> median value over the reel
    screened: pd.DataFrame | None = None   # device index, one column per screen (NaN = missing)


def instrument_accuracy(quantity: str, value, accuracy: dict):
    """Half-width ``a`` of the instrument's specification ±(gain·reading + offset) at ``value``.

    0 for a quantity no instrument entry of reel.yaml covers.
    """
    kind = QUANTITIES[quantity].accuracy
    spec = accuracy.get(kind, {}) if kind is not None else {}
    offset_key = next((k for k in spec if k.startswith("offset")), None)
    return spec.get("gain", 0.0) * np.abs(value) + (spec.get(offset_key, 0.0) if offset_key else 0.0)


def instrument_uncertainty(quantity: str, values, accuracy: dict) -> np.ndarray:
    """Standard uncertainty from the instrument alone, u = a/√3 [1]; NaN where no
    instrument entry covers the quantity."""
    values = np.asarray(values, dtype=float)
    if QUANTITIES[quantity].accuracy is None:
        return np.full(values.shape, np.nan)
    return instrument_accuracy(quantity, values, accuracy) / SQRT3


def accuracy_guard(profile: Profile, dim: Dimension | Screen, typical: float,
                    accuracy: dict) -> float:
    """Guard band of a tolerance: twice the standard uncertainty of a difference.

    The instrument's specification ±(gain·reading + offset) is read as the half-width
    ``a`` of a rectangular distribution, u = a/√3 [1]; the difference of two readings
    (independent errors) has u·√2, and acceptance with coverage factor 2 needs
    spread ≤ T − 2·√2·u [2].
    """
    if profile.guard_band != "accuracy" or QUANTITIES[dim.quantity].accuracy is None:
        return 0.0
    return 2.0 * math.sqrt(2.0) * float(instrument_accuracy(dim.quantity, typical, accuracy)) / SQRT3


def _collect(quantity: str, condition, tables, temperature, index: pd.Index):
    """Values of one quantity over ``index``; each refusal as (code, sentence)."""
    ev = evaluate_quantity(quantity, condition, tables, temperature)
    col = pd.Series(np.nan, index=index)
    why = pd.Series("", index=index, dtype=object)
    code = pd.Series("", index=index, dtype=object)
    dataset = QUANTITIES[quantity].dataset
    if ev is None:
        why[:] = REASONS.text(f"no_{dataset}_data", dataset=dataset, where=" in this reel")
        code[:] = f"no_{dataset}_data"
        return col, why, code
    ev_index = pd.Index(ev.device.astype(str))      # device ids are unique per table
    present = index.isin(ev_index)
    for target, source in ((col, ev.value), (why, ev.reason), (code, ev.code)):
        target[present] = pd.Series(source, index=ev_index).reindex(index[present]).to_numpy()
    why[~present] = REASONS.text(f"no_{dataset}_data", dataset=dataset, where="")
    code[~present] = f"no_{dataset}_data"
    return col, why, code


def _screen(screen: Screen, col, why, code, reasons) -> None:
    """Each device's reason for failing ``screen``: no value (with its refusal), or beyond a limit."""
    for dev in col.index:
        if why[dev]:
            reasons[dev].append(Reason.wrapped("screen_refused", code[dev], why[dev],
                                               screen.describe(), screen.name))
            continue
        v = col[dev]
        failed = []
        if screen.maximum is not None and v > screen.maximum:
            failed.append(("above", screen.maximum))
        if screen.minimum is not None and v < screen.minimum:
            failed.append(("below", screen.minimum))
        for side, limit in failed:
            reasons[dev].append(Reason.of(
                "screen_failed", screen.name, criterion=screen.describe(),
                value=si(v, screen.unit), side=side, limit=si(limit, screen.unit)))


def evaluate(profile: Profile, tables: dict[str, pd.DataFrame], all_devices,
             accuracy: dict) -> Evaluation:
    """Evaluate every dimension and screen of ``profile`` for ``all_devices``."""
    devices = np.asarray(sorted(set(map(str, all_devices))), dtype=object)
    index = pd.Index(devices, name="device")
    reasons: dict[str, list[Reason]] = {d: [] for d in devices}
    values = pd.DataFrame(index=index)
    screened = pd.DataFrame(index=index)
    guards, typical = {}, {}
    t = profile.temperature
    for dim in profile.dimensions:
        col, why, code = _collect(dim.quantity, dim.condition, tables, t, index)
        if dim.relative:
            bad = col.notna() & ~(col > 0)
            why[bad] = REASONS.text("not_positive", criterion=dim.describe())
            code[bad] = "not_positive"
            col[bad] = np.nan
        values[dim.name] = col
        for dev in index[why.to_numpy() != ""]:
            reasons[dev].append(Reason.wrapped("criterion_refused", code[dev], why[dev],
                                               dim.describe(), dim.name))
        finite = col[np.isfinite(col)]
        typical[dim.name] = float(finite.median()) if len(finite) else math.nan
        guards[dim.name] = accuracy_guard(profile, dim, typical[dim.name], accuracy)
    for screen in profile.screens:
        col, why, code = _collect(screen.quantity, screen.condition, tables, t, index)
        screened[screen.name] = col
        _screen(screen, col, why, code, reasons)
    return Evaluation(devices, values, reasons, guards, typical, screened)


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


def column_suffix(dim) -> str:
    """Unit suffix of a criterion's columns: ``_percent``, ``_<unit>`` or nothing."""
    return "_percent" if dim.relative else (f"_{dim.unit}" if dim.unit else "")


def spread_columns(block: np.ndarray, dims, tolerance: dict, word: str = "spread") -> dict:
    """Each criterion's spread over the rows of ``block`` (SI values, one column per
    criterion) and its margin to the effective tolerance, as ``<dim>_<word><suffix>``
    and ``<dim>_margin<suffix>`` (percent for relative criteria)."""
    row = {}
    for j, d in enumerate(dims):
        sp = spread(block[:, j], d)
        scale = 100 if d.relative else 1
        row[f"{d.name}_{word}{column_suffix(d)}"] = sp * scale
        row[f"{d.name}_margin{column_suffix(d)}"] = (tolerance[d.name] - sp) * scale
    return row
