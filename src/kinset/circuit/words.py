"""A circuit figure in words: its label, its unit and its value, from the kind module's
FIGURES and the figure's column name (unit last: ``lo_if_isolation_dB``,
``offset_drift_V_per_K``)."""

from __future__ import annotations

import math
import re

from kinset.format import si

#: Units that take no SI prefix, and how their values are written: decibels to 0.1 dB,
#: parts per million to four significant digits.
PLAIN_UNITS = {"dB": ".1f", "dBc": ".1f", "dBm": ".1f", "ppm": ".4g"}


def figure_label(module, figure: str) -> str:
    """A figure's name in words (its FIGURES text up to the first colon or bracket)."""
    return re.split(r"[:(]", module.FIGURES[figure])[0].strip()


def figure_unit(figure: str) -> str:
    """The unit in a figure's column name: ``lo_if_isolation_dB`` -> ``dB``,
    ``offset_drift_V_per_K`` -> ``V/K``."""
    head, per, tail = figure.rpartition("_per_")
    if per:
        return f"{head.rsplit('_', 1)[-1]}/{tail}"
    return figure.rsplit("_", 1)[-1]


def figure_value(value: float, figure: str, digits: int = 3) -> str:
    """The value with its unit for people: ``68.9 dB``, ``-4.98 µV``, ``196 nV/K``;
    NaN gives ``n/a``."""
    unit = figure_unit(figure)
    if value is None or not math.isfinite(float(value)):
        return "n/a"
    if unit in PLAIN_UNITS:
        return f"{float(value):{PLAIN_UNITS[unit]}} {unit}"
    return si(float(value), unit, digits)
