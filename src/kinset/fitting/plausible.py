"""Readings no small-signal diode gives, and the unit slip that most often explains them.

A forward current of 10 A from a small-signal part is not a measurement of that part:
most often the column says ``current_A`` and the instrument wrote milliamperes. Each read
quantity has one :class:`Bound` here: the largest reading such a part plausibly gives (a
reading above it rejects the part) and the magnitude its readings usually have, from
which :func:`kinset.format.likely_unit` guesses the unit the numbers were written in.
Each bound carries its reason.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from kinset.fitting.batch import Groups, factorize_runs
from kinset.format import likely_unit, si
from kinset.outcomes import Finding

_QUANTITY_UNIT = re.compile(r"[A-Za-z][A-Za-z0-9_]*_([A-Za-z\u00b5\u03bc]+)")


@dataclass(frozen=True)
class Bound:
    """The plausible range of one read quantity for a small-signal diode."""

    quantity: str       # the readings' column (kinset.io.datasets), e.g. "current"
    unit: str           # its SI unit
    typical: float      # [unit] the magnitude its readings usually have
    limit: float        # [unit] above this, not a small-signal part's reading
    reason: str

    @property
    def contract_column(self) -> str:
        """The column's name in SI, as the contract writes it (``current_A``)."""
        return f"{self.quantity}_{self.unit}"


FORWARD_CURRENT = Bound(
    "current", "A", 1e-3, 1.0,
    "from memory: small-signal diodes are rated for 100-300 mA of continuous forward "
    "current, and bench sweeps go from nanoamperes to tens of milliamperes")
FORWARD_VOLTAGE: dict[str, Bound] = {
    "silicon": Bound(
        "voltage", "V", 0.65, 3.0,
        "from memory: small-signal silicon diodes show at most about 1.25 V at their rated "
        "current; 3 V leaves room for series resistance at a current limit"),
    "schottky": Bound(
        "voltage", "V", 0.35, 2.0,
        "from memory: small-signal Schottky diodes show at most about 1 V at their rated "
        "current; 2 V leaves room for series resistance"),
    "germanium": Bound(
        "voltage", "V", 0.3, 2.0,
        "from memory: small-signal germanium diodes show at most about 1 V at their rated "
        "current; 2 V leaves room for series resistance"),
}
REVERSE_CURRENT = Bound(
    "reverse_current", "A", 1e-8, 1.0,
    "common practice: leakage of small-signal diodes is picoamperes to microamperes, and "
    "breakdown sweeps stop at milliamperes; a reverse current of amperes is not leakage")
REVERSE_VOLTAGE = Bound(
    "reverse_voltage", "V", 10.0, 1000.0,
    "from memory: small-signal and switching diodes are rated for tens to a few hundred "
    "volts in reverse; 1 kV is beyond any of them")
CAPACITANCE = Bound(
    "capacitance", "F", 1e-12, 1e-6,
    "from memory: small-signal diodes have 0.1-10 pF of junction capacitance and "
    "varactors up to some hundreds of pF; a microfarad is a capacitor's value, not a diode's")


def column_names(values: np.ndarray, bound: Bound) -> np.ndarray:
    """Column names as read (a table without them, or a row without one: the SI name)."""
    out = np.asarray(values, dtype=object).copy()
    # Judged once per distinct name (a reel's 400,000 readings hold a handful), not per row
    codes, names = factorize_runs(out, sort=False)
    bad = np.array([not isinstance(v, str) or v in ("", "nan") for v in names], dtype=bool)
    missing = (codes < 0) | np.append(bad, True)[codes]
    out[missing] = bound.contract_column
    return out


def beyond(code: str, bound: Bound, groups: Groups, values: np.ndarray, columns: np.ndarray,
           considered: np.ndarray, material: str = "") -> Finding:
    """The parts with a reading above ``bound.limit``, as the finding ``code``.

    ``values`` are SI readings in device order (``groups``), ``columns`` the column each
    was read from as its header writes it (:func:`column_names`), ``considered`` the
    readings to look at. The finding's fields: ``value`` (the largest reading), ``column``
    (where it was read), ``written`` (the unit that column states), ``likely`` (the unit
    the numbers most likely were, :func:`kinset.format.likely_unit`), ``limit`` and
    ``material``.
    """
    magnitude = np.where(considered & np.isfinite(values), np.abs(values), np.nan)
    peak = groups.max(magnitude)
    with np.errstate(invalid="ignore"):
        where = peak > bound.limit
    top = np.flatnonzero(magnitude == groups.each(peak))
    column = np.full(groups.n, bound.contract_column, dtype=object)
    column[groups.codes[top[::-1]]] = columns[top[::-1]]      # the first such reading
    written = np.asarray([m.group(1) if (m := _QUANTITY_UNIT.fullmatch(c)) else bound.unit
                          for c in column], dtype=object)
    return Finding(code, where, {
        "value": lambda d: si(peak[d], bound.unit), "column": column, "written": written,
        "likely": lambda d: likely_unit(peak[d], written[d], bound.typical, bound.limit),
        "limit": si(bound.limit, bound.unit), "material": material})
