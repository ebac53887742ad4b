"""What the reference circuits share: the deck's head, its tables, NaN for what is missing.

Not a kind itself (``KINDS`` does not name it): the kind modules build their decks and
read their figures with these helpers, so that every kind writes the same options and
reads the simulator's tables the same way.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence

import numpy as np

#: Vectors per ``wrdata`` line: a deck of a thousand circuits writes several files
#: rather than one line of thousands of names.
VECTORS_PER_FILE = 200

# A .model card and its parameter assignments (the form report/spice.py writes:
# plain numbers, '+' continuation lines).
_CARD = re.compile(r"\.model\s+(\S+)\s+D\s*\((.*?)\)", re.IGNORECASE | re.DOTALL)
_ASSIGN = re.compile(r"([A-Za-z]\w*)\s*=\s*([-+0-9.eE]+)")


def settings(parameters: Mapping[str, tuple[float, str]], params: Mapping | None) -> dict:
    """The defaults of ``parameters`` with the given ``params`` over them."""
    out = {k: float(v[0]) for k, v in parameters.items()}
    out.update({k: float(v) for k, v in (params or {}).items() if k in parameters})
    return out


def card_lines(cards: str | Iterable[str]) -> str:
    """The ``.model`` lines as one block of text (a string, or one card per item)."""
    if isinstance(cards, str):
        return cards.rstrip("\n")
    return "\n".join(str(c).rstrip("\n") for c in cards)


def card_values(cards: str | Iterable[str]) -> dict[str, dict[str, float]]:
    """The numeric parameters of each diode card, keyed by lower-case model name."""
    text = "\n".join(ln.lstrip("+ ") if ln.lstrip().startswith("+") else ln
                     for ln in card_lines(cards).splitlines())
    out = {}
    for name, body in _CARD.findall(text.replace("\n", " ")):
        out[name.lower()] = {k.upper(): float(v) for k, v in _ASSIGN.findall(body)}
    return out


def head(title: str, cards: str | Iterable[str], temperature_C: float) -> list[str]:
    """Title line, temperatures and the model cards: the start of every kind's deck.

    TNOM and TEMP are set explicitly (ngspice's TNOM default is 27 °C); each card
    written by kinset carries its own TNOM, which wins over the option.
    """
    t = f"{float(temperature_C):.10g}"
    return [f"* kinset reference circuit: {title}", f".options tnom={t} temp={t}",
            card_lines(cards)]


def diode_nodes(circuits, positions: int) -> list[tuple[str, str]]:
    """(node, model) of every diode of kinds with one node per diode: ``<label>_<k>``."""
    return [(f"{c.label}_{k}", model) for c in circuits
            for k, model in enumerate(c.models[:positions], start=1)]


def wrdata_lines(prefix: str, vectors: Sequence[str]) -> list[str]:
    """``wrdata`` lines writing ``vectors`` into files ``<prefix>_<k>.txt``, in groups."""
    return [f"wrdata {prefix}_{k}.txt " + " ".join(vectors[i:i + VECTORS_PER_FILE])
            for k, i in enumerate(range(0, len(vectors), VECTORS_PER_FILE))]


def columns(result, prefix: str) -> dict[str, np.ndarray]:
    """Every column of the files ``<prefix>_<k>.txt`` of a run, by lower-case name.

    A run that is missing (None) or wrote no such file gives an empty dict; the
    callers turn a missing column into NaN.
    """
    out: dict[str, np.ndarray] = {}
    tables = getattr(result, "tables", None) or {}
    for name, table in tables.items():
        if re.fullmatch(rf"{re.escape(prefix)}_\d+\.txt", name):
            out.update({n.lower(): v for n, v in table.as_dict().items()})
    return out


def column(cols: Mapping[str, np.ndarray], name: str) -> np.ndarray | None:
    """The column ``name`` if present and every value in it finite, else None."""
    v = cols.get(name.lower())
    if v is None or v.size == 0 or not np.all(np.isfinite(v)):
        return None
    return v


def finite(value: float) -> float:
    """``value`` as a float, NaN if it is not finite."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        return math.nan
    return x if math.isfinite(x) else math.nan
