"""Numbers with SI prefixes for notes and report labels (values stay SI inside)."""

from __future__ import annotations

import math

from kinset.si import display_prefix


def si(value: float, unit: str, digits: int = 3) -> str:
    """``si(0.000883, "A") -> '883 µA'``; NaN gives 'n/a'."""
    if value is None or not math.isfinite(value):
        return "n/a"
    if value == 0:
        return f"0 {unit}"
    factor, prefix = display_prefix(abs(value))
    return f"{value / factor:.{digits}g} {prefix}{unit}"
