"""Readers for each dataset's CSV files: what columns each holds, in SI.

Each reader returns one long table (one row per reading) with the columns named
by quantity in SI (temperatures in kelvin) plus ``device``, ``source`` and ``line``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from kinset.io.tables import Spec, read_table

FORWARD_SWEEP = Spec(
    quantities={"voltage": "voltage", "current": "current", "temperature": "temperature"},
    required={"voltage", "current"},
    text=("device",), integer=("position",), named=("voltage", "current"),
)
FORWARD_SUPPLY = Spec(
    quantities={"supply": "voltage", "resistance": "resistance", "voltage": "voltage",
                "temperature": "temperature"},
    required={"supply", "resistance", "voltage"},
    text=("device",), integer=("position",), positive=("resistance",),
    named=("supply", "resistance", "voltage"),
)
LEAKAGE = Spec(
    quantities={"reverse_voltage": "voltage", "reverse_current": "current",
                "temperature": "temperature"},
    required={"reverse_voltage", "reverse_current"},
    named=("reverse_voltage", "reverse_current"),
)
CAPACITANCE = Spec(
    quantities={"reverse_voltage": "voltage", "capacitance": "capacitance",
                "frequency": "frequency", "temperature": "temperature"},
    required={"reverse_voltage", "capacitance"}, named=("capacitance",),
)
CAPACITANCE_INDEX = Spec(
    quantities={"reverse_voltage": "voltage", "temperature": "temperature"},
    required={"reverse_voltage"},
    text=("file", "device", "fixture"), required_text=("file", "device", "fixture"),
)
RECOVERY = Spec(
    quantities={"time": "time", "current": "current", "forward_current": "current",
                "reverse_current": "current"},
    required={"time", "current"},
)


def read_forward(path: str | Path) -> pd.DataFrame:
    """Read a forward V–I file in either form of the contract.

    Sweep or points: ``device, voltage_V, current_A``. Supply and resistor readings:
    ``device, supply_V, resistance_ohm, voltage_V``, where the current through the
    diode is (supply − voltage) / resistance (Ohm's law on the series resistor).

    Returns
    -------
    DataFrame
        ``device, voltage [V], current [A], temperature [K] (NaN when not given),
        position (NaN when not given), source, line``, and ``column_voltage``,
        ``column_current``: the columns they were read from, as the header writes them.
    """
    path = str(path)
    frame = read_table(path, [FORWARD_SWEEP, FORWARD_SUPPLY])
    if "current" not in frame:   # the reader refused resistances <= 0 (Spec.positive)
        frame["current"] = (frame["supply"] - frame["voltage"]) / frame["resistance"].to_numpy()
        supply, resistance, voltage = (frame[f"column_{q}"].iloc[0]
                                       for q in ("supply", "resistance", "voltage"))
        frame["column_current"] = pd.Categorical.from_codes(
            np.zeros(len(frame), dtype=np.int8), [f"({supply} \u2212 {voltage})/{resistance}"])
        frame = frame.drop(columns=["supply", "resistance", "column_supply", "column_resistance"])
    for col in ("temperature", "position"):
        if col not in frame:
            frame[col] = np.nan
    return frame[["device", "voltage", "current", "temperature", "position", "source", "line",
                  "column_voltage", "column_current"]]


def _read_with(path: str | Path, spec: Spec, optional: tuple[str, ...]) -> pd.DataFrame:
    """The file read by ``spec``, with each ``optional`` quantity it lacks as NaN."""
    frame = read_table(str(path), spec)
    for col in optional:
        if col not in frame:
            frame[col] = np.nan
    return frame


def read_leakage(path: str | Path) -> pd.DataFrame:
    """Read a reverse-leakage sweep file (positive magnitudes)."""
    return _read_with(path, LEAKAGE, ("temperature",))


def read_capacitance(path: str | Path) -> pd.DataFrame:
    """Read a C–V table file."""
    return _read_with(path, CAPACITANCE, ("temperature", "frequency"))


def read_capacitance_index(path: str | Path) -> pd.DataFrame:
    """Read ``capacitance/index.csv``, the list of Touchstone files and their biases."""
    return _read_with(path, CAPACITANCE_INDEX, ("temperature",))


def read_recovery(path: str | Path) -> pd.DataFrame:
    """Read a reverse-recovery waveform file (positive current = forward)."""
    return _read_with(path, RECOVERY, ("forward_current", "reverse_current"))

