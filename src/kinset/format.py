"""Numbers with SI prefixes for notes and report labels (values stay SI inside)."""

from __future__ import annotations

import math

from kinset.si import DISPLAY, PREFIXES, display_prefix


def si(value: float, unit: str, digits: int = 3) -> str:
    """``si(0.000883, "A") -> '883 µA'``; NaN gives 'n/a'."""
    if value is None or not math.isfinite(value):
        return "n/a"
    if value == 0:
        return f"0 {unit}"
    factor, prefix = display_prefix(abs(value))
    return f"{value / factor:.{digits}g} {prefix}{unit}"


def likely_unit(value: float, unit: str, typical: float, limit: float = math.inf) -> str:
    """The unit a reading was most likely written in, when its column says ``unit``.

    ``value`` is the reading in SI as read (``10`` under ``current_A`` is 10.0; under
    ``current_mA`` it is 0.01); ``unit`` the unit as the column writes it (``A``, ``mA``;
    a leading SI prefix letter followed by more letters is a prefix); ``typical`` the SI
    magnitude such a reading usually has; ``limit`` the largest SI value such a reading can
    plausibly have. The number as written is taken in each prefix of kinset's display set
    (steps of 1000, BIPM SI Brochure, 9th ed., Table 7); among those that keep it at or
    below ``limit``, the one nearest ``typical`` in decades is returned, written with its
    base unit: ``likely_unit(10.0, "A", 1e-3) -> 'mA'``. A value that is not positive and
    finite, or that no prefix brings within ``limit``, returns ``unit`` as written.
    """
    prefix = unit[0] if len(unit) > 1 and unit[0] in PREFIXES and unit[0] != "" else ""
    base = unit[len(prefix):]
    if not (math.isfinite(value) and value > 0 and typical > 0):
        return unit
    number = value / PREFIXES[prefix]
    best, best_distance = unit, math.inf
    for candidate in DISPLAY:
        reading = number * PREFIXES[candidate]
        if reading > limit:
            continue
        distance = abs(math.log10(reading / typical))
        if distance < best_distance - 1e-12:
            best, best_distance = candidate + base, distance
    return best
