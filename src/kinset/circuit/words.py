"""A circuit figure in words: its label and its unit, from the kind module's FIGURES."""

from __future__ import annotations

import re


def figure_label(module, figure: str) -> str:
    """A figure's name in words (its FIGURES text up to the first colon or bracket)."""
    return re.split(r"[:(]", module.FIGURES[figure])[0].strip()


def figure_unit(figure: str) -> str:
    """The unit in a figure's column name (``lo_if_isolation_dB`` -> ``dB``)."""
    return figure.rsplit("_", 1)[-1]
