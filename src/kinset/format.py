"""Numbers with SI prefixes for notes and report labels (values stay SI inside)."""

from __future__ import annotations

import math

_PREFIX = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"),
           (1e-9, "n"), (1e-12, "p"), (1e-15, "f")]


def si(value: float, unit: str, digits: int = 3) -> str:
    """``si(0.000883, "A") -> '883 µA'``; NaN gives 'n/a'."""
    if value is None or not math.isfinite(value):
        return "n/a"
    if value == 0:
        return f"0 {unit}"
    mag = abs(value)
    for factor, prefix in _PREFIX:
        if mag >= factor * 0.9995:
            break
    return f"{value / factor:.{digits}g} {prefix}{unit}"
