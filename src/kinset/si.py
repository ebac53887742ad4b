"""SI facts used across kinset: the Celsius offset and the prefixes, each defined once.

Readers turn prefixed units into SI with :data:`PREFIXES`; notes, labels and axes write
numbers back with a prefix from :func:`display_prefix`.
"""

from __future__ import annotations

# [K] The Celsius scale's offset, by definition (BIPM, The International System of
# Units, 9th edition, 2019, §2.3.1); scipy.constants.zero_Celsius holds the same value
# (tests/test_architecture.py checks), without the import cost of scipy at start-up.
ZERO_CELSIUS = 273.15

# SI prefixes (BIPM, The International System of Units, 9th edition, 2019, Table 7).
# "u" and the micro signs both stand for micro, as instrument exports use either.
PREFIXES: dict[str, float] = {
    "T": 1e12, "G": 1e9, "M": 1e6, "k": 1e3, "": 1.0,
    "m": 1e-3, "u": 1e-6, "\u00b5": 1e-6, "\u03bc": 1e-6,
    "n": 1e-9, "p": 1e-12, "f": 1e-15,
}

# The prefixes kinset writes, largest first (the micro sign for micro).
DISPLAY = ("G", "M", "k", "", "m", "\u00b5", "n", "p", "f")


def display_prefix(magnitude: float) -> tuple[float, str]:
    """The factor and prefix to write a positive ``magnitude`` with (0.000883 -> 1e-6, 'µ').

    A value that rounds up to the next prefix at three digits takes that prefix
    (999.6e-6 is written 1 m..., not 1e+03 µ...); below femto, femto.
    """
    for prefix in DISPLAY:
        factor = PREFIXES[prefix]
        if magnitude >= factor * 0.9995:
            return factor, prefix
    return PREFIXES[DISPLAY[-1]], DISPLAY[-1]
