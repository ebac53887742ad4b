"""Why a part is not placed: the matcher's codes, its sentences and the stage of each code.

A part's first reason decides its ``stage`` in ``unmatched.csv`` (``data``, ``screen``,
``guard``, ``taken``, ``no_set``) and its ``reason_code``; every reason is kept in the
plain-words ``reason``. Refusals of a value (no data, outside the measured range, ...)
carry the code :mod:`kinset.quantities` gave them.
"""

from __future__ import annotations

from dataclasses import dataclass

from kinset.outcomes import Catalogue, Note
from kinset.registry import NAMES

REASONS = Catalogue.load("matching", extra=[
    Note(f"no_{d}_data", "rejected", "no {dataset} data{where}") for d in NAMES])

STAGES = ("data", "screen", "guard", "taken", "no_set")
_STAGE_OF = {"screen_failed": "screen", "within_guard_band": "guard", "uncertain": "guard",
             "less_certain": "guard",
             "no_partner": "no_set", "too_few_partners": "no_set", "partners_used": "no_set",
             "quota_reached": "no_set",
             "retired": "taken", "kept_elsewhere": "taken", "placed_earlier": "taken"}
# Every other code (the matcher's missing data, the refusals of kinset.quantities) is data.


def stage_of(code: str) -> str:
    """The stage a part left at, from the code of its first reason."""
    return _STAGE_OF.get(code, "data")


@dataclass(frozen=True)
class Reason:
    """One reason a part cannot take part: its code and its sentence."""

    code: str
    text: str
    criterion: str = ""   # the dimension or screen it concerns ('' for the whole part)
    nearest: str = ""     # no set: the part that came nearest to being its partner
    shortfall: float = float("nan")   # no set: by how much on ``criterion`` (its unit, or %)

    @classmethod
    def of(cls, code: str, about: str = "", **fields) -> "Reason":
        """The reason ``code`` about the dimension or screen named ``about``."""
        return cls(code, REASONS.text(code, **fields), about)

    @classmethod
    def wrapped(cls, form: str, code: str, detail: str, criterion: str, name: str) -> "Reason":
        """A refusal of ``code`` (its sentence ``detail``) about the dimension or screen
        ``name`` (described as ``criterion``), put in words by ``form``."""
        return cls(code, REASONS.text(form, criterion=criterion, detail=detail), name)
