"""Units carried in column names: ``quantity_unit``, with SI prefixes.

The contract puts the unit in the column name (``current_mA``, ``capacitance_pF``).
This module splits such a name, checks the unit belongs to the quantity's dimension
and returns the factor to SI. Temperatures become kelvin inside kinset.
"""

from __future__ import annotations

from dataclasses import dataclass

from kinset.errors import InputError
from kinset.si import PREFIXES, ZERO_CELSIUS


# Base units kinset reads, by dimension. "ohm" is written out because the Greek
# letter rarely survives an export; "Ohm" is accepted too.
BASE_UNITS: dict[str, tuple[str, ...]] = {
    "voltage": ("V",),
    "current": ("A",),
    "capacitance": ("F",),
    "time": ("s",),
    "frequency": ("Hz",),
    "resistance": ("ohm", "Ohm"),
    "charge": ("C",),
}


@dataclass(frozen=True)
class ColumnUnit:
    """How to turn one column into SI."""

    quantity: str       # the part before the unit, e.g. "reverse_voltage"
    unit: str           # as written, e.g. "mV"
    scale: float        # multiply by this ...
    offset: float = 0.0  # ... then add this (only temperatures in Celsius)


def split_column(name: str) -> tuple[str, str] | None:
    """Split ``quantity_unit`` at its last underscore; None when there is none."""
    name = name.strip()
    if "_" not in name:
        return None
    quantity, unit = name.rsplit("_", 1)
    if not quantity or not unit:
        return None
    return quantity, unit


def unit_scale(unit: str, dimension: str) -> tuple[float, float]:
    """Factor and offset that turn a reading in ``unit`` into SI for ``dimension``.

    Temperatures are returned in kelvin: ``C`` (Celsius) and ``K`` are accepted,
    without prefixes.

    Raises
    ------
    ValueError
        When the unit is not a known prefix plus a base unit of that dimension.
    """
    if dimension == "temperature":
        if unit == "C":
            return 1.0, ZERO_CELSIUS
        if unit == "K":
            return 1.0, 0.0
        raise ValueError(f"unit '{unit}' is not a temperature unit (use C or K)")
    for base in BASE_UNITS[dimension]:
        if unit.endswith(base):
            prefix = unit[: -len(base)]
            if prefix in PREFIXES:
                return PREFIXES[prefix], 0.0
            raise ValueError(f"unknown SI prefix '{prefix}' in unit '{unit}'")
    expected = " or ".join(BASE_UNITS[dimension])
    raise ValueError(f"unit '{unit}' is not a {dimension} unit (expected {expected} "
                     f"with an optional SI prefix)")


def resolve_columns(columns: list[str], wanted: dict[str, str], file: str,
                    required: set[str], header_line: int = 1
                    ) -> dict[str, tuple[str, ColumnUnit]]:
    """Find each wanted quantity among a file's columns.

    Parameters
    ----------
    columns : list of str
        Column names as they appear in the file's header.
    wanted : dict
        quantity name -> dimension, e.g. ``{"voltage": "voltage", "temperature": "temperature"}``.
    file : str
        File name, for error messages.
    required : set of str
        Quantities that must be present.
    header_line : int
        Line of the header in the file, for error messages.

    Returns
    -------
    dict
        quantity -> (column name as written, ColumnUnit).
    """
    found: dict[str, tuple[str, ColumnUnit]] = {}
    for col in columns:
        parts = split_column(col)
        bare = col.strip()
        if bare in wanted:
            raise InputError(f"column '{bare}' has no unit: write it as {bare}_<unit>, "
                             f"e.g. {bare}_{_example_unit(wanted[bare])}", file, header_line, bare)
        if parts is None:
            continue
        quantity, unit = parts
        if quantity not in wanted:
            continue
        try:
            scale, offset = unit_scale(unit, wanted[quantity])
        except ValueError as exc:
            raise InputError(str(exc), file, header_line, col) from None
        if quantity in found:
            raise InputError(f"quantity '{quantity}' appears twice "
                             f"('{found[quantity][0]}' and '{col}')", file, header_line, col)
        found[quantity] = (col, ColumnUnit(quantity, unit, scale, offset))
    missing = sorted(required - set(found))
    if missing:
        names = ", ".join(f"{q}_{_example_unit(wanted[q])}" for q in missing)
        raise InputError(f"missing required column(s): {names} "
                         f"(columns present: {', '.join(columns)})", file, header_line)
    return found


def _example_unit(dimension: str) -> str:
    return "C" if dimension == "temperature" else BASE_UNITS[dimension][0]
